// UTC timestamps as text: the one formatter and parser of the station (logs,
// status, the store and its tools, the CLI).
// Pure functions, no clock, no locale, no time zone database.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

namespace tarn::os {

// "2026-06-01T00:00:00Z" (ISO 8601, UTC, whole seconds).
std::string format_utc(std::int64_t unix_s);
// "20260601T000000Z": for file names.
std::string format_utc_compact(std::int64_t unix_s);

// Accepts "2026-06-01T00:00:00Z", "2026-06-01T00:00Z", "2026-06-01" (midnight UTC),
// or unix seconds ("1780272000", may be negative). Anything else: nullopt.
std::optional<std::int64_t> parse_utc(std::string_view text);

}  // namespace tarn::os
