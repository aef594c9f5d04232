#include "drivers/protocol/sdi12.h"

#include <charconv>
#include <stdexcept>

#include "drivers/protocol/crc.h"

namespace tarn::protocol::sdi12 {

bool is_valid_address(char a) {
  return (a >= '0' && a <= '9') || (a >= 'a' && a <= 'z') || (a >= 'A' && a <= 'Z');
}

namespace {

void require_address(char a) {
  if (!is_valid_address(a)) throw std::invalid_argument("SDI-12 address must be 0-9, a-z or A-Z");
}

bool is_digit(char c) {
  return c >= '0' && c <= '9';
}

// Strips one trailing CR LF; rejects empty text, control bytes and non-ASCII.
// With a CRC tail the last three characters may also be 0x7F (0x40 | 0x3F).
Result<std::string_view, ReplyError> body_of(std::string_view line, bool crc_tail) {
  if (line.size() >= 2 && line.substr(line.size() - 2) == "\r\n") line.remove_suffix(2);
  if (line.empty()) return fail(ReplyError::empty);
  for (std::size_t i = 0; i < line.size(); ++i) {
    const auto u = static_cast<unsigned char>(line[i]);
    const bool in_tail = crc_tail && i + 3 >= line.size();
    if (u < 0x20 || u > (in_tail ? 0x7F : 0x7E)) return fail(ReplyError::bad_character);
  }
  return line;
}

// body_of plus the address check. expected == 0 accepts any valid address.
Result<std::string_view, ReplyError> addressed_body(std::string_view line, char expected,
                                                    bool crc_tail = false) {
  auto body = body_of(line, crc_tail);
  if (!body) return body;
  const char a = body.value().front();
  if (!is_valid_address(a)) return fail(ReplyError::bad_address);
  if (expected != 0 && a != expected) return fail(ReplyError::wrong_address);
  return body;
}

bool all_digits(std::string_view s) {
  for (char c : s) {
    if (!is_digit(c)) return false;
  }
  return true;
}

unsigned digits_value(std::string_view s) {
  unsigned v = 0;
  for (char c : s) v = v * 10 + static_cast<unsigned>(c - '0');
  return v;
}

// One value "<sign><digits with at most one '.'>" with 1..7 digits (v1.4 §4.4.7,
// from memory: "polarity sign, up to 7 digits, optional decimal point").
Result<double, ReplyError> parse_value(std::string_view token) {
  const bool negative = token.front() == '-';
  const std::string_view number = token.substr(1);
  unsigned digits = 0;
  unsigned points = 0;
  for (char c : number) {
    if (is_digit(c)) {
      ++digits;
    } else if (c == '.') {
      ++points;
    } else {
      return fail(ReplyError::bad_value);
    }
  }
  if (digits == 0 || digits > 7 || points > 1) return fail(ReplyError::bad_value);
  double v = 0;
  const auto [end, ec] = std::from_chars(number.data(), number.data() + number.size(), v);
  if (ec != std::errc() || end != number.data() + number.size()) return fail(ReplyError::bad_value);
  return negative ? -v : v;
}

Result<std::vector<double>, ReplyError> parse_values(std::string_view text) {
  std::vector<double> values;
  std::size_t i = 0;
  while (i < text.size()) {
    if (text[i] != '+' && text[i] != '-') return fail(ReplyError::bad_value);
    std::size_t j = i + 1;
    while (j < text.size() && text[j] != '+' && text[j] != '-') ++j;
    auto v = parse_value(text.substr(i, j - i));
    if (!v) return fail(v.error());
    values.push_back(v.value());
    i = j;
  }
  return values;
}

}  // namespace

std::string acknowledge_active(char address) {
  require_address(address);
  return {address, '!'};
}

std::string address_query() {
  return "?!";
}

std::string identify(char address) {
  require_address(address);
  return {address, 'I', '!'};
}

std::string change_address(char from, char to) {
  require_address(from);
  require_address(to);
  return {from, 'A', to, '!'};
}

std::string start_measurement(char address, const MeasureOptions& opt) {
  require_address(address);
  if (opt.index > 9) throw std::invalid_argument("SDI-12 measurement index must be 0..9");
  std::string cmd{address, opt.kind == Measure::standard ? 'M' : 'C'};
  if (opt.crc) cmd += 'C';
  if (opt.index != 0) cmd += static_cast<char>('0' + opt.index);
  cmd += '!';
  return cmd;
}

std::string send_data(char address, unsigned index) {
  require_address(address);
  if (index > 9) throw std::invalid_argument("SDI-12 data index must be 0..9");
  return {address, 'D', static_cast<char>('0' + index), '!'};
}

std::string_view to_string(ReplyError e) {
  switch (e) {
    case ReplyError::empty:
      return "empty reply";
    case ReplyError::bad_character:
      return "control or non-ASCII byte in reply";
    case ReplyError::bad_address:
      return "reply does not start with an SDI-12 address";
    case ReplyError::wrong_address:
      return "reply from another address";
    case ReplyError::bad_length:
      return "reply length not allowed for this command";
    case ReplyError::bad_field:
      return "non-digit in a numeric field";
    case ReplyError::bad_value:
      return "data value not of the form +d.d or -d.d (1..7 digits)";
    case ReplyError::too_many_values:
      return "more values than the measurement announced";
    case ReplyError::crc_mismatch:
      return "CRC mismatch";
  }
  return "unknown reply error";
}

Result<char, ReplyError> parse_address_reply(std::string_view line) {
  auto body = addressed_body(line, 0);
  if (!body) return fail(body.error());
  if (body.value().size() != 1) return fail(ReplyError::bad_length);
  return body.value().front();
}

Result<Identification, ReplyError> parse_identify(std::string_view line, char expected_address) {
  auto body = addressed_body(line, expected_address);
  if (!body) return fail(body.error());
  const std::string_view b = body.value();
  constexpr std::size_t fixed = 1 + 2 + 8 + 6 + 3;
  if (b.size() < fixed || b.size() > fixed + 13) return fail(ReplyError::bad_length);
  if (!all_digits(b.substr(1, 2))) return fail(ReplyError::bad_field);
  return Identification{b[0],
                        std::string(b.substr(1, 2)),
                        std::string(b.substr(3, 8)),
                        std::string(b.substr(11, 6)),
                        std::string(b.substr(17, 3)),
                        std::string(b.substr(20))};
}

Result<MeasurementAnnounce, ReplyError> parse_measurement_reply(std::string_view line,
                                                                char expected_address,
                                                                Measure kind) {
  auto body = addressed_body(line, expected_address);
  if (!body) return fail(body.error());
  const std::string_view b = body.value();
  const std::size_t count_digits = kind == Measure::standard ? 1 : 2;
  if (b.size() != 1 + 3 + count_digits) return fail(ReplyError::bad_length);
  if (!all_digits(b.substr(1))) return fail(ReplyError::bad_field);
  return MeasurementAnnounce{b[0], digits_value(b.substr(1, 3)), digits_value(b.substr(4))};
}

Result<DataReply, ReplyError> parse_data_reply(std::string_view line, char expected_address,
                                               bool crc) {
  auto body = addressed_body(line, expected_address, crc);
  if (!body) return fail(body.error());
  std::string_view b = body.value();
  if (crc) {
    if (b.size() < 4) return fail(ReplyError::bad_length);
    if (!crc_matches(b)) return fail(ReplyError::crc_mismatch);
    b.remove_suffix(3);
  }
  const std::string_view text = b.substr(1);
  if (text.size() > 75) return fail(ReplyError::bad_length);  // v1.4: <= 75 chars (aC/aR)
  auto values = parse_values(text);
  if (!values) return fail(values.error());
  return DataReply{b[0], std::move(values.value())};
}

std::array<char, 3> encode_crc(std::uint16_t crc) {
  return {static_cast<char>(0x40 | (crc >> 12)), static_cast<char>(0x40 | ((crc >> 6) & 0x3F)),
          static_cast<char>(0x40 | (crc & 0x3F))};
}

std::uint16_t crc_of(std::string_view text) {
  return crc16_arc(text);
}

bool crc_matches(std::string_view line) {
  if (line.size() < 4) return false;
  const auto expected = encode_crc(crc_of(line.substr(0, line.size() - 3)));
  return line.substr(line.size() - 3) == std::string_view(expected.data(), expected.size());
}

DataCollector::DataCollector(char address, unsigned expected_values, bool crc)
    : address_(address),
      expected_(expected_values),
      crc_(crc),
      state_(expected_values == 0 ? State::complete : State::collecting) {
  require_address(address);
  values_.reserve(expected_values);
}

std::optional<std::string> DataCollector::next_command() const {
  if (state_ != State::collecting) return std::nullopt;
  return send_data(address_, next_index_);
}

Result<DataCollector::State, ReplyError> DataCollector::accept(std::string_view line) {
  if (state_ != State::collecting) throw std::logic_error("DataCollector::accept after the end");
  auto reply = parse_data_reply(line, address_, crc_);
  if (!reply) {
    state_ = State::failed;
    return fail(reply.error());
  }
  const auto& got = reply.value().values;
  if (got.empty()) {  // the sensor has nothing more for this measurement
    state_ = State::short_of_values;
    return state_;
  }
  if (values_.size() + got.size() > expected_) {
    state_ = State::failed;
    return fail(ReplyError::too_many_values);
  }
  values_.insert(values_.end(), got.begin(), got.end());
  if (values_.size() == expected_) {
    state_ = State::complete;
  } else if (++next_index_ > 9) {
    state_ = State::short_of_values;
  }
  return state_;
}

std::vector<Attempt> attempt_plan(const RetryPolicy& p) {
  std::vector<Attempt> plan;
  for (unsigned cycle = 0; cycle < p.break_cycles; ++cycle) {
    plan.push_back({true, p.retry_wait_min});
    for (unsigned r = 0; r < p.retries_per_break; ++r) plan.push_back({false, p.retry_wait_min});
  }
  return plan;
}

std::chrono::microseconds reply_timeout(std::size_t max_chars, const RetryPolicy& p) {
  return p.reply_start_max + character_time * static_cast<long>(max_chars + 1);
}

}  // namespace tarn::protocol::sdi12
