#include "drivers/modbus_rtu_driver.h"

#include <algorithm>
#include <cstdio>

#include "config/json_reader.h"
#include "drivers/calibration_config.h"
#include "drivers/driver_support.h"
#include "drivers/protocol/modbus_rtu.h"

namespace tarn::drivers {

namespace {

namespace mb = protocol::modbus;
using config::Need;
using config::ObjectReader;

struct ChannelMap {
  std::uint8_t function = mb::fn_read_holding_registers;
  std::uint16_t reg = 0;
  mb::RegisterField field;  // index filled per block
};

struct ModbusOptions {
  std::uint8_t unit = 1;
  std::uint8_t function = mb::fn_read_holding_registers;
  int max_registers = mb::max_registers_per_read;
  std::vector<ChannelMap> channels;
};

// A request covering some channels.
struct Block {
  mb::ReadRequest req;
  std::vector<std::size_t> channels;
};

ModbusOptions read_options(const config::Instrument& in, config::Problems& p) {
  ModbusOptions o;
  ObjectReader r(in.options, in.pointer + "/options", p);
  int unit = 1, fn = 3;
  r.integer("unit", unit, mb::min_unit, mb::max_unit, Need::required);
  if (r.integer("function", fn, 3, 4) && fn != 3 && fn != 4) fn = 3;
  r.integer("max_registers", o.max_registers, 1, mb::max_registers_per_read);
  r.finish();
  o.unit = std::uint8_t(unit);
  o.function = std::uint8_t(fn);
  for (auto& ch : in.channels) {
    ObjectReader cr(ch.source, ch.pointer + "/source", p);
    ChannelMap m;
    int reg = 0, cfn = fn;
    std::string type = "u16", order = "high_first";
    cr.integer("register", reg, 0, 65535, Need::required);
    cr.one_of("type", type, {"u16", "s16", "u32", "s32", "f32"});
    cr.one_of("word_order", order, {"high_first", "low_first"});
    cr.integer("function", cfn, 3, 4);
    cr.number("scale", m.field.scale, -1e12, 1e12);
    cr.number("offset", m.field.offset, -1e12, 1e12);
    cr.finish();
    m.function = std::uint8_t(cfn);
    m.reg = std::uint16_t(reg);
    m.field.type = type == "s16"   ? mb::RegisterType::s16
                   : type == "u32" ? mb::RegisterType::u32
                   : type == "s32" ? mb::RegisterType::s32
                   : type == "f32" ? mb::RegisterType::f32
                                   : mb::RegisterType::u16;
    m.field.order =
        order == "low_first" ? mb::WordOrder::low_word_first : mb::WordOrder::high_word_first;
    if (std::size_t(reg) + mb::register_span(m.field.type) > 65536)
      p.add(ch.pointer + "/source/register",
            "is " + std::to_string(reg) + "; a " + type + " there runs past register 65535");
    o.channels.push_back(m);
  }
  return o;
}

void check(config::Instrument& in, const config::Line& line, config::Problems& p) {
  in.settings.put(read_options(in, p));
  if (line.data_bits != 8)
    p.add(line.pointer + "/data_bits",
          "is " + std::to_string(line.data_bits) + "; Modbus RTU needs 8 data bits");
}

// Channels sorted by (function, register); a channel joins the open block when
// its registers touch or overlap it and the block stays within max_registers.
std::vector<Block> plan_blocks(const ModbusOptions& o) {
  std::vector<std::size_t> order(o.channels.size());
  for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return std::pair(o.channels[a].function, o.channels[a].reg) <
           std::pair(o.channels[b].function, o.channels[b].reg);
  });
  std::vector<Block> blocks;
  for (std::size_t i : order) {
    const ChannelMap& c = o.channels[i];
    const std::size_t end = std::size_t(c.reg) + mb::register_span(c.field.type);
    if (!blocks.empty()) {
      Block& b = blocks.back();
      const std::size_t b_end = std::size_t(b.req.start) + b.req.count;
      const std::size_t new_end = std::max(b_end, end);
      if (b.req.function == c.function && c.reg <= b_end &&
          new_end - b.req.start <= std::size_t(o.max_registers)) {
        b.req.count = std::uint16_t(new_end - b.req.start);
        b.channels.push_back(i);
        continue;
      }
    }
    Block b;
    b.req = {o.unit, c.function, c.reg, std::uint16_t(end - c.reg)};
    b.channels.push_back(i);
    blocks.push_back(std::move(b));
  }
  return blocks;
}

class ModbusRtuDriver final : public InstrumentDriver {
 public:
  ModbusRtuDriver(const config::Instrument& in, ModbusOptions o)
      : name_(in.name), opt_(std::move(o)), blocks_(plan_blocks(opt_)) {
    for (auto& ch : in.channels) channel_names_.push_back(ch.name);
    cal_ = calibrations_of(in);
  }

