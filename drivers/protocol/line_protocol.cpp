#include "drivers/protocol/line_protocol.h"

#include <charconv>
#include <cmath>
#include <stdexcept>

#include "drivers/protocol/crc.h"

namespace tarn::protocol::line {

// ---- LineSplitter ----

LineSplitter::LineSplitter(std::size_t max_line_bytes) : cap_(max_line_bytes) {
  if (cap_ == 0) throw std::invalid_argument("LineSplitter: max_line_bytes must be >= 1");
  buf_ = std::make_unique<char[]>(cap_);
}

void LineSplitter::feed(std::string_view bytes,
                        const std::function<void(std::string_view)>& on_line) {
  for (char c : bytes) {
    if (c == '\r' || c == '\n') {
      if (!dropping_ && len_ > 0) {
        ++lines_;
        const std::size_t n = len_;
        len_ = 0;  // reset before the call, so a throwing callback leaves a sane state
        on_line(std::string_view(buf_.get(), n));
      }
      dropping_ = false;
      len_ = 0;
      continue;
    }
    if (dropping_) continue;
    if (len_ == cap_) {
      ++overlong_;
      dropping_ = true;
      len_ = 0;
      continue;
    }
    buf_[len_++] = c;
  }
}

void LineSplitter::reset() {
  len_ = 0;
  dropping_ = false;
}

// ---- building blocks ----

std::string_view to_string(FieldFault f) {
  switch (f) {
    case FieldFault::none:
      return "none";
    case FieldFault::absent:
      return "field absent";
    case FieldFault::empty:
      return "field empty";
    case FieldFault::not_numeric:
      return "field not numeric";
    case FieldFault::checksum:
      return "line checksum failed";
    case FieldFault::no_match:
      return "line did not match the pattern";
  }
  return "unknown fault";
}

namespace {

bool is_blank(char c) {
  return c == ' ' || c == '\t';
}

std::string_view trim(std::string_view s) {
  while (!s.empty() && is_blank(s.front())) s.remove_prefix(1);
  while (!s.empty() && is_blank(s.back())) s.remove_suffix(1);
  return s;
}

int hex_digit(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  return -1;
}

}  // namespace

ChecksumCheck check_nmea_checksum(std::string_view line) {
  std::string_view s = line;
  while (!s.empty() && is_blank(s.back())) s.remove_suffix(1);
  if (!s.empty() && s.front() == '$') s.remove_prefix(1);
  const std::size_t star = s.rfind('*');
  if (star == std::string_view::npos) return {ChecksumState::absent, s};
  const std::string_view body = s.substr(0, star);
  const std::string_view hex = s.substr(star + 1);
  // NMEA 0183 sentences are printable ASCII; a NUL would also be invisible to the XOR.
  for (char c : body) {
    const auto u = static_cast<unsigned char>(c);
    if (u < 0x20 || u > 0x7E) return {ChecksumState::malformed, body};
  }
  if (hex.size() != 2 || hex_digit(hex[0]) < 0 || hex_digit(hex[1]) < 0) {
    return {ChecksumState::malformed, body};
  }
  const int sent = hex_digit(hex[0]) * 16 + hex_digit(hex[1]);
  return {sent == nmea_checksum(body) ? ChecksumState::ok : ChecksumState::mismatch, body};
}

Result<double, FieldFault> parse_number(std::string_view field) {
  std::string_view s = trim(field);
  if (s.empty()) return fail(FieldFault::empty);
  if (s.front() == '+') {
    s.remove_prefix(1);
    if (s.empty() || s.front() == '+' || s.front() == '-') return fail(FieldFault::not_numeric);
  }
  double v = 0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (ec != std::errc() || end != s.data() + s.size() || !std::isfinite(v)) {
    return fail(FieldFault::not_numeric);
  }
  return v;
}

// ---- FieldMapper ----

Result<FieldMapper, std::string> FieldMapper::create(LineFormat format) {
  if (format.channel_fields.empty())
    return fail(std::string("line format maps no fields to channels"));
  if (format.split == Split::delimiter &&
      (format.delimiter == '\r' || format.delimiter == '\n' || format.delimiter == '\0')) {
    return fail(std::string("line delimiter must be a printable character or tab"));
  }
  FieldMapper m(std::move(format));
  if (m.format_.split == Split::regex) {
    try {
      m.regex_.emplace(m.format_.pattern, std::regex::ECMAScript | std::regex::optimize);
    } catch (const std::regex_error& e) {
      return fail("line pattern is not a valid regular expression: " + std::string(e.what()));
    }
    const std::size_t groups = m.regex_->mark_count();
    for (std::size_t g : m.format_.channel_fields) {
      if (g == 0 || g > groups) {
        return fail("line pattern has " + std::to_string(groups) +
                    " capture groups; channel field " + std::to_string(g) + " is not one of 1.." +
                    std::to_string(groups));
      }
    }
  }
  return m;
}

namespace {

LineReading all_channels(LineStatus status, FieldFault fault, std::size_t n) {
  LineReading r;
  r.status = status;
  r.channels.assign(n, ChannelValue{std::nullopt, fault});
  return r;
}

ChannelValue channel_from(std::string_view field) {
  auto v = parse_number(field);
  if (!v) return {std::nullopt, v.error()};
  return {v.value(), FieldFault::none};
}

std::vector<std::string_view> split_fields(std::string_view s, Split split, char delimiter) {
  std::vector<std::string_view> fields;
  if (split == Split::delimiter) {
    std::size_t start = 0;
    for (;;) {
      const std::size_t pos = s.find(delimiter, start);
      if (pos == std::string_view::npos) {
        fields.push_back(s.substr(start));
        return fields;
      }
      fields.push_back(s.substr(start, pos - start));
      start = pos + 1;
    }
  }
  std::size_t i = 0;
  while (i < s.size()) {
    while (i < s.size() && is_blank(s[i])) ++i;
    std::size_t j = i;
    while (j < s.size() && !is_blank(s[j])) ++j;
    if (j > i) fields.push_back(s.substr(i, j - i));
    i = j;
  }
  return fields;
}

}  // namespace

LineReading FieldMapper::map(std::string_view line) const {
  const std::size_t n = channel_count();
  if (!format_.prefix.empty() && !line.starts_with(format_.prefix)) {
    return LineReading{LineStatus::ignored, {}};
  }
  std::string_view body = line;
  if (format_.checksum != Checksum::none) {
    const ChecksumCheck check = check_nmea_checksum(line);
    const bool accepted =
        check.state == ChecksumState::ok ||
        (check.state == ChecksumState::absent && format_.checksum == Checksum::if_present);
    if (!accepted) return all_channels(LineStatus::garbled, FieldFault::checksum, n);
    body = check.body;
  }
  return format_.split == Split::regex ? map_groups(body) : map_fields(body);
}

LineReading FieldMapper::map_fields(std::string_view body) const {
  const auto fields = split_fields(body, format_.split, format_.delimiter);
  LineReading r;
  r.channels.reserve(channel_count());
  for (std::size_t idx : format_.channel_fields) {
    r.channels.push_back(idx < fields.size() ? channel_from(fields[idx])
                                             : ChannelValue{std::nullopt, FieldFault::absent});
  }
  return r;
}

LineReading FieldMapper::map_groups(std::string_view body) const {
  std::match_results<std::string_view::const_iterator> m;
  if (!std::regex_search(body.begin(), body.end(), m, *regex_)) {
    return all_channels(LineStatus::garbled, FieldFault::no_match, channel_count());
  }
  LineReading r;
  r.channels.reserve(channel_count());
  for (std::size_t g : format_.channel_fields) {
    if (!m[g].matched) {
      r.channels.push_back({std::nullopt, FieldFault::absent});
      continue;
    }
    const auto offset = static_cast<std::size_t>(m[g].first - body.begin());
    r.channels.push_back(
        channel_from(body.substr(offset, static_cast<std::size_t>(m[g].length()))));
  }
  return r;
}

}  // namespace tarn::protocol::line
