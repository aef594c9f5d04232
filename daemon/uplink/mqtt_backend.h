// The "mqtt" backend: paho.mqtt.cpp async client, MQTT 3.1.1, QoS 1.
// Topics (no leading slash, station id in the path):
//   <prefix>/<station>/data      window and cleaning packets (codec, binary)
//   <prefix>/<station>/alert     alert packets
//   <prefix>/<station>/manifest  channel manifest (retained)
//   <prefix>/<station>/health    station health packets
//   <prefix>/<station>/status    "online ..." / "offline" (retained; last will)
//   <prefix>/<station>/cmd       downlink commands (subscribed)
//   <prefix>/<station>/reply     answers to commands
#pragma once

#include "daemon/uplink/backend.h"

namespace tarn::uplink {

struct MqttOptions {
  std::string host = "127.0.0.1";
  int port = 1883;
  std::string client_id;  // default: tarn-<station>
  std::string topic_prefix = "tarn";
  int keepalive_s = 60;
  int max_inflight = 8;
  std::size_t mtu = 4096;
  bool tls = false;
  std::string ca_file, cert_file, key_file;
  bool verify_hostname = true;
  std::string secrets_file;  // JSON {"username": "...", "password": "..."}, mode 0600/0400
};

MqttOptions read_mqtt_options(const config::StationConfig& cfg, config::Problems& problems);
BackendFactory mqtt_backend_factory();

}  // namespace tarn::uplink
