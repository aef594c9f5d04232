// Station: the running daemon on one io_context thread: a BusScheduler per
// line -> samples -> QC -> windows -> packets -> uplink. A thin coordinator:
// it builds and tears down the parts below, and runs their life (start,
// the tick every sampling period, reload, orderly stop). It owns no
// threads; library threads (MQTT) post back into the loop.
//
// The parts, each a file pair in daemon/core/ with its contract on top:
//   station_context      the shared state: config, clock, io, store, pipeline, backend
//   bus_lines            the schedulers per line, each poll into the pipeline
//   sample_intake        the pipeline's output to the archive and the packet queue
//   packet_queue         windows, alerts, cleanings, manifest, health into the outbox
//   outbox_drain         the outbox (and replies, resends) to the uplink; daily budget
//   link_control         the backend's life and the link policy (open / close)
//   shore_commands       the downlink: commands, replies, setting overrides
//   maintenance_control  maintenance periods: start, end, expiry, restore
//   clock_watch          clock synchronisation and steps
//   health_reporter      boot count, health readings and packets, sparklines
//   status_report        the status JSON and the systemd status line
//
// Called by: daemon/cli/cmd_run.cpp (the run command and its control socket).
// Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <functional>
#include <string>

#include "config/downlink_command.h"
#include "config/station_config.h"
#include "daemon/core/bus_lines.h"
#include "daemon/core/clock_watch.h"
#include "daemon/core/health_reporter.h"
#include "daemon/core/link_control.h"
#include "daemon/core/maintenance_control.h"
#include "daemon/core/outbox_drain.h"
#include "daemon/core/packet_queue.h"
#include "daemon/core/sample_intake.h"
#include "daemon/core/shore_commands.h"
#include "daemon/core/station_context.h"
#include "daemon/core/status_report.h"
#include "drivers/os/env.h"

namespace tarn::daemon {

class Station final {
 public:
  Station(boost::asio::io_context& io, os::Env& clock, config::StationConfig cfg);
  ~Station();
  Station(const Station&) = delete;
  Station& operator=(const Station&) = delete;

  void start();
  // Orderly stop: the open window is closed and marked partial, handed on,
  // and `done` is called once it was sent or `deadline_ms` (real) passed.
  void stop(int deadline_ms, std::function<void()> done);
  // Applies a new, already validated config (SIGHUP); the setting overrides
  // from the shore are applied onto it.
  void reload(config::StationConfig cfg);
  // Maintenance periods (control socket), of the whole station or one
  // instrument (daemon/core/maintenance_book.h): that scope's samples are
  // flagged fail. Returns an error in words, empty on success; `data` gets
  // what was started or ended.
  std::string maintenance(const config::MaintenanceArgs& a, const std::string& via, Json& data);
  Json status() const { return status_.status(); }
  // One line for systemd's STATUS=.
  std::string status_line() const { return status_.line(); }
  const config::StationConfig& config() const { return ctx_.cfg; }

 private:
  void apply_config(config::StationConfig cfg);
  void open_store();
  // keep_assembler / keep_link: a reload that leaves the pipeline / the link
  // as they were keeps the running ones.
  void build(bool keep_assembler = false, bool keep_link = false);
  void teardown(bool keep_link = false);
  // Every sampling period: the clock, maintenance expiry, the pipeline's
  // clock (held samples settle, windows close on time), the store's upkeep.
  void schedule_tick();

  StationContext ctx_;
  ClockWatch clock_watch_;
  PacketQueue packets_;
  OutboxDrain drain_;
  LinkControl link_;
  SampleIntake intake_;
  BusLines lines_;
  MaintenanceControl maintenance_;
  ShoreCommands shore_;
  HealthReporter health_;
  StatusReport status_;
  os::Timer tick_timer_;     // station time: the next tick
  os::Timer stop_deadline_;  // real time: the orderly stop gives up waiting for the link
};

}  // namespace tarn::daemon
