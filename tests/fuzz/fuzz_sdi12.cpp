// libFuzzer target: SDI-12 reply parsers and the aD0..aD9 data collection.
// The input is split at LF into reply lines. Aborts if a CRC reply is accepted
// whose CRC does not match, or a value outside the 7-digit range comes back.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <string_view>

#include "drivers/protocol/sdi12.h"

using namespace tarn::protocol;

namespace {

void require(bool ok) {
  if (!ok) std::abort();
}

void check_values(const sdi12::DataReply& d) {
  for (double v : d.values) require(std::isfinite(v) && std::fabs(v) < 1e7);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view all(reinterpret_cast<const char*>(data), size);
  sdi12::DataCollector collector('0', size % 20, (size & 1) != 0);
  std::size_t start = 0;
  while (start <= all.size()) {
    std::size_t end = all.find('\n', start);
    if (end == std::string_view::npos) end = all.size();
    const std::string_view line = all.substr(start, end - start + (end < all.size() ? 1 : 0));
    start = end + 1;

    (void)sdi12::parse_address_reply(line);
    (void)sdi12::parse_identify(line, '0');
    (void)sdi12::parse_measurement_reply(line, '0', sdi12::Measure::standard);
    (void)sdi12::parse_measurement_reply(line, 'a', sdi12::Measure::concurrent);
    if (auto d = sdi12::parse_data_reply(line, '0', false)) check_values(d.value());
    if (auto d = sdi12::parse_data_reply(line, '0', true)) {
      check_values(d.value());
      std::string_view body = line;
      if (body.ends_with("\r\n")) body.remove_suffix(2);
      require(sdi12::crc_matches(body));
    }
    if (collector.next_command()) {
      (void)collector.accept(line);
      require(collector.values().size() <= size % 20);
    }
  }
  return 0;
}
