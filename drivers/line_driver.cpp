#include "drivers/line_driver.h"

#include <algorithm>
#include <optional>

#include "config/json_reader.h"
#include "drivers/calibration_config.h"
#include "drivers/driver_support.h"
#include "drivers/protocol/line_protocol.h"

namespace tarn::drivers {

namespace {

namespace line = protocol::line;
using config::Need;
using config::ObjectReader;

struct LineOptions {
  std::string poll;  // empty: streaming
  line::LineFormat format;
  std::int64_t max_line = 256;
  std::optional<std::size_t> status_field;
  std::vector<double> status_ok{0.0};
};

void read_status(ObjectReader& r, LineOptions& o) {
  const config::Json* s = r.object("status");
  if (!s) return;
  ObjectReader sr(*s, r.pointer_of("status"), r.problems());
  int field = 0;
  if (sr.integer("field", field, 0, 63, Need::required)) o.status_field = std::size_t(field);
  if (const config::Json* ok = sr.array("ok")) {
    o.status_ok.clear();
    for (std::size_t i = 0; i < ok->size(); ++i) {
      if ((*ok)[i].is_number())
        o.status_ok.push_back((*ok)[i].get<double>());
      else
        sr.problems().add(sr.pointer_of("ok") + "/" + std::to_string(i),
                          "is not a number; allowed: status values that mean ok, e.g. [0]");
    }
  }
  sr.finish();
}

LineOptions read_options(const config::Instrument& in, config::Problems& p) {
  LineOptions o;
  const std::string ptr = in.pointer + "/options";
  config::Json empty = config::Json::object();
  ObjectReader r(in.options.is_null() ? empty : in.options, ptr, p);
  r.string("poll", o.poll);
  std::string delimiter = ",";
  r.one_of("delimiter", delimiter, {",", ";", "\t", " ", "whitespace"});
  if (r.string("pattern", o.format.pattern)) {
    o.format.split = line::Split::regex;
    if (r.has("delimiter"))
      p.add(r.pointer_of("delimiter"), "is set together with \"pattern\"; allowed: one of the two");
  } else if (delimiter == "whitespace") {
    o.format.split = line::Split::whitespace;
  } else {
    o.format.split = line::Split::delimiter;
    o.format.delimiter = delimiter[0];
  }
  std::string checksum = "none";
  r.one_of("checksum", checksum, {"none", "nmea", "nmea_if_present"});
  o.format.checksum = checksum == "nmea"              ? line::Checksum::required
                      : checksum == "nmea_if_present" ? line::Checksum::if_present
                                                      : line::Checksum::none;
  r.string("prefix", o.format.prefix);
  r.integer("max_line", o.max_line, 8, 4096);
  read_status(r, o);
  r.finish();
  for (auto& ch : in.channels) {
    ObjectReader cr(ch.source, ch.pointer + "/source", p);
    int field = 0;
    cr.integer("field", field, 0, 63, Need::required);
    cr.finish();
    o.format.channel_fields.push_back(std::size_t(field));
  }
  if (o.status_field) o.format.channel_fields.push_back(*o.status_field);
  return o;
}

void check(config::Instrument& in, const config::Line&, config::Problems& p) {
  const std::size_t before = p.size();
  LineOptions o = read_options(in, p);
  if (p.size() == before && !in.channels.empty()) {
    auto m = line::FieldMapper::create(o.format);
    if (!m) p.add(in.pointer + "/options", m.error());
  }
  in.settings.put(std::move(o));
}

class LineDriver final : public InstrumentDriver {
 public:
  LineDriver(const config::Instrument& in, LineOptions o, line::FieldMapper m)
      : name_(in.name),
        opt_(std::move(o)),
        mapper_(std::move(m)),
        splitter_(std::size_t(opt_.max_line)),
        log_(os::logger("driver line")) {
    for (auto& ch : in.channels) channel_names_.push_back(ch.name);
    cal_ = calibrations_of(in);
  }

  boost::asio::awaitable<PollResult> poll(SerialPort& port, ExchangeLog* log) override {
    PollResult res;
    res.channels.resize(cal_.size());
    std::optional<std::string> got;
    // (No co_await inside ?: : GCC 12 miscompiles the temporaries.)
    Transaction t;
    if (opt_.poll.empty())
      t = co_await stream(port, log, got);
    else
      t = co_await ask(port, log, got);
    if (!got) {
      if (t.outcome == Transaction::Outcome::reply) t.outcome = Transaction::Outcome::invalid;
      std::string why = t.outcome == Transaction::Outcome::timeout
                            ? "no line within " + std::to_string(port.line().timeout_ms) + " ms"
                        : t.error.empty() ? std::string("no usable line")
                                          : t.error;
      if (splitter_.overlong_lines() && t.outcome != Transaction::Outcome::port_lost)
        why += " (" + std::to_string(splitter_.overlong_lines()) + " over-long lines dropped)";
      fail_all(res, problem_of(t.outcome), why);
      co_return res;
    }
    map_line(*got, res);
    co_return res;
  }

