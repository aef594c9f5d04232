// Alert statistics over the samples whose only doubts the rule accepts,
// window statistics without QC (basis not_evaluated), and stale alerts.
// Thresholds: phycocyanin levels as in test_alert_rules.cpp (common practice
// in lake monitoring, no source). CAUTION: alert levels support and never
// replace laboratory analysis and the decisions of the local health or
// water authority. Simulated windows and times throughout.
#include <catch2/catch.hpp>

#include <string>
#include <vector>

#include "daemon/pipeline/alert_rules.h"
#include "daemon/pipeline/window_builder.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;

namespace {

constexpr std::int64_t kT0 = 1717200000;  // 2024-06-01 00:00 UTC, a multiple of 600
constexpr std::int64_t kW = 600;
constexpr std::uint32_t kDefaultDoubts = reason::solar_quenching | reason::fouling_drift;

FlaggedSample fs(std::int64_t t, std::optional<double> v, Flag f, std::uint32_t r = 0) {
  return FlaggedSample{t, v, f, r};
}

// One window of 60 s polls built by a real WindowBuilder.
WindowSummary build(const std::vector<FlaggedSample>& samples, WindowConfig c) {
  WindowBuilder b(std::move(c), 60);
  std::vector<WindowSummary> out;
  for (const auto& s : samples) b.push(s, out);
  b.advance(samples.back().t + kW, out);
  REQUIRE(!out.empty());
  return out.front();
}

AlertRule rule(std::uint32_t accept = kDefaultDoubts) {
  AlertRule r;
  r.name = "cyanobacteria";
  r.channel = "pc";
  r.levels = {{"watch", 3.4, {}}, {"warning", 6.7, {}}};
  r.accept_doubts = accept;
  r.stale_windows = 3;
  return r;
}

}  // namespace

TEST_CASE("accepted doubts: the alert statistic keeps quenched and fouled samples, not spikes",
          "[alerts][doubts]") {
  // A daytime bloom window: two passed samples, two suspect for solar
  // quenching (one also clock_unsynced, which is no doubt about the value),
  // one fouling + quenching, one suspect for a spike, one failed.
  const std::int64_t t = kT0;
  const std::vector<FlaggedSample> s = {
      fs(t, 8.0, Flag::pass),
      fs(t + 60, 8.2, Flag::pass),
      fs(t + 120, 6.0, Flag::suspect, reason::solar_quenching),
      fs(t + 180, 6.2, Flag::suspect, reason::solar_quenching | reason::clock_unsynced),
      fs(t + 240, 7.0, Flag::suspect, reason::solar_quenching | reason::fouling_drift),
      fs(t + 300, 30.0, Flag::suspect, reason::spike),
      fs(t + 360, 90.0, Flag::fail, reason::gross_range_sensor),
  };
  WindowConfig c;
  c.alert_masks = {kDefaultDoubts, 0u, reason::spike | kDefaultDoubts};
  const WindowSummary w = build(s, c);
  // Window stats for the shore are as before: passed samples only.
  REQUIRE(w.stats.has_value());
  CHECK(w.stats->count == 2);
  CHECK(w.stats->basis == StatsBasis::used);
  REQUIRE(w.alert_stats.size() == 3);
  const MaskedStats* d = w.alert_stats_for(kDefaultDoubts);
  REQUIRE(d);
  REQUIRE(d->stats.has_value());
  CHECK(d->stats->count == 5);
  CHECK(d->stats->mean == Approx((8.0 + 8.2 + 6.0 + 6.2 + 7.0) / 5));
  CHECK(window_statistic(w, Statistic::mean, 1, kDefaultDoubts).value() == Approx(7.08));
  CHECK(window_statistic(w, Statistic::mean, 1, 0u).value() == Approx(8.1));  // [] : passed only
  CHECK(window_statistic(w, Statistic::max, 1, reason::spike | kDefaultDoubts).value() ==
        Approx(30.0));
  CHECK_FALSE(window_statistic(w, Statistic::mean, 6, kDefaultDoubts).has_value());  // min_count

  SECTION("a whole daytime window suspect for quenching still raises the alert") {
    std::vector<FlaggedSample> day;
    for (int i = 0; i < 10; ++i)
      day.push_back(fs(t + 60 * i, 7.5, Flag::suspect, reason::solar_quenching));
    WindowConfig wc;
    wc.alert_masks = alert_masks_for("pc", {rule()});
    const WindowSummary dw = build(day, wc);
    CHECK_FALSE(dw.stats.has_value());  // include_suspect false: no shore stats
    WindowSet set;
    set.start = dw.start;
    set.end = dw.end;
    set.channels.emplace_back("pc", dw);
    AlertEvaluator ev({rule()});
    std::vector<AlertEvent> events;
    ev.on_windows(set, events);
    REQUIRE(events.size() == 1);
    CHECK(events[0].change == AlertChange::raised);
    CHECK(events[0].to_name == "warning");
    CHECK(events[0].used_count == 10);
    // A rule accepting no doubt sees nothing in that window.
    AlertEvaluator strict({rule(0)});
    WindowConfig sc;
    sc.alert_masks = {0u};
    set.channels[0].second = build(day, sc);
    events.clear();
    strict.on_windows(set, events);
    CHECK(events.empty());
  }
}

