// StationContext: the state the station's parts share (daemon/core/station.h
// lists the parts): the io_context, the clock, the running config, the
// channel list and manifest built from it, the pipeline (WindowAssembler),
// the store, the uplink backend, and the liveness token that every timer and
// callback checks.
// Owns: the config, the pipeline, the store and the uplink backend. Station
// fills it (build, open the store); LinkControl makes and drops the backend;
// the other parts read and use what it holds.
// Called by: every part of the station, never from outside daemon/core.
// Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <cstdint>
#include <memory>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "codec/packet.h"
#include "config/station_config.h"
#include "daemon/core/window_assembler.h"
#include "daemon/store/station_store.h"
#include "daemon/uplink/backend.h"
#include "drivers/os/env.h"

namespace tarn::daemon {

using Json = nlohmann::json;

struct StationContext {
  StationContext(boost::asio::io_context& io, os::Env& clock, config::StationConfig cfg);

  std::int64_t now_s() const { return clock.wall_ms() / 1000; }
  // The configured instruments' names, in config order.
  std::vector<std::string> instrument_names() const;
  // The pipeline's state (alert levels, held samples, maintenance) into the
  // archive's state table.
  void save_state();
  // The uplink backend's state in words, "down" without one.
  std::string link_state() const;

  boost::asio::io_context& io;
  os::Env& clock;
  config::StationConfig cfg;
  std::int64_t started_ms = 0;
  std::string boot_time;
  // Channels in config order: the manifest's and the assembler's order.
  std::vector<std::string> channel_names, channel_units, channel_instruments;
  codec::CheckedManifest manifest;
  std::unique_ptr<WindowAssembler> assembler;
  std::unique_ptr<store::StationStore> store;
  std::unique_ptr<uplink::UplinkBackend> uplink;
  // The pipeline's output, reused for every push (cleared before each).
  AssemblerOutput out;
  // False once the Station is destroyed: timers and callbacks hold a
  // weak_ptr to it and do nothing when it is gone.
  std::shared_ptr<bool> alive = std::make_shared<bool>(true);
  bool stopping = false;  // an orderly stop began: no new polls, ticks or commands
};

}  // namespace tarn::daemon
