// The cleaning step: medians of the last usable values before maintenance and
// of the first ones after it, so that drift between cleanings can be
// corrected ashore (linear drift correction between cleanings: common
// practice, no source). Simulated time throughout.
#include <catch2/catch.hpp>

#include "daemon/pipeline/channel_pipeline.h"
#include "daemon/pipeline/channel_qc.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

QcConfig gross_config() {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  return config_with({g}, 60);
}

}  // namespace

TEST_CASE("cleaning step: medians of 5 usable values before and after maintenance",
          "[qc][cleaning]") {
  ChannelQc qc(gross_config());
  VectorSink sink;
  // Before: ..., 9 (fails gross range: not usable), then 5.0 5.2 5.1 5.3 5.4
  // is not the last five: the last five usable values are 5.2 5.1 5.3 5.4 5.6.
  const std::vector<double> before = {4.0, 5.0, 5.2, 5.1, 5.3, 5.4, 5.6};
  std::int64_t t = 0;
  for (double v : before) qc.push({t += 60, v, 0}, sink);
  qc.push({t += 60, 150.0, 0}, sink);  // outside the sensor span: flag 4, not usable
  qc.begin_maintenance(t + 30);
  qc.push({t += 60, 0.5, 0}, sink);  // during maintenance: flag 4
  qc.push({t += 60, 0.4, 0}, sink);
  qc.end_maintenance(t + 30);
  CHECK(sink.cleanings.empty());
  // After: 3.0 3.2 3.1 (then a missing value) 3.3 3.6: five usable values.
  const std::vector<std::optional<double>> after = {3.0, 3.2, 3.1, std::nullopt, 3.3, 3.6, 3.9};
  for (std::size_t i = 0; i < after.size(); ++i) {
    qc.push({t += 60, after[i], 0}, sink);
    if (i < 5) CHECK(sink.cleanings.empty());
  }
  REQUIRE(sink.cleanings.size() == 1);  // complete after the fifth usable value, once
  const CleaningStep& c = sink.cleanings[0];
  CHECK(c.n_before == 5);
  REQUIRE(c.before.has_value());
  CHECK(*c.before == Approx(5.3));  // median of 5.2 5.1 5.3 5.4 5.6
  CHECK(c.n_after == 5);
  REQUIRE(c.after.has_value());
  CHECK(*c.after == Approx(3.2));  // median of 3.0 3.2 3.1 3.3 3.6
  CHECK(c.maintenance_start == 8 * 60 + 30);
  CHECK(c.maintenance_end == 10 * 60 + 30);
}

TEST_CASE("cleaning step: delivered with what it has on finish or at the next maintenance",
          "[qc][cleaning]") {
  SECTION("finish") {
    ChannelQc qc(gross_config());
    VectorSink sink;
    qc.push({60, 2.0, 0}, sink);
    qc.push({120, 4.0, 0}, sink);
    qc.begin_maintenance(150);
    qc.end_maintenance(200);
    qc.push({240, 1.0, 0}, sink);
    qc.finish(sink);
    REQUIRE(sink.cleanings.size() == 1);
    CHECK(sink.cleanings[0].n_before == 2);
    CHECK(*sink.cleanings[0].before == Approx(3.0));  // even count: mean of the middle two
    CHECK(sink.cleanings[0].n_after == 1);
    CHECK(*sink.cleanings[0].after == Approx(1.0));
    qc.finish(sink);
    CHECK(sink.cleanings.size() == 1);  // once
  }
  SECTION("next maintenance, through the channel pipeline") {
    ChannelPipeline ch(ChannelConfig{"chla", gross_config(), WindowConfig{}});
    ChannelPipeline::Output out;
    ch.begin_maintenance(0);
    ch.end_maintenance(100);  // nothing usable before: before is empty
    ch.push({120, 7.0, 0}, out);
    ch.begin_maintenance(150);
    CHECK(out.cleanings.empty());
    ch.push({180, 7.5, 0}, out);  // flag 4 (maintenance); delivers the closed step
    REQUIRE(out.cleanings.size() == 1);
    CHECK_FALSE(out.cleanings[0].before.has_value());
    CHECK(out.cleanings[0].n_before == 0);
    CHECK(out.cleanings[0].n_after == 1);
    CHECK(*out.cleanings[0].after == Approx(7.0));
    CHECK(out.samples.back().flag == Flag::fail);
  }
}
