#include "daemon/core/window_assembler.h"

#include <algorithm>
#include <nlohmann/json.hpp>

namespace tarn::daemon {

using nlohmann::json;

WindowAssembler::WindowAssembler(const config::StationConfig& cfg, codec::Manifest manifest)
    : manifest_(std::move(manifest)),
      window_s_(cfg.sampling.window_s),
      period_s_(cfg.sampling.period_s),
      collator_([&] {
        std::vector<std::string> names;
        for (auto& in : cfg.instruments)
          for (auto& ch : in.channels) names.push_back(ch.name);
        return names;
      }()),
      alerts_(cfg.alert_rules) {
  for (auto& in : cfg.instruments)
    for (auto& ch : in.channels) {
      Channel c;
      c.name = ch.name;
      c.instrument = in.name;
      c.pipeline = std::make_unique<pipeline::ChannelPipeline>(ch.pipeline);
      channels_.push_back(std::move(c));
    }
}

void WindowAssembler::start(std::int64_t t, AssemblerOutput& out) {
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    scratch_.clear();
    channels_[i].pipeline->start(t, scratch_);
    absorb(i, scratch_, out);
  }
}

void WindowAssembler::push(std::size_t channel, const pipeline::RawSample& raw,
                           AssemblerOutput& out) {
  scratch_.clear();
  channels_[channel].pipeline->push(raw, scratch_);
  absorb(channel, scratch_, out);
}

void WindowAssembler::advance(std::int64_t now, AssemblerOutput& out) {
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    scratch_.clear();
    channels_[i].pipeline->advance(now, scratch_);
    absorb(i, scratch_, out);
  }
}

void WindowAssembler::settle_held(AssemblerOutput& out) {
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    scratch_.clear();
    channels_[i].pipeline->settle_held(scratch_);
    absorb(i, scratch_, out);
  }
}

void WindowAssembler::stop(std::int64_t t, AssemblerOutput& out) {
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    scratch_.clear();
    channels_[i].pipeline->stop(t, scratch_);
    absorb(i, scratch_, out);
  }
  std::vector<pipeline::WindowSet> sets;
  collator_.flush(sets);
  release(sets, out);
}

void WindowAssembler::set_maintenance(std::int64_t t, const std::set<std::string>& scopes) {
  for (auto& c : channels_) {
    bool want = scopes.count("") || scopes.count(c.instrument);
    if (want && !c.maintenance) c.pipeline->begin_maintenance(t);
    if (!want && c.maintenance) c.pipeline->end_maintenance(t);
    c.maintenance = want;
  }
}

bool WindowAssembler::in_maintenance() const {
  return std::any_of(channels_.begin(), channels_.end(),
                     [](const Channel& c) { return c.maintenance; });
}

void WindowAssembler::absorb(std::size_t ci, pipeline::ChannelPipeline::Output& o,
                             AssemblerOutput& out) {
  Channel& c = channels_[ci];
  for (auto& s : o.samples) {
    out.samples.push_back({ci, s});
    std::int64_t start = s.t - ((s.t % window_s_) + window_s_) % window_s_;
    auto& v = c.pending[start];
    if (v.size() < std::size_t(4 * window_s_ / period_s_ + 16)) v.push_back(s);
    c.view.last = s;
    // The status view counts the newest window samples arrived for.
    if (start > c.view.window_start) {
      c.view.window_start = start;
      c.view.window_counts = {};
    }
    if (start == c.view.window_start) c.view.window_counts[codec::flag_slot(s.flag)]++;
  }
  for (auto& k : o.cleanings) {
    codec::CleaningRecord r;
    r.channel = static_cast<std::uint16_t>(ci);
    r.maintenance_start = k.maintenance_start;
    r.maintenance_end = k.maintenance_end;
    r.before = k.before;
    r.after = k.after;
    r.n_before = static_cast<std::uint8_t>(std::min<std::uint32_t>(k.n_before, 255));
    r.n_after = static_cast<std::uint8_t>(std::min<std::uint32_t>(k.n_after, 255));
    if (!r.before) r.n_before = 0;
    if (!r.after) r.n_after = 0;
    out.cleanings.push_back(r);
  }
  std::vector<pipeline::WindowSet> sets;
  for (auto& w : o.windows) collator_.add(c.name, w, sets);
  // A channel's pending samples never grow past a few windows.
  while (c.pending.size() > 6) {
    late_samples_ += c.pending.begin()->second.size();
    c.pending.erase(c.pending.begin());
  }
  release(sets, out);
}

