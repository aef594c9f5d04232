#include "drivers/line_driver.h"

#include <charconv>
#include <cmath>

#include "config/json_reader.h"
#include "drivers/calibration_config.h"

namespace tarn::drivers {

namespace {

using config::Need;
using config::ObjectReader;

struct LineOptions {
  std::string poll;             // sent before each read; empty: the instrument streams
  std::string delimiter = ",";  // "," ";" "\t" or "whitespace"
  std::int64_t max_line = 256;
};

LineOptions read_options(const config::Json& j, const std::string& ptr, config::Problems& p) {
  LineOptions o;
  ObjectReader r(j, ptr, p);
  r.string("poll", o.poll);
  r.one_of("delimiter", o.delimiter, {",", ";", "\t", " ", "whitespace"});
  r.integer("max_line", o.max_line, 8, 4096);
  r.finish();
  return o;
}

void validate(const config::Instrument& in, const config::Line&, config::Problems& p) {
  read_options(in.options, in.pointer + "/options", p);
  for (auto& ch : in.channels) {
    ObjectReader r(ch.source, ch.pointer + "/source", p);
    int field = 0;
    r.integer("field", field, 0, 63, Need::required);
    r.finish();
  }
}

std::vector<std::string> split(const std::string& s, const std::string& delim) {
  std::vector<std::string> out;
  if (delim == "whitespace") {
    std::size_t i = 0;
    while (i < s.size()) {
      while (i < s.size() && std::isspace(static_cast<unsigned char>(s[i]))) ++i;
      std::size_t j = i;
      while (j < s.size() && !std::isspace(static_cast<unsigned char>(s[j]))) ++j;
      if (j > i) out.push_back(s.substr(i, j - i));
      i = j;
    }
    return out;
  }
  std::size_t start = 0;
  for (;;) {
    std::size_t pos = s.find(delim, start);
    out.push_back(s.substr(start, pos == std::string::npos ? std::string::npos : pos - start));
    if (pos == std::string::npos) break;
    start = pos + delim.size();
  }
  return out;
}

std::optional<double> parse_number(std::string f) {
  while (!f.empty() && std::isspace(static_cast<unsigned char>(f.front()))) f.erase(f.begin());
  while (!f.empty() && std::isspace(static_cast<unsigned char>(f.back()))) f.pop_back();
  if (!f.empty() && f.front() == '+') f.erase(f.begin());
  double v = 0;
  auto [p, ec] = std::from_chars(f.data(), f.data() + f.size(), v);
  if (ec != std::errc() || p != f.data() + f.size() || f.empty() || !std::isfinite(v))
    return std::nullopt;
  return v;
}

class LineDriver final : public InstrumentDriver {
 public:
  LineDriver(const config::Instrument& in) {
    config::Problems ignore;
    opt_ = read_options(in.options, in.pointer, ignore);
    for (auto& ch : in.channels) {
      fields_.push_back(ch.source.value("field", 0));
      cal_.push_back(make_calibration(ch));
    }
  }

  boost::asio::awaitable<PollResult> poll(SerialPort& port, ExchangeLog* log) override {
    PollResult res;
    res.channels.resize(fields_.size());
    std::vector<std::uint8_t> req(opt_.poll.begin(), opt_.poll.end());
    auto check = [](std::span<const std::uint8_t> b) {
      for (auto c : b)
        if (c == '\n') return FrameState::complete;
      return FrameState::incomplete;
    };
    Transaction t;
    for (int attempt = 0; attempt <= port.line().retries; ++attempt) {
      t = co_await port.transact(req, check, std::chrono::milliseconds(port.line().timeout_ms),
                                 std::size_t(opt_.max_line));
      if (log) {
        if (!req.empty()) log->add("tx", req);
        log->add("rx", t.bytes);
      }
      if (t.outcome == Transaction::Outcome::reply || t.outcome == Transaction::Outcome::port_lost)
        break;
    }
    ReadProblem fail = ReadProblem::none;
    switch (t.outcome) {
      case Transaction::Outcome::reply:
        break;
      case Transaction::Outcome::timeout:
        fail = ReadProblem::no_reply;
        res.error = "no reply within " + std::to_string(port.line().timeout_ms) + " ms";
        break;
      case Transaction::Outcome::invalid:
        fail = ReadProblem::garbled;
        res.error = t.error;
        break;
      case Transaction::Outcome::port_lost:
        fail = ReadProblem::offline;
        res.error = t.error;
        break;
    }
    if (fail != ReadProblem::none) {
      for (auto& c : res.channels) c.problem = fail;
      co_return res;
    }
    std::string text(t.bytes.begin(), t.bytes.end());
    auto nl = text.find('\n');
    text = text.substr(0, nl);
    if (!text.empty() && text.back() == '\r') text.pop_back();
    auto fields = split(text, opt_.delimiter);
    for (std::size_t i = 0; i < fields_.size(); ++i) {
      std::size_t f = std::size_t(fields_[i]);
      std::optional<double> raw = f < fields.size() ? parse_number(fields[f]) : std::nullopt;
      if (!raw) {
        res.channels[i].problem = ReadProblem::garbled;
        res.error = "field " + std::to_string(f) + " is not a number";
        continue;
      }
      res.channels[i].value = cal_[i](*raw);
      if (!res.channels[i].value) res.channels[i].problem = ReadProblem::garbled;
    }
    co_return res;
  }

 private:
  LineOptions opt_;
  std::vector<int> fields_;
  std::vector<CalibrationFn> cal_;
};

std::unique_ptr<InstrumentDriver> create(const config::Instrument& in, const config::Line&) {
  return std::make_unique<LineDriver>(in);
}

}  // namespace

DriverFactory line_driver_factory() {
  return {"line", "ASCII line per poll (or streamed), fields by delimiter", validate, create};
}

}  // namespace tarn::drivers
