// UplinkBackend: the one interface between the outbox drain and a link
// (mqtt, serial-radio, spool). A backend is a file pair
// daemon/uplink/<name>_backend.{h,cpp} plus one line in backend_registry.cpp.
// Thread-safety: every method and every callback runs on the io_context
// thread; backends that use library threads post back with asio::post.
#pragma once

#include <boost/asio/io_context.hpp>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "codec/packet_kind.h"
#include "config/problems.h"
#include "config/station_config.h"
#include "drivers/os/env.h"

namespace tarn::uplink {

enum class LinkState { down, connecting, up, stopping };
const char* to_string(LinkState s);

// What a packet is, so that the backend can route it (MQTT topic suffix): the
// station's one packet kind, codec/packet_kind.h.
using codec::PacketKind;
const char* topic_suffix(PacketKind k);

struct OutgoingPacket {
  std::uint64_t sequence = 0;
  PacketKind kind = PacketKind::window;
  std::vector<std::uint8_t> payload;
  bool retained = false;
};

// Called once per send(): ok=true only when the far end acknowledged
// (MQTT PUBACK, radio ack, spool fsync).
using AckHandler = std::function<void(std::uint64_t sequence, bool ok, const std::string& error)>;
// Called for each command that arrives from the shore.
using CommandHandler = std::function<void(const std::vector<std::uint8_t>& payload)>;

class UplinkBackend {
 public:
  virtual ~UplinkBackend() = default;
  virtual void start() = 0;  // connect (and keep reconnecting) until stop()
  virtual void stop() = 0;   // orderly: offline status, disconnect
  virtual LinkState state() const = 0;
  virtual std::string last_error() const = 0;
  // Largest payload the link carries in one packet.
  virtual std::size_t mtu() const = 0;
  // How many more sends the backend takes now (bounded in-flight window).
  virtual std::size_t free_slots() const = 0;
  // REQUIRES: state() == up and free_slots() > 0. The handler is called
  // exactly once, later, on the io_context thread.
  virtual void send(OutgoingPacket packet, AckHandler done) = 0;
  virtual void on_command(CommandHandler handler) = 0;
  // Bytes put on the link so far, protocol overhead included (estimate).
  virtual std::uint64_t bytes_sent() const = 0;
};

struct BackendContext {
  boost::asio::io_context& io;
  os::Env& env;  // time, timers, files, processes
  const config::StationConfig& config;
  std::string boot_time;  // ISO 8601 UTC
};

struct BackendFactory {
  const char* name;
  const char* summary;
  void (*validate)(const config::StationConfig&, config::Problems&);
  std::unique_ptr<UplinkBackend> (*create)(BackendContext&);
};

const std::vector<BackendFactory>& backend_registry();
const BackendFactory* find_backend(const std::string& name);
void validate_uplink(const config::StationConfig& cfg, config::Problems& problems);

}  // namespace tarn::uplink
