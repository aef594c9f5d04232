// A recorded series for `tarn replay`: calibrated channel values at UTC times,
// read from CSV or JSON Lines. Pure: text in, records or one error out; no
// file, clock or port (the CLI reads the file). Thread-safe (no state).
//
// CSV: a header line `time,channel,value`, then one sample per line. Fields
// may be wrapped in double quotes (no embedded commas or quotes). An empty
// value is a sample without a value.
// JSONL: one object per line {"t": .., "ch": .., "v": ..}; v a number or null
// (a missing "v" is null); "f" and "r" (the flag and reasons `tarn store
// export --format jsonl` writes) are ignored: a replay flags afresh; no other
// keys.
// Times: ISO 8601 UTC `YYYY-MM-DDTHH:MM:SS[.fff](Z|+00:00)` (a space may
// stand for the T), or epoch seconds (a JSON number or decimal digits);
// fractions of a second are dropped (the pipeline works in whole seconds).
// Blank lines are skipped. Samples of one channel must be in increasing time
// order; different channels may be interleaved or one after the other.
// Errors: the first problem, with its 1-based line number and a message in
// the form "what is wrong; what is allowed".
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace tarn::config {

enum class SeriesFormat { csv, jsonl };
std::string_view series_format_name(SeriesFormat f);  // "CSV", "JSONL"

struct SeriesFormatChoice {
  SeriesFormat format = SeriesFormat::csv;
  std::string how;  // "by extension .csv", "by content (first line starts with '{')"
};
// By the name's extension (.csv; .jsonl, .ndjson, .json), else by content:
// JSONL when the first non-blank character is '{', CSV otherwise.
SeriesFormatChoice choose_series_format(std::string_view name, std::string_view text);

struct SeriesRecord {
  std::int64_t t = 0;           // UTC seconds since the Unix epoch
  std::uint32_t channel = 0;    // index into SeriesInput::channels
  std::optional<double> value;  // finite when present
  std::size_t line = 0;         // 1-based line in the input
};

struct SeriesInput {
  std::vector<std::string> channels;  // in order of first appearance
  std::vector<SeriesRecord> records;  // in input order
};

struct SeriesError {
  std::size_t line = 0;  // 1-based
  std::string message;   // "what is wrong; what is allowed"
};

struct SeriesParse {
  SeriesInput input;
  std::optional<SeriesError> error;  // set: input is incomplete, do not use it
};

SeriesParse parse_series(std::string_view text, SeriesFormat format);

// "2026-06-20T12:00:00Z" (and the variants above) -> UTC seconds; nullopt if
// the text is not such a time or names an impossible date or time.
std::optional<std::int64_t> parse_iso_utc(std::string_view text);

}  // namespace tarn::config
