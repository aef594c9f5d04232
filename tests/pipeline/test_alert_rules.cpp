// Bloom alert rules on closed windows. Phycocyanin check values 3.4, 6.7 and
// 13.4 ug/L, the lowest level also requiring phycocyanin above chlorophyll:
// common practice in lake monitoring, no source. Level names are our own.
// CAUTION: alert levels support and never replace laboratory analysis and the
// decisions of the local health or water authority.
#include <catch2/catch.hpp>

#include <string>
#include <vector>

#include "daemon/pipeline/alert_rules.h"
#include "daemon/pipeline/channel_pipeline.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

constexpr std::int64_t kT0 = 1717200000;  // 2024-06-01 00:00 UTC, a multiple of 600
constexpr std::int64_t kW = 600;

AlertRule bloom_rule() {
  AlertRule r;
  r.name = "cyanobacteria";
  r.channel = "pc";
  r.statistic = Statistic::mean;
  AlertCondition pc_above_chla;
  pc_above_chla.channel = "chla";
  pc_above_chla.compare = Compare::below;  // chlorophyll below the phycocyanin value
  r.levels = {{"watch", 3.4, {pc_above_chla}}, {"warning", 6.7, {}}, {"bloom", 13.4, {}}};
  r.hysteresis = 0.5;
  r.raise_windows = 2;
  r.clear_windows = 2;
  r.renotify_s = 3600;
  return r;
}

struct Step {
  std::optional<double> pc;  // window mean; empty: no usable samples
  double chla;
};

// The scripted bloom, one entry per 10 min window; comments give the expected
// effect with persistence 2, hysteresis 0.5, clear persistence 2, re-notify 1 h.
const std::vector<Step> kScript = {
    {1.0, 5},          {1.0, 5},  {2.0, 5},
    {3.6, 5},          {3.6, 5},  // 3,4: above 3.4 but chlorophyll higher: watch does not qualify
    {3.6, 2},          {3.7, 2},  // 5,6: qualifies twice -> 6 raises watch
    {3.2, 2},                     // 7: below 3.4, above 2.9: holds
    {8.0, 2},          {3.6, 2},  // 8,9: a one-window blip above 6.7: no warning
    {5.0, 2},          {7.0, 2},  {7.2, 2},  // 12 raises warning
    {6.5, 2},          {7.0, 2},             // 13: holds (6.2 clear line)
    {14.0, 3},         {15.0, 3},            // 16 raises bloom
    {13.0, 3},         {14, 3},   {14, 3},
    {14, 3},           {14, 3},               // 17 holds; 18-21
    {14, 3},           {14, 3},   {14, 3},    // 22: reminder (1 h after 16)
    {std::nullopt, 3},                        // 25: no evidence, holds
    {14, 3},           {14, 3},   {14, 3},    // 28: reminder
    {14, 3},           {12.5, 3}, {13.5, 3},  // 30: below 12.9 once, 31 back above: no clearing
    {12.5, 3},         {12.7, 3},             // 33: twice below -> lowered to warning
    {8.0, 3},          {7.0, 3},  {6.5, 3},
    {6.0, 3},          {5.9, 3},             // 38: lowered to watch
    {3.0, 3},          {2.5, 3},  {2.4, 3},  // 41: cleared
    {1.0, 3},          {1.0, 3},  {1.0, 3},
};

WindowSummary window_with_mean(std::int64_t start, std::optional<double> mean) {
  WindowSummary w;
  w.start = start;
  w.end = start + kW;
  w.expected_count = 10;
  if (mean) {
    WindowStats s;
    s.count = 10;
    s.mean = s.min = s.max = *mean;
    s.median = *mean;
    w.stats = s;
    w.flag_counts[0] = 10;
    w.flag = Flag::pass;
  }
  return w;
}

WindowSet set_at(std::size_t i) {
  WindowSet s;
  s.start = kT0 + static_cast<std::int64_t>(i) * kW;
  s.end = s.start + kW;
  s.channels.emplace_back("pc", window_with_mean(s.start, kScript[i].pc));
  s.channels.emplace_back("chla", window_with_mean(s.start, kScript[i].chla));
  return s;
}

std::size_t window_index(const AlertEvent& e) {
  return static_cast<std::size_t>((e.window_start - kT0) / kW);
}

std::string describe(const std::vector<AlertEvent>& events) {
  std::string out;
  for (const auto& e : events) {
    out += std::to_string(window_index(e)) + ":" + std::string(alert_change_name(e.change)) + ":" +
           (e.from_name.empty() ? "-" : e.from_name) + ">" + (e.to_name.empty() ? "-" : e.to_name) +
           " ";
  }
  return out;
}

const std::string kExpected =
    "6:raised:->watch 12:raised:watch>warning 16:raised:warning>bloom "
    "22:reminder:bloom>bloom 28:reminder:bloom>bloom 33:lowered:bloom>warning "
    "38:lowered:warning>watch 41:cleared:watch>- ";

}  // namespace

