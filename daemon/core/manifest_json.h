// The manifest file (M.json, codec/FORMAT.md §9) and the manifest of a station
// config. JSON lives here so that codec/ stays standard-library only.
// Thread-safety: pure functions.
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "codec/manifest.h"
#include "codec/result.h"
#include "config/station_config.h"

namespace tarn::daemon {

// Parses and validates; an error names the JSON pointer and what is allowed.
codec::Result<codec::Manifest> manifest_from_json(const nlohmann::json& j);

// Reads `path` (M.json); errors start with the path.
codec::Result<codec::Manifest> load_manifest_file(const std::string& path);

nlohmann::json manifest_to_json(const codec::Manifest& m);

// The manifest a station config sends: channels in config order, each with its
// instrument's name. Fails when an instrument samples at another period than the
// station (the format carries one period per station).
// REQUIRES: a config that passed load_and_check().
codec::Result<codec::Manifest> manifest_of_config(const config::StationConfig& c);

}  // namespace tarn::daemon