 private:
  // Feeds bytes to the splitter; remembers the newest line meant for us.
  void feed(std::span<const std::uint8_t> bytes, std::optional<std::string>& got, bool newest) {
    std::string_view text(reinterpret_cast<const char*>(bytes.data()), bytes.size());
    splitter_.feed(text, [&](std::string_view l) {
      if (got && !newest) return;
      if (mapper_.map(l).status == line::LineStatus::ignored) return;
      got = std::string(l);
    });
  }

  boost::asio::awaitable<Transaction> ask(SerialPort& port, ExchangeLog* log,
                                          std::optional<std::string>& got) {
    std::vector<std::uint8_t> req(opt_.poll.begin(), opt_.poll.end());
    Transaction t;
    for (int attempt = 0; attempt <= port.line().retries && !got; ++attempt) {
      splitter_.reset();  // a fragment of a late reply is not glued to this answer
      std::size_t fed = 0;
      auto check = [&](std::span<const std::uint8_t> b) {
        feed(b.subspan(fed), got, false);
        fed = b.size();
        return got ? FrameState::complete : FrameState::incomplete;
      };
      t = co_await port.transact(req, check, std::chrono::milliseconds(port.line().timeout_ms),
                                 std::size_t(opt_.max_line) * 4);
      if (log) {
        log->add("tx", req);
        log->add("rx", t.bytes);
      }
      if (t.outcome == Transaction::Outcome::port_lost) break;
    }
    co_return t;
  }

  boost::asio::awaitable<Transaction> stream(SerialPort& port, ExchangeLog* log,
                                             std::optional<std::string>& got) {
    splitter_.reset();
    bool synced = false;  // the first fragment may be the tail of a line
    std::size_t fed = 0;
    auto take = [&](std::span<const std::uint8_t> b) {
      if (!synced) {
        auto it =
            std::find_if(b.begin(), b.end(), [](std::uint8_t c) { return c == '\n' || c == '\r'; });
        if (it == b.end()) return;
        synced = true;
        b = b.subspan(std::size_t(it - b.begin()));
      }
      feed(b, got, true);
    };
    // What arrived since the last poll, bounded: a babbling line is cut.
    Transaction pending = port.read_pending(std::size_t(opt_.max_line) * 16);
    if (log) log->add("rx", pending.bytes);
    if (pending.outcome == Transaction::Outcome::port_lost) co_return pending;
    take(pending.bytes);
    if (pending.bytes.size() >= std::size_t(opt_.max_line) * 16) port.drain_input();
    if (got) co_return pending;
    auto check = [&](std::span<const std::uint8_t> b) {
      take(b.subspan(fed));
      fed = b.size();
      return got ? FrameState::complete : FrameState::incomplete;
    };
    Transaction t =
        co_await port.transact({}, check, std::chrono::milliseconds(port.line().timeout_ms),
                               std::size_t(opt_.max_line) * 4, false);
    if (log) log->add("rx", t.bytes);
    co_return t;
  }

  void map_line(const std::string& l, PollResult& res) {
    line::LineReading lr = mapper_.map(l);
    bool logged = false;
    auto debug_raw = [&](const std::string& why) {
      if (!logged) log_->debug("{}: {}: raw line \"{}\"", name_, why, l);
      logged = true;
    };
    if (lr.status == line::LineStatus::garbled) {
      std::string why = std::string("line ") + std::string(line::to_string(lr.channels[0].fault));
      debug_raw(why);
      fail_all(res, ReadProblem::garbled, why);
      return;
    }
    if (opt_.status_field) {
      const auto& st = lr.channels.back();
      bool ok = st.value && std::find(opt_.status_ok.begin(), opt_.status_ok.end(), *st.value) !=
                                opt_.status_ok.end();
      if (!ok) {
        std::string why = st.value ? "instrument status " + std::to_string(int(*st.value))
                                   : "status field " + std::string(line::to_string(st.fault));
        debug_raw(why);
        fail_all(res, ReadProblem::instrument_error, why);
        return;
      }
    }
    for (std::size_t i = 0; i < cal_.size(); ++i) {
      const auto& cv = lr.channels[i];
      if (cv.fault != line::FieldFault::none || !cv.value) {
        res.channels[i].problem = ReadProblem::garbled;
        res.error = channel_names_[i] + ": field " + std::to_string(opt_.format.channel_fields[i]) +
                    " " + std::string(line::to_string(cv.fault));
        debug_raw(res.error);
        continue;
      }
      res.channels[i] = calibrated(cal_[i], *cv.value, channel_names_[i], res.error);
    }
  }

  std::string name_;
  LineOptions opt_;
  line::FieldMapper mapper_;
  line::LineSplitter splitter_;
  std::shared_ptr<spdlog::logger> log_;
  std::vector<std::string> channel_names_;
  std::vector<Calibration> cal_;
};

std::unique_ptr<InstrumentDriver> create(const config::Instrument& in, const config::Line&) {
  LineOptions o = in.settings.get<LineOptions>();
  auto m = line::FieldMapper::create(o.format);
  if (!m) throw std::logic_error("line driver created from an invalid config: " + m.error());
  return std::make_unique<LineDriver>(in, std::move(o), std::move(m).value());
}

}  // namespace

DriverFactory line_driver_factory() {
  return {line::protocol_name.data(),
          "ASCII line per poll or streamed; delimiter or regex fields, NMEA checksum", check,
          create};
}

}  // namespace tarn::drivers
