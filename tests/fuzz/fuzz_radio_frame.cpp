// libFuzzer target: radio frames (codec/radio_frame.h). Byte 0 picks the MTU
// (64 + 4 * b), byte 1 the chunk size for the splitter; the rest is the byte
// stream from the modem. Aborts if the splitter holds more than the MTU, if a
// decoded frame does not encode and decode back to itself, or if a payload
// within max_payload() does not fit the MTU.
#include <algorithm>
#include <cstdint>
#include <cstdlib>
#include <span>
#include <vector>

#include "codec/radio_frame.h"

using namespace tarn::codec::radio;

namespace {
void require(bool ok) {
  if (!ok) std::abort();
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 2) return 0;
  const std::size_t mtu = 64 + 4 * std::size_t(data[0]);
  const std::size_t chunk = 1 + data[1] % 64;
  FrameSplitter splitter(mtu);
  std::span<const std::uint8_t> stream(data + 2, size - 2);
  for (std::size_t at = 0; at < stream.size(); at += chunk) {
    auto piece = stream.subspan(at, std::min(chunk, stream.size() - at));
    splitter.feed(piece, [&](std::span<const std::uint8_t> stuffed) {
      require(!stuffed.empty() && stuffed.size() <= mtu);
      auto f = decode_frame(stuffed);
      if (!f.ok()) return;
      // A frame that decodes encodes again (never longer) and decodes to itself.
      auto w = encode_frame(*f, mtu + 2);
      require(w.ok());
      require(w->size() <= stuffed.size() + 2);
      auto g = decode_frame(std::span<const std::uint8_t>(*w).subspan(1, w->size() - 2));
      require(g.ok() && g->type == f->type && g->station_tag == f->station_tag &&
              g->sequence == f->sequence && g->payload == f->payload);
      if (f->payload.size() <= max_payload(mtu)) require(encode_frame(*f, mtu).ok());
    });
    require(splitter.pending_bytes() <= mtu);
  }
  // The raw input as one stuffed run: decode must not read past it.
  auto f = decode_frame({data, size});
  if (f.ok()) require(f->payload.size() < size);
  return 0;
}
