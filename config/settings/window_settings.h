// Window settings of one channel: how its windows summarise (config/README.md,
// "Channel window"), as a plain struct the config fills and the pipeline's
// WindowBuilder (daemon/pipeline/window_builder.h) runs. Pure; standard
// library only.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

namespace tarn::pipeline {

struct WindowConfig {
  std::int64_t window_s = 600;
  bool include_suspect = false;
  bool median = false;             // keep values to give the median (alerts on median)
  double min_pass_fraction = 0.5;  // common practice, no source
  std::uint32_t max_empty_windows = 144;
  // Accepted-doubt masks (reason bits) of the alert rules that read this
  // channel, each once; the builder keeps alert stats per mask.
  std::vector<std::uint32_t> alert_masks;
};

// "/window_s: must be a positive multiple of ..." style problems; empty if usable.
struct WindowConfigProblem {
  const char* where;
  const char* message;
};
std::optional<WindowConfigProblem> check_window_config(const WindowConfig& c,
                                                       std::int64_t poll_interval_s);

}  // namespace tarn::pipeline
