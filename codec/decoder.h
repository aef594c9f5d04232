// Decoder: packets back into windows, alerts, health records and manifests
// (codec/FORMAT.md). Pure: no clock, no I/O.
//
// Never trusts a length beyond the bytes present; allocates at most a bound
// derived from the packet size and the manifest (FORMAT.md §6). A packet is
// either decoded whole or rejected with an Error: never half decoded.
// Thread-safety: pure functions, safe to call from any thread.
#pragma once

#include <cstdint>
#include <span>
#include <vector>

#include "codec/packet.h"

namespace tarn::codec {

// Checks size, CRC and version and reads the header.
Result<PacketHeader> peek_header(std::span<const std::uint8_t> packet);

// Decodes a packet of format version 1 or 2. `manifest` may be null for manifest and
// health packets; windows, alerts and cleanings need the manifest whose hash the packet
// carries (CheckedManifest::hash_for its version).
Result<DecodedPacket> decode_packet(std::span<const std::uint8_t> packet,
                                    const CheckedManifest* manifest);

struct SectionInfo {
  std::uint8_t type = 0;
  std::size_t offset = 0;  // of the body, from the start of the packet
  std::size_t length = 0;
};
// The sections of a packet whose CRC and version check out.
Result<std::vector<SectionInfo>> list_sections(std::span<const std::uint8_t> packet);

// Joins the parts of a split manifest (any order, each index once) and checks
// the result against `hash`; `version` is the format version of the packets that
// carried the parts (their canonical bytes differ, FORMAT.md §5.1).
Result<Manifest> assemble_manifest(std::span<const ManifestPart> parts, std::uint32_t hash,
                                   std::uint8_t version = kFormatVersion);

}  // namespace tarn::codec