TEST_CASE("alerts: a scripted bloom raises and clears each level exactly once", "[alert]") {
  AlertEvaluator ev({bloom_rule()});
  std::vector<AlertEvent> events;
  for (std::size_t i = 0; i < kScript.size(); ++i) ev.on_windows(set_at(i), events);
  CHECK(describe(events) == kExpected);
  CHECK(ev.level(0) == 0);

  // Evidence on the first raise: the value, the threshold, the window, and
  // the condition on the other channel.
  const AlertEvent& watch = events.at(0);
  CHECK(watch.rule == "cyanobacteria");
  CHECK(watch.channel == "pc");
  CHECK(watch.value == Approx(3.7));
  CHECK(watch.threshold == Approx(3.4));
  CHECK(watch.window_start == kT0 + 6 * kW);
  CHECK(watch.window_end == kT0 + 7 * kW);
  CHECK(watch.used_count == 10);
  REQUIRE(watch.conditions.size() == 1);
  CHECK(watch.conditions[0].channel == "chla");
  CHECK(watch.conditions[0].value == Approx(2.0));
  CHECK(watch.conditions[0].held);
  // Lowering gives the clear line it fell below: 13.4 - 0.5.
  CHECK(events.at(5).threshold == Approx(12.9));
  CHECK(events.at(5).value == Approx(12.7));
  // Reminders: exactly every 3600 s of window time while bloom stands.
  CHECK(events.at(4).window_end - events.at(3).window_end == 3600);
  CHECK(events.at(3).window_end - events.at(2).window_end == 3600);
}

TEST_CASE("alerts: a restart in the middle keeps the level and gives the same events", "[alert]") {
  for (std::size_t cut : {7u, 14u, 19u, 31u, 36u}) {
    AlertEvaluator first({bloom_rule()});
    std::vector<AlertEvent> events;
    for (std::size_t i = 0; i < cut; ++i) first.on_windows(set_at(i), events);
    const AlertSnapshot saved = first.snapshot();

    AlertEvaluator second({bloom_rule()});  // the daemon restarted
    const AlertRestoreReport rep = second.restore(saved);
    CHECK(rep.restored == 1);
    CHECK(rep.notes.empty());
    CHECK(second.level(0) == first.level(0));
    CHECK(second.level_name(0) == first.level_name(0));
    second.on_windows(set_at(cut - 1), events);  // a re-delivered window changes nothing
    for (std::size_t i = cut; i < kScript.size(); ++i) second.on_windows(set_at(i), events);
    INFO("cut at " << cut);
    CHECK(describe(events) == kExpected);
  }
}

TEST_CASE("alerts: restore reports rules that changed", "[alert]") {
  AlertSnapshot s;
  AlertRuleState gone;
  gone.rule = "old-rule";
  AlertRuleState high;
  high.rule = "cyanobacteria";
  high.level = 7;
  s.rules = {gone, high};
  AlertEvaluator ev({bloom_rule()});
  const auto rep = ev.restore(s);
  CHECK(rep.restored == 1);
  REQUIRE(rep.notes.size() == 2);
  CHECK(ev.level(0) == 3);
}

TEST_CASE("alerts: statistic choice and the rule check", "[alert]") {
  AlertRule r;
  r.name = "peak";
  r.channel = "pc";
  r.statistic = Statistic::max;
  r.levels = {{"high", 10.0, {}}};
  AlertEvaluator ev({r});
  WindowSet s;
  s.start = kT0;
  s.end = kT0 + kW;
  WindowSummary w = window_with_mean(kT0, 2.0);
  w.stats->max = 11.0;
  s.channels.emplace_back("pc", w);
  std::vector<AlertEvent> events;
  ev.on_windows(s, events);
  REQUIRE(events.size() == 1);
  CHECK(events[0].value == 11.0);

  AlertRule bad = bloom_rule();
  bad.levels[2].threshold = 5.0;  // not ascending
  bad.statistic = Statistic::median;
  bad.raise_windows = 0;
  const auto problems = check_alert_rules({bad}, {{"pc", false}, {"chla", false}});
  REQUIRE(problems.size() == 3);
  CHECK(problems[0].where == "/0/statistic");
  CHECK(problems[1].where == "/0/levels/2/threshold");
  CHECK(problems[2].where == "/0/raise_windows");
  CHECK(check_alert_rules({bloom_rule()}, {{"pc", false}, {"chla", false}}).empty());
  CHECK_THROWS_AS(AlertEvaluator({bad}), std::invalid_argument);
}

TEST_CASE("alerts: end to end from raw samples through QC, windows and the collator",
          "[alert][pipeline]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 200;
  SpikeParams sp;
  sp.suspect_threshold = 5;
  sp.fail_threshold = 10;
  TimingParams tp;
  WindowConfig wc;
  wc.window_s = kW;
  ChannelPipeline pc({"pc", config_with({tp, g, sp}), wc});
  ChannelPipeline chla({"chla", config_with({tp, g, sp}), wc});
  WindowCollator collator({"pc", "chla"});
  AlertEvaluator ev({bloom_rule()});
  std::vector<AlertEvent> events;
  ChannelPipeline::Output out;
  std::vector<WindowSet> sets;
  pc.start(kT0, out);
  chla.start(kT0, out);
  auto drain = [&](ChannelPipeline& p) {
    for (const auto& w : out.windows) collator.add(p.name(), w, sets);
    out.clear();
  };
  for (std::size_t i = 0; i < kScript.size(); ++i) {
    for (int k = 0; k < 10; ++k) {
      const std::int64_t t = kT0 + static_cast<std::int64_t>(i) * kW + k * 60;
      // A window without evidence: every phycocyanin poll unanswered.
      const std::optional<double> v = kScript[i].pc;
      pc.push({t, v, v ? 0u : reason::no_reply}, out);
      drain(pc);
      chla.push({t, kScript[i].chla, 0}, out);
      drain(chla);
    }
  }
  pc.stop(kT0 + static_cast<std::int64_t>(kScript.size()) * kW, out);
  drain(pc);
  chla.stop(kT0 + static_cast<std::int64_t>(kScript.size()) * kW, out);
  drain(chla);
  collator.flush(sets);
  for (const auto& s : sets) ev.on_windows(s, events);
  CHECK(sets.size() == kScript.size());
  // Steps between windows are single-sample changes the spike test judges
  // against neighbours; the window means stay those of the script.
  CHECK(describe(events) == kExpected);
}
