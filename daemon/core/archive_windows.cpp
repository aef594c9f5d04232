#include "daemon/core/archive_windows.h"

#include <map>
#include <string>
#include <tuple>

#include "config/settings/reasons.h"

namespace tarn::daemon {

Placement place_samples(const codec::Manifest& m, const std::vector<SlotSample>& samples) {
  const std::int64_t ws = m.window_s, ps = m.period_s;
  const std::uint32_t slots = m.slots_per_window();
  std::map<std::int64_t, PlacedWindow> by_start;
  // (window start, channel, slot) -> index of the sample that filled it
  std::map<std::tuple<std::int64_t, std::size_t, std::uint32_t>, std::size_t> first_of;
  Placement out;
  for (std::size_t i = 0; i < samples.size(); ++i) {
    const SlotSample& s = samples[i];
    const std::int64_t start = codec::floor_div(s.t, ws) * ws;
    const std::uint32_t slot = std::uint32_t((s.t - start) / ps);
    auto [it, fresh] = first_of.try_emplace({start, s.channel, slot}, i);
    if (!fresh) {
      out.duplicates.emplace_back(i, it->second);
      continue;
    }
    auto [wit, wfresh] = by_start.try_emplace(start);
    PlacedWindow& pw = wit->second;
    if (wfresh) {
      pw.window.start = start;
      pw.window.slots = slots;
      pw.window.channels.resize(m.channels.size());
      for (auto& c : pw.window.channels) {
        c.values.assign(slots, std::nullopt);
        c.flags.assign(slots, codec::Flag::missing);
        c.reasons.assign(slots, 0);
      }
      pw.filled.assign(m.channels.size(), std::vector<bool>(slots, false));
    }
    codec::ChannelWindow& c = pw.window.channels[s.channel];
    c.values[slot] = s.value;
    c.flags[slot] = s.flag;
    c.reasons[slot] = s.reasons;
    pw.filled[s.channel][slot] = true;
  }
  for (auto& [_, pw] : by_start) out.windows.push_back(std::move(pw));
  return out;
}

std::vector<codec::Window> windows_from_archive(const codec::Manifest& m, std::int64_t from,
                                                std::int64_t to,
                                                const std::vector<store::ArchivedSample>& samples) {
  std::map<std::string, std::size_t> index;
  for (std::size_t i = 0; i < m.channels.size(); ++i) index[m.channels[i].name] = i;
  const std::int64_t first = codec::floor_div(from, m.window_s) * m.window_s;

  std::vector<SlotSample> placed;
  for (const auto& s : samples) {
    auto ch = index.find(s.channel);
    if (ch == index.end() || s.t < first || s.t >= to) continue;
    SlotSample p;
    p.t = s.t;
    p.channel = ch->second;
    p.flag =
        codec::is_valid_flag(static_cast<std::uint8_t>(s.flag)) ? s.flag : codec::Flag::missing;
    p.value = p.flag == codec::Flag::missing ? std::nullopt : s.value;
    if (!p.value) p.flag = codec::Flag::missing;
    p.reasons = s.reasons;
    placed.push_back(p);
  }
  // A second sample for a slot is ignored (place_samples keeps the first).
  Placement pl = place_samples(m, placed);

  std::vector<codec::Window> out;
  for (auto& [w, filled] : pl.windows) {
    for (std::size_t c = 0; c < w.channels.size(); ++c) {
      codec::ChannelWindow& cw = w.channels[c];
      bool any_reason = false;
      for (std::uint32_t i = 0; i < w.slots; ++i) {
        any_reason |= cw.reasons[i] != 0;
        if (!filled[c][i]) w.partial = true;
        if (cw.reasons[i] & pipeline::reason::clock_unsynced) w.clock_unsynced = true;
      }
      if (!any_reason) cw.reasons.clear();
      cw.stats = codec::summarise(cw, w.start, std::uint32_t(m.period_s));
    }
    out.push_back(std::move(w));
  }
  return out;
}

}  // namespace tarn::daemon
