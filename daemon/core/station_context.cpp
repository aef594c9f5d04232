#include "daemon/core/station_context.h"

namespace tarn::daemon {

StationContext::StationContext(boost::asio::io_context& io_context, os::Env& c,
                               config::StationConfig config)
    : io(io_context), clock(c), cfg(std::move(config)) {}

std::vector<std::string> StationContext::instrument_names() const {
  std::vector<std::string> v;
  for (auto& in : cfg.instruments) v.push_back(in.name);
  return v;
}

void StationContext::save_state() {
  store->archive().put_state("pipeline", assembler->snapshot(), now_s());
}

std::string StationContext::link_state() const {
  return uplink ? uplink::to_string(uplink->state()) : "down";
}

}  // namespace tarn::daemon
