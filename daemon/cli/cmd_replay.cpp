// tarn replay --config FILE INPUT: runs the configured pipeline (QC, windows,
// alert rules) over a recorded series of calibrated values and prints JSON
// Lines, or with --summary per-channel flag counts and the alert timeline.
// It drives the daemon's own WindowAssembler (daemon/core/window_assembler.h)
// with the input's times: no clock, port, store or socket; instruments'
// calibrations are not applied (the input is already calibrated).
//
// Time: samples are pushed in time order (a stable sort, so a channel's own
// order is kept); between them the pipeline is advanced at every half period
// as the station's tick does, so windows close and the timing test
// synthesises missing polls as it would on the station. At the end the
// pipeline is stopped one period after the last sample: an open window is
// closed as partial.
#include <algorithm>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <iterator>
#include <map>
#include <sstream>

#include <nlohmann/json.hpp>

#include "config/series_input.h"
#include "config/settings/reason_names.h"
#include "daemon/cli/command.h"
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"
#include "daemon/core/window_assembler.h"
#include "drivers/os/utc_text.h"

namespace {

using json = nlohmann::ordered_json;  // keys in the order written: "record" first
using tarn::os::format_utc;
namespace pl = tarn::pipeline;

constexpr const char* kUsage =
    "usage: tarn replay --config FILE [--summary] [--maintenance START/END]... INPUT\n"
    "Runs the config's QC tests, windows and alert rules over a recorded series of\n"
    "calibrated values and prints one JSON object per line (samples, windows, alerts).\n"
    "INPUT: CSV with the header time,channel,value or JSON Lines {\"t\":..,\"ch\":..,\"v\":..};\n"
    "'-' reads standard input. Times: ISO 8601 UTC (2026-06-20T12:00:00Z) or epoch seconds.\n"
    "--summary prints per-channel flag counts and the alert level timeline instead.\n"
    "--maintenance START/END (ISO 8601 UTC) marks a maintenance period; repeatable.\n";

json reason_names(std::uint32_t bits) {
  json a = json::array();
  for (int b = 0; b < 32; ++b) {
    const std::uint32_t bit = 1u << b;
    if (!(bits & bit)) continue;
    std::string_view n = pl::reason_name(bit);
    a.push_back(n.empty() ? "bit" + std::to_string(b) : std::string(n));
  }
  return a;
}

json counts_json(const std::array<std::uint32_t, 5>& c) {
  return {{"pass", c[0]},
          {"not_evaluated", c[1]},
          {"suspect", c[2]},
          {"fail", c[3]},
          {"missing", c[4]}};
}

json sample_json(const std::string& ch, const pl::FlaggedSample& s) {
  return {{"record", "sample"},
          {"t", format_utc(s.t)},
          {"ch", ch},
          {"v", s.value ? json(*s.value) : json(nullptr)},
          {"flag", int(s.flag)},
          {"reasons", reason_names(s.reasons)}};
}

json window_json(const std::string& ch, const pl::WindowSummary& w) {
  json j = {{"record", "window"},
            {"start", format_utc(w.start)},
            {"end", format_utc(w.end)},
            {"channel", ch},
            {"flag", int(w.flag)},
            {"partial", w.partial},
            {"expected", w.expected_count},
            {"counts", counts_json(w.flag_counts)},
            {"reasons", reason_names(w.reasons)}};
  if (w.stats) {
    j["count"] = w.stats->count;
    j["mean"] = w.stats->mean;
    j["min"] = w.stats->min;
    j["max"] = w.stats->max;
    j["sd"] = w.stats->sd;
    if (w.stats->median) j["median"] = *w.stats->median;
  }
  return j;
}

json alert_json(const pl::AlertEvent& e) {
  json conds = json::array();
  for (auto& c : e.conditions)
    conds.push_back({{"channel", c.channel},
                     {"statistic", std::string(pl::statistic_name(c.statistic))},
                     {"value", c.value ? json(*c.value) : json(nullptr)},
                     {"held", c.held}});
  return {{"record", "alert"},
          {"rule", e.rule},
          {"channel", e.channel},
          {"change", std::string(pl::alert_change_name(e.change))},
          {"level", e.to_level},
          {"level_name", e.to_name},
          {"previous_level", e.from_level},
          {"previous_level_name", e.from_name},
          {"statistic", std::string(pl::statistic_name(e.statistic))},
          {"value", e.value},
          {"threshold", e.threshold},
          {"used_count", e.used_count},
          {"stale_cause", e.change == pl::AlertChange::stale
                              ? json(std::string(pl::stale_cause_name(e.stale_cause)))
                              : json(nullptr)},
          {"window_start", format_utc(e.window_start)},
          {"window_end", format_utc(e.window_end)},
          {"conditions", conds}};
}

json cleaning_json(const std::string& channel, const tarn::codec::CleaningRecord& c) {
  return {{"record", "cleaning"},
          {"ch", channel},
          {"maintenance_start", format_utc(c.maintenance_start)},
          {"maintenance_end", format_utc(c.maintenance_end)},
          {"before", c.before ? json(*c.before) : json(nullptr)},
          {"n_before", c.n_before},
          {"after", c.after ? json(*c.after) : json(nullptr)},
          {"n_after", c.n_after}};
}

struct Period {
  std::int64_t start = 0, end = 0;
};

std::optional<std::int64_t> parse_time_arg(const std::string& s) {
  if (auto t = tarn::config::parse_iso_utc(s)) return t;
  return tarn::os::parse_utc(s);
}

// Per-channel flag counts and the alert timeline for --summary.
struct Summary {
  std::vector<std::array<std::uint64_t, 5>> flags;
  std::vector<std::map<std::string, std::uint64_t>> reasons;
  std::uint64_t windows = 0, partial_windows = 0;
  std::vector<pl::AlertEvent> alerts;
  std::vector<std::pair<std::string, tarn::codec::CleaningRecord>> cleanings;
};

class Replay {
 public:
  Replay(const tarn::config::StationConfig& cfg, tarn::codec::Manifest m, bool summary)
      : assembler_(cfg, std::move(m)), summary_mode_(summary) {
    for (auto& in : cfg.instruments)
      for (auto& ch : in.channels) names_.push_back(ch.name);
    sum_.flags.resize(names_.size());
    sum_.reasons.resize(names_.size());
  }
  const std::vector<std::string>& names() const { return names_; }
  tarn::daemon::WindowAssembler& assembler() { return assembler_; }
  tarn::daemon::AssemblerOutput& out() { return out_; }
  const Summary& summary() const { return sum_; }

