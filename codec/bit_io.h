// Byte- and bit-level primitives of the wire format (codec/FORMAT.md §1):
// LEB128 varints, zigzag, little-endian fixed fields, length-prefixed strings,
// and an MSB-first bit stream with Exp-Golomb, length-prefixed signed and
// escaped Rice codes.
//
// Readers never read past the bytes they were given: a read beyond the end
// yields zeros and sets a sticky overrun state that the caller checks.
// Thread-safety: one object per thread.
#pragma once

#include <bit>
#include <cstdint>
#include <cstring>
#include <optional>
#include <span>
#include <string>
#include <vector>

namespace tarn::codec {

// Zigzag mapping of signed to unsigned: 0,-1,1,-2 -> 0,1,2,3.
constexpr std::uint64_t zigzag(std::int64_t v) {
  return (std::uint64_t(v) << 1) ^ std::uint64_t(v >> 63);
}
constexpr std::int64_t unzigzag(std::uint64_t z) {
  return std::int64_t(z >> 1) ^ -std::int64_t(z & 1);
}

// ---- byte level -----------------------------------------------------------

inline void put_varint(std::vector<std::uint8_t>& out, std::uint64_t v) {
  while (v >= 0x80) {
    out.push_back(std::uint8_t(v | 0x80));
    v >>= 7;
  }
  out.push_back(std::uint8_t(v));
}
inline std::size_t varint_size(std::uint64_t v) {
  std::size_t n = 1;
  while (v >= 0x80) v >>= 7, ++n;
  return n;
}
inline void put_u32le(std::vector<std::uint8_t>& out, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) out.push_back(std::uint8_t(v >> (8 * i)));
}
inline void put_f64le(std::vector<std::uint8_t>& out, double d) {
  std::uint64_t v = std::bit_cast<std::uint64_t>(d);
  for (int i = 0; i < 8; ++i) out.push_back(std::uint8_t(v >> (8 * i)));
}
inline void put_string(std::vector<std::uint8_t>& out, const std::string& s) {
  put_varint(out, s.size());
  out.insert(out.end(), s.begin(), s.end());
}

class ByteReader {
 public:
  explicit ByteReader(std::span<const std::uint8_t> data) : data_(data) {}
  std::size_t remaining() const { return data_.size() - pos_; }
  std::size_t position() const { return pos_; }
  bool at_end() const { return pos_ == data_.size(); }

  // At most 10 bytes; fails on truncation or a value above 2^64-1.
  std::optional<std::uint64_t> varint() {
    std::uint64_t v = 0;
    for (int shift = 0; shift < 64; shift += 7) {
      if (pos_ >= data_.size()) return std::nullopt;
      std::uint8_t b = data_[pos_++];
      if (shift == 63 && b > 1) return std::nullopt;
      v |= std::uint64_t(b & 0x7f) << shift;
      if (!(b & 0x80)) return v;
    }
    return std::nullopt;
  }
  std::optional<std::uint8_t> u8() {
    if (pos_ >= data_.size()) return std::nullopt;
    return data_[pos_++];
  }
  std::optional<std::uint32_t> u32le() {
    if (remaining() < 4) return std::nullopt;
    std::uint32_t v = 0;
    for (int i = 0; i < 4; ++i) v |= std::uint32_t(data_[pos_++]) << (8 * i);
    return v;
  }
  std::optional<double> f64le() {
    if (remaining() < 8) return std::nullopt;
    std::uint64_t v = 0;
    for (int i = 0; i < 8; ++i) v |= std::uint64_t(data_[pos_++]) << (8 * i);
    return std::bit_cast<double>(v);
  }
  // Length-prefixed; the length is checked against the bytes present.
  std::optional<std::string> string() {
    auto n = varint();
    if (!n || *n > remaining()) return std::nullopt;
    std::string s(reinterpret_cast<const char*>(data_.data() + pos_), std::size_t(*n));
    pos_ += std::size_t(*n);
    return s;
  }
  // REQUIRES: n <= remaining().
  std::span<const std::uint8_t> take(std::size_t n) {
    auto s = data_.subspan(pos_, n);
    pos_ += n;
    return s;
  }

 private:
  std::span<const std::uint8_t> data_;
  std::size_t pos_ = 0;
};

// ---- bit level --------------------------------------------------------------

// Unary prefix length at which a Rice code switches to its escape form.
inline constexpr unsigned kRiceEscape = 16;
// Largest bit width of a value carried by the escape form and by SL codes.
inline constexpr unsigned kMaxValueBits = 56;

class BitWriter {
 public:
  explicit BitWriter(std::vector<std::uint8_t>& out) : out_(out), start_(out.size()) {}

