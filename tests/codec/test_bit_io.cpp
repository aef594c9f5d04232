// Primitive codes of codec/FORMAT.md §1 against published examples.
#include <catch2/catch.hpp>

#include <random>

#include "codec/bit_io.h"
#include "codec/crc32c.h"

using namespace tarn::codec;

namespace {
std::vector<std::uint8_t> bytes_of(const std::string& s) {
  return {s.begin(), s.end()};
}

// Bit string ("0"/"1") of the first `n` bits written by `fn`.
template <class Fn>
std::string bits_of(Fn fn) {
  std::vector<std::uint8_t> out;
  BitWriter w(out);
  fn(w);
  std::size_t n = w.bit_count();
  w.finish();
  std::string s;
  for (std::size_t i = 0; i < n; ++i) s += (out[i / 8] >> (7 - i % 8)) & 1 ? '1' : '0';
  return s;
}
}  // namespace

TEST_CASE("varint matches the Protocol Buffers encoding documentation", "[bit_io]") {
  // Source: Protocol Buffers documentation, "Encoding", section Base 128 Varints:
  // 1 is 01, 150 is 96 01.
  std::vector<std::uint8_t> out;
  put_varint(out, 1);
  CHECK(out == std::vector<std::uint8_t>{0x01});
  out.clear();
  put_varint(out, 150);
  CHECK(out == std::vector<std::uint8_t>{0x96, 0x01});
  ByteReader r(out);
  CHECK(r.varint() == std::optional<std::uint64_t>(150));
  CHECK(r.at_end());
}

TEST_CASE("zigzag matches the Protocol Buffers encoding documentation", "[bit_io]") {
  // Source: Protocol Buffers documentation, "Encoding", section Signed Integers:
  // 0 -> 0, -1 -> 1, 1 -> 2, -2 -> 3, 0x7fffffff -> 0xfffffffe, -0x80000000 -> 0xffffffff.
  CHECK(zigzag(0) == 0);
  CHECK(zigzag(-1) == 1);
  CHECK(zigzag(1) == 2);
  CHECK(zigzag(-2) == 3);
  CHECK(zigzag(2147483647) == 4294967294u);
  CHECK(zigzag(-2147483648LL) == 4294967295u);
  for (std::int64_t v : std::initializer_list<std::int64_t>{0, -1, 1, -2, 123456789, -987654321,
                                                            INT64_MAX, INT64_MIN})
    CHECK(unzigzag(zigzag(v)) == v);
}

TEST_CASE("varint reader refuses truncation and overflow", "[bit_io]") {
  std::vector<std::uint8_t> cut{0x96};
  CHECK_FALSE(ByteReader(cut).varint());
  std::vector<std::uint8_t> max;
  put_varint(max, UINT64_MAX);
  CHECK(max.size() == 10);
  CHECK(ByteReader(max).varint() == std::optional<std::uint64_t>(UINT64_MAX));
  std::vector<std::uint8_t> over(10, 0xff);
  over.back() = 0x02;  // bit 64 set
  CHECK_FALSE(ByteReader(over).varint());
  std::vector<std::uint8_t> str{0x05, 'a', 'b'};  // claims 5 bytes, 2 present
  CHECK_FALSE(ByteReader(str).string());
}

TEST_CASE("Exp-Golomb order 0 matches ITU-T H.264 table 9-2", "[bit_io]") {
  // Source: ITU-T Rec. H.264, clause 9.1, Table 9-2 (bit strings of codeNum 0..8).
  const char* table[] = {"1",     "010",   "011",     "00100",  "00101",
                         "00110", "00111", "0001000", "0001001"};
  for (unsigned v = 0; v < 9; ++v)
    CHECK(bits_of([&](BitWriter& w) { w.put_eg(v, 0); }) == table[v]);
  // Order k: the order-0 code of (v >> k) followed by the k low bits, worked by hand from the
  // definition w = v + 2^k written after bit_width(w) - 1 - k zeros.
  CHECK(bits_of([](BitWriter& w) { w.put_eg(0, 3); }) == "1000");
  // 9 >> 2 = 2 -> "011" (table above), then the low bits 01.
  CHECK(bits_of([](BitWriter& w) { w.put_eg(9, 2); }) == "01101");
  CHECK(eg_bits(9, 2) == 5);
}

