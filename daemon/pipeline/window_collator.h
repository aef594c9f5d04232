// WindowCollator: gathers the closed windows of a station's channels into one
// set per window start, for the alert rules, which compare channels. A set is
// released when every channel has delivered that window or a later one, or
// when more than max_pending sets wait (a stopped channel must not hold the
// alerts back); sets are released in start order, each start once. Pure; not
// thread-safe.
#pragma once

#include <cstdint>
#include <deque>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "daemon/pipeline/window_builder.h"

namespace tarn::pipeline {

struct WindowSet {
  std::int64_t start = 0, end = 0;
  std::vector<std::pair<std::string, WindowSummary>> channels;
  // nullptr when the channel has no window in this set.
  const WindowSummary* find(std::string_view channel) const;
};

class WindowCollator {
 public:
  explicit WindowCollator(std::vector<std::string> channels, std::size_t max_pending = 4);

  // Unknown channels and windows at or before the last released start are
  // dropped and counted.
  void add(std::string_view channel, const WindowSummary& w, std::vector<WindowSet>& out);
  // Releases everything pending (e.g. at stop).
  void flush(std::vector<WindowSet>& out);
  std::uint64_t dropped() const { return dropped_; }

 private:
  void release_ready(std::vector<WindowSet>& out);
  std::vector<std::string> channels_;
  std::vector<std::int64_t> latest_;  // latest window start per channel
  std::vector<bool> seen_;
  std::deque<WindowSet> pending_;  // ascending start
  std::size_t max_pending_;
  bool released_any_ = false;
  std::int64_t last_released_ = 0;
  std::uint64_t dropped_ = 0;
};

}  // namespace tarn::pipeline
