#include "daemon/core/time_format.h"

#include <charconv>
#include <cstdio>
#include <ctime>

namespace tarn::daemon {

std::string iso_utc(std::int64_t unix_s) {
  std::time_t t = static_cast<std::time_t>(unix_s);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

std::optional<std::int64_t> parse_utc(const std::string& text) {
  std::int64_t v = 0;
  auto [p, ec] = std::from_chars(text.data(), text.data() + text.size(), v);
  if (ec == std::errc() && p == text.data() + text.size()) return v;
  int Y = 0, M = 0, D = 0, h = 0, m = 0, s = 0;
  char z = 0;
  int n = std::sscanf(text.c_str(), "%4d-%2d-%2dT%2d:%2d:%2d%c", &Y, &M, &D, &h, &m, &s, &z);
  if (n == 7 && z != 'Z') return std::nullopt;
  if (n < 3 || (n > 3 && n < 5)) {
    return std::nullopt;
  }
  if (n == 5 || n == 6) {
    // "…T12:00Z" or missing Z
    if (text.back() != 'Z') return std::nullopt;
    if (n == 6) s = 0;
  }
  if (M < 1 || M > 12 || D < 1 || D > 31 || h > 23 || m > 59 || s > 60) return std::nullopt;
  std::tm tm{};
  tm.tm_year = Y - 1900;
  tm.tm_mon = M - 1;
  tm.tm_mday = D;
  tm.tm_hour = h;
  tm.tm_min = m;
  tm.tm_sec = s;
  return static_cast<std::int64_t>(timegm(&tm));
}

}  // namespace tarn::daemon
