// Plain names for the reason bits of reasons.h, for config files (e.g. an
// instrument-status test's list of bits), logs and the status view.
// Pure functions; thread-safe.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

namespace tarn::pipeline {

// Name of a single bit (e.g. "spike"); empty for an unassigned bit.
// REQUIRES: bit has exactly one bit set.
std::string_view reason_name(std::uint32_t bit);

// The bit for a name; nullopt for an unknown name.
std::optional<std::uint32_t> reason_from_name(std::string_view name);

// All set bits as names joined by ',' (e.g. "spike,flat_line"); unassigned
// bits appear as "bit<N>".
std::string reason_list(std::uint32_t bits);

}  // namespace tarn::pipeline
