// Station: the running daemon's object graph on one io_context thread:
// a BusScheduler per line -> samples -> QC -> windows -> packets -> uplink.
// It owns no threads; library threads (MQTT) post back into the loop.
// The link policy (daemon/uplink/link_policy.h) opens and closes the uplink;
// downlink commands (daemon/uplink/downlink.h) act on it as a DownlinkTarget.
// Setting overrides from the shore are kept in the archive state "overrides"
// and applied onto the config file's JSON at start, SIGHUP and each "set".
// Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <deque>
#include <functional>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include "codec/packet.h"
#include "config/station_config.h"
#include "daemon/core/health.h"
#include "daemon/core/maintenance_book.h"
#include "daemon/core/window_assembler.h"
#include "daemon/store/station_store.h"
#include "daemon/uplink/backend.h"
#include "daemon/uplink/command_runner.h"
#include "daemon/uplink/downlink.h"
#include "daemon/uplink/link_policy.h"
#include "drivers/bus_scheduler.h"
#include "drivers/os/env.h"

namespace tarn::daemon {

using Json = nlohmann::json;

class Station final : public uplink::DownlinkTarget {
 public:
  Station(boost::asio::io_context& io, os::Env& clock, config::StationConfig cfg);
  ~Station();

  void start();
  // Orderly stop: the open window is closed and marked partial, handed on,
  // and `done` is called once it was sent or `deadline_ms` (real) passed.
  void stop(int deadline_ms, std::function<void()> done);
  // Applies a new, already validated config (SIGHUP).
  void reload(config::StationConfig cfg);
  // Maintenance periods (control socket, downlink), of the whole station or
  // one instrument (daemon/core/maintenance_book.h): that scope's samples are
  // flagged fail. Returns an error in words, empty on success; `data` gets
  // what was started or ended.
  std::string maintenance(const config::MaintenanceArgs& a, const std::string& via) override;
  std::string maintenance(const config::MaintenanceArgs& a, const std::string& via, Json& data);
  Json status() const;
  // One line for systemd's STATUS=.
  std::string status_line() const;
  const config::StationConfig& config() const { return cfg_; }

  // DownlinkTarget (io_context thread).
  std::int64_t station_now() const override { return now_s(); }
  Json ping() override;
  std::string resend(const config::ResendArgs& a, Json& data) override;
  std::string set_setting(const std::string& pointer, const Json& value) override;
  void save_nonces(const std::string& serialized) override;

 private:
  struct Reply {
    std::vector<std::uint8_t> bytes;
    bool then_apply = false;  // apply pending_config_ once it went out
  };
  void apply_config(config::StationConfig cfg);
  config::LoadResult config_with_overrides(const Json& overrides) const;
  void make_downlink();
  void on_command(const std::vector<std::uint8_t>& payload);
  void apply_pending_config();
  void policy_tick();
  void open_link(const std::string& reason);
  void close_link(const std::string& reason);
  bool budget_left() const;
  void send_counted(uplink::OutgoingPacket p, uplink::AckHandler done);
  // keep_assembler: the pipeline (QC, windows, alerts) is unchanged and kept.
  // keep_assembler / keep_link: a reload that leaves the pipeline / the link
  // as they were keeps the running ones.
  void build(bool keep_assembler = false, bool keep_link = false);
  void teardown(bool keep_link = false);
  void reap_retired();
  void start_lines();  // now, or once the retired schedulers let go of their ports
  void open_store();
  void on_poll(std::size_t line, std::size_t instrument, const drivers::PollResult& r);
  void handle(AssemblerOutput& out);
  // rebuilt: a window rebuilt from the archive for a resend (not counted as closed).
  void queue_window(const codec::Window& w, bool rebuilt = false);
  std::size_t packet_mtu() const;  // the uplink's, at most the codec's largest packet
  std::string resend_from_archive(std::int64_t from, std::int64_t to, Json& data);
  void queue_alerts(const std::vector<pipeline::AlertEvent>& events);
  void queue_cleanings(const std::vector<codec::CleaningRecord>& records);
  void queue_manifest_if_changed();
  void resume_from_archive();
  void save_state();
  void schedule_tick();
  void drain();
  void log_summaries();
  void check_clock();
  void schedule_health();
  void publish_health();
  Json sparklines() const;
  std::int64_t now_s() const { return clock_.wall_ms() / 1000; }

