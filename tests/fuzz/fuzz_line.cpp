// libFuzzer target: the line protocol's LineSplitter and FieldMapper.
// Byte 0 picks the line cap (1..256), byte 1 the read chunk size; the rest is
// the byte stream. Aborts if the splitter holds or delivers more than the cap,
// delivers a line with CR/LF, or a mapper accepts a line whose checksum fails.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <string_view>

#include "drivers/protocol/crc.h"
#include "drivers/protocol/line_protocol.h"

using namespace tarn::protocol;

namespace {

void require(bool ok) {
  if (!ok) std::abort();
}

line::FieldMapper make(line::LineFormat f) {
  auto m = line::FieldMapper::create(std::move(f));
  require(m.ok());
  return std::move(m).value();
}

const line::FieldMapper& csv() {
  static const line::FieldMapper m = [] {
    line::LineFormat f;
    f.checksum = line::Checksum::required;
    f.channel_fields = {0, 1, 2, 7};
    return make(f);
  }();
  return m;
}

const line::FieldMapper& blanks() {
  static const line::FieldMapper m = [] {
    line::LineFormat f;
    f.split = line::Split::whitespace;
    f.checksum = line::Checksum::if_present;
    f.channel_fields = {0, 3};
    return make(f);
  }();
  return m;
}

const line::FieldMapper& pattern() {
  static const line::FieldMapper m = [] {
    line::LineFormat f;
    f.split = line::Split::regex;
    f.pattern = R"(CHL=(\S+)\s+PC=([-+0-9.eE]*)(?:\s+T=(\S+))?)";
    f.prefix = "";
    f.channel_fields = {1, 2, 3};
    return make(f);
  }();
  return m;
}

void check_reading(const line::LineReading& r, std::size_t channels) {
  if (r.status == line::LineStatus::ignored) return;
  require(r.channels.size() == channels);
  for (const auto& c : r.channels) {
    require(c.value.has_value() == (c.fault == line::FieldFault::none));
    if (c.value) require(std::isfinite(*c.value));
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 2) return 0;
  line::LineSplitter splitter(1 + data[0]);
  const std::size_t chunk = 1 + data[1] % 64;
  const std::string_view stream(reinterpret_cast<const char*>(data + 2), size - 2);
  for (std::size_t at = 0; at < stream.size(); at += chunk) {
    splitter.feed(stream.substr(at, chunk), [&](std::string_view l) {
      require(!l.empty() && l.size() <= splitter.max_line_bytes());
      require(l.find_first_of("\r\n") == std::string_view::npos);
      const auto r = csv().map(l);
      check_reading(r, 4);
      if (r.status == line::LineStatus::mapped) {
        require(line::check_nmea_checksum(l).state == line::ChecksumState::ok);
      }
      check_reading(blanks().map(l), 2);
      check_reading(pattern().map(l), 3);
    });
    require(splitter.pending_bytes() <= splitter.max_line_bytes());
  }
  return 0;
}
