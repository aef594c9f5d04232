#include "codec/decoder.h"

#include <algorithm>
#include <cstdio>

#include "codec/bit_io.h"
#include "codec/crc32c.h"
#include "codec/format_rules.h"

namespace tarn::codec {
namespace {

Error malformed(std::string msg) {
  return make_error(Errc::malformed, std::move(msg));
}
Error truncated(std::string msg) {
  return make_error(Errc::truncated, std::move(msg));
}

struct Parsed {
  PacketHeader header;
  std::vector<SectionInfo> sections;
};

Result<Parsed> parse_frame(std::span<const std::uint8_t> p) {
  if (p.size() < kMinPacketBytes)
    return truncated("packet of " + std::to_string(p.size()) + " bytes is shorter than the " +
                     std::to_string(kMinPacketBytes) + "-byte minimum");
  if (p.size() > kMaxPacketBytes)
    return malformed("packet of " + std::to_string(p.size()) + " bytes exceeds the " +
                     std::to_string(kMaxPacketBytes) + "-byte maximum");
  const std::size_t n = p.size() - 4;
  std::uint32_t stored = std::uint32_t(p[n]) | std::uint32_t(p[n + 1]) << 8 |
                         std::uint32_t(p[n + 2]) << 16 | std::uint32_t(p[n + 3]) << 24;
  std::uint32_t computed = crc32c(p.first(n));
  if (stored != computed) {
    char buf[96];
    std::snprintf(buf, sizeof buf, "CRC-32C mismatch: packet says %08x, bytes give %08x", stored,
                  computed);
    return make_error(Errc::bad_crc, buf);
  }
  Parsed out;
  const std::uint8_t b0 = p[0];
  if ((b0 >> 4) < kOldestFormatVersion || (b0 >> 4) > kFormatVersion)
    return make_error(Errc::bad_version, "format version " + std::to_string(b0 >> 4) +
                                             " is not supported (this decoder reads versions " +
                                             std::to_string(kOldestFormatVersion) + " to " +
                                             std::to_string(kFormatVersion) + ")");
  out.header.version = std::uint8_t(b0 >> 4);
  out.header.clock_unsynced = b0 & kHeaderClockUnsynced;
  out.header.partial = b0 & kHeaderPartial;
  ByteReader r(p.first(n));
  r.u8();
  auto hash = r.u32le();
  auto seq = r.varint();
  if (!hash || !seq) return truncated("header cut short");
  out.header.manifest_hash = *hash;
  out.header.sequence = *seq;
  while (!r.at_end()) {
    auto type = r.u8();
    auto len = r.varint();
    if (!len) return truncated("section header cut short at byte " + std::to_string(r.position()));
    if (*type == 0) return malformed("section type 0 at byte " + std::to_string(r.position()));
    if (*len > r.remaining())
      return truncated("section type " + std::to_string(*type) + " claims " + std::to_string(*len) +
                       " bytes, " + std::to_string(r.remaining()) + " present");
    out.sections.push_back(SectionInfo{*type, r.position(), std::size_t(*len)});
    r.take(std::size_t(*len));
  }
  return out;
}

struct ListHeader {
  std::vector<std::int64_t> starts;
  std::vector<std::uint32_t> slots;
  std::vector<bool> partial, clock;
  std::size_t c0 = 0, cn = 0;
};

// Reads the byte-level list header (FORMAT.md §4.1) from the front of `body`.
struct ListPrefix {
  std::int64_t first_index = 0;
  std::size_t count = 0;
  std::size_t bits_from = 0;  // byte offset of the bit stream
};
Result<ListPrefix> get_list_prefix(std::span<const std::uint8_t> body) {
  ByteReader byr(body);
  auto idx = byr.varint();
  auto count = byr.varint();
  if (!idx || !count) return truncated("window list header cut short");
  if (*count < 1 || *count > kMaxWindowsPerSection)
    return malformed("window count " + std::to_string(*count) + " outside 1.." +
                     std::to_string(kMaxWindowsPerSection));
  return ListPrefix{unzigzag(*idx), std::size_t(*count), byr.position()};
}

// Reads the window descriptors. `min_bits_per_channel` bounds the window count
// by the section size before anything is allocated.
Result<ListHeader> get_window_list(BitReader& br, const ListPrefix& pre, const Manifest& m,
                                   unsigned min_bits_per_channel) {
  ListHeader h;
  auto start = window_start(pre.first_index, m.window_s);
  if (!start) return malformed("first window start outside the years 1900..2300");
  const std::size_t nch = m.channels.size();
  if (br.get_bit()) {
    auto c0 = br.get_eg(0), cn1 = br.get_eg(0);
    if (!c0 || !cn1 || *c0 >= nch || *cn1 >= nch - *c0)
      return malformed("channel range outside the manifest's " + std::to_string(nch) + " channels");
    h.c0 = std::size_t(*c0);
    h.cn = std::size_t(*cn1) + 1;
  } else {
    h.c0 = 0;
    h.cn = nch;
  }
  const std::size_t wn = pre.count;
  // Every window costs at least 2 descriptor bits and min_bits_per_channel per channel.
  if (wn * (2 + min_bits_per_channel * h.cn) > br.bits_left())
    return malformed(std::to_string(wn) + " windows cannot fit in the section");
  const std::uint32_t n = m.slots_per_window();
  std::int64_t index = pre.first_index;
  std::size_t total = 0;
  for (std::size_t w = 0; w < wn; ++w) {
    if (w > 0) {
      auto gap = br.get_eg(0);
      if (!gap || *gap > (std::uint64_t(1) << 40)) return malformed("window gap out of range");
      index += std::int64_t(*gap) + 1;
      start = window_start(index, m.window_s);
      if (!start) return malformed("window start outside the years 1900..2300");
    }
    h.starts.push_back(*start);
    const bool partial = br.get_bit();
    h.partial.push_back(partial);
    h.clock.push_back(br.get_bit());
    std::uint32_t slots = n;
    if (partial) {
      auto missing = br.get_eg(0);
      if (!missing || *missing >= n)
        return malformed("partial window " + std::to_string(w) + " has no slots");
      slots = n - std::uint32_t(*missing);
    }
    h.slots.push_back(slots);
    total += slots;
  }
  if (br.overrun()) return truncated("window descriptors cut short");
  if (wn > 1 && total * h.cn > kMaxSlotsPerSection)
    return malformed("section holds " + std::to_string(total * h.cn) + " channel-slots, over " +
                     std::to_string(kMaxSlotsPerSection));
  return h;
}

std::vector<Window> make_windows(const ListHeader& h, bool stats_only) {
  std::vector<Window> ws(h.starts.size());
  for (std::size_t w = 0; w < ws.size(); ++w) {
    ws[w].start = h.starts[w];
    ws[w].slots = h.slots[w];
    ws[w].partial = h.partial[w];
    ws[w].clock_unsynced = h.clock[w];
    ws[w].stats_only = stats_only;
    ws[w].first_channel = std::uint16_t(h.c0);
    ws[w].channels.resize(h.cn);
  }
  return ws;
}

Result<Ok> finish_bits(const BitReader& br, const char* what) {
  if (br.overrun()) return truncated(std::string(what) + " section cut short");
  if (!br.only_zero_padding())
    return malformed(std::string(what) + " section has trailing data after its last field");
  return Ok{};
}

// Flags and values of one channel over the concatenated slots (FORMAT.md §4.2-4.3).
Result<Ok> get_channel_samples(BitReader& br, std::vector<Window>& ws, std::size_t ci, double res,
                               std::vector<Flag>& flags, std::vector<std::int64_t>& q) {
  std::size_t total = 0;
  for (auto& w : ws) total += w.slots;
  flags.assign(total, Flag::pass);
  if (br.get_bit()) {
    auto runs = br.get_eg(0);
    if (!runs || *runs >= total) return malformed("flag run count exceeds the slots");
    std::size_t pos = 0;
    for (std::uint64_t r = 0; r <= *runs; ++r) {
      auto gap = br.get_eg(kFlagGapOrder);
      unsigned code = unsigned(br.get(2));
      auto len = br.get_eg(0);
      if (!gap || !len || *gap > total - pos || *len >= total - pos - *gap)
        return malformed("flag runs exceed the slots");
      pos += std::size_t(*gap);
      std::fill_n(flags.begin() + std::ptrdiff_t(pos), std::size_t(*len) + 1, kFlagOfCode[code]);
      pos += std::size_t(*len) + 1;
    }
  }
  std::size_t present = 0;
  for (Flag f : flags) present += f != Flag::missing;
  q.resize(present);
  if (present > 0) {
    auto first = br.get_sl();
    if (!first || !quant_in_range(*first)) return malformed("first value out of range");
    std::int64_t v = *first;
    q[0] = v;
    if (present > 1) {
      const unsigned k = unsigned(br.get(kRiceParamBits));
      for (std::size_t i = 1; i < present; ++i) {
        auto z = br.get_rice(k);
        if (!z) return malformed("value difference code too long");
        v += unzigzag(*z);
        if (!quant_in_range(v)) return malformed("value out of range");
        q[i] = v;
      }
    }
  }
  if (br.overrun()) return truncated("samples section cut short");
  std::size_t s = 0, p = 0;
  for (auto& w : ws) {
    ChannelWindow& c = w.channels[ci];
    c.flags.assign(flags.begin() + std::ptrdiff_t(s), flags.begin() + std::ptrdiff_t(s + w.slots));
    c.values.resize(w.slots);
    for (std::uint32_t i = 0; i < w.slots; ++i)
      if (c.flags[i] != Flag::missing) c.values[i] = double(q[p++]) * res;
    s += w.slots;
  }
  return Ok{};
}

Result<std::vector<Window>> get_samples(std::span<const std::uint8_t> body, const Manifest& m) {
  auto pre = get_list_prefix(body);
  if (!pre) return pre.error();
  BitReader bits(body.subspan(pre->bits_from));
  BitReader* br = &bits;
  auto h = get_window_list(bits, *pre, m, 1);
  if (!h) return h.error();
  std::vector<Window> ws = make_windows(*h, false);
  std::vector<Flag> flags;
  std::vector<std::int64_t> q;
  for (std::size_t ci = 0; ci < h->cn; ++ci)
    if (auto r = get_channel_samples(*br, ws, ci, m.channels[h->c0 + ci].resolution, flags, q); !r)
      return r.error();
  if (auto r = finish_bits(*br, "windows"); !r) return r.error();
  return ws;
}

Result<Ok> get_reasons(std::span<const std::uint8_t> body, std::vector<Window>& ws) {
  BitReader br(body);
  std::size_t total = 0;
  for (auto& w : ws) total += w.slots;
  const std::size_t cn = ws.front().channels.size();
  std::uint32_t prev = 0;
  for (std::size_t ci = 0; ci < cn; ++ci) {
    auto count = br.get_eg(0);
    if (!count || *count > total) return malformed("reason entry count exceeds the slots");
    std::size_t slot = 0, w = 0, base = 0;
    bool first = true;
    for (std::uint64_t e = 0; e < *count; ++e) {
      auto gap = br.get_eg(kReasonGapOrder);
      std::uint64_t next = first ? 0 : slot + 1;
      if (!gap || *gap >= total - next) return malformed("reason entries exceed the slots");
      slot = std::size_t(next + *gap);
      first = false;
      std::uint32_t mask = prev;
      if (!br.get_bit()) {
        auto mk = get_reason_mask(br);
        if (!mk) return malformed("bad reason mask");
        mask = *mk;
      } else if (prev == 0) {
        return malformed("reason entry repeats a mask before any was given");
      }
      prev = mask;
      while (slot >= base + ws[w].slots) base += ws[w++].slots;
      auto& rs = ws[w].channels[ci].reasons;
      if (rs.empty()) rs.assign(ws[w].slots, 0);
      rs[slot - base] = mask;
    }
  }
  if (auto r = finish_bits(br, "reasons"); !r) return r.error();
  return Ok{};
}

// Statistics of one channel-window (FORMAT.md §4.4).
Result<Ok> get_channel_stats(BitReader& br, Window& w, ChannelWindow& cw, double res,
                             std::uint32_t period, std::optional<std::int64_t>& prev_mean,
                             std::uint8_t version) {
  ChannelStats& s = cw.stats;
  const bool all_pass = br.get_bit();
  std::uint64_t sum = 0;
  if (!all_pass) {
    for (int k = 1; k < 5; ++k) {
      auto c = br.get_eg(0);
      if (!c || *c > w.slots) return malformed("flag count exceeds the slots");
      s.counts[k] = std::uint32_t(*c);
      sum += *c;
    }
    if (sum > w.slots) return malformed("flag counts exceed the slots");
  }
  s.counts[0] = w.slots - std::uint32_t(sum);
  // The statistics' basis (§4.4): passed samples; in version 2, without any, the
  // not-evaluated ones.
  std::uint32_t n1 = s.counts[0];
  if (version >= 2 && n1 == 0 && s.counts[1] > 0) {
    n1 = s.counts[1];
    s.basis = StatsBasis::not_evaluated;
  }
  if (n1 > 0) {
    std::int64_t mean;
    if (prev_mean) {
      auto d = br.get_eg(kStatsOrder);
      if (!d) return malformed("mean difference too long");
      mean = *prev_mean + unzigzag(*d);
    } else {
      auto v = br.get_sl();
      if (!v) return malformed("mean too long");
      mean = *v;
    }
    if (!quant_in_range(mean)) return malformed("mean out of range");
    prev_mean = mean;
    std::int64_t lo = mean, hi = mean, sd = 0;
    if (n1 >= 2) {
      auto a = br.get_eg(kStatsOrder), b = br.get_eg(kStatsOrder), c = br.get_eg(kStatsOrder);
      if (!a || !b || !c) return malformed("statistic too long");
      lo = mean - std::int64_t(*a);
      hi = mean + std::int64_t(*b);
      sd = std::int64_t(*c);
      if (!quant_in_range(lo) || !quant_in_range(hi) || !quant_in_range(sd))
        return malformed("statistic out of range");
    }
    std::uint32_t first = 0, last = w.slots - 1;
    if (!all_pass) {
      auto f = br.get_eg(0);
      if (!f || *f > w.slots - n1) return malformed("first passed slot out of range");
      first = std::uint32_t(*f);
      last = first;
      if (n1 >= 2) {
        auto extra = br.get_eg(0);
        if (!extra || *extra > w.slots - n1 - first)
          return malformed("last passed slot out of range");
        last = first + (n1 - 1) + std::uint32_t(*extra);
      }
    }
    s.mean = double(mean) * res;
    s.min = double(lo) * res;
    s.max = double(hi) * res;
    s.sd = double(sd) * res;
    s.first_t = w.start + std::int64_t(first) * period;
    s.last_t = w.start + std::int64_t(last) * period;
  }
  if (br.get_bit()) {
    auto mk = get_reason_mask(br);
    if (!mk) return malformed("bad reason mask");
    s.reasons_any = *mk;
  }
  if (br.overrun()) return truncated("stats section cut short");
  return Ok{};
}

Result<std::vector<Window>> get_stats(std::span<const std::uint8_t> body, const Manifest& m,
                                      std::uint8_t version) {
  auto pre = get_list_prefix(body);
  if (!pre) return pre.error();
  BitReader bits(body.subspan(pre->bits_from));
  BitReader* br = &bits;
  auto h = get_window_list(bits, *pre, m, 2);
  if (!h) return h.error();
  std::vector<Window> ws = make_windows(*h, true);
  std::vector<std::optional<std::int64_t>> prev(h->cn);
  for (auto& w : ws)
    for (std::size_t ci = 0; ci < h->cn; ++ci)
      if (auto r = get_channel_stats(*br, w, w.channels[ci], m.channels[h->c0 + ci].resolution,
                                     m.period_s, prev[ci], version);
          !r)
        return r.error();
  if (auto r = finish_bits(*br, "stats"); !r) return r.error();
  return ws;
}

Result<std::vector<AlertEvent>> get_alerts(std::span<const std::uint8_t> body, const Manifest& m,
                                           std::uint8_t version) {
  ByteReader r(body);
  auto count = r.varint();
  // Each event takes at least 7 bytes (8 in version 2).
  const std::size_t least = version >= 2 ? 8 : 7;
  if (!count || *count > r.remaining() / least) return malformed("alert count exceeds the section");
  std::vector<AlertEvent> out;
  for (std::uint64_t i = 0; i < *count; ++i) {
    AlertEvent e;
    auto ch = r.varint();
    auto level = r.varint();
    auto name = r.string();
    auto prev = r.varint();
    auto idx = r.varint();
    auto stat = r.varint();
    auto rule = r.string();
    if (!ch || !level || !name || !prev || !idx || !stat || !rule)
      return truncated("alert " + std::to_string(i) + " cut short");
    if (*ch >= m.channels.size()) return malformed("alert channel index out of range");
    if (*level > UINT32_MAX || *prev > UINT32_MAX) return malformed("alert level out of range");
    if (name->size() > kMaxTextBytes || rule->size() > kMaxTextBytes)
      return malformed("alert text longer than 255 bytes");
    auto start = window_start(unzigzag(*idx), m.window_s);
    std::int64_t q = unzigzag(*stat);
    if (!start || !quant_in_range(q)) return malformed("alert field out of range");
    e.channel = std::uint16_t(*ch);
    e.level = std::uint32_t(*level);
    e.level_name = *name;
    e.previous_level = std::uint32_t(*prev);
    e.window_start = *start;
    e.statistic = double(q) * m.channels[e.channel].resolution;
    e.rule_id = *rule;
    if (version >= 2) {
      auto kc = r.u8();
      if (!kc) return truncated("alert " + std::to_string(i) + " cut short");
      const unsigned kind = *kc & 15u, cause = *kc >> 4;
      if (kind > 2 || cause > 3) return malformed("alert kind or cause unknown");
      e.kind = AlertKind(kind);
      e.cause = StaleCause(cause);
      if ((e.kind == AlertKind::change && e.cause != StaleCause::none) ||
          (e.kind == AlertKind::stale && e.cause == StaleCause::none))
        return malformed("alert cause does not fit its kind");
    }
    out.push_back(std::move(e));
  }
  if (!r.at_end()) return malformed("alerts section has trailing bytes");
  return out;
}

Result<std::vector<CleaningRecord>> get_cleanings(std::span<const std::uint8_t> body,
                                                  const Manifest& m) {
  ByteReader r(body);
  auto count = r.varint();
  // Each record takes at least 5 bytes.
  if (!count || *count > r.remaining() / 5) return malformed("cleaning count exceeds the section");
  std::vector<CleaningRecord> out;
  for (std::uint64_t i = 0; i < *count; ++i) {
    CleaningRecord c;
    auto ch = r.varint();
    auto start = r.varint();
    auto length = r.varint();
    auto nb = r.u8();
    auto na = r.u8();
    if (!ch || !start || !length || !nb || !na)
      return truncated("cleaning record " + std::to_string(i) + " cut short");
    if (*ch >= m.channels.size()) return malformed("cleaning channel index out of range");
    const std::int64_t t0 = unzigzag(*start);
    if (t0 < kMinTime - kTimeEpoch || t0 > kMaxTime - kTimeEpoch ||
        *length > std::uint64_t(kMaxTime - (t0 + kTimeEpoch)))
      return malformed("cleaning time out of range");
    c.channel = std::uint16_t(*ch);
    c.maintenance_start = t0 + kTimeEpoch;
    c.maintenance_end = c.maintenance_start + std::int64_t(*length);
    c.n_before = *nb;
    c.n_after = *na;
    const double res = m.channels[c.channel].resolution;
    for (auto [n, v] : {std::pair{c.n_before, &c.before}, std::pair{c.n_after, &c.after}}) {
      if (n == 0) continue;
      auto q = r.varint();
      if (!q) return truncated("cleaning record " + std::to_string(i) + " cut short");
      if (!quant_in_range(unzigzag(*q))) return malformed("cleaning median out of range");
      *v = double(unzigzag(*q)) * res;
    }
    out.push_back(c);
  }
  if (!r.at_end()) return malformed("cleanings section has trailing bytes");
  return out;
}

Result<std::vector<HealthRecord>> get_health(std::span<const std::uint8_t> body) {
  ByteReader r(body);
  auto count = r.varint();
  if (!count || *count > r.remaining() / 2) return malformed("health count exceeds the section");
  std::vector<HealthRecord> out;
  for (std::uint64_t i = 0; i < *count; ++i) {
    HealthRecord h;
    auto mask = r.u8();
    auto t = r.varint();
    if (!mask || !t) return truncated("health record cut short");
    if (*mask & ~7u) return malformed("health record has unknown field bits");
    const std::int64_t offset = unzigzag(*t);
    if (offset < kMinTime - kTimeEpoch || offset > kMaxTime - kTimeEpoch)
      return malformed("health time out of range");
    h.t = offset + kTimeEpoch;
    if (*mask & 1) {
      auto v = r.varint();
      if (!v || !quant_in_range(unzigzag(*v))) return malformed("board temperature bad");
      h.board_temp_c = double(unzigzag(*v)) * 0.1;
    }
    if (*mask & 2) {
      auto v = r.varint();
      if (!v) return truncated("disk free cut short");
      h.disk_free_mib = *v;
    }
    if (*mask & 4) {
      auto v = r.varint();
      if (!v || *v > std::uint64_t(kMaxQuant)) return malformed("supply voltage bad");
      h.supply_v = double(*v) * 0.001;
    }
    out.push_back(h);
  }
  if (!r.at_end()) return malformed("health section has trailing bytes");
  return out;
}

Result<ManifestPart> get_manifest_part(std::span<const std::uint8_t> body) {
  ByteReader r(body);
  auto index = r.varint();
  auto count = r.varint();
  if (!index || !count) return truncated("manifest part header cut short");
  if (*count < 1 || *count > (1u << 21) || *index >= *count)
    return malformed("manifest part index/count out of range");
  ManifestPart part;
  part.index = std::uint32_t(*index);
  part.count = std::uint32_t(*count);
  auto rest = r.take(r.remaining());
  part.bytes.assign(rest.begin(), rest.end());
  return part;
}

// Section types of each format version; others are skipped (§3).
bool is_known(std::uint8_t t, std::uint8_t version) {
  return t >= 1 && t <= (version >= 2 ? 7 : 6);
}

}  // namespace

Result<PacketHeader> peek_header(std::span<const std::uint8_t> packet) {
  auto p = parse_frame(packet);
  if (!p) return p.error();
  return p->header;
}

Result<std::vector<SectionInfo>> list_sections(std::span<const std::uint8_t> packet) {
  auto p = parse_frame(packet);
  if (!p) return p.error();
  return p->sections;
}

Result<DecodedPacket> decode_packet(std::span<const std::uint8_t> packet,
                                    const CheckedManifest* manifest) {
  auto parsed = parse_frame(packet);
  if (!parsed) return parsed.error();
  DecodedPacket out;
  out.header = parsed->header;
  const std::uint8_t version = out.header.version;
  bool seen[8] = {};
  bool have_windows = false, samples = false;
  for (const SectionInfo& s : parsed->sections) {
    auto body = packet.subspan(s.offset, s.length);
    if (!is_known(s.type, version)) {
      out.skipped_sections.push_back(s.type);
      continue;
    }
    const auto type = SectionType(s.type);
    if (seen[s.type]) return malformed("section type " + std::to_string(s.type) + " repeated");
    seen[s.type] = true;
    const bool needs_manifest = type == SectionType::windows || type == SectionType::stats ||
                                type == SectionType::reasons || type == SectionType::alerts ||
                                type == SectionType::cleanings;
    if (needs_manifest) {
      if (!manifest)
        return make_error(Errc::manifest_mismatch, "packet carries data but no manifest is known");
      if (manifest->hash_for(version) != out.header.manifest_hash) {
        char buf[128];
        std::snprintf(buf, sizeof buf, "packet refers to manifest %08x, the manifest given is %08x",
                      out.header.manifest_hash, manifest->hash_for(version));
        return make_error(Errc::manifest_mismatch, buf);
      }
    }
    switch (type) {
      case SectionType::windows:
      case SectionType::stats: {
        if (have_windows) return malformed("both a windows and a stats section");
        auto ws = type == SectionType::windows ? get_samples(body, manifest->manifest)
                                               : get_stats(body, manifest->manifest, version);
        if (!ws) return ws.error();
        out.windows = std::move(*ws);
        have_windows = true;
        samples = type == SectionType::windows;
        break;
      }
      case SectionType::reasons: {
        if (!samples) return malformed("reasons section without a preceding windows section");
        if (auto r = get_reasons(body, out.windows); !r) return r.error();
        break;
      }
      case SectionType::alerts: {
        auto a = get_alerts(body, manifest->manifest, version);
        if (!a) return a.error();
        out.alerts = std::move(*a);
        break;
      }
      case SectionType::cleanings: {
        auto c = get_cleanings(body, manifest->manifest);
        if (!c) return c.error();
        out.cleanings = std::move(*c);
        break;
      }
      case SectionType::health: {
        auto h = get_health(body);
        if (!h) return h.error();
        out.health = std::move(*h);
        break;
      }
      case SectionType::manifest: {
        auto part = get_manifest_part(body);
        if (!part) return part.error();
        if (part->count == 1) {
          auto m = assemble_manifest(std::span(&*part, 1), out.header.manifest_hash, version);
          if (!m) return m.error();
          out.manifest = std::move(*m);
        }
        out.manifest_part = std::move(*part);
        break;
      }
    }
  }
  if (have_windows) {
    bool clock = false, partial = false;
    for (const Window& w : out.windows) clock |= w.clock_unsynced, partial |= w.partial;
    if (clock != out.header.clock_unsynced || partial != out.header.partial)
      return malformed("header flags disagree with the windows' partial/clock bits");
  }
  if (samples) {
    const Manifest& m = manifest->manifest;
    for (Window& w : out.windows)
      for (ChannelWindow& c : w.channels)
        c.stats = summarise(c, w.start, m.period_s, /*passed_only=*/version == 1);
  }
  return out;
}

Result<Manifest> assemble_manifest(std::span<const ManifestPart> parts, std::uint32_t hash,
                                   std::uint8_t version) {
  if (parts.empty()) return malformed("no manifest parts");
  const std::uint32_t count = parts.front().count;
  if (parts.size() != count)
    return malformed("manifest has " + std::to_string(count) + " parts, " +
                     std::to_string(parts.size()) + " given");
  std::vector<const ManifestPart*> order(count, nullptr);
  for (const ManifestPart& p : parts) {
    if (p.count != count || p.index >= count || order[p.index])
      return malformed("manifest parts disagree or repeat");
    order[p.index] = &p;
  }
  std::vector<std::uint8_t> bytes;
  for (const ManifestPart* p : order) bytes.insert(bytes.end(), p->bytes.begin(), p->bytes.end());
  if (crc32c(bytes) != hash) return malformed("manifest bytes do not match the packet's hash");
  return parse_canonical_manifest(bytes, version);
}

}  // namespace tarn::codec
