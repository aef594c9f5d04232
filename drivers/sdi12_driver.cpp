#include "drivers/sdi12_driver.h"

#include <optional>

#include "config/json_reader.h"
#include "drivers/calibration_config.h"
#include "drivers/driver_support.h"
#include "drivers/protocol/sdi12.h"

namespace tarn::drivers {

namespace {

namespace sdi = protocol::sdi12;
using config::Need;
using config::ObjectReader;

struct Sdi12Options {
  char address = '0';
  sdi::MeasureOptions measure;
  bool send_break = true;
  std::vector<std::size_t> values;  // per channel
};

Sdi12Options read_options(const config::Instrument& in, config::Problems& p) {
  Sdi12Options o;
  config::Json empty = config::Json::object();
  ObjectReader r(in.options.is_null() ? empty : in.options, in.pointer + "/options", p);
  std::string address = "0", measure = "M";
  if (r.string("address", address) && (address.size() != 1 || !sdi::is_valid_address(address[0])))
    p.add(r.pointer_of("address"),
          "is \"" + address + "\"; allowed: one character 0-9, a-z or A-Z");
  r.one_of("measure", measure, {"M", "MC", "C", "CC"});
  int index = 0;
  r.integer("index", index, 0, 9);
  r.boolean("send_break", o.send_break);
  r.finish();
  o.address = address.empty() ? '0' : address[0];
  o.measure.kind = measure[0] == 'C' ? sdi::Measure::concurrent : sdi::Measure::standard;
  o.measure.crc = measure.size() == 2;
  o.measure.index = unsigned(index);
  for (auto& ch : in.channels) {
    ObjectReader cr(ch.source, ch.pointer + "/source", p);
    int v = 0;
    cr.integer("value", v, 0, 29, Need::required);
    cr.finish();
    o.values.push_back(std::size_t(v));
  }
  return o;
}

void check(config::Instrument& in, const config::Line& line, config::Problems& p) {
  in.settings.put(read_options(in, p));
  if (line.baud != 1200 || line.data_bits != 7 || line.parity != "even" || line.stop_bits != 1)
    p.add(line.pointer, "is " + std::to_string(line.baud) + " baud " +
                            std::to_string(line.data_bits) + " bits parity " + line.parity +
                            "; SDI-12 adapters run at 1200 baud, 7 data bits, even parity, 1 stop");
}

// The first reply line in `bytes` that is not an echo of `cmd` (CR LF stripped).
std::optional<std::string> reply_line(std::span<const std::uint8_t> bytes, const std::string& cmd) {
  std::size_t start = 0;
  for (std::size_t i = 0; i < bytes.size(); ++i) {
    if (bytes[i] != '\n') continue;
    std::string l(bytes.begin() + long(start), bytes.begin() + long(i));
    start = i + 1;
    while (!l.empty() && (l.back() == '\r' || l.front() == '\r')) {
      if (l.back() == '\r')
        l.pop_back();
      else
        l.erase(l.begin());
    }
    if (l.empty() || l == cmd) continue;
    return l;
  }
  return std::nullopt;
}

class Sdi12Driver final : public InstrumentDriver {
 public:
  Sdi12Driver(const config::Instrument& in, Sdi12Options o)
      : name_(in.name), opt_(std::move(o)), log_(os::logger("driver sdi12")) {
    for (auto& ch : in.channels) channel_names_.push_back(ch.name);
    cal_ = calibrations_of(in);
  }

  boost::asio::awaitable<PollResult> poll(SerialPort& port, ExchangeLog* log) override {
    PollResult res;
    res.channels.resize(cal_.size());
    const std::string mcmd = sdi::start_measurement(opt_.address, opt_.measure);
    Exchange m = co_await command(port, log, mcmd, [&](const std::string& l) {
      return bool(sdi::parse_measurement_reply(l, opt_.address, opt_.measure.kind));
    });
    if (!m.line) {
      fail_all(res, problem_of(m.outcome), mcmd + ": " + m.why);
      co_return res;
    }
    const auto ann = sdi::parse_measurement_reply(*m.line, opt_.address, opt_.measure.kind).value();
    if (ann.count == 0) {
      fail_all(res, ReadProblem::instrument_error, mcmd + ": the sensor has no values (n = 0)");
      co_return res;
    }
    if (ann.seconds > 0) {
      if (!co_await wait_ready(port, log, ann.seconds)) {
        fail_all(res, ReadProblem::offline, "port lost while waiting for the measurement");
        co_return res;
      }
    }
    sdi::DataCollector dc(opt_.address, ann.count, opt_.measure.crc);
    while (auto dcmd = dc.next_command()) {
      Exchange d = co_await command(port, log, *dcmd, [&](const std::string& l) {
        return bool(sdi::parse_data_reply(l, opt_.address, opt_.measure.crc));
      });
      if (!d.line) {
        fail_all(res, problem_of(d.outcome), *dcmd + ": " + d.why);
        co_return res;
      }
      auto st = dc.accept(*d.line);
      if (!st) {
        fail_all(res, ReadProblem::garbled, *dcmd + ": " + std::string(sdi::to_string(st.error())));
        co_return res;
      }
    }
    const auto& values = dc.values();
    for (std::size_t i = 0; i < cal_.size(); ++i) {
      if (opt_.values[i] >= values.size()) {
        res.channels[i].problem = ReadProblem::garbled;
        res.error = channel_names_[i] + ": value " + std::to_string(opt_.values[i]) +
                    " not sent (the sensor gave " + std::to_string(values.size()) + " of " +
                    std::to_string(ann.count) + ")";
        continue;
      }
      res.channels[i] = calibrated(cal_[i], values[opt_.values[i]], channel_names_[i], res.error);
    }
    co_return res;
  }

