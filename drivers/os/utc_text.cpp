#include "drivers/os/utc_text.h"

#include <charconv>
#include <cstdio>

namespace tarn::os {
namespace {

// Days since 1970-01-01 of a proleptic Gregorian date, and back. The algorithm
// is H. Hinnant's "days_from_civil" (chrono-compatible low-level date
// algorithms, public domain), from memory.
std::int64_t days_from_civil(std::int64_t y, unsigned m, unsigned d) {
  y -= m <= 2;
  const std::int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = unsigned(y - era * 400);
  const unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + std::int64_t(doe) - 719468;
}

void civil_from_days(std::int64_t z, std::int64_t& y, unsigned& m, unsigned& d) {
  z += 719468;
  const std::int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const unsigned doe = unsigned(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  y = std::int64_t(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  d = doy - (153 * mp + 2) / 5 + 1;
  m = mp < 10 ? mp + 3 : mp - 9;
  y += m <= 2;
}

struct Parts {
  std::int64_t y;
  unsigned mo, d, h, mi, s;
};

Parts split(std::int64_t t) {
  std::int64_t days = t >= 0 ? t / 86400 : -((-t + 86399) / 86400);
  std::int64_t rem = t - days * 86400;
  Parts p{};
  civil_from_days(days, p.y, p.mo, p.d);
  p.h = unsigned(rem / 3600);
  p.mi = unsigned(rem / 60 % 60);
  p.s = unsigned(rem % 60);
  return p;
}

bool digits(std::string_view s, std::size_t pos, std::size_t n, unsigned& out) {
  if (pos + n > s.size()) return false;
  out = 0;
  for (std::size_t i = pos; i < pos + n; ++i) {
    if (s[i] < '0' || s[i] > '9') return false;
    out = out * 10 + unsigned(s[i] - '0');
  }
  return true;
}

bool is_leap(std::int64_t y) {
  return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

}  // namespace

std::string format_utc(std::int64_t unix_s) {
  Parts p = split(unix_s);
  char buf[40];
  std::snprintf(buf, sizeof buf, "%04lld-%02u-%02uT%02u:%02u:%02uZ", static_cast<long long>(p.y),
                p.mo, p.d, p.h, p.mi, p.s);
  return buf;
}

std::string format_utc_compact(std::int64_t unix_s) {
  Parts p = split(unix_s);
  char buf[40];
  std::snprintf(buf, sizeof buf, "%04lld%02u%02uT%02u%02u%02uZ", static_cast<long long>(p.y), p.mo,
                p.d, p.h, p.mi, p.s);
  return buf;
}

std::optional<std::int64_t> parse_utc(std::string_view s) {
  if (s.empty()) return std::nullopt;
  if (s.find('-', 1) == std::string_view::npos) {  // unix seconds
    std::int64_t v = 0;
    auto [p, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
    if (ec != std::errc() || p != s.data() + s.size()) return std::nullopt;
    return v;
  }
  unsigned y = 0, mo = 0, d = 0, h = 0, mi = 0, sec = 0;
  if (!digits(s, 0, 4, y) || s.size() < 10 || s[4] != '-' || !digits(s, 5, 2, mo) || s[7] != '-' ||
      !digits(s, 8, 2, d))
    return std::nullopt;
  if (s.size() > 10) {
    if (s[10] != 'T' || !digits(s, 11, 2, h) || s.size() < 17 || s[13] != ':' ||
        !digits(s, 14, 2, mi))
      return std::nullopt;
    std::size_t pos = 16;
    if (pos < s.size() && s[pos] == ':') {
      if (!digits(s, pos + 1, 2, sec)) return std::nullopt;
      pos += 3;
    }
    if (pos + 1 != s.size() || s[pos] != 'Z') return std::nullopt;
  }
  static constexpr unsigned mdays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  if (mo < 1 || mo > 12 || d < 1) return std::nullopt;
  unsigned dmax = mdays[mo - 1] + (mo == 2 && is_leap(y) ? 1 : 0);
  if (d > dmax || h > 23 || mi > 59 || sec > 59) return std::nullopt;
  return days_from_civil(y, mo, d) * 86400 + h * 3600 + mi * 60 + sec;
}

}  // namespace tarn::os
