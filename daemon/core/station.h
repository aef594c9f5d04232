// Station: the running daemon's object graph on one io_context thread:
// a BusScheduler per line -> samples -> QC -> windows -> packets -> uplink.
// It owns no threads; library threads (MQTT) post back into the loop.
// Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <deque>
#include <functional>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include "codec/packet.h"
#include "config/station_config.h"
#include "daemon/core/window_assembler.h"
#include "daemon/store/station_store.h"
#include "daemon/uplink/backend.h"
#include "drivers/bus_scheduler.h"
#include "drivers/clock.h"

namespace tarn::daemon {

using Json = nlohmann::json;

class Station {
 public:
  Station(boost::asio::io_context& io, const drivers::Clock& clock, config::StationConfig cfg);
  ~Station();

  void start();
  // Orderly stop: the open window is closed and marked partial, handed on,
  // and `done` is called once it was sent or `deadline_ms` (real) passed.
  void stop(int deadline_ms, std::function<void()> done);
  // Applies a new, already validated config (SIGHUP).
  void reload(config::StationConfig cfg);
  // Maintenance periods (control socket, downlink): samples flagged fail.
  // Returns an error in words, empty on success.
  std::string maintenance(bool start, const std::string& note);
  Json status() const;
  // One line for systemd's STATUS=.
  std::string status_line() const;
  const config::StationConfig& config() const { return cfg_; }

 private:
  void build();
  void teardown();
  void open_store();
  void on_poll(std::size_t line, std::size_t instrument, const drivers::PollResult& r);
  void handle(AssemblerOutput& out);
  void queue_window(const codec::Window& w);
  void queue_alerts(const std::vector<pipeline::AlertEvent>& events);
  void queue_manifest_if_changed();
  void resume_from_archive();
  void save_state();
  void schedule_tick();
  void drain();
  void log_summaries();
  std::int64_t now_s() const { return clock_.wall_ms() / 1000; }

  boost::asio::io_context& io_;
  const drivers::Clock& clock_;
  config::StationConfig cfg_;
  std::int64_t started_ms_ = 0;
  std::string boot_time_;
  std::vector<std::unique_ptr<drivers::BusScheduler>> lines_;
  std::vector<std::vector<std::size_t>> channel_index_;  // [line][member] -> first channel
  std::vector<std::string> channel_names_, channel_units_, channel_instruments_;
  codec::CheckedManifest manifest_;
  std::unique_ptr<WindowAssembler> assembler_;
  std::unique_ptr<store::StationStore> store_;
  std::unique_ptr<uplink::UplinkBackend> uplink_;
  std::set<std::uint64_t> inflight_;
  std::uint64_t windows_closed_ = 0, packets_acked_ = 0, alerts_raised_ = 0;
  std::int64_t last_ack_t_ = 0;
  std::optional<std::int64_t> maintenance_id_;
  AssemblerOutput out_;
  boost::asio::steady_timer tick_timer_, drain_timer_, summary_timer_;
  std::shared_ptr<bool> alive_;
  bool stopping_ = false;
  std::function<void()> stop_done_;
};

}  // namespace tarn::daemon
