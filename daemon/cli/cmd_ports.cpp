// tarn ports [--json]: lists the serial ports this machine has, with their
// /dev/serial/by-id link, USB vendor:product, serial number and description,
// so a line can be configured by a path that survives renumbering or by its
// USB identity. Never opens a port; needs no daemon.
#include <cstdio>

#include <nlohmann/json.hpp>

#include "daemon/cli/command.h"
#include "drivers/serial_port.h"

namespace {

std::string vid_pid(const tarn::drivers::PortInfo& p) {
  if (p.usb_vendor < 0) return "-";
  char buf[16];
  std::snprintf(buf, sizeof buf, "%04x:%04x", p.usb_vendor & 0xFFFF, p.usb_product & 0xFFFF);
  return buf;
}

int run_ports(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {}, {"json", "help"});
  if (!o.ok() || o.has("help")) {
    std::fprintf(o.has("help") ? stdout : stderr,
                 "%s%susage: tarn ports [--json]\n"
                 "Lists serial ports: path, by-id link, USB vendor:product, serial, description.\n",
                 o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  auto ports = tarn::drivers::list_ports();
  if (o.has("json")) {
    nlohmann::json a = nlohmann::json::array();
    for (auto& p : ports) {
      nlohmann::json j = {{"path", p.path},
                          {"by_id", p.by_id},
                          {"transport", p.transport},
                          {"description", p.description}};
      if (p.usb_vendor >= 0) {
        j["usb"] = {{"vendor_product", vid_pid(p)},
                    {"serial", p.usb_serial},
                    {"manufacturer", p.usb_manufacturer},
                    {"product", p.usb_product_name}};
      }
      a.push_back(j);
    }
    std::printf("%s\n", a.dump(2).c_str());
    return 0;
  }
  if (ports.empty()) {
    std::printf("no serial ports found\n");
    return 0;
  }
  for (auto& p : ports) {
    std::printf("%s\n", p.path.c_str());
    std::printf("  by-id        %s\n", p.by_id.empty() ? "-" : p.by_id.c_str());
    std::printf("  transport    %s\n", p.transport.c_str());
    if (p.usb_vendor >= 0) {
      std::printf("  usb          %s  serial %s\n", vid_pid(p).c_str(),
                  p.usb_serial.empty() ? "-" : p.usb_serial.c_str());
      if (!p.usb_manufacturer.empty() || !p.usb_product_name.empty())
        std::printf("  maker        %s %s\n", p.usb_manufacturer.c_str(),
                    p.usb_product_name.c_str());
    }
    std::printf("  description  %s\n", p.description.empty() ? "-" : p.description.c_str());
  }
  std::printf("%zu port%s\n", ports.size(), ports.size() == 1 ? "" : "s");
  return 0;
}

}  // namespace

TARN_COMMAND(ports, "list serial ports (by-id link, USB identity)", run_ports);