TEST_CASE("alert_masks_for: distinct masks of the rules reading a channel, conditions included",
          "[alerts][doubts]") {
  AlertRule a = rule();
  AlertRule b = rule(0);
  b.name = "strict";
  b.channel = "chla";
  b.levels[0].conditions.push_back({"pc", Statistic::mean, Compare::above, 1.0});
  AlertRule c = rule();
  c.name = "again";
  CHECK(alert_masks_for("pc", {a, b, c}) == std::vector<std::uint32_t>{kDefaultDoubts, 0u});
  CHECK(alert_masks_for("chla", {a, b, c}) == std::vector<std::uint32_t>{0u});
  CHECK(alert_masks_for("temp", {a, b, c}).empty());
}

TEST_CASE("statistics without QC: not-evaluated samples give stats marked as such",
          "[window][basis]") {
  const std::int64_t t = kT0;
  WindowConfig c;
  c.median = true;
  c.alert_masks = {kDefaultDoubts};
  SECTION("only not-evaluated samples (no QC tests, or warm-up)") {
    const WindowSummary w = build(
        {fs(t, 2.0, Flag::not_evaluated), fs(t + 60, 4.0, Flag::not_evaluated, reason::warming_up),
         fs(t + 120, std::nullopt, Flag::missing, reason::no_reply)},
        c);
    REQUIRE(w.stats.has_value());
    CHECK(w.stats->basis == StatsBasis::not_evaluated);
    CHECK(w.stats->count == 2);
    CHECK(w.stats->mean == Approx(3.0));
    CHECK(*w.stats->median == Approx(3.0));
    CHECK(w.flag == Flag::not_evaluated);  // the window flag is unchanged by the fallback
    // Alerts never use them: nothing vouches for those values.
    CHECK_FALSE(window_statistic(w, Statistic::mean, 1, kDefaultDoubts).has_value());
    WindowSummary bare = w;
    bare.alert_stats.clear();  // a window built without masks falls back to its stats
    CHECK_FALSE(window_statistic(bare, Statistic::mean).has_value());
  }
  SECTION("one used sample wins over not-evaluated ones") {
    const WindowSummary w =
        build({fs(t, 2.0, Flag::not_evaluated), fs(t + 60, 5.0, Flag::pass)}, c);
    REQUIRE(w.stats.has_value());
    CHECK(w.stats->basis == StatsBasis::used);
    CHECK(w.stats->count == 1);
    CHECK(w.stats->mean == Approx(5.0));
  }
  SECTION("failed samples only: no stats, flag 4") {
    const WindowSummary w = build({fs(t, 2.0, Flag::fail, reason::late)}, c);
    CHECK_FALSE(w.stats.has_value());
    CHECK(w.flag == Flag::fail);
  }
}

namespace {

struct Feed {
  explicit Feed(AlertEvaluator e) : ev(std::move(e)) {}
  AlertEvaluator ev;
  std::size_t i = 0;
  std::vector<AlertEvent> events;
  // One window set with a pc window built from `samples` (times shifted to
  // the set's window), or no pc window at all when `present` is false.
  void step(const std::vector<FlaggedSample>& samples, bool present = true) {
    WindowSet set;
    set.start = kT0 + static_cast<std::int64_t>(i++) * kW;
    set.end = set.start + kW;
    if (present) {
      std::vector<FlaggedSample> s = samples;
      for (auto& x : s) x.t += set.start;
      WindowConfig c;
      c.alert_masks = {kDefaultDoubts};
      set.channels.emplace_back("pc", build(s, c));
    }
    ev.on_windows(set, events);
  }
};

std::vector<FlaggedSample> bloom(double v) {
  std::vector<FlaggedSample> s;
  for (int k = 0; k < 10; ++k) s.push_back(fs(60 * k, v, Flag::pass));
  return s;
}

}  // namespace

