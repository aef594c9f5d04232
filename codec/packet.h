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

inline constexpr std::uint8_t kFormatVersion = 1;
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
};

// A manifest together with its hash, known to satisfy validate().
struct CheckedManifest {
  Manifest manifest;
  std::uint32_t hash = 0;
};
Expected<CheckedManifest> check_manifest(Manifest m);

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
  std::optional<ManifestPart> manifest_part;
  std::optional<Manifest> manifest;            // set when the part is the whole manifest (count 1)
  std::vector<std::uint8_t> skipped_sections;  // types this decoder does not know
};

}  // namespace tarn::codec