  // REQUIRES: bits <= 56, v < 2^bits.
  void put(std::uint64_t v, unsigned bits) {
    acc_ = (bits == 64 ? 0 : acc_ << bits) | v;
    n_ += bits;
    while (n_ >= 8) {
      n_ -= 8;
      out_.push_back(std::uint8_t(acc_ >> n_));
    }
  }
  void put_bit(bool b) { put(b ? 1 : 0, 1); }
  // Exp-Golomb of order k. REQUIRES: v + 2^k < 2^56.
  void put_eg(std::uint64_t v, unsigned k) {
    std::uint64_t w = v + (std::uint64_t(1) << k);
    unsigned m = unsigned(std::bit_width(w)) - 1;
    put(0, m - k);
    put(w, m + 1);
  }
  // Signed integer with a 6-bit length prefix: n = bit width of zigzag(x), then n bits.
  // REQUIRES: bit_width(zigzag(x)) <= 56.
  void put_sl(std::int64_t x) {
    std::uint64_t z = zigzag(x);
    unsigned n = unsigned(std::bit_width(z));
    put(n, 6);
    put(z, n);
  }
  // Rice code of parameter k with escape. REQUIRES: k <= 31, bit_width(z) <= 56.
  void put_rice(std::uint64_t z, unsigned k) {
    std::uint64_t q = z >> k;
    if (q < kRiceEscape) {
      // q ones, a zero, then the k low bits; at most 16 + 31 bits in one put.
      std::uint64_t low = z & ((std::uint64_t(1) << k) - 1);
      put(((((std::uint64_t(1) << q) - 1) << 1) << k) | low, unsigned(q) + 1 + k);
    } else {
      unsigned n = unsigned(std::bit_width(z));
      put((std::uint64_t(1) << kRiceEscape) - 1, kRiceEscape);
      put(n, 6);
      put(z, n);
    }
  }
  // Pads with zero bits to a byte boundary.
  void finish() {
    if (n_ > 0) {
      out_.push_back(std::uint8_t(acc_ << (8 - n_)));
      n_ = 0;
    }
  }
  std::size_t bit_count() const { return (out_.size() - start_) * 8 + n_; }

 private:
  std::vector<std::uint8_t>& out_;
  std::size_t start_;
  std::uint64_t acc_ = 0;
  unsigned n_ = 0;
};

// Bit length of a Rice code (for choosing k).
inline unsigned rice_bits(std::uint64_t z, unsigned k) {
  std::uint64_t q = z >> k;
  return q < kRiceEscape ? unsigned(q) + 1 + k : kRiceEscape + 6 + unsigned(std::bit_width(z));
}
inline unsigned eg_bits(std::uint64_t v, unsigned k) {
  std::uint64_t w = v + (std::uint64_t(1) << k);
  return 2 * (unsigned(std::bit_width(w)) - 1) + 1 - k;
}

class BitReader {
 public:
  explicit BitReader(std::span<const std::uint8_t> data) : p_(data.data()), n_(data.size()) {}

  // Reads n <= 57 bits.
  std::uint64_t get(unsigned n) {
    if (n == 0) return 0;
    std::uint64_t v = peek() >> (64 - n);
    pos_ += n;
    return v;
  }
  bool get_bit() { return get(1) != 0; }
  // Fails (returns nullopt) when the prefix would exceed 56 - k zeros.
  std::optional<std::uint64_t> get_eg(unsigned k) {
    unsigned zeros = unsigned(std::countl_zero(peek()));
    if (zeros + k > kMaxValueBits - 1) return std::nullopt;
    pos_ += zeros;
    std::uint64_t w = get(zeros + k + 1);
    return w - (std::uint64_t(1) << k);
  }
  std::optional<std::int64_t> get_sl() {
    unsigned n = unsigned(get(6));
    if (n > kMaxValueBits) return std::nullopt;
    return unzigzag(get(n));
  }
  std::optional<std::uint64_t> get_rice(unsigned k) {
    std::uint64_t w = peek();
    unsigned q = unsigned(std::countl_one(w));
    if (q < kRiceEscape) {
      // q ones + zero + k bits all lie within the 57 bits peek() guarantees.
      pos_ += q + 1 + k;
      std::uint64_t low = k == 0 ? 0 : (w << (q + 1)) >> (64 - k);
      return (std::uint64_t(q) << k) | low;
    }
    pos_ += kRiceEscape;
    unsigned n = unsigned(get(6));
    if (n > kMaxValueBits) return std::nullopt;
    return get(n);
  }
  // True once any read went past the end of the data.
  bool overrun() const { return pos_ > n_ * 8; }
  std::size_t bit_position() const { return pos_; }
  std::size_t bits_left() const { return pos_ >= n_ * 8 ? 0 : n_ * 8 - pos_; }
  // True if all bits from the current position to the end are zero (padding).
  bool only_zero_padding() const {
    if (overrun()) return false;
    std::size_t left = n_ * 8 - pos_;
    if (left >= 8) return false;
    return left == 0 || (peek() >> (64 - left)) == 0;
  }

 private:
  // The next 64 bits (at least 57 of them from the stream), zeros past the end.
  std::uint64_t peek() const {
    std::size_t byte = pos_ >> 3;
    std::uint64_t w = 0;
    if (byte + 8 <= n_) {
      std::memcpy(&w, p_ + byte, 8);
      if constexpr (std::endian::native == std::endian::little) w = byteswap64(w);
    } else {
      for (std::size_t i = 0; i < 8; ++i) w = (w << 8) | (byte + i < n_ ? p_[byte + i] : 0u);
    }
    return w << (pos_ & 7);
  }
  static std::uint64_t byteswap64(std::uint64_t v) { return __builtin_bswap64(v); }

  const std::uint8_t* p_;
  std::size_t n_;
  std::size_t pos_ = 0;
};

}  // namespace tarn::codec
