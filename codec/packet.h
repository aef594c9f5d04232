// Packet layout shared by the encoder and the decoder (codec/FORMAT.md §2-3).
// Thread-safety: plain values.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

#include "codec/manifest.h"
#include "codec/result.h"
#include "codec/window.h"

namespace tarn::codec {

// Encoders write kFormatVersion; decoders read kOldestFormatVersion .. kFormatVersion
// (FORMAT.md §2: shore decoders are updated before stations).
inline constexpr std::uint8_t kFormatVersion = 2;
inline constexpr std::uint8_t kOldestFormatVersion = 1;
inline constexpr std::size_t kMaxPacketBytes = 65535;
// Header byte + manifest hash + 1-byte sequence + CRC.
inline constexpr std::size_t kMinPacketBytes = 1 + 4 + 1 + 4;
// Most windows in one section, and most channel-slots (windows x channels x slots)
// in one section unless it holds a single window.
inline constexpr std::size_t kMaxWindowsPerSection = 255;
inline constexpr std::size_t kMaxSlotsPerSection = 65536;

// Header flag bits (low nibble of byte 0).
inline constexpr std::uint8_t kHeaderClockUnsynced = 0x1;
inline constexpr std::uint8_t kHeaderPartial = 0x2;

enum class SectionType : std::uint8_t {
  windows = 1,  // samples, flags and values
  stats = 2,    // statistics-only windows
  reasons = 3,  // reason bits for the windows section of the same packet
  alerts = 4,
  manifest = 5,  // one part of the canonical manifest bytes
  health = 6,
  cleanings = 7,  // readings around sensor cleanings (version 2)
};

// A manifest together with its hashes, known to satisfy validate().
struct CheckedManifest {
  Manifest manifest;
  std::uint32_t hash = 0;     // of the version 2 canonical bytes: what encoders write
  std::uint32_t hash_v1 = 0;  // of the version 1 canonical bytes: for version 1 packets
  // The hash a packet of `version` carries for this manifest.
  std::uint32_t hash_for(std::uint8_t version) const { return version == 1 ? hash_v1 : hash; }
};
Result<CheckedManifest> check_manifest(Manifest m);

struct PacketHeader {
  std::uint8_t version = kFormatVersion;
  bool clock_unsynced = false;
  bool partial = false;
  std::uint32_t manifest_hash = 0;
  std::uint64_t sequence = 0;
  bool operator==(const PacketHeader&) const = default;
};

// One part of a manifest split over several packets.
struct ManifestPart {
  std::uint32_t index = 0;  // 0-based
  std::uint32_t count = 1;
  std::vector<std::uint8_t> bytes;  // a slice of the canonical manifest bytes
  bool operator==(const ManifestPart&) const = default;
};

struct DecodedPacket {
  PacketHeader header;
  std::vector<Window> windows;  // from the windows or stats section
  std::vector<AlertEvent> alerts;
  std::vector<HealthRecord> health;
  std::vector<CleaningRecord> cleanings;
  std::optional<ManifestPart> manifest_part;
  std::optional<Manifest> manifest;            // set when the part is the whole manifest (count 1)
  std::vector<std::uint8_t> skipped_sections;  // types this decoder does not know
};

}  // namespace tarn::codec