  boost::asio::awaitable<std::string> identify(SerialPort& port, ExchangeLog* log) override {
    // Commissioning: "?!" first, which every sensor on the bus answers with
    // its address (so it is only meaningful with one sensor connected; two
    // answer over each other and give no clean reply), then aI!.
    std::string who;
    {
      const std::string q = sdi::address_query();
      Exchange e = co_await command(
          port, log, q, [&](const std::string& l) { return bool(sdi::parse_address_reply(l)); });
      if (!e.line)
        who = "address query ?!: " + e.why + " (more than one sensor on the bus?)";
      else if (char a = sdi::parse_address_reply(*e.line).value(); a != opt_.address)
        who = std::string("address query ?!: a sensor answers as '") + a + "', the config says '" +
              opt_.address + "'";
      else
        who = std::string("address query ?!: '") + a + "' answers";
    }
    const std::string cmd = sdi::identify(opt_.address);
    Exchange e = co_await command(port, log, cmd, [&](const std::string& l) {
      return bool(sdi::parse_identify(l, opt_.address));
    });
    if (!e.line) co_return who + "; " + cmd + ": " + e.why;
    auto id = sdi::parse_identify(*e.line, opt_.address).value();
    co_return who + "; SDI-12 " + id.sdi12_version.substr(0, 1) + "." + id.sdi12_version.substr(1) +
        ", vendor \"" + id.vendor + "\", model \"" + id.model + "\", version \"" +
        id.sensor_version + "\"" + (id.serial.empty() ? "" : ", serial \"" + id.serial + "\"");
  }

 private:
  struct Exchange {
    std::optional<std::string> line;  // a reply that passed `good`
    Transaction::Outcome outcome = Transaction::Outcome::timeout;
    std::string why;
  };

  // Sends `cmd` along the retry plan until a reply passes `good`.
  template <class Good>
  boost::asio::awaitable<Exchange> command(SerialPort& port, ExchangeLog* log,
                                           const std::string& cmd, Good good) {
    sdi::RetryPolicy policy;
    policy.break_cycles = 1 + unsigned(std::max(0, port.line().retries));
    const std::vector<std::uint8_t> req(cmd.begin(), cmd.end());
    Exchange ex;
    ex.why = "no reply";
    for (const sdi::Attempt& a : sdi::attempt_plan(policy)) {
      if (a.send_break && opt_.send_break) {
        if (!co_await port.send_break(policy.break_length)) {
          ex.outcome = Transaction::Outcome::port_lost;
          ex.why = "port is closed";
          co_return ex;
        }
        co_await port.pause(policy.mark_after_break);
      }
      auto check = [&](std::span<const std::uint8_t> b) {
        return reply_line(b, cmd) ? FrameState::complete : FrameState::incomplete;
      };
      Transaction t = co_await port.transact(
          req, check, std::chrono::milliseconds(port.line().timeout_ms), 256);
      if (log) {
        log->add("tx", req);
        log->add("rx", t.bytes);
      }
      ex.outcome = t.outcome;
      if (t.outcome == Transaction::Outcome::port_lost) {
        ex.why = t.error;
        co_return ex;
      }
      if (t.outcome != Transaction::Outcome::reply) {
        ex.why = t.bytes.empty() ? "no reply" : "incomplete reply \"" + printable(t.bytes) + "\"";
        continue;
      }
      auto l = reply_line(t.bytes, cmd);
      if (good(*l)) {
        ex.line = l;
        co_return ex;
      }
      ex.outcome = Transaction::Outcome::invalid;
      ex.why = "bad reply \"" +
               printable(std::span(reinterpret_cast<const std::uint8_t*>(l->data()), l->size())) +
               "\"";
      log_->debug("{}: {} -> {}", name_, cmd, ex.why);
      co_await port.pause(policy.retry_wait_min);
    }
    co_return ex;
  }

  // Waits for the service request (standard measurement) or the announced
  // seconds (concurrent). False when the port was lost.
  boost::asio::awaitable<bool> wait_ready(SerialPort& port, ExchangeLog* log, unsigned seconds) {
    const auto limit = std::chrono::milliseconds(std::int64_t(seconds) * 1000 + 100);
    if (opt_.measure.kind == sdi::Measure::concurrent) {
      co_await port.pause(limit);
      co_return port.is_open();
    }
    // Any other line (noise, another sensor) is skipped: the wait goes on.
    const std::string want(1, opt_.address);
    auto check = [&want](std::span<const std::uint8_t> b) {
      std::size_t start = 0;
      for (std::size_t i = 0; i < b.size(); ++i) {
        if (b[i] != '\n') continue;
        if (reply_line(b.subspan(start, i + 1 - start), "") == want) return FrameState::complete;
        start = i + 1;
      }
      return FrameState::incomplete;
    };
    Transaction t = co_await port.transact({}, check, limit, 64);
    if (log) log->add("rx", t.bytes);
    co_return t.outcome != Transaction::Outcome::port_lost;
  }

  std::string name_;
  Sdi12Options opt_;
  std::shared_ptr<spdlog::logger> log_;
  std::vector<std::string> channel_names_;
  std::vector<Calibration> cal_;
};

std::unique_ptr<InstrumentDriver> create(const config::Instrument& in, const config::Line&) {
  return std::make_unique<Sdi12Driver>(in, in.settings.get<Sdi12Options>());
}

}  // namespace

DriverFactory sdi12_driver_factory() {
  return {"sdi12", "SDI-12 sensor via a transparent adapter: aM!/aC!, aD0!.., CRC, aI!", check,
          create};
}

}  // namespace tarn::drivers
