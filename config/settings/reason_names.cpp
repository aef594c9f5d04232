#include "config/settings/reason_names.h"

#include <array>
#include <utility>

#include "config/settings/reasons.h"

namespace tarn::pipeline {
namespace {

constexpr std::array<std::pair<std::uint32_t, std::string_view>, 20> kNames{{
    {reason::no_reply, "no_reply"},
    {reason::garbled, "garbled"},
    {reason::offline, "offline"},
    {reason::instrument_status, "instrument_status"},
    {reason::warming_up, "warming_up"},
    {reason::poll_missed, "poll_missed"},
    {reason::gross_range_sensor, "gross_range_sensor"},
    {reason::gross_range_operator, "gross_range_operator"},
    {reason::climatology, "climatology"},
    {reason::spike, "spike"},
    {reason::rate_of_change, "rate_of_change"},
    {reason::flat_line, "flat_line"},
    {reason::attenuated, "attenuated"},
    {reason::solar_quenching, "solar_quenching"},
    {reason::maintenance, "maintenance"},
    {reason::fouling_drift, "fouling_drift"},
    {reason::timing_gap, "timing_gap"},
    {reason::late, "late"},
    {reason::clock_unsynced, "clock_unsynced"},
    {0, ""},
}};

}  // namespace

std::string_view reason_name(std::uint32_t bit) {
  for (const auto& [b, n] : kNames)
    if (b == bit && b != 0) return n;
  return {};
}

std::optional<std::uint32_t> reason_from_name(std::string_view name) {
  for (const auto& [b, n] : kNames)
    if (b != 0 && n == name) return b;
  return std::nullopt;
}

std::string reason_list(std::uint32_t bits) {
  std::string out;
  for (int i = 0; i < 32; ++i) {
    const std::uint32_t bit = 1u << i;
    if (!(bits & bit)) continue;
    if (!out.empty()) out += ',';
    const std::string_view n = reason_name(bit);
    if (n.empty()) {
      out += "bit" + std::to_string(i);
    } else {
      out += n;
    }
  }
  return out;
}

}  // namespace tarn::pipeline
