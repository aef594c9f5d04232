// WindowAssembler: the station's samples -> QC -> windows -> alert events,
// joined with what the wire format needs (per-slot values, flags and reasons
// of every channel of a window). Pure: data and timestamps in, results out;
// no clock, file or port (DEVELOPERS.md, principle 1). The Station feeds it and
// hands its output to the store and the codec.
// Thread-safety: not thread-safe; the io_context thread only.
#pragma once

#include <cstdint>
#include <map>
#include <memory>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include "codec/manifest.h"
#include "codec/window.h"
#include "config/station_config.h"
#include "daemon/pipeline/alert_rules.h"
#include "daemon/pipeline/channel_pipeline.h"
#include "daemon/pipeline/window_collator.h"

namespace tarn::daemon {

struct AssemblerOutput {
  struct Sample {
    std::size_t channel = 0;
    pipeline::FlaggedSample sample;
  };
  std::vector<Sample> samples;               // every flagged sample, for the archive
  std::vector<codec::Window> windows;        // closed windows, all channels, for packets
  std::vector<pipeline::AlertEvent> alerts;  // level changes and reminders
  // The same closed windows as the pipeline summarised them (per channel:
  // flag, counts, statistics with the median), in release order; the alert
  // rules read these. For `tarn replay`; the station ignores them.
  std::vector<pipeline::WindowSet> window_sets;
  // Cleaning steps (median before and after a maintenance period), for the
  // archive's log and a cleaning packet to the shore.
  std::vector<codec::CleaningRecord> cleanings;
  void clear() {
    samples.clear();
    windows.clear();
    alerts.clear();
    window_sets.clear();
    cleanings.clear();
  }
};

struct ChannelView {
  std::optional<pipeline::FlaggedSample> last;
  std::array<std::uint32_t, 5> window_counts{};  // current window: pass, ne, suspect, fail, missing
  std::int64_t window_start = 0;                 // the window window_counts belong to
};

class WindowAssembler {
 public:
  // REQUIRES: cfg passed load_and_check() (it runs the typed settings the check
  // read: Channel::pipeline, StationConfig::alert_rules); `manifest` is
  // manifest_of_config(cfg).
  WindowAssembler(const config::StationConfig& cfg, codec::Manifest manifest);

  void start(std::int64_t t, AssemblerOutput& out);
  void push(std::size_t channel, const pipeline::RawSample& raw, AssemblerOutput& out);
  // Settles held samples and closes windows whose end has passed.
  void advance(std::int64_t now, AssemblerOutput& out);
  // Closes the open windows as partial.
  void stop(std::int64_t t, AssemblerOutput& out);
  // Settles samples held for the spike test's look-ahead (as if the next poll
  // were missed), so that they reach the archive; windows stay open.
  void settle_held(AssemblerOutput& out);
  // Maintenance from t on for the channels of the instruments in `scopes`
  // ("" = every channel); the channels of the others end theirs at t. A
  // channel already in maintenance keeps its start.
  void set_maintenance(std::int64_t t, const std::set<std::string>& scopes);
  bool in_maintenance() const;  // any channel
  bool channel_in_maintenance(std::size_t channel) const { return channels_[channel].maintenance; }

  // Persistable state (QC look-back summaries, last closed windows, alert levels).
  std::string snapshot() const;
  // Returns notes about what could not be restored (config changed).
  std::vector<std::string> restore(const std::string& snapshot);

  // The earliest end of the last closed window over the channels (after
  // restore()), i.e. where a restart must resume; empty when unknown.
  std::optional<std::int64_t> resume_point() const;
  std::size_t channel_count() const { return channels_.size(); }
  const ChannelView& view(std::size_t channel) const { return channels_[channel].view; }
  // The active level of each alert rule: (rule name, level name or "" for none).
  std::vector<std::pair<std::string, std::string>> alert_levels() const;
  // Per rule, in the same order: why its standing level is stale, or "" when
  // it is not (see pipeline::stale_cause_name).
  std::vector<std::string> alert_stale_causes() const;
  std::uint64_t late_samples() const { return late_samples_; }

 private:
  struct Channel {
    std::string name;
    std::string instrument;
    bool maintenance = false;
    std::unique_ptr<pipeline::ChannelPipeline> pipeline;
    // Flagged samples of windows not yet released, by window start.
    std::map<std::int64_t, std::vector<pipeline::FlaggedSample>> pending;
    ChannelView view;
  };
  void absorb(std::size_t channel, pipeline::ChannelPipeline::Output& o, AssemblerOutput& out);
  void release(std::vector<pipeline::WindowSet>& sets, AssemblerOutput& out);
  codec::Window to_codec(const pipeline::WindowSet& set);

  codec::Manifest manifest_;
  std::int64_t window_s_, period_s_;
  std::vector<Channel> channels_;
  pipeline::WindowCollator collator_;
  pipeline::AlertEvaluator alerts_;
  pipeline::ChannelPipeline::Output scratch_;
  std::uint64_t late_samples_ = 0;
};

}  // namespace tarn::daemon
