#include "config/settings/window_settings.h"

namespace tarn::pipeline {

std::optional<WindowConfigProblem> check_window_config(const WindowConfig& c,
                                                       std::int64_t poll_interval_s) {
  if (c.window_s <= 0) return WindowConfigProblem{"/window_s", "must be > 0"};
  if (poll_interval_s <= 0) return WindowConfigProblem{"/poll_interval_s", "must be > 0"};
  if (c.window_s < poll_interval_s)
    return WindowConfigProblem{"/window_s", "must be >= the poll interval"};
  if (c.window_s > 7 * 86400) return WindowConfigProblem{"/window_s", "must be <= 604800 (7 days)"};
  if (!(c.min_pass_fraction >= 0 && c.min_pass_fraction <= 1))
    return WindowConfigProblem{"/min_pass_fraction", "must be 0..1"};
  return std::nullopt;
}

}  // namespace tarn::pipeline
