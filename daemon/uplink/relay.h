// Relay: the shore end of a serial-radio link (`tarn relay --config FILE`).
// Reads radio frames from its own modem, publishes each station's packets to
// an MQTT broker on the same topics the mqtt backend uses (it runs one mqtt
// backend per station: same options, same QoS 1, same topics), and answers.
//
// Acknowledgement policy: a data frame is acknowledged on the radio only after
// the broker's PUBACK. The relay then needs no durable queue of its own: the
// station's outbox stays the one durable queue, and a relay crash or a broker
// outage can never lose a packet the station believes delivered. While the
// broker is unreachable the relay's pongs say "not ready", so the station
// keeps its link down and spends no airtime on frames nobody can take.
//
// Duplicates (a retransmission after a lost ack) are recognised by sequence:
// the last `seen_per_station` sequences published for each station are kept
// in <state_dir>/relay-seen.log (appended and fsync'ed before the ack), so a
// relay restart does not publish them again; a duplicate is acknowledged
// again and not published.
// Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <cstdint>
#include <deque>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include "config/problems.h"
#include "config/station_config.h"
#include "daemon/uplink/backend.h"
#include "daemon/uplink/radio_port.h"
#include "drivers/os/env.h"

namespace tarn::uplink {

struct RelayConfig {
  RadioPortOptions modem;
  int reopen_ms = 5000;
  int command_timeout_ms = 2000;  // command frames: resend after this, 3 tries
  std::vector<std::string> stations;
  nlohmann::json broker;  // the mqtt backend's options, as in a station's uplink.options
  std::string state_dir;
  std::size_t seen_per_station = 4096;
  std::string log_level = "info";
};

// Parses and validates a relay config file (JSON, comments allowed). Never
// opens a port or socket. Problems carry JSON pointers of this file.
std::optional<RelayConfig> load_relay_config(const std::string& path, config::Problems& problems);

// The sequences already published, per station, bounded, persisted.
class SeenSequences {
 public:
  // The file is read and rewritten (compacted) through `env`.
  SeenSequences(os::Env& env, std::string path, std::size_t per_station);
  // Reads the file; a torn last line (power cut) is ignored. Error in words.
  std::string load();
  bool contains(const std::string& station, std::uint64_t seq) const;
  // Appends and fsyncs before returning. Error in words (then not durable).
  std::string add(const std::string& station, std::uint64_t seq);
  std::size_t size(const std::string& station) const;

 private:
  void remember(const std::string& station, std::uint64_t seq);
  std::string compact();
  os::Env& env_;
  std::string path_;
  std::size_t per_station_;
  int fd_ = -1;
  std::size_t lines_ = 0;
  struct PerStation {
    std::set<std::uint64_t> set;
    std::deque<std::uint64_t> order;
  };
  std::map<std::string, PerStation> seen_;

 public:
  ~SeenSequences();
};

struct RelayCounters {
  std::uint64_t published = 0, duplicates = 0, refused_not_ready = 0, unknown_station = 0,
                commands_forwarded = 0;
};

class Relay {
 public:
  Relay(boost::asio::io_context& io, os::Env& env, RelayConfig cfg);
  ~Relay();
  // Returns an error in words (state file unusable), empty on success.
  std::string start();
  void stop();
  const RelayCounters& counters() const { return counters_; }

 private:
  struct StationLink;
  void open_modem();
  void on_frame(const codec::radio::Frame& f);
  void on_data(StationLink& s, const codec::radio::Frame& f);
  void on_ping(StationLink& s, const codec::radio::Frame& f);
  void on_command_ack(StationLink& s, const codec::radio::Frame& f);
  void send_commands();
  void schedule_tick();
  void ack(const StationLink& s, std::uint64_t seq);

  boost::asio::io_context& io_;
  os::Env& env_;
  RelayConfig cfg_;
  std::unique_ptr<RadioPort> modem_;
  SeenSequences seen_;
  std::vector<std::unique_ptr<StationLink>> links_;
  std::map<std::uint16_t, StationLink*> by_tag_;
  os::Timer tick_;  // every 100 ms real time: reopen, command resends
  std::int64_t next_open_ms_ = 0;
  RelayCounters counters_;
  std::shared_ptr<bool> alive_;
  bool stopped_ = true;
};

}  // namespace tarn::uplink
