#include "config/series_input.h"

#include <charconv>
#include <chrono>
#include <cmath>
#include <limits>
#include <unordered_map>

#include <nlohmann/json.hpp>

namespace tarn::config {

namespace {

constexpr const char* kTimesAllowed =
    "allowed: ISO 8601 UTC like 2026-06-20T12:00:00Z or epoch seconds like 1781956800";

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t' || s.front() == '\r'))
    s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\r'))
    s.remove_suffix(1);
  return s;
}

// Quoted text for messages: printable ASCII only, at most 40 characters.
std::string quote(std::string_view s) {
  std::string out = "\"";
  for (std::size_t i = 0; i < s.size() && i < 40; ++i) {
    unsigned char c = static_cast<unsigned char>(s[i]);
    out += c == '"' ? '\'' : (c >= 0x20 && c < 0x7f) ? char(c) : '?';
  }
  if (s.size() > 40) out += "...";
  return out + "\"";
}

bool digits(std::string_view s, std::size_t pos, std::size_t n, int& v) {
  if (pos + n > s.size()) return false;
  v = 0;
  for (std::size_t i = pos; i < pos + n; ++i) {
    if (s[i] < '0' || s[i] > '9') return false;
    v = v * 10 + (s[i] - '0');
  }
  return true;
}

// Epoch seconds as decimal digits (optional '-', optional fraction dropped).
std::optional<std::int64_t> parse_epoch_text(std::string_view s) {
  std::string_view whole = s;
  if (auto dot = s.find('.'); dot != std::string_view::npos) {
    whole = s.substr(0, dot);
    std::string_view frac = s.substr(dot + 1);
    if (frac.empty()) return std::nullopt;
    for (char c : frac)
      if (c < '0' || c > '9') return std::nullopt;
  }
  if (whole.empty() || whole == "-") return std::nullopt;
  std::int64_t v = 0;
  auto [p, ec] = std::from_chars(whole.data(), whole.data() + whole.size(), v);
  if (ec != std::errc() || p != whole.data() + whole.size()) return std::nullopt;
  if (v < 0 && whole.size() != s.size()) return std::nullopt;  // "-5.5": say no, not floor
  return v;
}

std::optional<std::int64_t> epoch_of_number(double d) {
  // Whole seconds; within +-1e11 s (about year 5000) so the cast is defined.
  if (!std::isfinite(d) || d < -1e11 || d > 1e11) return std::nullopt;
  return static_cast<std::int64_t>(std::floor(d));
}

std::optional<std::int64_t> parse_time_text(std::string_view s) {
  if (auto t = parse_iso_utc(s)) return t;
  return parse_epoch_text(s);
}

std::optional<double> parse_value_text(std::string_view s) {
  double v = 0;
  auto [p, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (ec != std::errc() || p != s.data() + s.size() || !std::isfinite(v)) return std::nullopt;
  return v;
}

class Builder {
 public:
  explicit Builder(SeriesParse& out) : out_(out) {}

  bool fail(std::size_t line, std::string message) {
    out_.error = SeriesError{line, std::move(message)};
    return false;
  }

  bool add(std::size_t line, std::int64_t t, std::string_view channel, std::optional<double> v) {
    if (channel.empty()) return fail(line, "empty channel name; allowed: a channel of the config");
    auto it = index_.find(std::string(channel));
    std::uint32_t ci;
    if (it == index_.end()) {
      ci = static_cast<std::uint32_t>(out_.input.channels.size());
      out_.input.channels.emplace_back(channel);
      index_.emplace(std::string(channel), ci);
      last_.push_back({std::numeric_limits<std::int64_t>::min(), 0});
    } else {
      ci = it->second;
    }
    auto& [last_t, last_line] = last_[ci];
    if (t <= last_t)
      return fail(line, "time of channel " + quote(channel) + " is not after its sample on line " +
                            std::to_string(last_line) +
                            "; allowed: each channel's samples in increasing time order");
    last_[ci] = {t, line};
    out_.input.records.push_back(SeriesRecord{t, ci, v, line});
    return true;
  }

 private:
  SeriesParse& out_;
  std::unordered_map<std::string, std::uint32_t> index_;
  std::vector<std::pair<std::int64_t, std::size_t>> last_;
};

// Calls f(line_number, line) for each line (without its '\n'); stops when f returns false.
template <class F>
void for_lines(std::string_view text, F&& f) {
  std::size_t n = 0, pos = 0;
  while (pos < text.size()) {
    std::size_t nl = text.find('\n', pos);
    std::string_view line = text.substr(pos, nl == std::string_view::npos ? nl : nl - pos);
    if (!f(++n, line)) return;
    if (nl == std::string_view::npos) return;
    pos = nl + 1;
  }
}

std::string_view unquote(std::string_view f) {
  f = trim(f);
  if (f.size() >= 2 && f.front() == '"' && f.back() == '"') f = f.substr(1, f.size() - 2);
  return f;
}

void parse_csv(std::string_view text, SeriesParse& out) {
  Builder b(out);
  bool header = false;
  for_lines(text, [&](std::size_t n, std::string_view line) {
    if (trim(line).empty()) return true;
    std::string_view f[3];
    std::size_t count = 0, pos = 0;
    while (true) {
      std::size_t c = line.find(',', pos);
      if (count < 3)
        f[count] = unquote(line.substr(pos, c == std::string_view::npos ? c : c - pos));
      ++count;
      if (c == std::string_view::npos) break;
      pos = c + 1;
    }
    if (!header) {
      if (count != 3 || f[0] != "time" || f[1] != "channel" || f[2] != "value")
        return b.fail(n, "CSV header is " + quote(trim(line)) +
                             "; allowed: the header line time,channel,value");
      header = true;
      return true;
    }
    if (count != 3)
      return b.fail(n, std::to_string(count) +
                           " fields; allowed: 3 fields time,channel,value (value may be empty)");
    auto t = parse_time_text(f[0]);
    if (!t) return b.fail(n, "time " + quote(f[0]) + " is not a time; " + kTimesAllowed);
    std::optional<double> v;
    if (!f[2].empty()) {
      v = parse_value_text(f[2]);
      if (!v)
        return b.fail(n, "value " + quote(f[2]) +
                             " is not a number; allowed: a finite decimal number or empty for no "
                             "value");
    }
    return b.add(n, *t, f[1], v);
  });
  if (!out.error && !header)
    out.error = SeriesError{1, "no CSV header; allowed: the header line time,channel,value"};
}

void parse_jsonl(std::string_view text, SeriesParse& out) {
  using nlohmann::json;
  Builder b(out);
  for_lines(text, [&](std::size_t n, std::string_view line) {
    if (trim(line).empty()) return true;
    json j = json::parse(line.begin(), line.end(), nullptr, /*allow_exceptions=*/false);
    if (j.is_discarded() || !j.is_object())
      return b.fail(n, std::string(j.is_discarded() ? "not valid JSON" : "not a JSON object") +
                           "; allowed: one object per line like {\"t\":\"2026-06-20T12:00:00Z\","
                           "\"ch\":\"pc\",\"v\":1.5}");
    for (auto& [k, v] : j.items())
      if (k != "t" && k != "ch" && k != "v" && k != "f" && k != "r")
        return b.fail(n, "unknown key " + quote(k) + "; allowed: t, ch, v (f and r are ignored)");
    if (!j.contains("t")) return b.fail(n, "no \"t\"; allowed: t, the sample's time");
    std::optional<std::int64_t> t;
    const json& jt = j["t"];
    if (jt.is_string())
      t = parse_time_text(jt.get_ref<const std::string&>());
    else if (jt.is_number())
      t = epoch_of_number(jt.get<double>());
    if (!t) return b.fail(n, "\"t\" " + quote(jt.dump()) + " is not a time; " + kTimesAllowed);
    if (!j.contains("ch") || !j["ch"].is_string())
      return b.fail(n, "\"ch\" missing or not a string; allowed: a channel name as a string");
    std::optional<double> v;
    if (j.contains("v") && !j["v"].is_null()) {
      const json& jv = j["v"];
      if (!jv.is_number() || !std::isfinite(jv.get<double>()))
        return b.fail(n, "\"v\" " + quote(jv.dump()) +
                             " is not a number; allowed: a finite number or null for no value");
      v = jv.get<double>();
    }
    return b.add(n, *t, j["ch"].get_ref<const std::string&>(), v);
  });
}

bool ends_with(std::string_view s, std::string_view suffix) {
  if (s.size() < suffix.size()) return false;
  for (std::size_t i = 0; i < suffix.size(); ++i) {
    char c = s[s.size() - suffix.size() + i];
    if (c >= 'A' && c <= 'Z') c = char(c - 'A' + 'a');
    if (c != suffix[i]) return false;
  }
  return true;
}

}  // namespace

std::string_view series_format_name(SeriesFormat f) {
  return f == SeriesFormat::csv ? "CSV" : "JSONL";
}

SeriesFormatChoice choose_series_format(std::string_view name, std::string_view text) {
  for (std::string_view ext : {".csv"})
    if (ends_with(name, ext)) return {SeriesFormat::csv, "by extension " + std::string(ext)};
  for (std::string_view ext : {".jsonl", ".ndjson", ".json"})
    if (ends_with(name, ext)) return {SeriesFormat::jsonl, "by extension " + std::string(ext)};
  std::string_view t = text;
  while (!t.empty() &&
         (t.front() == ' ' || t.front() == '\t' || t.front() == '\r' || t.front() == '\n'))
    t.remove_prefix(1);
  if (!t.empty() && t.front() == '{')
    return {SeriesFormat::jsonl, "by content (the first line starts with '{')"};
  return {SeriesFormat::csv, "by content (the first line does not start with '{')"};
}

SeriesParse parse_series(std::string_view text, SeriesFormat format) {
  SeriesParse out;
  if (format == SeriesFormat::csv)
    parse_csv(text, out);
  else
    parse_jsonl(text, out);
  return out;
}

std::optional<std::int64_t> parse_iso_utc(std::string_view s) {
  // YYYY-MM-DDTHH:MM:SS[.f+](Z|+00:00)
  int Y, M, D, h, m, sec;
  if (!digits(s, 0, 4, Y) || s.size() < 20 || s[4] != '-' || !digits(s, 5, 2, M) || s[7] != '-' ||
      !digits(s, 8, 2, D) || (s[10] != 'T' && s[10] != ' ') || !digits(s, 11, 2, h) ||
      s[13] != ':' || !digits(s, 14, 2, m) || s[16] != ':' || !digits(s, 17, 2, sec))
    return std::nullopt;
  std::size_t pos = 19;
  if (pos < s.size() && s[pos] == '.') {
    std::size_t start = ++pos;
    while (pos < s.size() && s[pos] >= '0' && s[pos] <= '9') ++pos;
    if (pos == start) return std::nullopt;
  }
  std::string_view zone = s.substr(pos);
  if (zone != "Z" && zone != "+00:00") return std::nullopt;
  if (h > 23 || m > 59 || sec > 59) return std::nullopt;  // no leap second: POSIX time has none
  using namespace std::chrono;
  const year_month_day ymd{year{Y}, month{unsigned(M)}, day{unsigned(D)}};
  if (!ymd.ok()) return std::nullopt;
  const std::int64_t days = sys_days{ymd}.time_since_epoch().count();
  return days * 86400 + h * 3600 + m * 60 + sec;
}

}  // namespace tarn::config
