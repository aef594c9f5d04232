#include "codec/encoder.h"

#include <algorithm>
#include <bit>
#include <cmath>

#include "codec/bit_io.h"
#include "codec/crc32c.h"
#include "codec/format_rules.h"

namespace tarn::codec {

Result<CheckedManifest> check_manifest(Manifest m) {
  if (auto v = validate(m); !v) return v.error();
  CheckedManifest c;
  c.hash = manifest_hash(m, kFormatVersion);
  c.hash_v1 = manifest_hash(m, 1);
  c.manifest = std::move(m);
  return c;
}

namespace {

Error invalid(std::string msg) {
  return make_error(Errc::invalid_input, std::move(msg));
}

std::string window_name(const Window& w, std::size_t index) {
  return "window " + std::to_string(index) + " (start " + std::to_string(w.start) + ")";
}

// Quantised statistics of one channel-window, for the stats section.
struct QuantStats {
  std::array<std::uint32_t, 5> counts{};
  std::int64_t mean = 0, min = 0, max = 0, sd = 0;
  std::uint32_t n = 0;  // samples the statistics cover (passed, or not evaluated)
  std::uint32_t first_slot = 0, last_slot = 0;
  std::uint32_t reasons = 0;
};

// The caller's windows checked and quantised once, then cut into packets.
class WindowBatch {
 public:
  WindowBatch(const CheckedManifest& m, std::span<const Window> w, const EncodeOptions& o)
      : m_(m), w_(w), opts_(o), nch_(m.manifest.channels.size()) {}

  Result<Ok> prepare();
  // Encodes windows [w0, w0 + wn) and channels [c0, c0 + cn) into `out`.
  void encode(std::size_t w0, std::size_t wn, std::size_t c0, std::size_t cn, std::uint64_t seq,
              std::vector<std::uint8_t>& out);

 private:
  Result<Ok> check_window(std::size_t wi);
  Result<Ok> check_samples(std::size_t wi, std::size_t c);
  Result<Ok> check_stats(std::size_t wi, std::size_t c);
  void put_window_list(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0,
                       std::size_t cn);
  void put_samples(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c);
  void put_stats(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0, std::size_t cn);
  bool put_reasons(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0, std::size_t cn);

