// ChannelPipeline: one channel's ChannelQc feeding its WindowBuilder, the unit
// the daemon drives. Raw samples in; flagged samples (for the archive) and
// closed windows (for the codec and the alert rules) out. Pure; not
// thread-safe.
//
// Window closing: a window closes as soon as every sample before its end has
// been settled by QC, i.e. when the first poll after its end arrives (the
// spike test's look-ahead settles the window's last sample), or when advance()
// finds that poll overdue, or on stop().
// A QC break (a gap longer than the timing test's max_fill) stops the windows
// after the last sample before it and starts them again at the first sample
// after it, so both windows around the gap are marked partial.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "config/settings/channel_settings.h"
#include "daemon/pipeline/channel_qc.h"
#include "daemon/pipeline/window_builder.h"

namespace tarn::pipeline {

struct ChannelSnapshot {
  QcSnapshot qc;
  std::optional<std::int64_t> last_closed_end;
};

class ChannelPipeline {
 public:
  struct Output {
    std::vector<FlaggedSample> samples;
    std::vector<WindowSummary> windows;
    std::vector<CleaningStep> cleanings;  // see QcSink::on_cleaning
    void clear() {
      samples.clear();
      windows.clear();
      cleanings.clear();
    }
  };

  // REQUIRES: a config without problems (throws std::invalid_argument).
  explicit ChannelPipeline(ChannelConfig config);

  // Outputs are appended to `out`.
  void start(std::int64_t t, Output& out);
  void push(const RawSample& raw, Output& out);
  void advance(std::int64_t now, Output& out);
  void stop(std::int64_t t, Output& out);
  // Settles a sample QC holds for its look-ahead (the spike test) as if its
  // next poll were missed, without cutting the open window short.
  void settle_held(Output& out);

  void begin_maintenance(std::int64_t t) { qc_.begin_maintenance(t); }
  void end_maintenance(std::int64_t t) { qc_.end_maintenance(t); }

  ChannelSnapshot snapshot() const { return {qc_.snapshot(), windows_.last_closed_end()}; }
  // REQUIRES: before start() and the first push().
  void restore(const ChannelSnapshot& s);

  const std::string& name() const { return name_; }
  const ChannelQc& qc() const { return qc_; }
  const WindowBuilder& windows() const { return windows_; }
  std::size_t state_bytes() const;

 private:
  class Forward : public QcSink {
   public:
    Forward(ChannelPipeline& p, Output& out) : p_(p), out_(out) {}
    void on_sample(const FlaggedSample& s) override;
    void on_break(std::int64_t last_before, std::int64_t first_after) override;
    void on_cleaning(const CleaningStep& c) override { out_.cleanings.push_back(c); }

   private:
    ChannelPipeline& p_;
    Output& out_;
  };
  void sync_windows(Output& out);

  std::string name_;
  ChannelQc qc_;
  WindowBuilder windows_;
};

}  // namespace tarn::pipeline
