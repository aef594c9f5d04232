#include "daemon/pipeline/window_collator.h"

#include <algorithm>

namespace tarn::pipeline {

const WindowSummary* WindowSet::find(std::string_view channel) const {
  for (const auto& [name, w] : channels)
    if (name == channel) return &w;
  return nullptr;
}

WindowCollator::WindowCollator(std::vector<std::string> channels, std::size_t max_pending)
    : channels_(std::move(channels)),
      latest_(channels_.size(), 0),
      seen_(channels_.size(), false),
      max_pending_(max_pending ? max_pending : 1) {}

void WindowCollator::add(std::string_view channel, const WindowSummary& w,
                         std::vector<WindowSet>& out) {
  const auto it = std::find(channels_.begin(), channels_.end(), channel);
  if (it == channels_.end() || (released_any_ && w.start <= last_released_)) {
    ++dropped_;
    return;
  }
  const auto i = static_cast<std::size_t>(it - channels_.begin());
  if (seen_[i] && w.start <= latest_[i]) {
    ++dropped_;
    return;
  }
  seen_[i] = true;
  latest_[i] = w.start;
  auto pos = std::find_if(pending_.begin(), pending_.end(),
                          [&](const WindowSet& s) { return s.start >= w.start; });
  if (pos == pending_.end() || pos->start != w.start) {
    WindowSet s;
    s.start = w.start;
    s.end = w.end;
    pos = pending_.insert(pos, std::move(s));
  }
  pos->channels.emplace_back(std::string(channel), w);
  release_ready(out);
}

void WindowCollator::release_ready(std::vector<WindowSet>& out) {
  while (!pending_.empty()) {
    const std::int64_t s = pending_.front().start;
    bool ready = true;
    for (std::size_t i = 0; i < channels_.size(); ++i)
      if (!seen_[i] || latest_[i] < s) ready = false;
    if (!ready && pending_.size() <= max_pending_) return;
    out.push_back(std::move(pending_.front()));
    pending_.pop_front();
    released_any_ = true;
    last_released_ = s;
  }
}

void WindowCollator::flush(std::vector<WindowSet>& out) {
  while (!pending_.empty()) {
    released_any_ = true;
    last_released_ = pending_.front().start;
    out.push_back(std::move(pending_.front()));
    pending_.pop_front();
  }
}

}  // namespace tarn::pipeline
