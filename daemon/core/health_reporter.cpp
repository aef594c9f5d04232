#include "daemon/core/health_reporter.h"

#include <cstdlib>

#include "daemon/core/clock_watch.h"
#include "daemon/core/outbox_drain.h"
#include "daemon/core/packet_queue.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

HealthReporter::HealthReporter(StationContext& ctx, PacketQueue& packets, OutboxDrain& drain,
                               const ClockWatch& clock_watch)
    : ctx_(ctx), packets_(packets), drain_(drain), clock_watch_(clock_watch) {}

void HealthReporter::start() {
  opts_ = ctx_.cfg.settings.get<HealthOptions>();
  auto& a = ctx_.store->archive();
  // Board boots, not daemon starts: the runtime directory lives on /run, a
  // tmpfs every boot empties (the unit keeps it over restarts of the
  // service with RuntimeDirectoryPreserve=yes), so a marker there tells a
  // reboot from a restart.
  auto bc = a.get_state("boot_count");
  std::int64_t n = bc.ok() && bc.value() ? std::atoll(bc.value()->c_str()) : 0;
  const std::string marker = ctx_.cfg.paths.runtime_dir + "/boot-counted";
  if (!ctx_.clock.exists(marker)) {
    ++n;
    a.put_state("boot_count", std::to_string(n), ctx_.now_s());
    // Not fatal: without the marker the next start counts a boot again.
    if (auto e = ctx_.clock.write_file_atomic(marker, std::to_string(n) + "\n"); !e.empty())
      os::logger("station")->debug("boot marker: {}", e);
    os::logger("station")->info("board boot #{} (first start since the board booted)", n);
  }
  reading_ = read_health(ctx_.clock, opts_, ctx_.cfg.paths.state_dir);
  reading_.boot_count = n;
}

void HealthReporter::reload() {
  const auto interval_before = opts_.interval_s;
  opts_ = ctx_.cfg.settings.get<HealthOptions>();
  // Rescheduled only for a new interval: a reload every half hour must not
  // push an hourly health packet back for ever.
  if (opts_.interval_s != interval_before) {
    timer_.cancel();
    schedule();
  }
}

void HealthReporter::schedule() {
  std::weak_ptr<bool> alive = ctx_.alive;
  timer_ = ctx_.clock.start_timer(std::int64_t(opts_.interval_s) * 1000, [this, alive] {
    if (!alive.lock() || ctx_.stopping) return;
    publish();
    schedule();
  });
}

void HealthReporter::publish() {
  std::int64_t boots = reading_.boot_count;
  reading_ = read_health(ctx_.clock, opts_, ctx_.cfg.paths.state_dir);
  reading_.boot_count = boots;
  if (!opts_.supply_channel.empty())
    for (std::size_t i = 0; i < ctx_.channel_names.size(); ++i)
      if (ctx_.channel_names[i] == opts_.supply_channel) {
        const auto& v = ctx_.assembler->view(i);
        if (v.last && v.last->value) reading_.supply_v = *v.last->value;
      }
  codec::HealthRecord rec;
  rec.t = ctx_.now_s();
  rec.board_temp_c = reading_.board_temp_c;
  rec.disk_free_mib = reading_.disk_free_mib;
  rec.supply_v = reading_.supply_v;
  packets_.health(rec, clock_watch_.sync() == ClockSync::unsynchronised);
  drain_.drain();
}

Json HealthReporter::sparklines() const {
  // Hourly means of the last 6 hours per channel, from the archive (passed
  // samples only), oldest first; null where an hour has none.
  Json out = Json::object();
  if (!ctx_.store) return out;
  std::int64_t now = ctx_.now_s(), span = 6 * 3600, step = 1800;
  std::int64_t from = now - span;
  for (auto& name : ctx_.channel_names) {
    std::vector<double> sum(std::size_t(span / step), 0.0);
    std::vector<int> n(sum.size(), 0);
    ctx_.store->archive().for_each_sample(from, now, name, [&](const store::ArchivedSample& s) {
      if (s.flag == codec::Flag::pass && s.value) {
        std::size_t b = std::size_t((s.t - from) / step);
        if (b < sum.size()) {
          sum[b] += *s.value;
          n[b]++;
        }
      }
      return true;
    });
    Json arr = Json::array();
    for (std::size_t i = 0; i < sum.size(); ++i)
      arr.push_back(n[i] ? Json(sum[i] / n[i]) : Json(nullptr));
    out[name] = arr;
  }
  return out;
}

}  // namespace tarn::daemon
