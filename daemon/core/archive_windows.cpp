#include "daemon/core/archive_windows.h"

#include <map>
#include <string>

#include "config/settings/reasons.h"

namespace tarn::daemon {

std::vector<codec::Window> windows_from_archive(const codec::Manifest& m, std::int64_t from,
                                                std::int64_t to,
                                                const std::vector<store::ArchivedSample>& samples) {
  const std::int64_t ws = m.window_s, ps = m.period_s;
  const std::uint32_t slots = m.slots_per_window();
  std::map<std::string, std::size_t> index;
  for (std::size_t i = 0; i < m.channels.size(); ++i) index[m.channels[i].name] = i;
  const std::int64_t first = codec::floor_div(from, ws) * ws;

  struct Slot {
    bool seen = false;
    std::optional<double> value;
    codec::Flag flag = codec::Flag::missing;
    std::uint32_t reasons = 0;
  };
  // window start -> channel -> slots
  std::map<std::int64_t, std::vector<std::vector<Slot>>> grid;
  for (const auto& s : samples) {
    auto ch = index.find(s.channel);
    if (ch == index.end() || s.t < first || s.t >= to) continue;
    const std::int64_t start = codec::floor_div(s.t, ws) * ws;
    auto& w = grid[start];
    if (w.empty()) w.assign(m.channels.size(), std::vector<Slot>(slots));
    Slot& slot = w[ch->second][std::size_t((s.t - start) / ps)];
    if (slot.seen) continue;
    slot.seen = true;
    slot.flag = codec::Flag(static_cast<std::uint8_t>(s.flag));
    if (!codec::is_valid_flag(static_cast<std::uint8_t>(slot.flag)))
      slot.flag = codec::Flag::missing;
    slot.value = slot.flag == codec::Flag::missing ? std::nullopt : s.value;
    if (!slot.value) slot.flag = codec::Flag::missing;
    slot.reasons = s.reasons;
  }

  std::vector<codec::Window> out;
  for (auto& [start, chans] : grid) {
    codec::Window w;
    w.start = start;
    w.slots = slots;
    for (auto& cs : chans) {
      codec::ChannelWindow c;
      bool any_reason = false;
      for (const Slot& s : cs) {
        c.values.push_back(s.value);
        c.flags.push_back(s.flag);
        c.reasons.push_back(s.reasons);
        any_reason |= s.reasons != 0;
        if (!s.seen) w.partial = true;
        if (s.reasons & pipeline::reason::clock_unsynced) w.clock_unsynced = true;
      }
      if (!any_reason) c.reasons.clear();
      c.stats = codec::summarise(c, start, std::uint32_t(ps));
      w.channels.push_back(std::move(c));
    }
    out.push_back(std::move(w));
  }
  return out;
}

}  // namespace tarn::daemon
