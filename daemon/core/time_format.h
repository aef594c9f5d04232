// UTC time formatting and parsing for logs, status and the CLI.
#pragma once

#include <cstdint>
#include <optional>
#include <string>

namespace tarn::daemon {

// "2026-06-01T12:00:00Z"
std::string iso_utc(std::int64_t unix_s);
// Accepts "2026-06-01T12:00:00Z", "2026-06-01T12:00Z", "2026-06-01" or unix seconds.
std::optional<std::int64_t> parse_utc(const std::string& text);

}  // namespace tarn::daemon