  boost::asio::io_context& io_;
  os::Env& clock_;
  config::StationConfig cfg_;
  std::int64_t started_ms_ = 0;
  std::string boot_time_;
  std::vector<std::unique_ptr<drivers::BusScheduler>> lines_;
  // Stopped schedulers whose exchange in progress has not finished yet (a
  // reload): destroyed once idle, never under a suspended poll.
  std::vector<std::unique_ptr<drivers::BusScheduler>> retired_;
  std::vector<store::ArchivedSample> pending_archive_;  // this poll cycle's, not yet written
  // Per channel, the newest sample the last replay read from the archive: the
  // pipeline emits those again (a sample held for the spike test's
  // look-ahead), and the archive must not get them twice.
  std::vector<std::int64_t> archived_until_;
  // Per instrument, the slot of its last poll: a reload's new schedulers fill
  // the slots in between with readings flagged missed.
  std::map<std::string, std::int64_t> last_slot_ms_;
  // link_fingerprint() of the config the running backend was built from
  // (its files as they were then): a reload compares the new config to it.
  std::string link_fp_;
  void flush_archive();
  bool lines_waiting_ = false;
  std::vector<std::vector<std::size_t>> channel_index_;  // [line][member] -> first channel
  std::vector<std::string> channel_names_, channel_units_, channel_instruments_;
  codec::CheckedManifest manifest_;
  std::unique_ptr<WindowAssembler> assembler_;
  std::unique_ptr<store::StationStore> store_;
  std::unique_ptr<uplink::UplinkBackend> uplink_;
  std::set<std::uint64_t> inflight_;
  std::uint64_t windows_closed_ = 0, packets_acked_ = 0, alerts_raised_ = 0;
  std::int64_t last_ack_t_ = 0;
  // Maintenance: the open periods (also rows of the archive's maintenance
  // table, read back at start) and the timer that ends them by themselves.
  MaintenanceBook maint_;
  MaintenanceOptions maint_opts_;
  boost::asio::steady_timer maint_timer_;
  void restore_maintenance();
  void apply_maintenance();
  void record_ended(const std::vector<MaintenanceEntry>& ended);
  void schedule_maintenance_end();
  void expire_maintenance();
  std::vector<std::string> instrument_names() const;
  AssemblerOutput out_;
  HealthOptions health_opts_;
  HealthReading health_;
  ClockSync clock_sync_ = ClockSync::unknown;
  std::int64_t last_wall_ms_ = 0, last_steady_ms_ = 0;
  std::uint64_t clock_steps_ = 0;
  std::string last_step_;
  boost::asio::steady_timer tick_timer_, drain_timer_, summary_timer_, health_timer_, retire_timer_;
  std::shared_ptr<bool> alive_;
  bool stopping_ = false;
  std::function<void()> stop_done_;
  // Link policy.
  uplink::LinkPolicyConfig policy_;
  std::unique_ptr<uplink::LinkSchedule> schedule_;
  uplink::CommandRunner runner_;
  bool link_open_ = false;
  std::int64_t opened_t_ = 0, drained_t_ = 0;
  uplink::DailyUsage usage_;
  bool usage_dirty_ = false;
  std::string last_policy_note_;
  boost::asio::steady_timer policy_timer_;
  // Downlink.
  std::unique_ptr<uplink::DownlinkReceiver> downlink_;
  std::deque<Reply> replies_;
  std::deque<store::Packet> resend_;
  std::size_t resend_inflight_ = 0;
  Json overrides_ = Json::object();
  std::optional<config::StationConfig> pending_config_;
};

}  // namespace tarn::daemon
