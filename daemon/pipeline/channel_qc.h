// ChannelQc: the QC of one channel. Raw samples in (in time order), flagged
// samples out, through a QcSink. Pure: times come with the samples and with
// the calls, nothing reads a clock. Not thread-safe (one event-loop thread).
//
// How a sample's flag is made (QARTOD flag scale, see README.md):
//  - no value (or a NaN/infinite one, dropped with reason::garbled) -> 9 (missing); a poll that
//  never came or came off its schedule
//    (timing test) -> 9; during maintenance -> 4 with the maintenance reason.
//  - otherwise the tests run in the configured order. Each test that can run
//    gives 1, 3 or 4 and sets its reason bit when it gives 3 or 4; the sample's
//    flag is the worst of them; 2 (not evaluated) when no test could run.
//  - order: a test with look-back (rate of change, flat line, attenuated
//    signal, fouling drift, and the spike test's neighbours) takes a sample in
//    only if no test above it in the list gave it 4. So a value the gross-range
//    test fails does not disturb the look-back of the tests listed below it.
//
// The spike test needs the next sample, so a sample is held back until the
// next poll's outcome is known: it is emitted when the next sample arrives
// (valued or missing), when advance() finds that next poll overdue, or on
// finish(). A missing or unusable neighbour leaves the spike test not
// evaluated for that sample; its other tests still count. Hence the last
// sample of a window is settled by the first poll of the next window, and
// windows close one poll after their end (see channel_pipeline.h).
//
// Time order: a sample at or before the last accepted time is dropped and
// counted (counters().dropped_out_of_order), never re-ordered.
#pragma once

#include <cstdint>
#include <deque>
#include <optional>
#include <variant>
#include <vector>

#include "config/settings/qc_params.h"
#include "daemon/pipeline/qc_tests.h"
#include "daemon/pipeline/sample.h"
#include "daemon/pipeline/solar_position.h"

namespace tarn::pipeline {

// The step a cleaning made in a channel: the median of the last
// QcConfig::cleaning_samples usable values (a value, flag 1, 2 or 3) before
// maintenance began and of the first ones after it ended. Ashore, the drift
// between two cleanings can be corrected from these steps (linear drift
// correction between cleanings: common practice, no source). before/after
// are empty when no usable value was seen on that side.
struct CleaningStep {
  std::int64_t maintenance_start = 0, maintenance_end = 0;
  std::optional<double> before, after;
  std::uint32_t n_before = 0, n_after = 0;
};

class QcSink {
 public:
  virtual ~QcSink() = default;
  virtual void on_sample(const FlaggedSample& s) = 0;
  // A gap of more than the timing test's max_fill polls between two samples:
  // nothing was synthesised for it and the look-back restarted.
  virtual void on_break(std::int64_t last_before, std::int64_t first_after) = 0;
  // A cleaning step, once its after-median is complete (cleaning_samples
  // usable values after the end), or earlier with what it has when the next
  // maintenance begins or on finish().
  virtual void on_cleaning(const CleaningStep&) {}
};

// Collects into vectors; for tests and simple callers.
class VectorSink : public QcSink {
 public:
  void on_sample(const FlaggedSample& s) override { samples.push_back(s); }
  void on_break(std::int64_t a, std::int64_t b) override { breaks.push_back({a, b}); }
  void on_cleaning(const CleaningStep& c) override { cleanings.push_back(c); }
  struct Break {
    std::int64_t last_before, first_after;
  };
  std::vector<FlaggedSample> samples;
  std::vector<Break> breaks;
  std::vector<CleaningStep> cleanings;
};

struct MaintenancePeriod {
  std::int64_t start = 0;
  std::int64_t end = 0;  // exclusive
};

struct QcCounters {
  std::uint64_t accepted = 0;
  std::uint64_t dropped_out_of_order = 0;
  std::uint64_t synthesised_missing = 0;
  std::uint64_t breaks = 0;
};

// What survives a restart. The rolling look-back (rate of change, flat line,
// attenuated signal, spike neighbours) is not kept: it rebuilds within its
// period, with those tests not evaluated until then.
struct QcSnapshot {
  std::optional<std::int64_t> last_t;  // samples at or before it are dropped after restore
  std::optional<std::int64_t> maintenance_since;  // a maintenance period still open
  std::optional<MaintenancePeriod> last_maintenance;
  std::vector<FoulingState> fouling;  // one per fouling_drift test, in list order
};

class ChannelQc {
 public:
  // REQUIRES: check_qc_config(config) is empty (throws std::invalid_argument
  // otherwise: a programming error, the config layer checks first).
  explicit ChannelQc(QcConfig config);