  bool binary() const override { return true; }
  std::size_t requests_per_poll() const { return blocks_.size(); }

  boost::asio::awaitable<PollResult> poll(SerialPort& port, ExchangeLog* log) override {
    PollResult res;
    res.channels.resize(cal_.size());
    for (const Block& b : blocks_) {
      const bool lost = co_await read_block(port, log, b, res);
      if (lost) {
        fail_all(res, ReadProblem::offline, res.error);
        break;
      }
    }
    co_return res;
  }

 private:
  // Returns true when the port was lost.
  boost::asio::awaitable<bool> read_block(SerialPort& port, ExchangeLog* log, const Block& b,
                                          PollResult& res) {
    auto frame = mb::build_read_request(b.req);
    if (!frame) throw std::logic_error("modbus request planned from a validated config failed");
    const std::vector<std::uint8_t> req(frame.value().begin(), frame.value().end());
    const mb::CharacterFrame cf{8, port.line().parity != "none", unsigned(port.line().stop_bits)};
    mb::Response resp;
    Transaction t;
    std::string why;
    for (int attempt = 0; attempt <= port.line().retries; ++attempt) {
      port.drain_input();
      co_await port.pause(mb::silent_interval(unsigned(port.line().baud), cf));
      std::size_t skip = 0;  // CRC-valid frames meant for another request
      auto check = [&](std::span<const std::uint8_t> bytes) {
        for (;;) {
          resp = mb::parse_read_response(bytes.subspan(skip), b.req);
          if (resp.status == mb::ResponseStatus::invalid &&
              (resp.fault == mb::ResponseFault::unit_mismatch ||
               resp.fault == mb::ResponseFault::function_mismatch)) {
            skip += resp.frame_bytes;
            continue;
          }
          break;
        }
        switch (resp.status) {
          case mb::ResponseStatus::incomplete:
            return FrameState::incomplete;
          case mb::ResponseStatus::invalid:
            return FrameState::invalid;
          default:
            return FrameState::complete;
        }
      };
      t = co_await port.transact(req, check, std::chrono::milliseconds(port.line().timeout_ms),
                                 mb::max_frame_bytes * 2);
      if (log) {
        log->add("tx", req);
        log->add("rx", t.bytes);
      }
      if (t.outcome == Transaction::Outcome::port_lost) {
        res.error = t.error;
        co_return true;
      }
      if (t.outcome == Transaction::Outcome::reply) break;
      why =
          t.outcome == Transaction::Outcome::timeout
              ? (t.bytes.empty() ? "no reply"
                                 : "truncated reply (" + std::to_string(t.bytes.size()) + " bytes)")
              : "bad reply: " + std::string(mb::to_string(resp.fault));
    }
    char where[96];
    std::snprintf(where, sizeof where, " (unit %u, function %02u, registers %u..%u)", b.req.unit,
                  b.req.function, b.req.start, b.req.start + b.req.count - 1);
    if (t.outcome != Transaction::Outcome::reply) {
      for (std::size_t i : b.channels) res.channels[i].problem = problem_of(t.outcome);
      res.error = why + where;
      co_return false;
    }
    if (resp.status == mb::ResponseStatus::exception) {
      char code[16];
      std::snprintf(code, sizeof code, "0x%02x ", resp.exception_code);
      for (std::size_t i : b.channels) res.channels[i].problem = ReadProblem::instrument_error;
      res.error = "exception " + std::string(code) +
                  std::string(mb::exception_name(resp.exception_code)) + where;
      co_return false;
    }
    for (std::size_t i : b.channels) {
      mb::RegisterField f = opt_.channels[i].field;
      f.index = opt_.channels[i].reg - b.req.start;
      auto raw = mb::decode_register(resp.registers, f);
      if (!raw) {
        res.channels[i].problem = ReadProblem::garbled;
        res.error = channel_names_[i] + ": " + std::string(mb::to_string(raw.error()));
        continue;
      }
      res.channels[i] = calibrated(cal_[i], raw.value(), channel_names_[i], res.error);
    }
    co_return false;
  }

  std::string name_;
  ModbusOptions opt_;
  std::vector<Block> blocks_;
  std::vector<std::string> channel_names_;
  std::vector<Calibration> cal_;
};

std::unique_ptr<InstrumentDriver> create(const config::Instrument& in, const config::Line&) {
  return std::make_unique<ModbusRtuDriver>(in, in.settings.get<ModbusOptions>());
}

}  // namespace

DriverFactory modbus_rtu_driver_factory() {
  return {"modbus-rtu", "Modbus RTU registers (functions 03/04), CRC-16, exceptions by name", check,
          create};
}

}  // namespace tarn::drivers
