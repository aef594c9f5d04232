#include "daemon/core/station.h"

#include <boost/asio/post.hpp>
#include <map>
#include <memory>
#include <stdexcept>

#include "daemon/core/manifest_json.h"
#include "daemon/store/store_config.h"
#include "drivers/os/logging.h"
#include "drivers/os/utc_text.h"

namespace tarn::daemon {

namespace asio = boost::asio;

namespace {

// What the pipeline is built from (daemon/core/window_assembler.cpp and
// config/pipeline_config.cpp read nothing else): when a reload leaves it
// unchanged, the running pipeline is kept as it is, held samples included.
std::string pipeline_fingerprint(const config::StationConfig& c, std::uint32_t manifest) {
  Json j;
  j["manifest"] = manifest;
  j["location"] = {c.station.latitude, c.station.longitude};
  j["sampling"] = {c.sampling.period_s, c.sampling.window_s};
  j["alerts"] = c.alerts;
  Json chans = Json::array();
  for (auto& in : c.instruments)
    for (auto& ch : in.channels) chans.push_back({ch.name, in.period_s, ch.qc, ch.window});
  j["channels"] = chans;
  return j.dump();
}

}  // namespace

// The parts refer to each other: a reference to a part constructed later is
// only bound here, used once the Station is built.
Station::Station(asio::io_context& io, os::Env& clock, config::StationConfig cfg)
    : ctx_(io, clock, std::move(cfg)),
      clock_watch_(clock),
      packets_(ctx_),
      drain_(ctx_, link_, shore_),
      link_(ctx_, drain_, shore_),
      intake_(ctx_, packets_, drain_),
      lines_(ctx_, intake_, clock_watch_),
      maintenance_(ctx_),
      shore_(ctx_, intake_, packets_, drain_, maintenance_,
             [this](config::StationConfig c) { apply_config(std::move(c)); }),
      health_(ctx_, packets_, drain_, clock_watch_),
      status_(
          {ctx_, lines_, packets_, drain_, link_, shore_, maintenance_, clock_watch_, health_}) {}

Station::~Station() {
  *ctx_.alive = false;
  teardown();
}

void Station::open_store() {
  const auto& cfg = ctx_.cfg;
  const auto& opts = cfg.settings.get<store::StationStoreOptions>();
  auto res = store::StationStore::open(cfg.paths.state_dir, opts, ctx_.now_s());
  if (!res.ok())
    throw std::runtime_error("cannot open the store in " + cfg.paths.state_dir + ": " +
                             res.error().message());
  ctx_.store = std::move(res.value());
}

void Station::build(bool keep_assembler, bool keep_link) {
  ctx_.channel_names.clear();
  ctx_.channel_units.clear();
  ctx_.channel_instruments.clear();
  // Channels in config order: the manifest's and the assembler's order.
  std::map<std::string, std::size_t> first_of_instrument;
  for (auto& in : ctx_.cfg.instruments) {
    first_of_instrument[in.name] = ctx_.channel_names.size();
    for (auto& ch : in.channels) {
      ctx_.channel_names.push_back(ch.name);
      ctx_.channel_units.push_back(ch.unit);
      ctx_.channel_instruments.push_back(in.name);
    }
  }
  auto m = manifest_of_config(ctx_.cfg);
  if (!m.ok()) throw std::runtime_error("manifest: " + m.error().message);
  auto cm = codec::check_manifest(*m);
  if (!cm.ok()) throw std::runtime_error("manifest: " + cm.error().message);
  ctx_.manifest = *cm;
  if (!keep_assembler || !ctx_.assembler)
    ctx_.assembler = std::make_unique<WindowAssembler>(ctx_.cfg, ctx_.manifest.manifest);
  lines_.build(first_of_instrument);
  if (keep_link && ctx_.uplink) return;
  link_.build();
}

void Station::teardown(bool keep_link) {
  lines_.retire();
  if (keep_link) return;
  link_.drop();
}

void Station::start() {
  ctx_.started_ms = ctx_.clock.wall_ms();
  ctx_.boot_time = os::format_utc(ctx_.started_ms / 1000);
  open_store();
  health_.start();
  clock_watch_.check(health_.options().clock_sync);
  shore_.load_overrides();
  drain_.restore_usage();
  maintenance_.read_options();
  build();
  shore_.make_downlink();
  packets_.manifest_if_changed();
  intake_.resume_from_archive();
  maintenance_.restore();
  lines_.start();
  link_.tick();
  schedule_tick();
  drain_.drain();
  lines_.log_summaries();
  health_.schedule();
  const auto& cfg = ctx_.cfg;
  os::logger("station")->info(
      "station {} started: {} lines, {} instruments, {} channels, {} s period, {} s windows, "
      "speed x{}, store {}",
      cfg.station.id, cfg.lines.size(), cfg.instruments.size(), ctx_.channel_names.size(),
      cfg.sampling.period_s, cfg.sampling.window_s, ctx_.clock.speed(), ctx_.store->condition());
}

void Station::schedule_tick() {
  // Every period: let the pipeline settle held samples and close windows on
  // time, and the store run its retention and budget.
  std::weak_ptr<bool> alive = ctx_.alive;
  std::int64_t p = std::int64_t(ctx_.cfg.sampling.period_s) * 1000;
  std::int64_t next = (ctx_.clock.wall_ms() / p + 1) * p + p / 2;
  tick_timer_ = ctx_.clock.start_timer(next - ctx_.clock.wall_ms(), [this, alive] {
    if (!alive.lock() || ctx_.stopping) return;
    clock_watch_.check(health_.options().clock_sync);
    maintenance_.expire();
    ctx_.out.clear();
    ctx_.assembler->advance(ctx_.now_s(), ctx_.out);
    intake_.handle(ctx_.out);
    intake_.flush_archive();
    ctx_.store->maintain(ctx_.now_s());
    schedule_tick();
  });
}

std::string Station::maintenance(const config::MaintenanceArgs& a, const std::string& via,
                                 Json& data) {
  return maintenance_.request(a, via, data);
}

void Station::stop(int deadline_ms, std::function<void()> done) {
  ctx_.stopping = true;
  tick_timer_.cancel();
  maintenance_.cancel_timer();
  lines_.stop();
  ctx_.out.clear();
  ctx_.assembler->stop(ctx_.now_s(), ctx_.out);  // the open window, marked partial
  intake_.handle(ctx_.out);
  intake_.flush_archive();
  ctx_.save_state();
  drain_.set_stop_done([this, done] {
    drain_.cancel();
    lines_.cancel_summaries();
    health_.cancel();
    teardown();
    done();
  });
  std::weak_ptr<bool> alive = ctx_.alive;
  stop_deadline_ = ctx_.clock.start_real_timer(deadline_ms, [this, alive] {
    if (!alive.lock()) return;
    auto d = drain_.take_stop_done();
    if (!d) return;
    auto c = ctx_.store->outbox().counts();
    os::logger("station")->info("stopping; {} packet(s) wait in the outbox for the next start",
                                c.ok() ? c.value().unsent : -1);
    d();
  });
  drain_.drain();
  auto c = ctx_.store->outbox().counts();
  if (c.ok() && c.value().unsent == 0 && drain_.inflight().empty())
    if (auto d = drain_.take_stop_done()) asio::post(ctx_.io, d);
}

void Station::reload(config::StationConfig cfg) {
  shore_.add_overrides(cfg);
  apply_config(std::move(cfg));
}

void Station::apply_config(config::StationConfig cfg) {
  os::logger("station")->info("applying new config from {}", cfg.file);
  // A config that leaves the pipeline as it was (log level, lines, link)
  // keeps the running pipeline. Otherwise the pipeline carries on as after a
  // restart: its state (alert levels, maintenance, fouling references, last
  // closed windows) is saved and the open window is rebuilt from the archive,
  // so a reload neither repeats an alert nor sends a window start twice.
  bool same = false;
  if (auto m = manifest_of_config(cfg); m.ok())
    if (auto cm = codec::check_manifest(*m); cm.ok())
      same =
          pipeline_fingerprint(cfg, cm->hash) == pipeline_fingerprint(ctx_.cfg, ctx_.manifest.hash);
  if (!same) {
    // Samples held for the spike test's look-ahead go to the archive first.
    ctx_.out.clear();
    ctx_.assembler->settle_held(ctx_.out);
    intake_.handle(ctx_.out);
    ctx_.save_state();
  }
  intake_.flush_archive();  // the replay below reads the archive
  const bool same_link = link_.same_link(cfg);
  // The store's files stay open across a reload: its settings and the paths
  // apply at the next start.
  if (cfg.store != ctx_.cfg.store || cfg.paths.state_dir != ctx_.cfg.paths.state_dir ||
      cfg.paths.runtime_dir != ctx_.cfg.paths.runtime_dir) {
    os::logger("store")->warn(
        "the new config changes /store or /paths: they apply at the next start (systemctl "
        "restart tarn); the store runs on with the previous ones");
    cfg.store = ctx_.cfg.store;
    cfg.settings.put(ctx_.cfg.settings.get<store::StationStoreOptions>());
    cfg.paths = ctx_.cfg.paths;
  }
  tick_timer_.cancel();
  teardown(same_link);
  ctx_.cfg = std::move(cfg);
  os::set_log_level(ctx_.cfg.log_level);
  health_.reload();
  build(/*keep_assembler=*/same, same_link);
  packets_.manifest_if_changed();
  if (same)
    os::logger("station")->info("pipeline unchanged by the new config: it carries on as it was");
  else
    intake_.resume_from_archive();
  maintenance_.reload();
  shore_.make_downlink();
  lines_.start();
  if (same_link)
    os::logger("uplink")->info("link unchanged by the new config: it stays {}", ctx_.link_state());
  else
    link_.reconnect_if_open();
  schedule_tick();
}

}  // namespace tarn::daemon
