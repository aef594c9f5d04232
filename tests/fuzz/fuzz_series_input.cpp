// libFuzzer target: config/series_input (the recorded series `tarn replay`
// reads). Byte 0 picks the format (even: CSV, odd: JSONL); the rest is the
// text. Aborts when the contract of series_input.h is broken: an error whose
// line is 0 or past the input, or whose message lacks "; allowed" or has a
// newline; a record with a non-finite value, a line out of order, a channel
// index out of range, or a channel whose times do not increase.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <limits>
#include <string_view>
#include <vector>

#include "config/series_input.h"

namespace {

void require(bool ok) {
  if (!ok) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 1) return 0;
  using namespace tarn::config;
  const SeriesFormat f = (data[0] & 1) ? SeriesFormat::jsonl : SeriesFormat::csv;
  std::string_view text(reinterpret_cast<const char*>(data + 1), size - 1);
  std::size_t lines = 1;
  for (char c : text) lines += c == '\n';
  auto r = parse_series(text, f);
  if (r.error) {
    require(r.error->line >= 1 && r.error->line <= lines);
    require(r.error->message.find("; allowed") != std::string::npos);
    require(r.error->message.find('\n') == std::string::npos);
    return 0;
  }
  std::vector<std::int64_t> last(r.input.channels.size(), std::numeric_limits<std::int64_t>::min());
  std::size_t prev_line = 0;
  for (auto& rec : r.input.records) {
    require(rec.channel < r.input.channels.size());
    require(!rec.value || std::isfinite(*rec.value));
    require(rec.line > prev_line && rec.line <= lines);
    require(rec.t > last[rec.channel]);
    last[rec.channel] = rec.t;
    prev_line = rec.line;
  }
  for (auto& name : r.input.channels) require(!name.empty());
  // The time parser alone, on the same bytes: a time it accepts prints back
  // within the range the checks above rely on.
  if (auto t = parse_iso_utc(text)) require(*t > -1e12 && *t < 1e12);
  (void)choose_series_format(text, text);
  return 0;
}