TEST_CASE("stale alerts: a raised level without a value for N windows goes stale, then resumes",
          "[alerts][stale]") {
  Feed f(AlertEvaluator({rule()}));
  f.step(bloom(8.0));  // raises warning
  REQUIRE(f.events.size() == 1);
  CHECK(f.ev.level(0) == 2);

  SECTION("all samples failed QC") {
    const std::vector<FlaggedSample> failed = {fs(0, 300.0, Flag::fail, reason::gross_range_sensor),
                                               fs(60, 300.0, Flag::fail, reason::flat_line)};
    f.step(failed);
    f.step(failed);
    CHECK(f.events.size() == 1);  // two windows without a value: not yet
    CHECK_FALSE(f.ev.stale(0));
    f.step(failed);  // the third: stale
    REQUIRE(f.events.size() == 2);
    const AlertEvent& e = f.events[1];
    CHECK(e.change == AlertChange::stale);
    CHECK(alert_change_name(e.change) == "stale");
    CHECK(e.stale_cause == StaleCause::all_failed_qc);
    CHECK(stale_cause_name(e.stale_cause) == "all_failed_qc");
    CHECK(e.from_level == 2);
    CHECK(e.to_level == 2);  // the level holds
    CHECK(e.used_count == 0);
    CHECK(f.ev.stale(0));
    CHECK(f.ev.level(0) == 2);
    f.step(failed);
    CHECK(f.events.size() == 2);  // once
    // Persisted and restored.
    const AlertSnapshot snap = f.ev.snapshot();
    AlertEvaluator again({rule()});
    again.restore(snap);
    CHECK(again.stale(0));
    CHECK(again.level(0) == 2);
    // Data return: resumed, then normal evaluation (5.0: below 6.7 - 0 -> lowered).
    f.step(bloom(5.0));
    REQUIRE(f.events.size() == 4);
    CHECK(f.events[2].change == AlertChange::resumed);
    CHECK(alert_change_name(f.events[2].change) == "resumed");
    CHECK(f.events[2].value == Approx(5.0));
    CHECK(f.events[2].stale_cause == StaleCause::none);
    CHECK(f.events[3].change == AlertChange::lowered);
    CHECK_FALSE(f.ev.stale(0));
  }
  SECTION("instrument offline: no window values and reason offline") {
    const std::vector<FlaggedSample> off = {fs(0, std::nullopt, Flag::missing, reason::offline)};
    for (int k = 0; k < 3; ++k) f.step(off);
    REQUIRE(f.events.size() == 2);
    CHECK(f.events[1].stale_cause == StaleCause::instrument_offline);
  }
  SECTION("no values (polls missed, or no window for the channel)") {
    f.step({fs(0, std::nullopt, Flag::missing, reason::timing_gap)});
    f.step({}, false);
    f.step({fs(0, std::nullopt, Flag::missing, reason::no_reply)});
    REQUIRE(f.events.size() == 2);
    CHECK(f.events[1].stale_cause == StaleCause::no_values);
  }
  SECTION("only not-evaluated values count as none usable") {
    for (int k = 0; k < 3; ++k) f.step({fs(0, 9.0, Flag::not_evaluated, reason::warming_up)});
    REQUIRE(f.events.size() == 2);
    CHECK(f.events[1].stale_cause == StaleCause::all_failed_qc);
  }
}

TEST_CASE("stale alerts: never at level 0, never with stale_windows 0", "[alerts][stale]") {
  Feed quiet(AlertEvaluator({rule()}));
  for (int k = 0; k < 10; ++k) quiet.step({fs(0, std::nullopt, Flag::missing, reason::offline)});
  CHECK(quiet.events.empty());

  AlertRule never = rule();
  never.stale_windows = 0;
  Feed f(AlertEvaluator({never}));
  f.step(bloom(8.0));
  for (int k = 0; k < 10; ++k) f.step({fs(0, std::nullopt, Flag::missing, reason::offline)});
  CHECK(f.events.size() == 1);
  CHECK_FALSE(f.ev.stale(0));
}
