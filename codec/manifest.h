// The channel manifest: what a station measures and how finely. Packets refer
// to it by a 32-bit hash; it travels itself as a manifest packet
// (codec/FORMAT.md §5). Thread-safety: plain values and pure functions.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "codec/result.h"

namespace tarn::codec {

struct ManifestChannel {
  std::string name;        // e.g. "chl"; unique within the manifest
  std::string quantity;    // e.g. "chlorophyll-a"
  std::string unit;        // UCUM code, e.g. "ug/L", "Cel"
  double resolution = 0;   // quantisation step in `unit`, > 0
  std::string instrument;  // free text, may be empty
  bool operator==(const ManifestChannel&) const = default;
};

struct Manifest {
  std::string station;         // e.g. "hollin-buoy-1"
  std::uint32_t period_s = 0;  // sampling period
  std::uint32_t window_s = 0;  // window length, a multiple of period_s
  std::vector<ManifestChannel> channels;

  // Sample slots in a full window.
  std::uint32_t slots_per_window() const { return period_s ? window_s / period_s : 0; }
  bool operator==(const Manifest&) const = default;
};

// Limits every manifest keeps (FORMAT.md §5).
inline constexpr std::size_t kMaxChannels = 64;
inline constexpr std::uint32_t kMaxSlotsPerWindow = 4096;
inline constexpr std::size_t kMaxTextBytes = 255;

// Checks the limits and rules of FORMAT.md §5; the message names the field.
Expected<Ok> validate(const Manifest& m);

// Canonical byte form (FORMAT.md §5.1). REQUIRES: validate(m).ok().
std::vector<std::uint8_t> canonical_bytes(const Manifest& m);

// CRC-32C of the canonical bytes: the hash carried in every packet.
// REQUIRES: validate(m).ok().
std::uint32_t manifest_hash(const Manifest& m);

// Parses canonical bytes back; validates the result.
Expected<Manifest> parse_canonical_manifest(std::span<const std::uint8_t> bytes);

// Index of the channel called `name`, or -1.
int channel_index(const Manifest& m, const std::string& name);

}  // namespace tarn::codec
