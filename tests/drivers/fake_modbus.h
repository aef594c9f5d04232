// Test support: a small Modbus RTU server (one or more units on one pty, as on
// an RS-485 bus) built from the spec's frame layout, with fault switches.
// Frame layout: Modbus over Serial Line V1.02 (RTU: unit, function, data, CRC
// low byte first); function 03/04 request and reply and exception layout:
// Modbus Application Protocol V1.1b3 §6.3, §6.4, §7 (section numbers from memory).
#pragma once

#include <atomic>
#include <map>
#include <mutex>
#include <set>

#include "fake_instrument.h"

namespace tarn::test {

struct FakeModbusUnit {
  std::map<std::uint16_t, std::uint16_t> holding, input;  // absent -> exception 02
  std::atomic<bool> mute{false};
};

class FakeModbusBus {
 public:
  enum class Fault { none, bad_crc, truncated, garbage, late, wrong_unit };

  explicit FakeModbusBus(const std::string& link);
  FakeModbusUnit& unit(std::uint8_t id) { return units_[id]; }
  void set_fault(Fault f, int times = 1000000);  // the next `times` replies
  void set_late_ms(int ms) { late_ms_ = ms; }
  int requests() const { return requests_; }
  FakeInstrument& pty() { return *fake_; }

  static void put_f32(std::map<std::uint16_t, std::uint16_t>& regs, std::uint16_t at, float v,
                      bool high_first = true);

 private:
  Bytes answer(Bytes& in);

  std::map<std::uint8_t, FakeModbusUnit> units_;
  std::mutex mu_;
  Fault fault_ = Fault::none;
  int fault_left_ = 0;
  int late_ms_ = 400;
  std::atomic<int> requests_{0};
  std::unique_ptr<FakeInstrument> fake_;
};

}  // namespace tarn::test
