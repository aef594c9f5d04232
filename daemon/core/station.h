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
#include <string>
#include <vector>

#include "config/station_config.h"
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
  Json status() const;
  // One line for systemd's STATUS=.
  std::string status_line() const;
  const config::StationConfig& config() const { return cfg_; }

 private:
  struct ChannelWindow;
  struct ChannelRuntime;
  void build();
  void teardown();
  void on_poll(std::size_t line, std::size_t instrument, const drivers::PollResult& r);
  void schedule_window_close();
  void close_window(bool partial);
  void drain();
  void log_summaries();

  boost::asio::io_context& io_;
  const drivers::Clock& clock_;
  config::StationConfig cfg_;
  std::int64_t started_ms_ = 0;
  std::string boot_time_;
  std::vector<std::unique_ptr<drivers::BusScheduler>> lines_;
  std::vector<ChannelRuntime> channels_;                 // station-wide, config order
  std::vector<std::vector<std::size_t>> channel_index_;  // [line][instr] -> first channel
  std::vector<std::vector<std::size_t>> instrument_of_line_;
  std::unique_ptr<uplink::UplinkBackend> uplink_;
  std::deque<uplink::OutgoingPacket> queue_;  // provisional (replaced by the outbox)
  std::uint64_t next_sequence_ = 1;
  std::uint64_t windows_closed_ = 0, packets_acked_ = 0, packets_dropped_ = 0;
  std::int64_t window_start_ms_ = 0;
  bool window_partial_start_ = true;
  boost::asio::steady_timer window_timer_, drain_timer_, summary_timer_;
  std::shared_ptr<bool> alive_;
  bool stopping_ = false;
  std::function<void()> stop_done_;
};

}  // namespace tarn::daemon