  // REQUIRES: nothing; out-of-order samples are dropped and counted.
  void push(const RawSample& raw, QcSink& out);
  // The time is now `now`: with a timing test, due polls older than
  // now - late_s become missing samples (at most max_fill per call); a held
  // sample whose next poll is overdue is settled. A sample that arrives later
  // for a time already passed this way is dropped and counted.
  void advance(std::int64_t now, QcSink& out);
  // Settles the held sample (spike test not evaluated). Call before stopping.
  // Also delivers an open cleaning step with what it has.
  void finish(QcSink& out);

  // Maintenance: samples taken at or after t (and, once ended, before the end)
  // are flagged 4 with reason::maintenance. Ending restarts the look-back and
  // the fouling reference (the optics were cleaned): the first whole night
  // after the end gives the new reference, so the reference restarts from
  // the post-cleaning night baseline. Ending also opens a CleaningStep (see
  // QcSink::on_cleaning), delivered at a later push/advance/finish.
  void begin_maintenance(std::int64_t t);
  void end_maintenance(std::int64_t t);
  bool in_maintenance() const { return maintenance_since_.has_value(); }

  // Every sample with a time before this has been emitted.
  std::int64_t delivered_before() const;
  std::int64_t poll_interval_s() const { return config_.poll_interval_s; }
  const QcConfig& config() const { return config_; }
  const QcCounters& counters() const { return counters_; }

  QcSnapshot snapshot() const;
  // REQUIRES: called before the first push. Fouling states beyond the number
  // of fouling_drift tests are ignored.
  void restore(const QcSnapshot& s);

  // Bytes held by this channel's QC (object, config and look-back buffers).
  std::size_t state_bytes() const;

 private:
  using Check = std::variant<std::monostate, RateOfChangeCheck, FlatLineCheck,
                             AttenuatedSignalCheck, FoulingDriftCheck>;
  struct Pending {
    FlaggedSample s;
    bool ran = false;
    codec::Flag worst = codec::Flag::pass;
    bool spike_usable = false;
    double v = 0;
  };

  bool schedule(const RawSample& raw, QcSink& out);  // returns true if off schedule
  void evaluate(const RawSample& raw, QcSink& out);
  void settle(std::optional<double> right, QcSink& out);
  static codec::Flag settled_flag(const Pending& p);
  void emit_direct(const FlaggedSample& s, QcSink& out);
  void deliver(const FlaggedSample& s, QcSink& out);  // every sample goes out through here
  void flush_cleanings(QcSink& out);
  void close_cleaning();
  void emit_missing(std::int64_t t, std::uint32_t reasons, QcSink& out);
  void reset_lookback();
  bool maintenance_at(std::int64_t t) const;
  int month_of(std::int64_t t);
  std::int64_t late_s() const;

  QcConfig config_;
  std::vector<Check> checks_;  // parallel to config_.tests
  std::optional<TimingParams> timing_;
  std::optional<SpikeParams> spike_;
  std::optional<SunElevationCache> sun_;

  std::optional<Pending> pending_;
  std::optional<double> left_;  // the held sample's left neighbour, when usable
  std::optional<std::int64_t> last_t_;
  std::optional<std::int64_t> anchor_;  // the time the next due poll is counted from
  std::optional<std::int64_t> floor_t_;
  std::optional<std::int64_t> maintenance_since_;
  std::optional<MaintenancePeriod> last_maintenance_;
  std::int64_t month_day_ = INT64_MIN;
  int month_ = 1;
  QcCounters counters_;

  struct OpenCleaning {
    CleaningStep step;
    std::vector<double> before, after;
  };
  std::deque<double> recent_;  // the last cleaning_samples usable values
  std::optional<OpenCleaning> cleaning_;
  std::vector<CleaningStep> ready_;  // closed, not yet delivered
};

}  // namespace tarn::pipeline