void WindowAssembler::release(std::vector<pipeline::WindowSet>& sets, AssemblerOutput& out) {
  for (auto& set : sets) {
    out.windows.push_back(to_codec(set));
    alerts_.on_windows(set, out.alerts);
    for (auto& c : channels_) c.pending.erase(set.start);
    out.window_sets.push_back(std::move(set));
  }
  sets.clear();
}

codec::Window WindowAssembler::to_codec(const pipeline::WindowSet& set) {
  codec::Window w;
  w.start = set.start;
  w.slots = std::uint32_t(window_s_ / period_s_);
  for (auto& [name, s] : set.channels) w.partial |= s.partial;
  if (set.channels.size() < channels_.size()) w.partial = true;
  for (auto& c : channels_) {
    codec::ChannelWindow cw;
    cw.values.assign(w.slots, std::nullopt);
    cw.flags.assign(w.slots, codec::Flag::missing);
    cw.reasons.assign(w.slots, 0);
    auto it = c.pending.find(set.start);
    if (it != c.pending.end()) {
      for (auto& s : it->second) {
        std::int64_t off = s.t - set.start;
        if (off < 0 || off % period_s_ != 0 || off / period_s_ >= std::int64_t(w.slots)) continue;
        std::size_t slot = std::size_t(off / period_s_);
        cw.values[slot] = s.flag == codec::Flag::missing ? std::nullopt : s.value;
        cw.flags[slot] = s.flag;
        cw.reasons[slot] = s.reasons;
        if (s.reasons & pipeline::reason::clock_unsynced) w.clock_unsynced = true;
      }
    }
    cw.stats = codec::summarise(cw, set.start, std::uint32_t(period_s_));
    w.channels.push_back(std::move(cw));
  }
  return w;
}

std::optional<std::int64_t> WindowAssembler::resume_point() const {
  std::optional<std::int64_t> r;
  for (auto& c : channels_) {
    auto e = c.pipeline->snapshot().last_closed_end;
    if (!e) return std::nullopt;
    if (!r || *e < *r) r = e;
  }
  return r;
}

std::vector<std::pair<std::string, std::string>> WindowAssembler::alert_levels() const {
  std::vector<std::pair<std::string, std::string>> out;
  for (std::size_t i = 0; i < alerts_.rules().size(); ++i)
    out.emplace_back(alerts_.rules()[i].name, std::string(alerts_.level_name(i)));
  return out;
}

std::vector<std::string> WindowAssembler::alert_stale_causes() const {
  std::vector<std::string> out;
  for (std::size_t i = 0; i < alerts_.rules().size(); ++i)
    out.emplace_back(alerts_.stale(i) ? pipeline::stale_cause_name(alerts_.stale_cause(i))
                                      : std::string_view());
  return out;
}

// --- persistence --------------------------------------------------------------

static json opt(const std::optional<std::int64_t>& v) {
  return v ? json(*v) : json(nullptr);
}
static std::optional<std::int64_t> opt_i(const json& j) {
  return j.is_number_integer() ? std::optional<std::int64_t>(j.get<std::int64_t>()) : std::nullopt;
}
static std::optional<double> opt_d(const json& j) {
  return j.is_number() ? std::optional<double>(j.get<double>()) : std::nullopt;
}

std::string WindowAssembler::snapshot() const {
  json j;
  j["version"] = 1;
  j["maintenance"] = in_maintenance();
  json chans = json::object();
  for (auto& c : channels_) {
    auto s = c.pipeline->snapshot();
    json cj;
    cj["last_t"] = opt(s.qc.last_t);
    cj["maintenance_since"] = opt(s.qc.maintenance_since);
    if (s.qc.last_maintenance)
      cj["last_maintenance"] = {s.qc.last_maintenance->start, s.qc.last_maintenance->end};
    json f = json::array();
    for (auto& fs : s.qc.fouling)
      f.push_back({{"reference", fs.reference ? json(*fs.reference) : json(nullptr)},
                   {"last_baseline", fs.last_baseline ? json(*fs.last_baseline) : json(nullptr)},
                   {"drifted", fs.drifted},
                   {"in_night", fs.in_night},
                   {"night_min", fs.night_min},
                   {"night_count", fs.night_count}});
    cj["fouling"] = f;
    cj["last_closed_end"] = opt(s.last_closed_end);
    chans[c.name] = cj;
  }
  j["channels"] = chans;
  json rules = json::array();
  for (auto& r : alerts_.snapshot().rules)
    rules.push_back({{"rule", r.rule},
                     {"level", r.level},
                     {"raise_streak", r.raise_streak},
                     {"clear_streak", r.clear_streak},
                     {"last_event_end", opt(r.last_event_end)},
                     {"last_window_start", opt(r.last_window_start)},
                     {"no_value_windows", r.no_value_windows},
                     {"stale", r.stale},
                     {"stale_cause", static_cast<int>(r.stale_cause)}});
  j["alerts"] = rules;
  return j.dump();
}