TEST_CASE("Rice code: unary quotient, zero, k low bits; escape past 16", "[bit_io]") {
  // Worked by hand from the definition (FORMAT.md §1.6): z = 9, k = 2 -> q = 2, r = 1.
  CHECK(bits_of([](BitWriter& w) { w.put_rice(9, 2); }) == "11001");
  CHECK(bits_of([](BitWriter& w) { w.put_rice(0, 0); }) == "0");
  // q = 16 escapes: sixteen ones, 6-bit width (5), the 5 bits of 16.
  CHECK(bits_of([](BitWriter& w) { w.put_rice(16, 0); }) ==
        "1111111111111111"
        "000101"
        "10000");
  CHECK(rice_bits(16, 0) == 27);
  CHECK(rice_bits(9, 2) == 5);
}

TEST_CASE("bit stream round trip of every code", "[bit_io]") {
  std::mt19937_64 rng(7);
  std::vector<std::uint8_t> out;
  BitWriter w(out);
  struct Item {
    int kind;
    std::uint64_t u;
    std::int64_t s;
    unsigned k;
  };
  std::vector<Item> items;
  for (int i = 0; i < 20000; ++i) {
    Item it{int(rng() % 4), 0, 0, unsigned(rng() % 20)};
    unsigned width = unsigned(rng() % 54);
    it.u = width ? rng() >> (64 - width) : 0;
    it.s = (rng() & 1) ? std::int64_t(it.u >> 1) : -std::int64_t(it.u >> 1);
    switch (it.kind) {
      case 0:
        w.put(it.u, width), it.k = width;
        break;
      case 1:
        w.put_eg(it.u >> it.k, it.k), it.u >>= it.k;
        break;
      case 2:
        w.put_sl(it.s);
        break;
      case 3:
        w.put_rice(it.u, it.k);
        break;
    }
    items.push_back(it);
  }
  const std::size_t bits = w.bit_count();
  w.finish();
  CHECK(out.size() == (bits + 7) / 8);
  BitReader r(out);
  for (const Item& it : items) {
    switch (it.kind) {
      case 0:
        REQUIRE(r.get(it.k) == it.u);
        break;
      case 1:
        REQUIRE(r.get_eg(it.k) == std::optional<std::uint64_t>(it.u));
        break;
      case 2:
        REQUIRE(r.get_sl() == std::optional<std::int64_t>(it.s));
        break;
      case 3:
        REQUIRE(r.get_rice(it.k) == std::optional<std::uint64_t>(it.u));
        break;
    }
  }
  CHECK_FALSE(r.overrun());
  CHECK(r.only_zero_padding());
}

TEST_CASE("bit reader never reads past its bytes", "[bit_io]") {
  std::vector<std::uint8_t> one{0xff};
  BitReader r(one);
  CHECK(r.get(8) == 0xff);
  CHECK_FALSE(r.overrun());
  CHECK(r.get(3) == 0);  // zeros past the end
  CHECK(r.overrun());
  std::vector<std::uint8_t> zeros(3, 0);
  BitReader z(zeros);
  CHECK_FALSE(z.get_eg(0));  // an all-zero prefix never ends: refused, not looped
  std::vector<std::uint8_t> ones(4, 0xff);
  BitReader o(ones);
  CHECK_FALSE(o.get_rice(0));  // escape with width 63 > 56 refused
}

TEST_CASE("CRC-32C matches its catalogue check value and RFC 3720", "[crc]") {
  // Source: Greg Cook, "Catalogue of parametrised CRC algorithms" (reveng), CRC-32/ISCSI:
  // check = 0xe3069283 over the ASCII string "123456789".
  CHECK(crc32c(bytes_of("123456789")) == 0xe3069283u);
  // Source: RFC 3720 (iSCSI), Appendix B.4 CRC examples; the same values come from
  // Debian's python3-crcmod, crcmod.predefined 'crc-32c'.
  std::vector<std::uint8_t> zeros(32, 0), ones(32, 0xff), inc(32), dec(32);
  for (int i = 0; i < 32; ++i) inc[i] = std::uint8_t(i), dec[i] = std::uint8_t(31 - i);
  CHECK(crc32c(zeros) == 0x8a9136aau);
  CHECK(crc32c(ones) == 0x62a8ab43u);
  CHECK(crc32c(inc) == 0x46dd794eu);
  CHECK(crc32c(dec) == 0x113fdb5cu);
  // python3-crcmod 'crc-32c' of "hollin-buoy-1" (odd length exercises the byte tail).
  CHECK(crc32c(bytes_of("hollin-buoy-1")) == 0x2ecdff86u);
  CHECK(crc32c({}) == 0u);
}
