// The "line" protocol: instruments that answer a poll command with one line of
// ASCII text, or stream lines unasked. Two pure parts:
//
//   LineSplitter  bytes -> lines, with a hard cap on line length. Memory is
//                 allocated once (the cap) and never grows: a babbling
//                 instrument's over-long line is dropped up to its terminator
//                 and counted.
//   FieldMapper   one line -> one value (or a fault) per channel. Fields come
//                 from a one-character delimiter, runs of whitespace, or the
//                 capture groups of a regular expression; an optional NMEA
//                 0183-style "*hh" checksum (XOR) is verified first.
//
// How a driver uses it: keep one LineSplitter per port, call reset() before a
// poll (so a fragment of a late reply is not glued to the next answer), feed()
// every read, and hand each line to FieldMapper::map(). A channel whose fault
// is not `none` becomes a sample without value, reason garbled; log the raw
// line at debug level.
// Thread-safety: LineSplitter is single-threaded; FieldMapper::map is const and
// may be called concurrently.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <regex>
#include <string>
#include <string_view>
#include <vector>

#include "codec/result.h"

namespace tarn::protocol::line {

// The name of this protocol in the driver registry and the config.
inline constexpr std::string_view protocol_name = "line";

class LineSplitter {
 public:
  // REQUIRES: max_line_bytes >= 1 (else std::invalid_argument).
  explicit LineSplitter(std::size_t max_line_bytes);

  // Splits at CR or LF (CR LF, LF CR and blank lines yield no empty lines) and
  // calls on_line with each line, terminator excluded. A line longer than the
  // cap is never delivered: its bytes are dropped up to the next terminator.
  // on_line's argument is valid only during the call.
  void feed(std::string_view bytes, const std::function<void(std::string_view)>& on_line);

  // Forgets the partial line (and an over-long line being dropped).
  void reset();

  std::size_t max_line_bytes() const { return cap_; }
  std::size_t pending_bytes() const { return len_; }  // <= max_line_bytes(), always
  std::uint64_t lines() const { return lines_; }
  std::uint64_t overlong_lines() const { return overlong_; }  // counted when the cap is crossed

 private:
  std::size_t cap_;
  std::unique_ptr<char[]> buf_;
  std::size_t len_ = 0;
  bool dropping_ = false;
  std::uint64_t lines_ = 0;
  std::uint64_t overlong_ = 0;
};

enum class Split {
  delimiter,   // LineFormat::delimiter; empty fields are kept
  whitespace,  // runs of spaces/tabs; leading and trailing ones ignored
  regex,       // capture groups of LineFormat::pattern (std::regex ECMAScript, regex_search)
};

enum class Checksum {
  none,       // the line is taken as it is
  required,   // "$body*hh" must be present and match; leading '$' optional
  if_present  // verified when "*hh" is present, else the line is taken as it is
};

struct LineFormat {
  Split split = Split::delimiter;
  char delimiter = ',';
  std::string pattern;  // Split::regex only
  Checksum checksum = Checksum::none;
  std::string prefix;  // lines not starting with it are ignored; empty: none ignored
  // Channel k takes field channel_fields[k]: a 0-based field index, or for
  // Split::regex a capture group number (1-based).
  std::vector<std::size_t> channel_fields;
};

enum class FieldFault {
  none,
  absent,       // the line has fewer fields than the index (or the group did not take part)
  empty,        // the field is empty or blank
  not_numeric,  // not a finite decimal number
  checksum,     // the whole line failed its checksum (all channels)
  no_match,     // the regex did not match the line (all channels)
};
std::string_view to_string(FieldFault f);

struct ChannelValue {
  std::optional<double> value;  // set exactly when fault == none
  FieldFault fault = FieldFault::none;
};

enum class LineStatus {
  mapped,   // channels hold per-channel values/faults
  ignored,  // prefix did not match: not this instrument's line, channels empty
  garbled,  // checksum failure or no regex match: every channel has the same fault
};

struct LineReading {
  LineStatus status = LineStatus::mapped;
  std::vector<ChannelValue> channels;  // one per LineFormat::channel_fields entry
};

class FieldMapper {
 public:
  // Validates and precompiles the format. Error: one line saying what is wrong.
  static Result<FieldMapper, std::string> create(LineFormat format);

  LineReading map(std::string_view line) const;
  std::size_t channel_count() const { return format_.channel_fields.size(); }
  const LineFormat& format() const { return format_; }

 private:
  explicit FieldMapper(LineFormat format) : format_(std::move(format)) {}
  LineReading map_fields(std::string_view body) const;
  LineReading map_groups(std::string_view body) const;

  LineFormat format_;
  std::optional<std::regex> regex_;
};

// ---- building blocks, exposed for tests and for `tarn probe` ----

enum class ChecksumState { ok, absent, mismatch, malformed };
struct ChecksumCheck {
  ChecksumState state = ChecksumState::absent;
  std::string_view body;  // the text between the optional '$' and '*' (whole text when absent)
};
// NMEA 0183 style: optional leading '$', body, '*', two hex digits (either case),
// optional trailing spaces/tabs. The checksum is the XOR of the body's bytes.
// A body byte outside printable ASCII (0x20..0x7E) makes the line malformed.
ChecksumCheck check_nmea_checksum(std::string_view line);

// A finite decimal number with optional sign and exponent, surrounding blanks allowed.
Result<double, FieldFault> parse_number(std::string_view field);

}  // namespace tarn::protocol::line
