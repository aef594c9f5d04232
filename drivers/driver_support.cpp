#include "drivers/driver_support.h"

#include <cstdio>

namespace tarn::drivers {

ChannelReading calibrated(const Calibration& cal, double raw, const std::string& channel,
                          std::string& error) {
  ChannelReading c;
  auto v = protocol::calibration::apply(cal, raw);
  if (v) {
    c.value = v.value();
    return c;
  }
  c.problem = ReadProblem::garbled;
  char buf[64];
  std::snprintf(buf, sizeof buf, " (raw %g)", raw);
  error =
      channel + ": calibration: " + std::string(protocol::calibration::to_string(v.error())) + buf;
  return c;
}

void fail_all(PollResult& r, ReadProblem p, std::string why) {
  for (auto& c : r.channels) {
    c.value.reset();
    c.problem = p;
  }
  r.error = std::move(why);
}

ReadProblem problem_of(Transaction::Outcome o) {
  switch (o) {
    case Transaction::Outcome::reply:
      return ReadProblem::none;
    case Transaction::Outcome::timeout:
      return ReadProblem::no_reply;
    case Transaction::Outcome::invalid:
      return ReadProblem::garbled;
    case Transaction::Outcome::port_lost:
      return ReadProblem::offline;
  }
  return ReadProblem::garbled;
}

std::string hex(std::span<const std::uint8_t> bytes) {
  static const char* digits = "0123456789abcdef";
  std::string s;
  s.reserve(bytes.size() * 3);
  for (std::size_t i = 0; i < bytes.size(); ++i) {
    if (i) s += ' ';
    s += digits[bytes[i] >> 4];
    s += digits[bytes[i] & 15];
  }
  return s;
}

std::string printable(std::span<const std::uint8_t> bytes) {
  std::string s;
  for (std::uint8_t b : bytes) {
    if (b == '\r') {
      s += "\\r";
    } else if (b == '\n') {
      s += "\\n";
    } else if (b >= 0x20 && b < 0x7f && b != '\\') {
      s += char(b);
    } else {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\x%02x", b);
      s += buf;
    }
  }
  return s;
}

}  // namespace tarn::drivers
