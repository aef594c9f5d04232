#include "config/pipeline_config.h"

#include <array>
#include <cmath>
#include <set>
#include <string_view>

#include "config/json_reader.h"
#include "config/settings/qc_params.h"
#include "config/settings/reason_names.h"
#include "config/settings/reasons.h"

namespace tarn::config {
namespace {

namespace pl = tarn::pipeline;

// Plain bounds for values in channel units: finite and far beyond any sensor.
constexpr double kBig = 1e9;
constexpr std::int64_t kWeek = 7 * 86400;
constexpr std::int64_t kManySamples = 100000;

constexpr std::array<std::string_view, 10> kKinds = {
    pl::GrossRangeParams::kind,     pl::ClimatologyParams::kind,
    pl::SpikeParams::kind,          pl::RateOfChangeParams::kind,
    pl::FlatLineParams::kind,       pl::AttenuatedSignalParams::kind,
    pl::TimingParams::kind,         pl::InstrumentStatusParams::kind,
    pl::SolarQuenchingParams::kind, pl::FoulingDriftParams::kind};

// The reason bits a driver reports (reasons.h, "set by the driver side") plus
// the clock's: the only bits an instrument_status test can see on a raw sample.
constexpr std::array<std::string_view, 7> kStatusReasons = {
    "no_reply",   "garbled",     "offline",       "instrument_status",
    "warming_up", "poll_missed", "clock_unsynced"};

// The doubts an alert rule may accept (accept_doubts): the reasons a QC test
// gives with a suspect flag.
constexpr std::array<std::string_view, 8> kDoubtReasons = {
    "gross_range_operator", "climatology",     "spike",        "rate_of_change", "flat_line",
    "attenuated",           "solar_quenching", "fouling_drift"};

template <std::size_t N>
std::string join(const std::array<std::string_view, N>& a) {
  std::string out;
  for (auto s : a) out += (out.empty() ? "" : ", ") + std::string(s);
  return out;
}

template <std::size_t N>
std::vector<std::string> as_strings(const std::array<std::string_view, N>& a) {
  return {a.begin(), a.end()};
}

std::string did_you_mean(const std::string& word, const std::vector<std::string>& names) {
  std::string near = closest_match(word, names);
  return near.empty() ? std::string() : " (did you mean \"" + near + "\"?)";
}

void count(ObjectReader& r, const std::string& key, std::uint32_t& out, std::int64_t min,
           std::int64_t max, Need need = Need::optional) {
  std::int64_t v = out;
  if (r.integer(key, v, min, max, need)) out = static_cast<std::uint32_t>(v);
}

void optional_number(ObjectReader& r, const std::string& key, std::optional<double>& out,
                     double min, double max) {
  double v = 0;
  if (r.number(key, v, min, max)) out = v;
}

// A list of reason names -> bits; each name must be one a driver reports.
void reason_bits(ObjectReader& r, const std::string& key, std::uint32_t& out) {
  const Json* a = r.array(key);
  if (!a) return;
  std::uint32_t bits = 0;
  bool ok = true;
  for (std::size_t i = 0; i < a->size(); ++i) {
    const std::string at = r.pointer_of(key) + "/" + std::to_string(i);
    const Json& v = (*a)[i];
    std::string name = v.is_string() ? v.get<std::string>() : std::string();
    bool known = false;
    for (auto n : kStatusReasons) known = known || n == name;
    if (!v.is_string()) {
      r.problems().add(at,
                       "is not a string; allowed: a reason name (" + join(kStatusReasons) + ")");
    } else if (!known) {
      r.problems().add(at, "is \"" + name + "\", not a reason a driver reports" +
                               did_you_mean(name, as_strings(kStatusReasons)) +
                               "; allowed: " + join(kStatusReasons));
    } else {
      bits |= *pl::reason_from_name(name);
      continue;
    }
    ok = false;
  }
  if (ok) out = bits;
}

// accept_doubts: a list of reason names -> bits; [] accepts no doubt.
void doubt_bits(ObjectReader& r, const std::string& key, std::uint32_t& out) {
  const Json* a = r.array(key);
  if (!a) return;
  std::uint32_t bits = 0;
  bool ok = true;
  for (std::size_t i = 0; i < a->size(); ++i) {
    const std::string at = r.pointer_of(key) + "/" + std::to_string(i);
    const Json& v = (*a)[i];
    const std::string name = v.is_string() ? v.get<std::string>() : std::string();
    bool known = false;
    for (auto n : kDoubtReasons) known = known || n == name;
    if (!v.is_string()) {
      r.problems().add(at, "is not a string; allowed: a reason name (" + join(kDoubtReasons) + ")");
      ok = false;
    } else if (!known) {
      r.problems().add(at, "is \"" + name + "\", not a doubt a rule can accept" +
                               did_you_mean(name, as_strings(kDoubtReasons)) +
                               "; allowed: " + join(kDoubtReasons));
      ok = false;
    } else {
      bits |= *pl::reason_from_name(name);
    }
  }
  if (ok) out = bits;
}

pl::GrossRangeParams read_gross_range(ObjectReader& r) {
  pl::GrossRangeParams p;
  r.number("sensor_min", p.sensor_min, -kBig, kBig, Need::required);
  r.number("sensor_max", p.sensor_max, -kBig, kBig, Need::required);
  optional_number(r, "operator_min", p.operator_min, -kBig, kBig);
  optional_number(r, "operator_max", p.operator_max, -kBig, kBig);
  return p;
}

pl::ClimatologyParams read_climatology(ObjectReader& r) {
  pl::ClimatologyParams p;
  const Json* a = r.array("ranges", Need::required);
  if (!a) return p;
  for (std::size_t i = 0; i < a->size(); ++i) {
    ObjectReader e((*a)[i], r.pointer_of("ranges") + "/" + std::to_string(i), r.problems());
    pl::ClimatologyRange range;
    e.integer("month", range.month, 1, 12, Need::required);
    e.number("min", range.min, -kBig, kBig, Need::required);
    e.number("max", range.max, -kBig, kBig, Need::required);
    e.finish();
    p.ranges.push_back(range);
  }
  return p;
}

pl::SpikeParams read_spike(ObjectReader& r) {
  pl::SpikeParams p;
  r.number("suspect_threshold", p.suspect_threshold, 0, kBig, Need::required);
  r.number("fail_threshold", p.fail_threshold, 0, kBig, Need::required);
  return p;
}

pl::RateOfChangeParams read_rate_of_change(ObjectReader& r) {
  pl::RateOfChangeParams p;
  r.number("n_dev", p.n_dev, 0, 100);
  r.integer("period_s", p.period_s, 1, kWeek);
  count(r, "min_count", p.min_count, 2, kManySamples);
  return p;
}

pl::FlatLineParams read_flat_line(ObjectReader& r) {
  pl::FlatLineParams p;
  count(r, "suspect_count", p.suspect_count, 2, 10000);
  count(r, "fail_count", p.fail_count, 2, 10000);
  r.number("tolerance", p.tolerance, 0, kBig, Need::required);
  return p;
}

pl::AttenuatedSignalParams read_attenuated(ObjectReader& r) {
  pl::AttenuatedSignalParams p;
  r.integer("period_s", p.period_s, 1, kWeek);
  std::string measure = "range";
  if (r.one_of("measure", measure, {"range", "sd"}))
    p.measure = measure == "sd" ? pl::VariationMeasure::sd : pl::VariationMeasure::range;
  optional_number(r, "suspect_below", p.suspect_below, 0, kBig);
  optional_number(r, "fail_below", p.fail_below, 0, kBig);
  count(r, "min_count", p.min_count, 2, kManySamples);
  return p;
}

pl::TimingParams read_timing(ObjectReader& r) {
  pl::TimingParams p;
  r.integer("late_s", p.late_s, 0, 43200);
  count(r, "max_fill", p.max_fill, 1, kManySamples);
  return p;
}

pl::InstrumentStatusParams read_instrument_status(ObjectReader& r) {
  pl::InstrumentStatusParams p;
  reason_bits(r, "fail_on", p.fail_on);
  reason_bits(r, "suspect_on", p.suspect_on);
  return p;
}

pl::SolarQuenchingParams read_solar_quenching(ObjectReader& r) {
  pl::SolarQuenchingParams p;
  r.number("suspect_above_deg", p.suspect_above_deg, -90, 90);
  return p;
}

pl::FoulingDriftParams read_fouling_drift(ObjectReader& r) {
  pl::FoulingDriftParams p;
  r.number("max_rise", p.max_rise, 0, kBig, Need::required);
  r.number("night_below_deg", p.night_below_deg, -90, 90);
  count(r, "min_night_samples", p.min_night_samples, 1, kManySamples);
  r.number("growth_fraction", p.growth_fraction, 0, 10);
  optional_number(r, "max_rise_per_night", p.max_rise_per_night, 0, kBig);
  return p;
}

std::optional<pl::QcTestParams> read_test_params(const std::string& kind, ObjectReader& r) {
  if (kind == pl::GrossRangeParams::kind) return read_gross_range(r);
  if (kind == pl::ClimatologyParams::kind) return read_climatology(r);
  if (kind == pl::SpikeParams::kind) return read_spike(r);
  if (kind == pl::RateOfChangeParams::kind) return read_rate_of_change(r);
  if (kind == pl::FlatLineParams::kind) return read_flat_line(r);
  if (kind == pl::AttenuatedSignalParams::kind) return read_attenuated(r);
  if (kind == pl::TimingParams::kind) return read_timing(r);
  if (kind == pl::InstrumentStatusParams::kind) return read_instrument_status(r);
  if (kind == pl::SolarQuenchingParams::kind) return read_solar_quenching(r);
  if (kind == pl::FoulingDriftParams::kind) return read_fouling_drift(r);
  return std::nullopt;
}

// One element of a channel's "qc" array. An unknown kind gives one problem and
// no test (its other keys are not reported: they belong to a test we do not know).
std::optional<pl::QcTestParams> read_test(const Json& j, const std::string& ptr, Problems& p) {
  ObjectReader r(j, ptr, p);
  std::string kind;
  if (!r.string("kind", kind, Need::required)) return std::nullopt;
  auto params = read_test_params(kind, r);
  if (!params) {
    p.add(r.pointer_of("kind"), "is \"" + kind + "\", not a QC test" +
                                    did_you_mean(kind, as_strings(kKinds)) +
                                    "; allowed: " + join(kKinds));
    return std::nullopt;
  }
  r.finish();
  return params;
}

pl::WindowConfig read_window(const StationConfig& cfg, const Channel& ch, Problems& p) {
  pl::WindowConfig w;
  w.window_s = cfg.sampling.window_s;
  if (ch.window.is_null()) return w;
  ObjectReader r(ch.window, ch.pointer + "/window", p);
  r.boolean("include_suspect", w.include_suspect);
  r.boolean("median", w.median);
  r.number("min_pass_fraction", w.min_pass_fraction, 0, 1);
  count(r, "max_empty_windows", w.max_empty_windows, 0, kManySamples);
  r.finish();
  return w;
}

std::string period_pointer(const Instrument& in) {
  return in.period_s ? in.pointer + "/period_s" : std::string("/sampling/period_s");
}

// The value at a relative JSON pointer `where` inside `root`, if any.
const Json* value_at(const Json& root, const std::string& where) {
  try {
    const Json::json_pointer jp(where);
    if (root.contains(jp)) return &root.at(jp);
  } catch (const Json::exception&) {
  }
  return nullptr;
}

// "is <value>; " for a scalar at `where` inside `root`, so that a problem from
// the pipeline's checks says what was found as well as what is allowed.
std::string found_at(const Json& root, const std::string& where) {
  const Json* v = value_at(root, where);
  return v && v->is_primitive() ? "is " + v->dump() + "; " : std::string("is not usable; ");
}

// Index of the list element a relative path starts with ("/3/x" -> 3).
std::optional<std::size_t> leading_index(std::string_view where) {
  if (where.size() < 2 || where[0] != '/') return std::nullopt;
  std::size_t i = 1, n = 0;
  for (; i < where.size() && where[i] >= '0' && where[i] <= '9'; ++i) n = n * 10 + (where[i] - '0');
  if (i == 1 || (i < where.size() && where[i] != '/')) return std::nullopt;
  return n;
}

// The tests of a channel's "qc" array, with, for each test read, the index of
// its element in the array (unknown kinds leave no test, so the two differ),
// and the elements whose reading gave problems.
struct ReadTests {
  std::vector<pl::QcTestParams> tests;
  std::vector<std::size_t> element;
  std::set<std::size_t> unread;
};

ReadTests read_tests(const Channel& ch, Problems& p) {
  ReadTests out;
  if (ch.qc.is_null()) return out;
  if (!ch.qc.is_array()) {
    p.add(ch.pointer + "/qc", "is not an array; allowed: a list of QC test objects");
    return out;
  }
  for (std::size_t i = 0; i < ch.qc.size(); ++i) {
    const std::size_t before = p.size();
    auto t = read_test(ch.qc[i], ch.pointer + "/qc/" + std::to_string(i), p);
    if (p.size() != before) out.unread.insert(i);
    if (!t) continue;
    out.tests.push_back(std::move(*t));
    out.element.push_back(i);
  }
  return out;
}

// The pipeline's own QC checks, with their paths ("/tests/N/...") turned into
// the file's pointers ("/instruments/I/channels/C/qc/M/..."). Elements that
// already had reading problems are skipped, so that a field the reader refused
// is not reported a second time.
void check_channel(const Instrument& in, const Channel& ch, const pl::ChannelConfig& c,
                   const ReadTests& read, Problems& p) {
  constexpr std::string_view tests = "/tests";
  for (const auto& q : pl::check_qc_config(c.qc)) {
    std::string_view w = q.where;
    if (w.rfind(tests, 0) == 0) {
      std::string_view rest = w.substr(tests.size());
      auto idx = leading_index(rest);
      if (!idx || *idx >= read.element.size()) {
        p.add(ch.pointer + "/qc", q.message);
        continue;
      }
      const std::size_t e = read.element[*idx];
      if (read.unread.count(e)) continue;
      const std::size_t slash = rest.find('/', 1);
      const std::string rel =
          "/" + std::to_string(e) +
          std::string(slash == std::string_view::npos ? "" : rest.substr(slash));
      p.add(ch.pointer + "/qc" + rel, found_at(ch.qc, rel) + q.message);
    } else if (w == "/poll_interval_s") {
      p.add(period_pointer(in), "is " + std::to_string(c.qc.poll_interval_s) + "; " + q.message);
    } else if (w.rfind("/location", 0) == 0) {
      p.add("/station", q.message + "; allowed: the station's latitude and longitude");
    } else {
      p.add(ch.pointer + "/qc", q.message);
    }
  }
  if (auto wp = pl::check_window_config(c.window, c.qc.poll_interval_s)) {
    std::string_view w = wp->where;
    if (w == "/window_s")
      p.add("/sampling/window_s",
            "is " + std::to_string(c.window.window_s) + "; " + wp->message + " of " + ch.pointer);
    else if (w == "/poll_interval_s")
      p.add(period_pointer(in), std::string(wp->message));
    else
      p.add(ch.pointer + "/window" + std::string(w),
            found_at(ch.window, std::string(w)) + wp->message);
  }
}

pl::Statistic read_statistic(ObjectReader& r) {
  std::string s = "mean";
  r.one_of("statistic", s, {"mean", "median", "max"});
  return s == "median" ? pl::Statistic::median
         : s == "max"  ? pl::Statistic::max
                       : pl::Statistic::mean;
}

pl::AlertCondition read_condition(const Json& j, const std::string& ptr, Problems& p) {
  ObjectReader r(j, ptr, p);
  pl::AlertCondition c;
  r.string("channel", c.channel, Need::required);
  c.statistic = read_statistic(r);
  std::string cmp;
  if (r.one_of("compare", cmp, {"above", "below"}, Need::required))
    c.compare = cmp == "above" ? pl::Compare::above : pl::Compare::below;
  optional_number(r, "value", c.value, -kBig, kBig);
  r.finish();
  return c;
}

pl::AlertLevel read_level(const Json& j, const std::string& ptr, Problems& p) {
  ObjectReader r(j, ptr, p);
  pl::AlertLevel l;
  r.string("name", l.name, Need::required);
  r.number("threshold", l.threshold, -kBig, kBig, Need::required);
  if (const Json* cs = r.array("conditions"))
    for (std::size_t i = 0; i < cs->size(); ++i)
      l.conditions.push_back(
          read_condition((*cs)[i], r.pointer_of("conditions") + "/" + std::to_string(i), p));
  r.finish();
  return l;
}

pl::AlertRule read_rule(const Json& j, const std::string& ptr, Problems& p) {
  ObjectReader r(j, ptr, p);
  pl::AlertRule rule;
  r.string("name", rule.name, Need::required);
  r.string("channel", rule.channel, Need::required);
  rule.statistic = read_statistic(r);
  if (const Json* ls = r.array("levels", Need::required))
    for (std::size_t i = 0; i < ls->size(); ++i)
      rule.levels.push_back(
          read_level((*ls)[i], r.pointer_of("levels") + "/" + std::to_string(i), p));
  r.number("hysteresis", rule.hysteresis, 0, kBig);
  count(r, "raise_windows", rule.raise_windows, 1, 1000);
  count(r, "clear_windows", rule.clear_windows, 1, 1000);
  r.integer("renotify_s", rule.renotify_s, 0, 30 * 86400);
  count(r, "min_count", rule.min_count, 1, kManySamples);
  doubt_bits(r, "accept_doubts", rule.accept_doubts);
  count(r, "stale_windows", rule.stale_windows, 0, 10000);
  r.finish();
  return rule;
}

// Rules whose reading gave problems (their indexes), for skipping their
// semantic checks; filled by read_rules.
std::vector<pl::AlertRule> read_rules(const StationConfig& cfg, Problems& p,
                                      std::set<std::size_t>& unread) {
  std::vector<pl::AlertRule> rules;
  if (cfg.alerts.is_null()) return rules;
  ObjectReader r(cfg.alerts, "/alerts", p);
  if (const Json* rs = r.array("rules", Need::required)) {
    for (std::size_t i = 0; i < rs->size(); ++i) {
      const std::size_t before = p.size();
      rules.push_back(read_rule((*rs)[i], "/alerts/rules/" + std::to_string(i), p));
      if (p.size() != before) unread.insert(i);
    }
  }
  r.finish();
  return rules;
}

std::string channel_list(const std::vector<pl::ChannelInfo>& channels) {
  std::string out;
  for (const auto& c : channels) out += (out.empty() ? "" : ", ") + c.name;
  return out.empty() ? "none" : out;
}

void check_alerts(const StationConfig& cfg, const std::vector<pl::AlertRule>& rules,
                  const std::vector<pl::ChannelInfo>& channels, const std::set<std::size_t>& unread,
                  Problems& p) {
  const Json empty;
  const Json& list =
      cfg.alerts.is_object() && cfg.alerts.contains("rules") ? cfg.alerts.at("rules") : empty;
  std::vector<std::string> names;
  for (const auto& c : channels) names.push_back(c.name);
  for (const auto& a : pl::check_alert_rules(rules, channels)) {
    auto idx = leading_index(a.where);
    if (idx && unread.count(*idx)) continue;
    std::string msg = found_at(list, a.where) + a.message;
    if (a.message.rfind("unknown channel", 0) == 0) {
      const Json* v = value_at(list, a.where);
      const std::string word = v && v->is_string() ? v->get<std::string>() : std::string();
      msg = "names channel \"" + word + "\", which is not defined" + did_you_mean(word, names) +
            "; defined channels: " + channel_list(channels);
    }
    p.add("/alerts/rules" + a.where, msg);
  }
}

// A rule needing more used samples than a window can hold never fires.
void check_min_counts(const std::vector<pl::AlertRule>& rules,
                      const std::vector<std::pair<std::string, std::int64_t>>& expected,
                      Problems& p) {
  for (std::size_t i = 0; i < rules.size(); ++i)
    for (const auto& [name, n] : expected)
      if (name == rules[i].channel && rules[i].min_count > n)
        p.add("/alerts/rules/" + std::to_string(i) + "/min_count",
              "is " + std::to_string(rules[i].min_count) + ", more than the " + std::to_string(n) +
                  " samples a window of channel \"" + name + "\" holds; allowed: 1 to " +
                  std::to_string(n));
}

// Everything but the tests and the window options.
pl::ChannelConfig base_config(const StationConfig& cfg, const Instrument& in, const Channel& ch) {
  pl::ChannelConfig c;
  c.name = ch.name;
  c.qc.poll_interval_s = in.period_s ? in.period_s : cfg.sampling.period_s;
  c.qc.location = pl::GeoPoint{cfg.station.latitude, cfg.station.longitude};
  return c;
}

}  // namespace

pipeline::ChannelConfig read_channel_pipeline(const StationConfig& cfg, const Instrument& in,
                                              const Channel& ch, Problems& problems) {
  pl::ChannelConfig c = base_config(cfg, in, ch);
  c.qc.tests = read_tests(ch, problems).tests;
  c.window = read_window(cfg, ch, problems);
  // The rules' problems go to the caller too: nothing read here is thrown away.
  std::set<std::size_t> unread;
  c.window.alert_masks = pl::alert_masks_for(ch.name, read_rules(cfg, problems, unread));
  return c;
}

std::vector<pipeline::AlertRule> read_alert_rules(const StationConfig& cfg, Problems& problems) {
  std::set<std::size_t> unread;
  return read_rules(cfg, problems, unread);
}

void check_pipeline(StationConfig& cfg, Problems& problems) {
  std::vector<pl::ChannelInfo> channels;
  std::vector<std::pair<std::string, std::int64_t>> expected;  // samples per window
  for (auto& in : cfg.instruments) {
    for (auto& ch : in.channels) {
      pl::ChannelConfig c = base_config(cfg, in, ch);
      ReadTests read = read_tests(ch, problems);
      c.qc.tests = read.tests;
      c.window = read_window(cfg, ch, problems);
      check_channel(in, ch, c, read, problems);
      channels.push_back({ch.name, c.window.median});
      if (c.qc.poll_interval_s > 0)
        expected.emplace_back(ch.name, c.window.window_s / c.qc.poll_interval_s);
      ch.pipeline = std::move(c);
    }
  }
  std::set<std::size_t> unread_rules;
  cfg.alert_rules = read_rules(cfg, problems, unread_rules);
  check_alerts(cfg, cfg.alert_rules, channels, unread_rules, problems);
  check_min_counts(cfg.alert_rules, expected, problems);
  for (auto& in : cfg.instruments)
    for (auto& ch : in.channels)
      ch.pipeline.window.alert_masks = pl::alert_masks_for(ch.name, cfg.alert_rules);
}

void validate_pipeline(const StationConfig& cfg, Problems& problems) {
  StationConfig copy = cfg;
  check_pipeline(copy, problems);
}

}  // namespace tarn::config