  // Prints (or counts) what the last call produced and clears it.
  void emit() {
    for (auto& s : out_.samples) {
      if (summary_mode_) {
        sum_.flags[s.channel][tarn::codec::flag_slot(s.sample.flag)]++;
        for (int b = 0; b < 32; ++b)
          if (s.sample.reasons & (1u << b)) {
            std::string_view n = pl::reason_name(1u << b);
            sum_.reasons[s.channel][n.empty() ? "bit" + std::to_string(b) : std::string(n)]++;
          }
      } else {
        line(sample_json(names_[s.channel], s.sample));
      }
    }
    for (auto& set : out_.window_sets)
      for (auto& [name, w] : set.channels) {
        if (summary_mode_) {
          sum_.windows++;
          sum_.partial_windows += w.partial;
        } else {
          line(window_json(name, w));
        }
      }
    for (auto& c : out_.cleanings) {
      if (summary_mode_)
        sum_.cleanings.push_back({names_[c.channel], c});
      else
        line(cleaning_json(names_[c.channel], c));
    }
    for (auto& a : out_.alerts) {
      if (summary_mode_)
        sum_.alerts.push_back(a);
      else
        line(alert_json(a));
    }
    out_.clear();
  }

 private:
  static void line(const json& j) {
    std::string s = j.dump();
    s += '\n';
    std::fwrite(s.data(), 1, s.size(), stdout);
  }
  tarn::daemon::WindowAssembler assembler_;
  tarn::daemon::AssemblerOutput out_;
  std::vector<std::string> names_;
  bool summary_mode_;
  Summary sum_;
};

std::string level_text(const std::string& name, std::uint32_t level) {
  return level == 0 ? std::string("none") : name;
}

void print_summary(const std::string& file, const std::string& how,
                   const std::vector<std::string>& names, const Summary& s,
                   const tarn::daemon::WindowAssembler& a, std::size_t n, std::int64_t first,
                   std::int64_t last) {
  std::printf("replay of %s (%s): %zu input samples from %s to %s\n", file.c_str(), how.c_str(), n,
              format_utc(first).c_str(), format_utc(last).c_str());
  std::printf("%-16s %8s %8s %8s %8s %8s %8s  %s\n", "channel", "samples", "pass(1)", "n/e(2)",
              "susp(3)", "fail(4)", "miss(9)", "reasons (samples)");
  for (std::size_t i = 0; i < names.size(); ++i) {
    const auto& f = s.flags[i];
    std::string r;
    for (auto& [name, count] : s.reasons[i])
      r += (r.empty() ? "" : ", ") + name + " " + std::to_string(count);
    std::printf("%-16s %8llu %8llu %8llu %8llu %8llu %8llu  %s\n", names[i].c_str(),
                (unsigned long long)(f[0] + f[1] + f[2] + f[3] + f[4]), (unsigned long long)f[0],
                (unsigned long long)f[1], (unsigned long long)f[2], (unsigned long long)f[3],
                (unsigned long long)f[4], r.empty() ? "-" : r.c_str());
  }
  std::printf("windows: %llu channel windows, %llu partial\n", (unsigned long long)s.windows,
              (unsigned long long)s.partial_windows);
  for (auto& [ch, c] : s.cleanings) {
    auto v = [](const std::optional<double>& x) {
      char b[32] = "-";
      if (x) std::snprintf(b, sizeof b, "%.3f", *x);
      return std::string(b);
    };
    std::printf("cleaning of %s after %s: median %s before (%u values), %s after (%u values)\n",
                ch.c_str(), format_utc(c.maintenance_end).c_str(), v(c.before).c_str(),
                unsigned(c.n_before), v(c.after).c_str(), unsigned(c.n_after));
  }
  std::map<std::string, std::uint32_t> top;
  std::map<std::string, std::string> top_name;
  std::size_t reminders = 0;
  for (auto& e : s.alerts) reminders += e.change == pl::AlertChange::reminder;
  std::printf("alert level timeline: %zu change%s (and %zu reminder%s while a level stood)\n",
              s.alerts.size() - reminders, s.alerts.size() - reminders == 1 ? "" : "s", reminders,
              reminders == 1 ? "" : "s");
  for (auto& e : s.alerts) {
    if (e.change == pl::AlertChange::reminder) continue;
    std::printf("  %s  %-16s %-9s %s -> %s  (%s %s %g)\n", format_utc(e.window_start).c_str(),
                e.rule.c_str(), std::string(pl::alert_change_name(e.change)).c_str(),
                level_text(e.from_name, e.from_level).c_str(),
                level_text(e.to_name, e.to_level).c_str(),
                std::string(pl::statistic_name(e.statistic)).c_str(), e.channel.c_str(), e.value);
    if (e.to_level > top[e.rule]) {
      top[e.rule] = e.to_level;
      top_name[e.rule] = e.to_name;
    }
  }
  for (auto& [rule, level] : a.alert_levels())
    std::printf("rule %s: highest level %s, at the end %s\n", rule.c_str(),
                top[rule] ? top_name[rule].c_str() : "none",
                level.empty() ? "none" : level.c_str());
}

int run_replay(const tarn::cli::Args& args) {
  using namespace tarn;
  cli::Options o(args, {"config", "maintenance"}, {"help", "summary"});
  if (!o.ok() || o.has("help") || !o.has("config") || o.positional().size() != 1) {
    std::string why = o.error();
    if (why.empty() && !o.has("help"))
      why = !o.has("config") ? "tarn replay: --config FILE is required"
                             : "tarn replay: one INPUT (a file or '-') is required";
    std::fprintf(o.has("help") ? stdout : stderr, "%s%s%s", why.c_str(), why.empty() ? "" : "\n",
                 kUsage);
    return o.has("help") ? 0 : cli::ex_usage;
  }
  std::vector<Period> periods;
  for (auto& m : o.get_all("maintenance")) {
    auto slash = m.find('/');
    std::optional<std::int64_t> a, b;
    if (slash != std::string::npos) {
      a = parse_time_arg(m.substr(0, slash));
      b = parse_time_arg(m.substr(slash + 1));
    }
    if (!a || !b || *b <= *a) {
      std::fprintf(stderr,
                   "tarn replay: --maintenance %s is not a period; allowed: START/END in ISO 8601 "
                   "UTC with END after START, like 2026-06-20T08:00:00Z/2026-06-20T09:30:00Z\n",
                   m.c_str());
      return cli::ex_usage;
    }
    periods.push_back({*a, *b});
  }
  std::sort(periods.begin(), periods.end(),
            [](const Period& x, const Period& y) { return x.start < y.start; });
  for (std::size_t i = 1; i < periods.size(); ++i)
    if (periods[i].start < periods[i - 1].end) {
      std::fprintf(stderr,
                   "tarn replay: --maintenance periods overlap (%s and %s); allowed: periods "
                   "that do not overlap\n",
                   format_utc(periods[i - 1].start).c_str(), format_utc(periods[i].start).c_str());
      return cli::ex_usage;
    }

  const std::string file = o.get("config");
  auto res = daemon::load_and_check(file);
  if (!res.config) {
    std::fputs(res.problems.render(file).c_str(), stderr);
    std::fprintf(stderr, "%s: %zu problem%s; nothing was replayed\n", file.c_str(),
                 res.problems.size(), res.problems.size() == 1 ? "" : "s");
    return cli::ex_config;
  }
  const config::StationConfig& cfg = *res.config;
  auto manifest = daemon::manifest_of_config(cfg);
  if (!manifest) {
    std::fprintf(stderr, "%s: %s\n", file.c_str(), manifest.error().message.c_str());
    return cli::ex_config;
  }

  const std::string input = o.positional()[0];
  const std::string shown = input == "-" ? std::string("stdin") : input;
  std::string text;
  if (input == "-") {
    text.assign(std::istreambuf_iterator<char>(std::cin), std::istreambuf_iterator<char>());
  } else {
    std::ifstream f(input, std::ios::binary);
    if (!f) {
      std::fprintf(stderr, "%s: cannot be read; allowed: a readable file, or '-' for stdin\n",
                   input.c_str());
      return cli::ex_noinput;
    }
    std::ostringstream ss;
    ss << f.rdbuf();
    text = ss.str();
  }
  const auto choice = config::choose_series_format(input == "-" ? "" : input, text);
  const std::string how =
      std::string(config::series_format_name(choice.format)) + ", " + choice.how;
  auto parsed = config::parse_series(text, choice.format);
  text.clear();
  text.shrink_to_fit();
  if (parsed.error) {
    std::fprintf(stderr, "%s:%zu: %s (read as %s)\n", shown.c_str(), parsed.error->line,
                 parsed.error->message.c_str(), how.c_str());
    return cli::ex_dataerr;
  }
  auto& in = parsed.input;
  if (in.records.empty()) {
    std::fprintf(stderr, "%s:1: no samples (read as %s); allowed: at least one sample line\n",
                 shown.c_str(), how.c_str());
    return cli::ex_dataerr;
  }

  Replay r(cfg, std::move(manifest).value(), o.has("summary"));
  // Input channel index -> config channel index.
  std::vector<std::size_t> map(in.channels.size());
  for (std::size_t i = 0; i < in.channels.size(); ++i) {
    auto it = std::find(r.names().begin(), r.names().end(), in.channels[i]);
    if (it == r.names().end()) {
      std::size_t line = 0;
      for (auto& rec : in.records)
        if (rec.channel == i) {
          line = rec.line;
          break;
        }
      std::string allowed;
      for (auto& n : r.names()) allowed += (allowed.empty() ? "" : ", ") + n;
      std::fprintf(stderr, "%s:%zu: channel \"%s\" is not in %s; allowed: %s\n", shown.c_str(),
                   line, in.channels[i].c_str(), file.c_str(), allowed.c_str());
      return cli::ex_dataerr;
    }
    map[i] = std::size_t(it - r.names().begin());
  }
  std::fprintf(stderr, "tarn replay: %s read as %s: %zu samples of %zu channels\n", shown.c_str(),
               how.c_str(), in.records.size(), in.channels.size());

  auto& recs = in.records;
  std::stable_sort(
      recs.begin(), recs.end(),
      [](const config::SeriesRecord& a, const config::SeriesRecord& b) { return a.t < b.t; });
  const std::int64_t p = cfg.sampling.period_s;
  const std::int64_t first = recs.front().t, last = recs.back().t;
  auto& a = r.assembler();
  std::size_t next_period = 0;
  bool in_maintenance = false;
  // Maintenance starts and ends that fall at or before t.
  auto maintenance_until = [&](std::int64_t t) {
    while (next_period < periods.size()) {
      const Period& mp = periods[next_period];
      if (!in_maintenance && mp.start <= t) {
        a.set_maintenance(mp.start, {std::string()});
        in_maintenance = true;
      }
      if (in_maintenance && mp.end <= t) {
        a.set_maintenance(mp.end, {});
        in_maintenance = false;
        ++next_period;
        continue;
      }
      break;
    }
  };
  auto floor_div = [](std::int64_t x, std::int64_t y) {
    return x / y - ((x % y != 0) && ((x < 0) != (y < 0)));
  };
  std::int64_t tick = floor_div(first, p) * p + p / 2;
  if (tick <= first) tick += p;
  auto ticks_before = [&](std::int64_t t) {
    for (; tick < t; tick += p) {
      maintenance_until(tick);
      a.advance(tick, r.out());
      r.emit();
    }
  };

  maintenance_until(first);
  a.start(first, r.out());
  r.emit();
  for (std::size_t i = 0; i < recs.size();) {
    const std::int64_t t = recs[i].t;
    ticks_before(t);
    maintenance_until(t);
    for (; i < recs.size() && recs[i].t == t; ++i) {
      pl::RawSample raw{t, recs[i].value, 0};
      a.push(map[recs[i].channel], raw, r.out());
    }
    r.emit();
  }
  const std::int64_t end = last + p;
  ticks_before(end);
  maintenance_until(end);
  a.stop(end, r.out());
  r.emit();
  if (o.has("summary"))
    print_summary(shown, how, r.names(), r.summary(), a, recs.size(), first, last);
  std::fflush(stdout);
  if (std::ferror(stdout)) {
    std::fprintf(stderr, "tarn replay: writing the output failed\n");
    return cli::ex_ioerr;
  }
  return 0;
}

}  // namespace

TARN_COMMAND(replay, "run the configured QC, windows and alerts over a recorded series",
             run_replay);
