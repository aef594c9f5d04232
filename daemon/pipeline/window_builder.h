// WindowBuilder: summarises one channel's flagged samples over windows aligned
// to UTC multiples of window_s, so that two stations' windows line up. Pure;
// not thread-safe.
//
// Rules:
//  - A window is [start, start + window_s) with start % window_s == 0.
//  - Windows follow each other while running; one is closed and emitted when
//    advance(t) learns that every sample before its end has been delivered, or
//    when a later sample arrives. A jump over whole windows emits each skipped
//    window empty (flag 9) up to max_empty_windows; further ones are counted in
//    counters().skipped_windows.
//  - start(t)/stop(t) cut windows short: the window holding t is marked
//    partial and its expected count covers only the time it was running.
//  - No window start is ever emitted twice. A sample older than the open
//    window is dropped and counted (counters().dropped_old). After a restart
//    (restore()) inside a window already emitted, the builder waits for the
//    next window; samples before it are dropped and counted.
//  - Stats (count, mean, min, max, sd, median, first/last time) are over the
//    used samples: those that passed (flag 1), and also suspect ones (3) if
//    include_suspect (basis `used`). A window with no used sample but with
//    not-evaluated samples (2) that carry values (a channel without QC tests,
//    or in warm-up) gets its stats over those instead, with basis
//    `not_evaluated` (codec/FORMAT.md's summary helper keeps the same rule).
//  - Alert stats: one set per accepted-doubts mask in config.alert_masks,
//    over the samples that passed and the suspect ones whose doubts are all in
//    the mask (accepted_for_alerts). Never over not-evaluated samples.
//  - Window flag: 9 if no sample carried a value; with used stats, 1 if at
//    least min_pass_fraction of the expected count passed, else 3; without
//    them (values but none used), 4 if any sample failed, else 3 if any was
//    suspect, else 2.
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <vector>

#include "config/settings/reasons.h"
#include "config/settings/window_settings.h"
#include "daemon/pipeline/sample.h"

namespace tarn::pipeline {

// Reason bits that are no doubt about a value: they say when it was taken.
inline constexpr std::uint32_t kNotDoubts = reason::clock_unsynced;

// Whether a sample counts in alert stats for the accepted-doubts mask
// `accept`: it has a value and passed, or it is suspect and every reason bit
// it carries (but kNotDoubts) is in `accept`.
bool accepted_for_alerts(const FlaggedSample& s, std::uint32_t accept);

// What a window's stats were computed over: its used samples, or, when it had
// none, its not-evaluated samples with values (see the rules above).
enum class StatsBasis : std::uint8_t { used = 0, not_evaluated = 1 };

struct WindowStats {
  std::uint32_t count = 0;
  double mean = 0, min = 0, max = 0, sd = 0;  // sd: sample standard deviation (0 for one sample)
  std::optional<double> median;
  std::int64_t first_t = 0, last_t = 0;
  StatsBasis basis = StatsBasis::used;
};

// Alert stats for one accepted-doubts mask; no stats when no sample counted.
struct MaskedStats {
  std::uint32_t accept = 0;
  std::optional<WindowStats> stats;
};

// WindowSummary::flag_counts is indexed by flag_slot() (codec/qartod_flag.h).

struct WindowSummary {
  std::int64_t start = 0;                           // aligned
  std::int64_t end = 0;                             // start + window_s
  std::int64_t covered_start = 0, covered_end = 0;  // the part the channel was running
  std::uint32_t expected_count = 0;
  std::array<std::uint32_t, 5> flag_counts{};  // pass, not_evaluated, suspect, fail, missing
  std::uint32_t reasons = 0;                   // OR of all samples' reasons
  std::optional<WindowStats> stats;
  std::vector<MaskedStats> alert_stats;  // one per WindowConfig::alert_masks, same order
  codec::Flag flag = codec::Flag::missing;
  bool partial = false;

  std::uint32_t count(codec::Flag f) const { return flag_counts[flag_slot(f)]; }
  // The alert stats for a mask; nullptr when the window has none for it.
  const MaskedStats* alert_stats_for(std::uint32_t accept) const;
  std::uint32_t total() const;
};

struct WindowCounters {
  std::uint64_t emitted = 0;
  std::uint64_t dropped_old = 0;
  std::uint64_t skipped_windows = 0;
};

// The window a WindowBuilder is filling (outside the class so that clang can
// use its default member initializers inside std::optional).
struct OpenWindow {
  std::int64_t start = 0, covered_start = 0;
  bool partial_start = false;
  std::array<std::uint32_t, 5> counts{};
  std::uint32_t reasons = 0;
  bool any_value = false;
};

// Running statistics of one set of values (Welford), with the values kept
// for the median when asked.
struct StatsAccumulator {
  std::uint32_t n = 0;
  double mean = 0, m2 = 0, min = 0, max = 0;
  std::int64_t first_t = 0, last_t = 0;
  std::vector<double> values;  // capacity reserved once; kept only with the median on
  void add(std::int64_t t, double v, bool keep, std::size_t cap);
  void clear();
  WindowStats result(bool median);  // REQUIRES: n > 0
};

class WindowBuilder {
 public:
  // REQUIRES: !check_window_config(config, poll_interval_s) (throws
  // std::invalid_argument otherwise).
  WindowBuilder(WindowConfig config, std::int64_t poll_interval_s);

  // Starts running at t. Implicit at the first push if not called.
  void start(std::int64_t t, std::vector<WindowSummary>& out);
  void push(const FlaggedSample& s, std::vector<WindowSummary>& out);
  // Every sample with a time before t has been delivered.
  void advance(std::int64_t t, std::vector<WindowSummary>& out);
  // Stops running at t: the window holding t is emitted, partial if cut short.
  void stop(std::int64_t t, std::vector<WindowSummary>& out);
  bool running() const { return open_.has_value(); }

  // End of the last emitted window (nullopt before the first); persist it so
  // that a restart never emits a window start twice.
  std::optional<std::int64_t> last_closed_end() const { return last_closed_end_; }
  // REQUIRES: not running.
  void restore(std::optional<std::int64_t> last_closed_end) { last_closed_end_ = last_closed_end; }

  const WindowCounters& counters() const { return counters_; }
  std::int64_t window_start_of(std::int64_t t) const;
  std::uint32_t expected_for(std::int64_t covered_s) const;
  std::size_t state_bytes() const;

 private:
  using Open = OpenWindow;
  void open_at(std::int64_t start, std::int64_t covered_start, bool partial);
  void close(std::int64_t covered_end, std::vector<WindowSummary>& out);
  void add(const FlaggedSample& s);

  WindowConfig config_;
  std::int64_t interval_;
  std::optional<Open> open_;
  std::optional<std::int64_t> last_closed_end_;
  // [0] used samples, [1] not-evaluated samples with values, [2 + k]
  // alert_masks[k].
  std::vector<StatsAccumulator> acc_;
  std::size_t values_cap_ = 0;
  WindowCounters counters_;
};

}  // namespace tarn::pipeline
