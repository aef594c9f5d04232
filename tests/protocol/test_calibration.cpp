#include <catch2/catch.hpp>

#include <cmath>
#include <limits>

#include "drivers/protocol/calibration.h"

using namespace tarn::protocol;
using namespace tarn::protocol::calibration;

TEST_CASE("Linear, polynomial and counts calibrations", "[calibration]") {
  CHECK(apply(Identity{}, 4.5).value() == 4.5);
  CHECK(apply(Linear{2.0, -1.0}, 3.0).value() == 5.0);
  CHECK(apply(Polynomial{{1.0, 2.0, 3.0}}, 2.0).value() == 17.0);  // 1 + 4 + 12
  CHECK(apply(Polynomial{{-0.5}}, 100.0).value() == -0.5);
  // Fluorometer: 1250 counts, blank 50 counts, 0.0121 ug/L per count -> 14.52 ug/L.
  CHECK(apply(CountsToConcentration{50.0, 0.0121}, 1250.0).value() == Approx(14.52));
  // Below the blank is kept negative; QC decides on it.
  CHECK(apply(CountsToConcentration{50.0, 0.0121}, 40.0).value() == Approx(-0.121));

  CHECK(apply(Polynomial{}, 1.0).error() == CalError::bad_coefficients);
  CHECK(apply(Linear{}, std::nan("")).error() == CalError::not_finite);
  CHECK(apply(Linear{1e308, 0}, 1e308).error() == CalError::not_finite);
  CHECK(check(Polynomial{}).value() == "polynomial needs at least one coefficient (c0)");
  CHECK(check(SteinhartHart{1e-3, 0, 0}));
  CHECK(check(CallendarVanDusen{0.0}));
  CHECK_FALSE(check(CallendarVanDusen{}));
  CHECK_FALSE(check(Linear{}));
}

TEST_CASE("Callendar-Van Dusen against the IEC 60751 table", "[calibration]") {
  // IEC 60751 (ITS-90) table for PT100: 0 degC 100.00, 50 degC 119.40, 100 degC 138.51,
  // 200 degC 175.86, -100 degC 60.26 ohm (values quoted in issue 3, match the table).
  const CallendarVanDusen pt100{};
  struct Row {
    double t, r;
  };
  // The table is rounded to 0.01 ohm, which is up to 0.013 degC near 100..200 degC, so
  // the inverse of a table value is held to the table's half digit (0.005 ohm)
  // over the local slope; the inverse of the exact R(t) is held to 0.01 degC.
  for (Row row :
       {Row{0, 100.00}, Row{50, 119.40}, Row{100, 138.51}, Row{200, 175.86}, Row{-100, 60.26}}) {
    INFO("t = " << row.t);
    const double r = cvd_resistance(pt100, row.t).value();
    CHECK(std::fabs(r - row.r) <= 0.005 + 1e-9);
    const double slope = cvd_resistance(pt100, row.t + 0.5).value() -
                         cvd_resistance(pt100, row.t - 0.5).value();  // ohm per degC
    CHECK(std::fabs(cvd_temperature(pt100, row.r).value() - row.t) <= 0.005 / slope + 1e-9);
    CHECK(std::fabs(cvd_temperature(pt100, r).value() - row.t) <= 0.01);
    CHECK(std::fabs(apply(pt100, r).value() - row.t) <= 0.01);
  }
  // PT1000: the same table times ten (R0 = 1000 ohm, same coefficients).
  const CallendarVanDusen pt1000{1000.0};
  CHECK(std::fabs(cvd_resistance(pt1000, 100).value() - 1385.1) <= 0.05);
  CHECK(std::fabs(cvd_resistance(pt1000, -100).value() - 602.6) <= 0.05);
  const double r_m100 = cvd_resistance(pt1000, -100).value();
  CHECK(std::fabs(cvd_temperature(pt1000, r_m100).value() + 100) <= 0.01);
}

