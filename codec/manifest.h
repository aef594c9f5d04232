// The channel manifest: what a station measures and how finely. Packets refer
// to it by a 32-bit hash; it travels itself as a manifest packet
// (codec/FORMAT.md §5). Thread-safety: plain values and pure functions.
#pragma once

#include <cstdint>
#include <optional>
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
  // Provenance (format version 2); empty/absent means not known.
  // Vertical position of the sensor in metres: depth below the water surface, positive
  // down; a sensor above the surface (air temperature, a radiometer on a mast) is negative.
  std::optional<double> depth_m;
  std::string model;          // instrument model, free text
  std::string serial;         // instrument serial number, free text
  std::string calibrated_on;  // date of the last calibration, "YYYY-MM-DD"
  bool operator==(const ManifestChannel&) const = default;
};

struct Manifest {
  std::string station;         // e.g. "hollin-buoy-1"
  std::uint32_t period_s = 0;  // sampling period
  std::uint32_t window_s = 0;  // window length, a multiple of period_s
  std::vector<ManifestChannel> channels;
  // Station position (format version 2), WGS 84 degrees, north and east positive;
  // both or neither. Elevation of the station in metres above sea level.
  std::optional<double> latitude, longitude;
  std::optional<double> elevation_m;

  // Sample slots in a full window.
  std::uint32_t slots_per_window() const { return period_s ? window_s / period_s : 0; }
  bool operator==(const Manifest&) const = default;
};

// Limits every manifest keeps (FORMAT.md §5).
inline constexpr std::size_t kMaxChannels = 64;
inline constexpr std::uint32_t kMaxSlotsPerWindow = 4096;
inline constexpr std::size_t kMaxTextBytes = 255;

// Checks the limits and rules of FORMAT.md §5; the message names the field.
Result<Ok> validate(const Manifest& m);

// Canonical byte form (FORMAT.md §5.1) of format `version` (1 or 2; version 1 leaves
// the provenance out). REQUIRES: validate(m).ok().
std::vector<std::uint8_t> canonical_bytes(const Manifest& m, std::uint8_t version = 2);

// CRC-32C of the canonical bytes: the hash carried in every packet of that version.
// REQUIRES: validate(m).ok().
std::uint32_t manifest_hash(const Manifest& m, std::uint8_t version = 2);

// Parses canonical bytes of format `version` back; validates the result.
Result<Manifest> parse_canonical_manifest(std::span<const std::uint8_t> bytes,
                                          std::uint8_t version = 2);

// Days since 1970-01-01 of a "YYYY-MM-DD" date of the proleptic Gregorian calendar in
// the years 1900..2299; empty when the text is not such a date.
std::optional<std::int64_t> days_of_date(const std::string& text);
// Inverse of days_of_date; REQUIRES: the day is in 1900-01-01..2299-12-31.
std::string date_of_days(std::int64_t days);

// Index of the channel called `name`, or -1.
int channel_index(const Manifest& m, const std::string& name);

}  // namespace tarn::codec
