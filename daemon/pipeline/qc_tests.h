// The individual QC tests, one value at a time. Stateless tests are free
// functions; tests with look-back are small classes whose memory is fixed at
// construction (RingBuffer), so a channel's state is bounded by the tests'
// look-back. ChannelQc (channel_qc.h) strings them together.
//
// A verdict's flag is pass (1), suspect (3) or fail (4) when the test ran, or
// not_evaluated (2) when it could not (e.g. not enough look-back yet).
// Not thread-safe; pure (no clock, no I/O).
#pragma once

#include <cstdint>
#include <optional>

#include "config/settings/qc_params.h"
#include "daemon/pipeline/ring_buffer.h"
#include "daemon/pipeline/sample.h"

namespace tarn::pipeline {

struct TestVerdict {
  codec::Flag flag = codec::Flag::not_evaluated;
  std::uint32_t reasons = 0;
};

TestVerdict gross_range_test(const GrossRangeParams& p, double v);
// REQUIRES: 1 <= month <= 12.
TestVerdict climatology_test(const ClimatologyParams& p, double v, int month);
TestVerdict spike_test(const SpikeParams& p, double prev, double v, double next);
TestVerdict instrument_status_test(const InstrumentStatusParams& p, std::uint32_t source_reasons);
TestVerdict solar_quenching_test(const SolarQuenchingParams& p, double sun_elevation_deg);

// UTC month (1..12) of a Unix time.
int utc_month(std::int64_t t);

// Look-back capacity for a period: enough slots for period_s at
// poll_interval_s plus slack; samples beyond it shorten the look-back.
std::size_t lookback_capacity(std::int64_t period_s, std::int64_t poll_interval_s);

// Each stateful check: step(t, v, learn) gives the verdict on (t, v) and, when
// learn is true, takes the sample into its look-back. Callers pass learn =
// false for samples an earlier test already failed.
class RateOfChangeCheck {
 public:
  RateOfChangeCheck(const RateOfChangeParams& p, std::int64_t poll_interval_s);
  TestVerdict step(std::int64_t t, double v, bool learn);
  void reset();
  std::size_t heap_bytes() const { return buf_.heap_bytes(); }

 private:
  struct Point {
    std::int64_t t;
    double v;
  };
  void evict_before(std::int64_t t_min);
  void recompute();
  RateOfChangeParams p_;
  RingBuffer<Point> buf_;
  double shift_ = 0, sum_ = 0, sumsq_ = 0;
  std::uint32_t since_recompute_ = 0;
};

class FlatLineCheck {
 public:
  explicit FlatLineCheck(const FlatLineParams& p);
  TestVerdict step(double v, bool learn);
  void reset() { buf_.clear(); }
  std::size_t heap_bytes() const { return buf_.heap_bytes(); }

 private:
  FlatLineParams p_;
  RingBuffer<double> buf_;  // the last max(fail_count, suspect_count) learned values
};

class AttenuatedSignalCheck {
 public:
  AttenuatedSignalCheck(const AttenuatedSignalParams& p, std::int64_t poll_interval_s);
  TestVerdict step(std::int64_t t, double v, bool learn);
  void reset();
  std::size_t heap_bytes() const {
    return buf_.heap_bytes() + maxq_.heap_bytes() + minq_.heap_bytes();
  }

 private:
  struct Point {
    std::int64_t t;
    double v;
  };
  void add(std::int64_t t, double v);
  void evict_through(std::int64_t t_max);
  void recompute();
  AttenuatedSignalParams p_;
  RingBuffer<Point> buf_;
  RingBuffer<Point> maxq_, minq_;  // monotonic queues for max and min over the period
  double shift_ = 0, sum_ = 0, sumsq_ = 0;
  std::uint32_t since_recompute_ = 0;
};

// The part of the fouling-drift state that survives a restart.
struct FoulingState {
  // The baseline drift is counted from: the first night since the last
  // maintenance, moved up by growth and down to any lower night (qc_params.h).
  std::optional<double> reference;
  std::optional<double> last_baseline;
  bool drifted = false;
  bool in_night = false;
  double night_min = 0;
  std::uint32_t night_count = 0;
};

class FoulingDriftCheck {
 public:
  explicit FoulingDriftCheck(const FoulingDriftParams& p) : p_(p) {}
  // sun_elevation_deg is the sun's elevation at the sample's time.
  TestVerdict step(double sun_elevation_deg, double v, bool learn);
  // Maintenance ended (optics cleaned): the reference is taken anew.
  void restart_reference();
  const FoulingState& state() const { return s_; }
  void restore(const FoulingState& s) { s_ = s; }

 private:
  void close_night();
  FoulingDriftParams p_;
  FoulingState s_;
};

}  // namespace tarn::pipeline