TEST_CASE("Callendar-Van Dusen round trip and domain", "[calibration]") {
  const CallendarVanDusen pt100{};
  for (double t = -200.0; t <= 850.0; t += 0.5) {
    const double r = cvd_resistance(pt100, t).value();
    INFO("t = " << t);
    REQUIRE(std::fabs(cvd_temperature(pt100, r).value() - t) < 1e-7);
  }
  CHECK(cvd_resistance(pt100, -200.5).error() == CalError::out_of_domain);
  CHECK(cvd_resistance(pt100, 851).error() == CalError::out_of_domain);
  CHECK(cvd_temperature(pt100, 0.0).error() == CalError::out_of_domain);
  CHECK(cvd_temperature(pt100, -5.0).error() == CalError::out_of_domain);
  CHECK(cvd_temperature(pt100, 1e6).error() == CalError::out_of_domain);  // open circuit
  CHECK(cvd_temperature(pt100, std::numeric_limits<double>::infinity()).error() ==
        CalError::not_finite);
  // Continuity at 0 degC: the branches meet.
  CHECK(std::fabs(cvd_temperature(pt100, 99.9999).value()) < 1e-3);
}

TEST_CASE("Steinhart-Hart against a 10k thermistor table", "[calibration]") {
  // YSI 44006 / 44031 (10 kohm at 25 degC) coefficients A=1.032e-3, B=2.387e-4,
  // C=1.580e-7 and its table points 29490 ohm at 0 degC, 10000 ohm at 25 degC,
  // 3893 ohm at 50 degC (all from memory). The fit is quoted as good to a few
  // hundredths of a degree; we allow 0.02 degC.
  const SteinhartHart ysi{1.032e-3, 2.387e-4, 1.580e-7};
  CHECK(steinhart_hart_temperature(ysi, 29490).value() == Approx(0.0).margin(0.02));
  CHECK(steinhart_hart_temperature(ysi, 10000).value() == Approx(25.0).margin(0.02));
  CHECK(steinhart_hart_temperature(ysi, 3893).value() == Approx(50.0).margin(0.02));
  CHECK(apply(ysi, 10000).value() == Approx(25.0).margin(0.02));
}

TEST_CASE("Steinhart-Hart round trip", "[calibration]") {
  // A 10k NTC coefficient set widely published with thermistor examples:
  // A=1.009249522e-3, B=2.378405444e-4, C=2.019202697e-7 (from memory).
  const SteinhartHart common{1.009249522e-3, 2.378405444e-4, 2.019202697e-7};
  const SteinhartHart ysi{1.032e-3, 2.387e-4, 1.580e-7};
  for (const auto& sh : {common, ysi}) {
    for (double t = -40.0; t <= 125.0; t += 0.25) {
      const double r = steinhart_hart_resistance(sh, t).value();
      INFO("t = " << t << " r = " << r);
      REQUIRE(r > 0);
      REQUIRE(std::fabs(steinhart_hart_temperature(sh, r).value() - t) < 1e-9);
    }
  }
  // Resistance falls with temperature (NTC).
  CHECK(steinhart_hart_resistance(common, 0).value() >
        steinhart_hart_resistance(common, 25).value());
  // B-only model (C = 0) also inverts.
  const SteinhartHart b_only{1.129e-3, 2.341e-4, 0.0};
  const double r = steinhart_hart_resistance(b_only, 20).value();
  CHECK(steinhart_hart_temperature(b_only, r).value() == Approx(20.0).margin(1e-9));

  CHECK(steinhart_hart_temperature(common, 0.0).error() == CalError::out_of_domain);
  CHECK(steinhart_hart_temperature(common, -10.0).error() == CalError::out_of_domain);
  CHECK(steinhart_hart_temperature(SteinhartHart{-1.0, 0.0, 0.0}, 100.0).error() ==
        CalError::out_of_domain);
  CHECK(steinhart_hart_resistance(common, -274.0).error() == CalError::out_of_domain);
}
