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
//    samples that passed (flag 1), and also suspect ones (3) if
//    include_suspect.
//  - Window flag: 9 if no sample carried a value; with stats, 1 if at least
//    min_pass_fraction of the expected count passed, else 3; without stats
//    (values but none usable), 4 if any sample failed, else 3 if any was
//    suspect, else 2.
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <vector>

#include "daemon/pipeline/sample.h"

namespace tarn::pipeline {

struct WindowConfig {
  std::int64_t window_s = 600;
  bool include_suspect = false;
  bool median = false;             // keep values to give the median (alerts on median)
  double min_pass_fraction = 0.5;  // common practice, no source
  std::uint32_t max_empty_windows = 144;
};

// "/window_s: must be a positive multiple of ..." style problems; empty if usable.
struct WindowConfigProblem {
  const char* where;
  const char* message;
};
std::optional<WindowConfigProblem> check_window_config(const WindowConfig& c,
                                                       std::int64_t poll_interval_s);

struct WindowStats {
  std::uint32_t count = 0;
  double mean = 0, min = 0, max = 0, sd = 0;  // sd: sample standard deviation (0 for one sample)
  std::optional<double> median;
  std::int64_t first_t = 0, last_t = 0;
};

// WindowSummary::flag_counts is indexed by flag_index() (sample.h).

struct WindowSummary {
  std::int64_t start = 0;                           // aligned
  std::int64_t end = 0;                             // start + window_s
  std::int64_t covered_start = 0, covered_end = 0;  // the part the channel was running
  std::uint32_t expected_count = 0;
  std::array<std::uint32_t, 5> flag_counts{};  // pass, not_evaluated, suspect, fail, missing
  std::uint32_t reasons = 0;                   // OR of all samples' reasons
  std::optional<WindowStats> stats;
  Flag flag = Flag::missing;
  bool partial = false;

  std::uint32_t count(Flag f) const { return flag_counts[flag_index(f)]; }
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
  std::uint32_t used = 0;
  double mean = 0, m2 = 0, min = 0, max = 0;
  std::int64_t first_t = 0, last_t = 0;
  bool any_value = false;
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
  std::size_t state_bytes() const { return sizeof(*this) + values_.capacity() * sizeof(double); }

 private:
  using Open = OpenWindow;
  void open_at(std::int64_t start, std::int64_t covered_start, bool partial);
  void close(std::int64_t covered_end, std::vector<WindowSummary>& out);
  void add(const FlaggedSample& s);

  WindowConfig config_;
  std::int64_t interval_;
  std::optional<Open> open_;
  std::optional<std::int64_t> last_closed_end_;
  std::vector<double> values_;  // used values of the open window, when median is on
  std::size_t values_cap_ = 0;
  WindowCounters counters_;
};

}  // namespace tarn::pipeline