  const CheckedManifest& m_;
  std::span<const Window> w_;
  const EncodeOptions& opts_;
  std::size_t nch_;
  std::vector<std::size_t> base_;  // offset of (window, channel) in q_
  std::vector<std::int64_t> q_;    // quantised values per slot (0 where missing)
  std::vector<QuantStats> stats_;  // per (window, channel), stats-only mode
  // Scratch reused across packets.
  std::vector<std::uint8_t> body_;
  std::vector<std::int64_t> vals_;
  std::vector<std::uint64_t> z_;
  std::vector<FlagRun> runs_;
};

Result<Ok> WindowBatch::prepare() {
  const std::size_t nw = w_.size();
  std::size_t total = 0;
  base_.resize(nw * nch_);
  for (std::size_t wi = 0; wi < nw; ++wi) {
    if (auto r = check_window(wi); !r) return r.error();
    for (std::size_t c = 0; c < nch_; ++c) {
      base_[wi * nch_ + c] = total;
      total += w_[wi].slots;
    }
  }
  if (opts_.stats_only) {
    stats_.resize(nw * nch_);
    for (std::size_t wi = 0; wi < nw; ++wi)
      for (std::size_t c = 0; c < nch_; ++c)
        if (auto r = check_stats(wi, c); !r) return r.error();
    return Ok{};
  }
  q_.assign(total, 0);
  for (std::size_t wi = 0; wi < nw; ++wi)
    for (std::size_t c = 0; c < nch_; ++c)
      if (auto r = check_samples(wi, c); !r) return r.error();
  return Ok{};
}

Result<Ok> WindowBatch::check_window(std::size_t wi) {
  const Window& w = w_[wi];
  const Manifest& m = m_.manifest;
  const std::uint32_t n = m.slots_per_window();
  std::string where = window_name(w, wi);
  if (w.start - floor_div(w.start, m.window_s) * m.window_s != 0)
    return invalid(where + ": start is not a multiple of window_s " + std::to_string(m.window_s));
  if (!within_time_range(w.start)) return invalid(where + ": start outside the years 1900..2300");
  if (wi > 0 && w.start <= w_[wi - 1].start)
    return invalid(where + ": windows must be in strictly increasing start order");
  if (w.slots == 0 || w.slots > n)
    return invalid(where + ": slots must be 1.." + std::to_string(n));
  if (w.slots < n && !w.partial)
    return invalid(where + ": fewer slots than window_s / period_s needs partial = true");
  if (w.first_channel != 0 || w.channels.size() != nch_)
    return invalid(where + ": needs all " + std::to_string(nch_) + " manifest channels");
  return Ok{};
}

Result<Ok> WindowBatch::check_samples(std::size_t wi, std::size_t c) {
  const Window& w = w_[wi];
  const ChannelWindow& ch = w.channels[c];
  const double res = m_.manifest.channels[c].resolution;
  std::string where = window_name(w, wi) + " channel '" + m_.manifest.channels[c].name + "'";
  if (ch.values.size() != w.slots || ch.flags.size() != w.slots)
    return invalid(where + ": values and flags need one entry per slot (" +
                   std::to_string(w.slots) + ")");
  if (!ch.reasons.empty() && ch.reasons.size() != w.slots)
    return invalid(where + ": reasons must be empty or one entry per slot");
  std::int64_t* q = q_.data() + base_[wi * nch_ + c];
  for (std::size_t i = 0; i < w.slots; ++i) {
    const Flag f = ch.flags[i];
    if (!is_valid_flag(std::uint8_t(f)))
      return invalid(where + " slot " + std::to_string(i) + ": flag " + std::to_string(int(f)) +
                     " is not one of 1, 2, 3, 4, 9");
    const bool has = ch.values[i].has_value();
    if (has != (f != Flag::missing))
      return invalid(where + " slot " + std::to_string(i) +
                     ": a value must be present exactly when the flag is not 9 (missing)");
    if (!has) continue;
    auto qv = quantise(*ch.values[i], res);
    if (!qv)
      return invalid(where + " slot " + std::to_string(i) +
                     ": value is not finite or too large for the resolution");
    q[i] = *qv;
  }
  return Ok{};
}

Result<Ok> WindowBatch::check_stats(std::size_t wi, std::size_t c) {
  const Window& w = w_[wi];
  const ChannelStats& s = w.channels[c].stats;
  const double res = m_.manifest.channels[c].resolution;
  const std::uint32_t period = m_.manifest.period_s;
  std::string where = window_name(w, wi) + " channel '" + m_.manifest.channels[c].name + "' stats";
  QuantStats& qs = stats_[wi * nch_ + c];
  std::uint64_t sum = 0;
  for (int k = 0; k < 5; ++k) sum += s.counts[k];
  if (sum != w.slots) return invalid(where + ": flag counts must add up to slots");
  qs.counts = s.counts;
  qs.reasons = s.reasons_any;
  // The basis rule of FORMAT.md §4.4: passed samples; without any, the not-evaluated ones.
  const bool ne = s.counts[0] == 0 && s.counts[1] > 0;
  if ((s.basis == StatsBasis::not_evaluated) != ne)
    return invalid(where + ": basis must be not_evaluated exactly when no slot passed and " +
                   "some are not evaluated");
  const std::uint32_t n1 = ne ? s.counts[1] : s.counts[0];
  qs.n = n1;
  const bool have = s.mean && s.min && s.max && s.sd && s.first_t && s.last_t;
  if (n1 == 0) {
    if (s.mean || s.min || s.max || s.sd || s.first_t || s.last_t)
      return invalid(where +
                     ": no passed or not-evaluated samples, so mean/min/max/sd/first/last " +
                     "must be empty");
    return Ok{};
  }
  if (!have)
    return invalid(where + ": statistics over " + std::to_string(n1) +
                   " samples need mean, min, max, sd, first_t, last_t");
  auto mean = quantise(*s.mean, res), lo = quantise(*s.min, res), hi = quantise(*s.max, res),
       sd = quantise(*s.sd, res);
  if (!mean || !lo || !hi || !sd)
    return invalid(where + ": a statistic is not finite or too large");
  if (*lo > *mean || *mean > *hi || *sd < 0)
    return invalid(where + ": needs min <= mean <= max and sd >= 0");
  auto slot_of = [&](std::int64_t t) -> std::int64_t {
    std::int64_t d = t - w.start;
    if (d < 0 || d % period != 0 || d / period >= w.slots) return -1;
    return d / period;
  };
  std::int64_t first = slot_of(*s.first_t), last = slot_of(*s.last_t);
  if (first < 0 || last < 0 || last < first || std::uint64_t(last - first) + 1 < n1)
    return invalid(where + ": first_t/last_t must be slot times in the window, " +
                   std::to_string(n1) + " slots apart at least");
  if (n1 == w.slots && (first != 0 || last != std::int64_t(w.slots) - 1))
    return invalid(where + ": all slots counted, so first_t/last_t are the first and last slot");
  if (n1 == 1 && (*lo != *mean || *hi != *mean || *sd != 0))
    return invalid(where + ": one sample needs min == max == mean and sd == 0");
  qs.mean = *mean;
  qs.min = *lo;
  qs.max = *hi;
  qs.sd = *sd;
  qs.first_slot = std::uint32_t(first);
  qs.last_slot = std::uint32_t(last);
  return Ok{};
}

// The bit stream's window descriptors (FORMAT.md §4.1); the byte-level list
// header (first window index, count) is written before the bit stream starts.
void WindowBatch::put_window_list(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0,
                                  std::size_t cn) {
  const Manifest& m = m_.manifest;
  const bool fragment = !(c0 == 0 && cn == nch_);
  bw.put_bit(fragment);
  if (fragment) {
    bw.put_eg(c0, 0);
    bw.put_eg(cn - 1, 0);
  }
  const std::uint32_t n = m.slots_per_window();
  for (std::size_t wi = w0; wi < w0 + wn; ++wi) {
    const Window& w = w_[wi];
    if (wi > w0)
      bw.put_eg(std::uint64_t(window_index(w.start, m.window_s) -
                              window_index(w_[wi - 1].start, m.window_s) - 1),
                0);
    bw.put_bit(w.partial);
    bw.put_bit(w.clock_unsynced);
    if (w.partial) bw.put_eg(n - w.slots, 0);
  }
}

void WindowBatch::put_samples(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c) {
  // Flags: runs of non-pass slots over the concatenated slots of the windows.
  runs_.clear();
  vals_.clear();
  std::uint32_t gap = 0;
  for (std::size_t wi = w0; wi < w0 + wn; ++wi) {
    const Window& w = w_[wi];
    const Flag* f = w.channels[c].flags.data();
    const std::int64_t* q = q_.data() + base_[wi * nch_ + c];
    for (std::uint32_t i = 0; i < w.slots; ++i) {
      const Flag fl = f[i];
      if (fl != Flag::missing) vals_.push_back(q[i]);
      if (fl == Flag::pass) {
        ++gap;
      } else if (!runs_.empty() && gap == 0 && runs_.back().flag == fl) {
        ++runs_.back().length;
      } else {
        runs_.push_back(FlagRun{gap, fl, 1});
        gap = 0;
      }
    }
  }
  put_flag_runs(bw, runs_);
  // Values: first absolute, then Rice-coded zigzag first differences.
  if (vals_.empty()) return;
  bw.put_sl(vals_[0]);
  if (vals_.size() < 2) return;
  z_.resize(vals_.size() - 1);
  for (std::size_t i = 1; i < vals_.size(); ++i) z_[i - 1] = zigzag(vals_[i] - vals_[i - 1]);
  const unsigned k = best_rice_parameter(z_);
  bw.put(k, kRiceParamBits);
  for (std::uint64_t z : z_) bw.put_rice(z, k);
}

void WindowBatch::put_stats(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0,
                            std::size_t cn) {
  std::vector<std::optional<std::int64_t>> prev_mean(cn);
  for (std::size_t wi = w0; wi < w0 + wn; ++wi) {
    for (std::size_t c = c0; c < c0 + cn; ++c) {
      const QuantStats& s = stats_[wi * nch_ + c];
      const std::uint32_t slots = w_[wi].slots;
      const bool all_pass = s.counts[0] == slots;
      bw.put_bit(all_pass);
      if (!all_pass)
        for (int k = 1; k < 5; ++k) bw.put_eg(s.counts[k], 0);
      if (s.n > 0) {
        auto& pm = prev_mean[c - c0];
        if (pm)
          bw.put_eg(zigzag(s.mean - *pm), kStatsOrder);
        else
          bw.put_sl(s.mean);
        pm = s.mean;
        if (s.n >= 2) {
          bw.put_eg(std::uint64_t(s.mean - s.min), kStatsOrder);
          bw.put_eg(std::uint64_t(s.max - s.mean), kStatsOrder);
          bw.put_eg(std::uint64_t(s.sd), kStatsOrder);
        }
        if (!all_pass) {
          bw.put_eg(s.first_slot, 0);
          if (s.n >= 2) bw.put_eg(s.last_slot - s.first_slot - (s.n - 1), 0);
        }
      }
      put_reason_mask_opt(bw, s.reasons);
    }
  }
}

// Returns false (and writes nothing) when no slot in range has reason bits.
bool WindowBatch::put_reasons(BitWriter& bw, std::size_t w0, std::size_t wn, std::size_t c0,
                              std::size_t cn) {
  bool any = false;
  for (std::size_t wi = w0; wi < w0 + wn && !any; ++wi)
    for (std::size_t c = c0; c < c0 + cn && !any; ++c)
      for (std::uint32_t r : w_[wi].channels[c].reasons) any |= r != 0;
  if (!any) return false;
  std::uint32_t prev = 0;
  for (std::size_t c = c0; c < c0 + cn; ++c) {
    std::uint64_t count = 0;
    for (std::size_t wi = w0; wi < w0 + wn; ++wi)
      for (std::uint32_t r : w_[wi].channels[c].reasons) count += r != 0;
    bw.put_eg(count, 0);
    std::int64_t last = -1, slot = 0;
    for (std::size_t wi = w0; wi < w0 + wn; ++wi) {
      const auto& rs = w_[wi].channels[c].reasons;
      for (std::size_t i = 0; i < w_[wi].slots; ++i, ++slot) {
        std::uint32_t r = rs.empty() ? 0 : rs[i];
        if (r == 0) continue;
        bw.put_eg(std::uint64_t(slot - last - 1), kReasonGapOrder);
        last = slot;
        bw.put_bit(r == prev);
        if (r != prev) put_reason_mask(bw, r);
        prev = r;
      }
    }
  }
  return true;
}

void begin_packet(std::vector<std::uint8_t>& out, std::uint8_t flags, std::uint32_t hash,
                  std::uint64_t seq) {
  out.clear();
  out.push_back(std::uint8_t(kFormatVersion << 4 | flags));
  put_u32le(out, hash);
  put_varint(out, seq);
}

void put_section(std::vector<std::uint8_t>& out, SectionType type,
                 const std::vector<std::uint8_t>& body) {
  out.push_back(std::uint8_t(type));
  put_varint(out, body.size());
  out.insert(out.end(), body.begin(), body.end());
}

void end_packet(std::vector<std::uint8_t>& out) {
  put_u32le(out, crc32c(out));
}

void WindowBatch::encode(std::size_t w0, std::size_t wn, std::size_t c0, std::size_t cn,
                         std::uint64_t seq, std::vector<std::uint8_t>& out) {
  std::uint8_t flags = 0;
  for (std::size_t wi = w0; wi < w0 + wn; ++wi) {
    if (w_[wi].clock_unsynced) flags |= kHeaderClockUnsynced;
    if (w_[wi].partial) flags |= kHeaderPartial;
  }
  begin_packet(out, flags, m_.hash, seq);
  body_.clear();
  put_varint(body_, zigzag(window_index(w_[w0].start, m_.manifest.window_s)));
  put_varint(body_, wn);
  BitWriter bw(body_);
  put_window_list(bw, w0, wn, c0, cn);
  if (opts_.stats_only) {
    put_stats(bw, w0, wn, c0, cn);
    bw.finish();
    put_section(out, SectionType::stats, body_);
  } else {
    for (std::size_t c = c0; c < c0 + cn; ++c) put_samples(bw, w0, wn, c);
    bw.finish();
    put_section(out, SectionType::windows, body_);
    if (opts_.with_reasons) {
      body_.clear();
      BitWriter rw(body_);
      if (put_reasons(rw, w0, wn, c0, cn)) {
        rw.finish();
        put_section(out, SectionType::reasons, body_);
      }
    }
  }
  end_packet(out);
}

// The largest count in [1, start] whose packet fits the MTU, left encoded in `out`; 0 when
// not even one fits. Packet size never shrinks as the count grows (FORMAT.md §8), so a
// binary search finds it.
template <class EncodeFn>
std::size_t fit_count(std::size_t start, std::size_t mtu, std::vector<std::uint8_t>& out,
                      EncodeFn&& enc) {
  enc(start, out);
  if (out.size() <= mtu) return start;
  std::size_t lo = 0, hi = start;  // lo fits (0: nothing known), hi does not
  while (hi - lo > 1) {
    std::size_t mid = lo + (hi - lo) / 2;
    enc(mid, out);
    (out.size() <= mtu ? lo : hi) = mid;
  }
  if (lo > 0) enc(lo, out);
  return lo;
}

}  // namespace

Result<std::vector<EncodedPacket>> encode_windows(const CheckedManifest& m,
                                                  std::span<const Window> windows,
                                                  std::uint64_t first_sequence,
                                                  const EncodeOptions& opts) {
  if (opts.mtu < kMinPacketBytes || opts.mtu > kMaxPacketBytes)
    return invalid("mtu must be " + std::to_string(kMinPacketBytes) + ".." +
                   std::to_string(kMaxPacketBytes) + " bytes");
  if (opts.windows_per_packet < 1 || opts.windows_per_packet > kMaxWindowsPerSection)
    return invalid("windows per packet must be 1.." + std::to_string(kMaxWindowsPerSection));
  WindowBatch batch(m, windows, opts);
  if (auto r = batch.prepare(); !r) return r.error();

  const std::size_t nch = m.manifest.channels.size();
  const std::size_t slot_cap =
      std::max<std::size_t>(1, kMaxSlotsPerSection / (nch * m.manifest.slots_per_window()));
  std::vector<EncodedPacket> packets;
  std::uint64_t seq = first_sequence;
  std::vector<std::uint8_t> out;
  std::size_t wi = 0;
  while (wi < windows.size()) {
    std::size_t want = std::min({opts.windows_per_packet, windows.size() - wi, slot_cap});
    std::size_t got = fit_count(
        want, opts.mtu, out, [&](std::size_t n, auto& o) { batch.encode(wi, n, 0, nch, seq, o); });
    if (got > 0) {
      packets.push_back(EncodedPacket{seq++, out, wi, got, 0, nch});
      wi += got;
      continue;
    }
    // One window is too large: split it into groups of channels.
    std::size_t c = 0;
    while (c < nch) {
      std::size_t cn = fit_count(nch - c, opts.mtu, out, [&](std::size_t n, auto& o) {
        batch.encode(wi, 1, c, n, seq, o);
      });
      if (cn == 0)
        return make_error(Errc::too_large,
                          window_name(windows[wi], wi) + " channel '" +
                              m.manifest.channels[c].name + "' needs " +
                              std::to_string(out.size()) + " bytes, over the MTU of " +
                              std::to_string(opts.mtu) + "; use statistics-only or a larger MTU");
      packets.push_back(EncodedPacket{seq++, out, wi, 1, c, cn});
      c += cn;
    }
    ++wi;
  }
  return packets;
}

Result<std::vector<std::uint8_t>> encode_alerts(const CheckedManifest& m,
                                                std::span<const AlertEvent> events,
                                                std::uint64_t sequence, bool clock_unsynced) {
  const Manifest& mf = m.manifest;
  std::vector<std::uint8_t> body;
  put_varint(body, events.size());
  for (std::size_t i = 0; i < events.size(); ++i) {
    const AlertEvent& e = events[i];
    std::string where = "alert " + std::to_string(i);
    if (e.channel >= mf.channels.size()) return invalid(where + ": channel index out of range");
    if (e.level_name.size() > kMaxTextBytes || e.rule_id.size() > kMaxTextBytes)
      return invalid(where + ": level_name and rule_id are at most 255 bytes");
    if (e.window_start - floor_div(e.window_start, mf.window_s) * mf.window_s != 0 ||
        !within_time_range(e.window_start))
      return invalid(where + ": window_start must be a window-aligned time in 1900..2300");
    auto q = quantise(e.statistic, mf.channels[e.channel].resolution);
    if (!q) return invalid(where + ": statistic is not finite or too large");
    const unsigned kind = unsigned(e.kind), cause = unsigned(e.cause);
    if (kind > 2 || cause > 3)
      return invalid(where + ": kind must be change, stale or resumed and cause one of none, " +
                     "instrument_offline, no_values, all_failed_qc");
    if ((e.kind == AlertKind::change && e.cause != StaleCause::none) ||
        (e.kind == AlertKind::stale && e.cause == StaleCause::none))
      return invalid(where + ": a stale event needs a cause, a change event has none");
    put_varint(body, e.channel);
    put_varint(body, e.level);
    put_string(body, e.level_name);
    put_varint(body, e.previous_level);
    put_varint(body, zigzag(window_index(e.window_start, mf.window_s)));
    put_varint(body, zigzag(*q));
    put_string(body, e.rule_id);
    body.push_back(std::uint8_t(kind | cause << 4));
  }
  std::vector<std::uint8_t> out;
  begin_packet(out, clock_unsynced ? kHeaderClockUnsynced : 0, m.hash, sequence);
  put_section(out, SectionType::alerts, body);
  end_packet(out);
  if (out.size() > kMaxPacketBytes) return make_error(Errc::too_large, "too many alert events");
  return out;
}

Result<std::vector<std::uint8_t>> encode_cleanings(const CheckedManifest& m,
                                                   std::span<const CleaningRecord> records,
                                                   std::uint64_t sequence, bool clock_unsynced) {
  const Manifest& mf = m.manifest;
  std::vector<std::uint8_t> body;
  put_varint(body, records.size());
  for (std::size_t i = 0; i < records.size(); ++i) {
    const CleaningRecord& c = records[i];
    std::string where = "cleaning record " + std::to_string(i);
    if (c.channel >= mf.channels.size()) return invalid(where + ": channel index out of range");
    if (!within_time_range(c.maintenance_start) || !within_time_range(c.maintenance_end) ||
        c.maintenance_end < c.maintenance_start)
      return invalid(where + ": maintenance_start <= maintenance_end, both in 1900..2300");
    if (c.before.has_value() != (c.n_before > 0) || c.after.has_value() != (c.n_after > 0))
      return invalid(where + ": a median is present exactly when its count is above 0");
    const double res = mf.channels[c.channel].resolution;
    std::optional<std::int64_t> before, after;
    if (c.before && !(before = quantise(*c.before, res)))
      return invalid(where + ": before is not finite or too large");
    if (c.after && !(after = quantise(*c.after, res)))
      return invalid(where + ": after is not finite or too large");
    put_varint(body, c.channel);
    put_varint(body, zigzag(c.maintenance_start - kTimeEpoch));
    put_varint(body, std::uint64_t(c.maintenance_end - c.maintenance_start));
    body.push_back(c.n_before);
    body.push_back(c.n_after);
    if (before) put_varint(body, zigzag(*before));
    if (after) put_varint(body, zigzag(*after));
  }
  std::vector<std::uint8_t> out;
  begin_packet(out, clock_unsynced ? kHeaderClockUnsynced : 0, m.hash, sequence);
  put_section(out, SectionType::cleanings, body);
  end_packet(out);
  if (out.size() > kMaxPacketBytes) return make_error(Errc::too_large, "too many cleaning records");
  return out;
}

Result<std::vector<std::uint8_t>> encode_health(const CheckedManifest& m,
                                                std::span<const HealthRecord> records,
                                                std::uint64_t sequence, bool clock_unsynced) {
  std::vector<std::uint8_t> body;
  put_varint(body, records.size());
  for (std::size_t i = 0; i < records.size(); ++i) {
    const HealthRecord& h = records[i];
    std::string where = "health record " + std::to_string(i);
    if (!within_time_range(h.t)) return invalid(where + ": t outside the years 1900..2300");
    std::optional<std::int64_t> temp, supply;
    if (h.board_temp_c && !(temp = quantise(*h.board_temp_c, 0.1)))
      return invalid(where + ": board_temp_c is not finite or too large");
    if (h.supply_v && (!(supply = quantise(*h.supply_v, 0.001)) || *supply < 0))
      return invalid(where + ": supply_v must be a finite number >= 0");
    std::uint8_t mask = (temp ? 1 : 0) | (h.disk_free_mib ? 2 : 0) | (supply ? 4 : 0);
    body.push_back(mask);
    put_varint(body, zigzag(h.t - kTimeEpoch));
    if (temp) put_varint(body, zigzag(*temp));
    if (h.disk_free_mib) put_varint(body, *h.disk_free_mib);
    if (supply) put_varint(body, std::uint64_t(*supply));
  }
  std::vector<std::uint8_t> out;
  begin_packet(out, clock_unsynced ? kHeaderClockUnsynced : 0, m.hash, sequence);
  put_section(out, SectionType::health, body);
  end_packet(out);
  if (out.size() > kMaxPacketBytes) return make_error(Errc::too_large, "too many health records");
  return out;
}

namespace {
// Bytes of canonical manifest that fit in part `i` of `count` (FORMAT.md §5.2).
std::size_t manifest_part_capacity(std::size_t mtu, std::uint64_t seq, std::size_t i,
                                   std::size_t count) {
  const std::size_t overhead =
      1 + 4 + varint_size(seq) + 1 + varint_size(mtu) + varint_size(i) + varint_size(count) + 4;
  return mtu > overhead ? mtu - overhead : 0;
}
}  // namespace

Result<std::vector<EncodedPacket>> encode_manifest(const CheckedManifest& m,
                                                   std::uint64_t first_sequence, std::size_t mtu) {
  constexpr std::size_t kMinMtu = 32;
  if (mtu < kMinMtu || mtu > kMaxPacketBytes)
    return invalid("mtu for a manifest must be " + std::to_string(kMinMtu) + ".." +
                   std::to_string(kMaxPacketBytes) + " bytes");
  const std::vector<std::uint8_t> bytes = canonical_bytes(m.manifest);
  // The part count enters the overhead of every part: iterate until it is stable
  // (it only grows, and by at most a few steps).
  std::size_t count = 1;
  std::vector<std::size_t> cuts;
  for (int round = 0; round < 8; ++round) {
    cuts.assign(1, 0);
    for (std::size_t i = 0; cuts.back() < bytes.size(); ++i)
      cuts.push_back(std::min(
          bytes.size(), cuts.back() + manifest_part_capacity(mtu, first_sequence + i, i, count)));
    if (cuts.size() - 1 <= count) break;
    count = cuts.size() - 1;
  }
  count = cuts.size() - 1;
  std::vector<EncodedPacket> out;
  for (std::size_t i = 0; i < count; ++i) {
    std::vector<std::uint8_t> body;
    put_varint(body, i);
    put_varint(body, count);
    body.insert(body.end(), bytes.begin() + std::ptrdiff_t(cuts[i]),
                bytes.begin() + std::ptrdiff_t(cuts[i + 1]));
    EncodedPacket p;
    p.sequence = first_sequence + i;
    begin_packet(p.bytes, 0, m.hash, p.sequence);
    put_section(p.bytes, SectionType::manifest, body);
    end_packet(p.bytes);
    if (p.bytes.size() > mtu) return make_error(Errc::too_large, "manifest part over the mtu");
    out.push_back(std::move(p));
  }
  return out;
}

}  // namespace tarn::codec
