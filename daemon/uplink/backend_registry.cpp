#include "daemon/uplink/backend.h"

#include "daemon/uplink/mqtt_backend.h"
#include "daemon/uplink/serial_radio_backend.h"
#include "daemon/uplink/spool_backend.h"

namespace tarn::uplink {

const char* to_string(LinkState s) {
  switch (s) {
    case LinkState::down:
      return "down";
    case LinkState::connecting:
      return "connecting";
    case LinkState::up:
      return "up";
    case LinkState::stopping:
      return "stopping";
  }
  return "?";
}

const char* topic_suffix(PacketKind k) {
  switch (k) {
    case PacketKind::window:
      return "data";
    case PacketKind::alert:
      return "alert";
    case PacketKind::manifest:
      return "manifest";
    case PacketKind::health:
      return "health";
    case PacketKind::reply:
      return "reply";
    case PacketKind::provisional:
      return "window";
  }
  return "data";
}

const std::vector<BackendFactory>& backend_registry() {
  // One line per backend.
  static const std::vector<BackendFactory> table = {
      mqtt_backend_factory(),
      serial_radio_backend_factory(),
      spool_backend_factory(),
  };
  return table;
}

const BackendFactory* find_backend(const std::string& name) {
  for (auto& b : backend_registry())
    if (name == b.name) return &b;
  return nullptr;
}

void validate_uplink(const config::StationConfig& cfg, config::Problems& problems) {
  const BackendFactory* b = find_backend(cfg.uplink.backend);
  if (!b) {
    std::string list;
    for (auto& f : backend_registry()) list += std::string(list.empty() ? "" : ", ") + f.name;
    problems.add("/uplink/backend", "is \"" + cfg.uplink.backend + "\"; allowed: " + list);
    return;
  }
  b->validate(cfg, problems);
}

}  // namespace tarn::uplink