std::vector<std::string> WindowAssembler::restore(const std::string& text) {
  std::vector<std::string> notes;
  json j;
  try {
    j = json::parse(text);
  } catch (const std::exception&) {
    notes.push_back("saved pipeline state is not valid JSON; starting fresh");
    return notes;
  }
  try {
    std::vector<Channel*> fresh;  // channels the saved state does not know (added by the config)
    std::optional<std::int64_t> newest_end;
    for (auto& c : channels_) {
      if (!j["channels"].contains(c.name)) {
        fresh.push_back(&c);
        continue;
      }
      const json& cj = j["channels"][c.name];
      pipeline::ChannelSnapshot s;
      s.qc.last_t = opt_i(cj["last_t"]);
      s.qc.maintenance_since = opt_i(cj["maintenance_since"]);
      if (cj.contains("last_maintenance") && cj["last_maintenance"].is_array())
        s.qc.last_maintenance =
            pipeline::MaintenancePeriod{cj["last_maintenance"][0].get<std::int64_t>(),
                                        cj["last_maintenance"][1].get<std::int64_t>()};
      for (auto& f : cj["fouling"]) {
        pipeline::FoulingState fs;
        fs.reference = opt_d(f["reference"]);
        fs.last_baseline = opt_d(f["last_baseline"]);
        fs.drifted = f.value("drifted", false);
        fs.in_night = f.value("in_night", false);
        fs.night_min = f.value("night_min", 0.0);
        fs.night_count = f.value("night_count", 0u);
        s.qc.fouling.push_back(fs);
      }
      s.last_closed_end = opt_i(cj["last_closed_end"]);
      // Samples of the open window are replayed from the archive after a
      // restart or reload: QC must take them again, so its floor is the end
      // of the last closed window, not the newest sample it had seen (a
      // state saved mid-window, e.g. by a maintenance start, would else make
      // the replay drop them and the window lose its first slots).
      if (s.last_closed_end && s.qc.last_t && *s.qc.last_t >= *s.last_closed_end)
        s.qc.last_t = *s.last_closed_end - 1;
      if (s.last_closed_end && (!newest_end || *s.last_closed_end > *newest_end))
        newest_end = s.last_closed_end;
      c.maintenance = s.qc.maintenance_since.has_value();
      c.pipeline->restore(s);
    }
    // A new channel starts where the others left off: no window the others
    // already sent is built again for it (that would send a window start
    // twice). It joins a running maintenance period of its instrument or
    // the station when the Station applies its periods (set_maintenance).
    for (Channel* c : fresh) {
      pipeline::ChannelSnapshot s;
      s.last_closed_end = newest_end;
      c->pipeline->restore(s);
      notes.push_back("channel " + c->name + " is new: it starts with the current window");
    }
    pipeline::AlertSnapshot a;
    for (auto& r : j["alerts"]) {
      pipeline::AlertRuleState st;
      st.rule = r.value("rule", "");
      st.level = r.value("level", 0u);
      st.raise_streak = r.value("raise_streak", std::vector<std::uint32_t>{});
      st.clear_streak = r.value("clear_streak", 0u);
      st.last_event_end = opt_i(r["last_event_end"]);
      st.last_window_start = opt_i(r["last_window_start"]);
      st.no_value_windows = r.value("no_value_windows", 0u);
      st.stale = r.value("stale", false);
      const int cause = r.value("stale_cause", 0);
      st.stale_cause = cause >= 0 && cause <= 3 ? static_cast<pipeline::StaleCause>(cause)
                                                : pipeline::StaleCause::none;
      a.rules.push_back(st);
    }
    auto rep = alerts_.restore(a);
    for (auto& n : rep.notes) notes.push_back(n);
  } catch (const std::exception& e) {
    notes.push_back(std::string("saved pipeline state unreadable (") + e.what() +
                    "); partly restored");
  }
  return notes;
}

}  // namespace tarn::daemon
