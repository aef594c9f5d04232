// Small helpers shared by the pipeline tests.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "daemon/pipeline/channel_qc.h"

namespace tarn::pipeline::testing {

// The flags of a series as a digit string, e.g. "11349".
inline std::string flags_of(const std::vector<FlaggedSample>& s) {
  std::string out;
  for (const auto& x : s) out += std::to_string(static_cast<int>(x.flag));
  return out;
}

// Raw samples every `interval` seconds from t0.
inline std::vector<RawSample> series(const std::vector<std::optional<double>>& values,
                                     std::int64_t t0 = 0, std::int64_t interval = 60) {
  std::vector<RawSample> out;
  std::int64_t t = t0;
  for (const auto& v : values) {
    out.push_back({t, v, 0});
    t += interval;
  }
  return out;
}

// Pushes all samples, then settles the held one.
inline std::vector<FlaggedSample> run(ChannelQc& qc, const std::vector<RawSample>& raw) {
  VectorSink sink;
  for (const auto& r : raw) qc.push(r, sink);
  qc.finish(sink);
  return sink.samples;
}

inline QcConfig config_with(std::vector<QcTestParams> tests, std::int64_t interval = 60) {
  QcConfig c;
  c.poll_interval_s = interval;
  c.tests = std::move(tests);
  return c;
}

}  // namespace tarn::pipeline::testing
