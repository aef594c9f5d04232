#include "drivers/calibration_config.h"

#include <cstdio>

#include "config/json_reader.h"

namespace tarn::drivers {

namespace cal = protocol::calibration;
using config::Need;
using config::ObjectReader;

namespace {

constexpr double big = 1e12;

cal::Polynomial read_polynomial(ObjectReader& r) {
  cal::Polynomial p;
  const config::Json* a = r.array("coefficients", Need::required);
  if (!a) return p;
  if (a->empty() || a->size() > 8) {
    r.problems().add(r.pointer_of("coefficients"),
                     "has " + std::to_string(a->size()) + " terms; allowed: 1 to 8 numbers");
    return p;
  }
  for (std::size_t i = 0; i < a->size(); ++i) {
    if (!(*a)[i].is_number()) {
      r.problems().add(r.pointer_of("coefficients") + "/" + std::to_string(i),
                       "is not a number; allowed: a coefficient such as 0.5");
      continue;
    }
    p.coefficients.push_back((*a)[i].get<double>());
  }
  return p;
}

}  // namespace

Calibration read_calibration(const config::Json& block, const std::string& pointer,
                             config::Problems& problems) {
  if (block.is_null()) return cal::Identity{};
  ObjectReader r(block, pointer, problems);
  std::string kind;
  r.one_of("kind", kind,
           {"linear", "polynomial", "counts", "steinhart_hart", "callendar_van_dusen"},
           Need::required);
  Calibration out = cal::Identity{};
  if (kind == "linear") {
    cal::Linear l;
    r.number("gain", l.gain, -big, big);
    r.number("offset", l.offset, -big, big);
    out = l;
  } else if (kind == "polynomial") {
    out = read_polynomial(r);
  } else if (kind == "counts") {
    cal::CountsToConcentration c;
    r.number("dark_counts", c.dark_counts, -big, big, Need::required);
    r.number("scale_factor", c.scale_factor, -big, big, Need::required);
    out = c;
  } else if (kind == "steinhart_hart") {
    cal::SteinhartHart s;
    r.number("a", s.a, -1, 1, Need::required);
    r.number("b", s.b, -1, 1, Need::required);
    r.number("c", s.c, -1, 1, Need::required);
    out = s;
  } else if (kind == "callendar_van_dusen") {
    cal::CallendarVanDusen c;
    r.number("r0", c.r0, 1, 1e6, Need::required);
    r.number("a", c.a, -1, 1);
    r.number("b", c.b, -1, 1);
    r.number("c", c.c, -1, 1);
    out = c;
  }
  r.finish();
  if (r.valid() && !kind.empty())
    if (auto why = cal::check(out)) problems.add(pointer, *why);
  return out;
}

const std::vector<Calibration>& calibrations_of(const config::Instrument& in) {
  return in.settings.get<ChannelCalibrations>().channels;
}

std::string describe(const Calibration& c) {
  char buf[160];
  if (auto* l = std::get_if<cal::Linear>(&c)) {
    std::snprintf(buf, sizeof buf, "linear (gain %g, offset %g)", l->gain, l->offset);
  } else if (auto* p = std::get_if<cal::Polynomial>(&c)) {
    std::snprintf(buf, sizeof buf, "polynomial (%zu terms)", p->coefficients.size());
  } else if (auto* k = std::get_if<cal::CountsToConcentration>(&c)) {
    std::snprintf(buf, sizeof buf, "counts (dark %g, x %g)", k->dark_counts, k->scale_factor);
  } else if (std::holds_alternative<cal::SteinhartHart>(c)) {
    std::snprintf(buf, sizeof buf, "steinhart_hart");
  } else if (auto* v = std::get_if<cal::CallendarVanDusen>(&c)) {
    std::snprintf(buf, sizeof buf, "callendar_van_dusen (r0 %g)", v->r0);
  } else {
    std::snprintf(buf, sizeof buf, "none");
  }
  return buf;
}

}  // namespace tarn::drivers
