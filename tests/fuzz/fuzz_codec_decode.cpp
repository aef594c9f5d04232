// libFuzzer target for the packet decoder (codec/decoder.h).
// Every input is decoded as given and, resealed with a correct CRC-32C, once more,
// so that the fuzzer reaches the section decoders (windows, stats, reasons, alerts,
// cleanings, health, manifest; versions 1 and 2). A packet that decodes must
// re-encode into packets that decode to the same samples.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <vector>

#include "codec/crc32c.h"
#include "codec/decoder.h"
#include "codec/encoder.h"

namespace {

using namespace tarn::codec;

const CheckedManifest& manifest() {
  static const CheckedManifest cm = [] {
    Manifest m;
    m.station = "hollin-buoy-1";
    m.period_s = 60;
    m.window_s = 600;
    m.channels = {{"chl", "chlorophyll-a", "ug/L", 0.01, "demo fluorometer A", 1.0,
                   "TF-3 fluorometer", "TF3-0042", "2024-04-15"},
                  {"pc", "phycocyanin", "ug/L", 0.01, "demo fluorometer B", 1.0, "TF-3 fluorometer",
                   "TF3-0057", "2024-02-29"},
                  {"pe", "phycoerythrin", "ug/L", 0.01, "demo fluorometer B", 1.0,
                   "TF-3 fluorometer", "TF3-0057", "2024-02-29"},
                  {"temp", "water temperature", "Cel", 0.001, "demo thermistor", 0.5,
                   "TT-1 thermistor", "", ""}};
    // The same as codec/vectors/manifest_hollin.json, so the vectors' seeds reach the
    // section decoders.
    m.latitude = 55.10;
    m.longitude = 3.60;
    m.elevation_m = 142;
    return *check_manifest(m);
  }();
  return cm;
}

void check_reencode(const DecodedPacket& d, const CheckedManifest& cm) {
  if (d.windows.empty() || d.windows[0].first_channel != 0 ||
      d.windows[0].channels.size() != cm.manifest.channels.size())
    return;
  // Encoders write the current version only; version 1 statistics (passed samples only)
  // are not version 2 statistics when a window has only not-evaluated samples.
  if (d.header.version != kFormatVersion && d.windows[0].stats_only) return;
  EncodeOptions o;
  o.stats_only = d.windows[0].stats_only;
  o.windows_per_packet = kMaxWindowsPerSection;
  auto again = encode_windows(cm, d.windows, d.header.sequence, o);
  if (!again) {
    // Values at the very edge of the 2^53 range may not quantise back; nothing else may fail.
    if (again.error().message.find("too large") == std::string::npos) std::abort();
    return;
  }
  if (again->size() != 1) std::abort();
  auto d2 = decode_packet(again->front().bytes, &cm);
  if (!d2 || d2->windows.size() != d.windows.size()) std::abort();
  for (std::size_t w = 0; w < d.windows.size(); ++w) {
    const Window &a = d.windows[w], &b = d2->windows[w];
    if (a.start != b.start || a.slots != b.slots || a.partial != b.partial) std::abort();
    for (std::size_t c = 0; c < a.channels.size(); ++c) {
      const auto &x = a.channels[c], &y = b.channels[c];
      if (x.flags != y.flags || x.reasons != y.reasons || x.stats.counts != y.stats.counts)
        std::abort();
      const double res = cm.manifest.channels[c].resolution;
      for (std::size_t i = 0; i < x.values.size(); ++i)
        if (x.values[i].has_value() != y.values[i].has_value() ||
            (x.values[i] &&
             std::fabs(*x.values[i] - *y.values[i]) > res * 1e-6 + std::fabs(*x.values[i]) * 1e-12))
          std::abort();
    }
  }
}

void run(const std::uint8_t* data, std::size_t size) {
  std::span<const std::uint8_t> in(data, size);
  (void)peek_header(in);
  (void)list_sections(in);
  (void)decode_packet(in, nullptr);
  auto d = decode_packet(in, &manifest());
  if (d) check_reencode(*d, manifest());
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  run(data, size);
  if (size >= 4) {
    std::vector<std::uint8_t> sealed(data, data + size);
    std::uint32_t c = crc32c(std::span(sealed).first(size - 4));
    for (int i = 0; i < 4; ++i) sealed[size - 4 + i] = std::uint8_t(c >> (8 * i));
    run(sealed.data(), sealed.size());
  }
  return 0;
}
