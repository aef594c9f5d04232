#include "daemon/core/station.h"

#include <algorithm>
#include <boost/asio/post.hpp>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>
#include <stdexcept>

#include "codec/encoder.h"
#include "daemon/core/archive_windows.h"
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"
#include "daemon/core/time_format.h"
#include "daemon/pipeline/reasons.h"
#include "daemon/store/store_config.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

namespace asio = boost::asio;

namespace {

std::uint32_t reason_of(drivers::ReadProblem p) {
  namespace r = pipeline::reason;
  switch (p) {
    case drivers::ReadProblem::none:
      return 0;
    case drivers::ReadProblem::no_reply:
      return r::no_reply;
    case drivers::ReadProblem::garbled:
      return r::garbled;
    case drivers::ReadProblem::offline:
      return r::offline;
    case drivers::ReadProblem::instrument_error:
      return r::instrument_status;
    case drivers::ReadProblem::warming_up:
      return r::warming_up;
    case drivers::ReadProblem::missed:
      return r::poll_missed;
  }
  return 0;
}

uplink::PacketKind wire_kind(store::PacketKind k) {
  switch (k) {
    case store::PacketKind::window:
      return uplink::PacketKind::window;
    case store::PacketKind::alert:
      return uplink::PacketKind::alert;
    case store::PacketKind::manifest:
      return uplink::PacketKind::manifest;
    case store::PacketKind::health:
      return uplink::PacketKind::health;
  }
  return uplink::PacketKind::window;
}

}  // namespace

Station::Station(asio::io_context& io, os::Env& clock, config::StationConfig cfg)
    : io_(io),
      clock_(clock),
      cfg_(std::move(cfg)),
      maint_timer_(io),
      tick_timer_(io),
      drain_timer_(io),
      summary_timer_(io),
      health_timer_(io),
      retire_timer_(io),
      alive_(std::make_shared<bool>(true)),
      runner_(clock),
      policy_timer_(io) {}

Station::~Station() {
  *alive_ = false;
  teardown();
}

void Station::open_store() {
  config::Problems p;
  auto opts = store::read_store_config(cfg_.store.is_null() ? nullptr : &cfg_.store, "/store", p);
  auto res = store::StationStore::open(cfg_.paths.state_dir, opts, now_s());
  if (!res.ok())
    throw std::runtime_error("cannot open the store in " + cfg_.paths.state_dir + ": " +
                             res.status().message());
  store_ = std::move(res.value());
}

// What the pipeline is built from (daemon/core/window_assembler.cpp and
// config/pipeline_config.cpp read nothing else): when a reload leaves it
// unchanged, the running pipeline is kept as it is, held samples included.
static std::string pipeline_fingerprint(const config::StationConfig& c, std::uint32_t manifest) {
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

// What the link is built from: the station id (client id, topics), the uplink
// section, and the files it names (CA, certificate, key, secrets: a changed
// password applies at the next reload). A reload that leaves all of it
// unchanged keeps the link up: no reconnect on a metered modem, and no
// orderly disconnect blocking the event loop.
static std::string link_fingerprint(const config::StationConfig& c) {
  Json j = {c.station.id, c.uplink.backend, c.uplink.options, c.uplink.policy};
  Json files = Json::array();
  std::function<void(const Json&)> walk = [&](const Json& v) {
    if (v.is_structured()) {
      for (auto& e : v) walk(e);
    } else if (v.is_string()) {
      std::error_code ec;
      const std::string& path = v.get_ref<const std::string&>();
      if (!path.empty() && std::filesystem::is_regular_file(path, ec)) {
        auto size = std::filesystem::file_size(path, ec);
        auto mtime = std::filesystem::last_write_time(path, ec).time_since_epoch().count();
        files.push_back({path, ec ? 0 : size, ec ? 0 : mtime});
      }
    }
  };
  walk(c.uplink.options);
  j.push_back(files);
  return j.dump();
}

void Station::build(bool keep_assembler, bool keep_link) {
  channel_index_.clear();
  channel_names_.clear();
  channel_units_.clear();
  channel_instruments_.clear();
  // Channels in config order: the manifest's and the assembler's order.
  std::map<std::string, std::size_t> first_of_instrument;
  for (auto& in : cfg_.instruments) {
    first_of_instrument[in.name] = channel_names_.size();
    for (auto& ch : in.channels) {
      channel_names_.push_back(ch.name);
      channel_units_.push_back(ch.unit);
      channel_instruments_.push_back(in.name);
    }
  }
  auto m = manifest_of_config(cfg_);
  if (!m.ok()) throw std::runtime_error("manifest: " + m.error().message);
  auto cm = codec::check_manifest(*m);
  if (!cm.ok()) throw std::runtime_error("manifest: " + cm.error().message);
  manifest_ = *cm;
  if (!keep_assembler || !assembler_)
    assembler_ = std::make_unique<WindowAssembler>(cfg_, manifest_.manifest);

  for (std::size_t li = 0; li < cfg_.lines.size(); ++li) {
    const auto& line = cfg_.lines[li];
    std::vector<drivers::BusScheduler::Member> members;
    std::vector<std::size_t> first;
    for (auto& in : cfg_.instruments) {
      if (in.line != line.name) continue;
      const drivers::DriverFactory* f = drivers::find_driver(in.driver);
      drivers::BusScheduler::Member mem;
      mem.instrument = in;
      mem.driver = f->create(in, line);
      mem.period_s = in.period_s ? in.period_s : cfg_.sampling.period_s;
      members.push_back(std::move(mem));
      first.push_back(first_of_instrument[in.name]);
    }
    channel_index_.push_back(first);
    if (members.empty()) {
      lines_.push_back(nullptr);
      continue;
    }
    std::weak_ptr<bool> alive = alive_;
    lines_.push_back(std::make_unique<drivers::BusScheduler>(
        io_, clock_, line, std::move(members),
        [this, alive, li](std::size_t i, const drivers::PollResult& r) {
          if (alive.lock()) on_poll(li, i, r);
        }));
  }
  // A reload that drops an instrument forgets its last slot: added again
  // later, it must not get the time between filled with missed readings.
  std::erase_if(last_slot_ms_, [&](const auto& e) { return !first_of_instrument.count(e.first); });
  if (keep_link && uplink_) return;
  link_fp_ = link_fingerprint(cfg_);
  uplink::BackendContext ctx{io_, clock_, cfg_, boot_time_};
  uplink_ = uplink::find_backend(cfg_.uplink.backend)->create(ctx);
  std::weak_ptr<bool> alive = alive_;
  uplink_->on_command([this, alive](const std::vector<std::uint8_t>& payload) {
    if (alive.lock()) on_command(payload);
  });
  config::Problems p;
  policy_ = uplink::read_link_policy(cfg_, p);
  schedule_ = std::make_unique<uplink::LinkSchedule>(policy_, now_s());
}

void Station::teardown(bool keep_link) {
  for (auto& l : lines_)
    if (l) {
      l->stop();
      retired_.push_back(std::move(l));
    }
  lines_.clear();
  reap_retired();
  if (keep_link) return;
  if (uplink_) uplink_->stop();
  uplink_.reset();
  inflight_.clear();
}

void Station::start_lines() {
  // A retired scheduler still inside a poll holds its port (and the lock):
  // the new ones start once the old ones let go, so a reload does not show
  // the lines offline for a moment.
  if (!retired_.empty()) {
    lines_waiting_ = true;
    return;
  }
  lines_waiting_ = false;
  if (stopping_) return;
  for (auto& l : lines_)
    if (l) l->start(last_slot_ms_);
}

void Station::reap_retired() {
  std::erase_if(retired_, [](auto& l) { return !l->busy(); });
  if (retired_.empty()) {
    if (lines_waiting_) start_lines();
    return;
  }
  std::weak_ptr<bool> alive = alive_;
  retire_timer_.expires_after(std::chrono::milliseconds(200));
  retire_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock()) reap_retired();
  });
}

void Station::start() {
  started_ms_ = clock_.wall_ms();
  boot_time_ = iso_utc(started_ms_ / 1000);
  open_store();
  {
    config::Problems ignore;
    health_opts_ = read_health_options(cfg_, ignore);
    auto& a = store_->archive();
    // Board boots, not daemon starts: the runtime directory lives on /run, a
    // tmpfs every boot empties (the unit keeps it over restarts of the
    // service with RuntimeDirectoryPreserve=yes), so a marker there tells a
    // reboot from a restart.
    auto bc = a.get_state("boot_count");
    std::int64_t n = bc.ok() && bc.value() ? std::atoll(bc.value()->c_str()) : 0;
    const std::string marker = cfg_.paths.runtime_dir + "/boot-counted";
    if (!std::filesystem::exists(marker)) {
      ++n;
      a.put_state("boot_count", std::to_string(n), now_s());
      std::ofstream(marker) << n << "\n";
      os::logger("station")->info("board boot #{} (first start since the board booted)", n);
    }
    health_ = read_health(clock_, health_opts_, cfg_.paths.state_dir);
    health_.boot_count = n;
  }
  check_clock();
  if (auto o = store_->archive().get_state("overrides"); o.ok() && o.value()) {
    overrides_ = Json::parse(*o.value(), nullptr, false);
    if (!overrides_.is_object()) overrides_ = Json::object();
  }
  if (!overrides_.empty()) {
    auto res = config_with_overrides(overrides_);
    if (res.config) {
      cfg_ = std::move(*res.config);
      os::logger("downlink")->info("setting overrides applied: {}", overrides_.dump());
    } else {
      os::logger("downlink")
          ->warn("setting overrides {} not applied: {}", overrides_.dump(),
                 res.problems.render(cfg_.file));
    }
  }
  if (auto u = store_->archive().get_state("link_usage"); u.ok() && u.value())
    usage_ = uplink::DailyUsage::parse(*u.value(), now_s());
  else
    usage_.roll(now_s());
  {
    config::Problems ignore;  // checked with the whole config before it got here
    maint_opts_ = read_maintenance_options(cfg_, ignore);
  }
  build();
  make_downlink();
  queue_manifest_if_changed();
  resume_from_archive();
  restore_maintenance();
  for (auto& l : lines_)
    if (l) l->start(last_slot_ms_);
  policy_tick();
  schedule_tick();
  drain();
  log_summaries();
  schedule_health();
  os::logger("station")->info(
      "station {} started: {} lines, {} instruments, {} channels, {} s period, {} s windows, "
      "speed x{}, store {}",
      cfg_.station.id, cfg_.lines.size(), cfg_.instruments.size(), channel_names_.size(),
      cfg_.sampling.period_s, cfg_.sampling.window_s, clock_.speed(), store_->condition());
}

void Station::resume_from_archive() {
  auto& archive = store_->archive();
  auto saved = archive.get_state("pipeline");
  std::int64_t t = now_s();
  if (saved.ok() && saved.value()) {
    for (auto& note : assembler_->restore(*saved.value()))
      os::logger("station")->warn("restore: {}", note);
  }
  // Samples archived after the last saved state (a power cut, a kill) are
  // replayed, so the current window (and one closed by nobody before the
  // kill) resumes where it was. The pipeline starts at the first of them.
  std::int64_t w = cfg_.sampling.window_s;
  std::int64_t from = (t / w) * w - w;
  if (auto rp = assembler_->resume_point(); rp && *rp < from && *rp >= t - 6 * w) from = *rp;
  auto samples = archive.samples_since(from);
  std::int64_t start_t = t;
  if (samples.ok() && !samples.value().empty()) start_t = std::min(t, samples.value().front().t);
  out_.clear();
  assembler_->start(start_t, out_);
  std::size_t replayed = 0;
  archived_until_.assign(channel_names_.size(), std::numeric_limits<std::int64_t>::min());
  if (samples.ok()) {
    std::map<std::string, std::size_t> index;
    for (std::size_t i = 0; i < channel_names_.size(); ++i) index[channel_names_[i]] = i;
    constexpr std::uint32_t driver_bits =
        pipeline::reason::no_reply | pipeline::reason::garbled | pipeline::reason::offline |
        pipeline::reason::instrument_status | pipeline::reason::warming_up |
        pipeline::reason::poll_missed | pipeline::reason::clock_unsynced;
    for (auto& s : samples.value()) {
      auto it = index.find(s.channel);
      if (it == index.end()) continue;
      pipeline::RawSample raw{s.t, s.value, s.reasons & driver_bits};
      archived_until_[it->second] = std::max(archived_until_[it->second], s.t);
      std::size_t before = out_.samples.size();
      assembler_->push(it->second, raw, out_);
      replayed += out_.samples.size() > before ? 1 : 0;
    }
  }
  // Replayed samples are in the archive already: only windows and alerts go on.
  out_.samples.clear();
  // Cleaning steps completed before the cut were sent then.
  out_.cleanings.clear();
  handle(out_);
  if (replayed)
    os::logger("station")->info("resumed the current window from the archive ({} samples)",
                                replayed);
}

void Station::on_poll(std::size_t li, std::size_t ii, const drivers::PollResult& r) {
  if (stopping_) return;
  if (lines_[li]) last_slot_ms_[lines_[li]->status()[ii].name] = r.t_ms;
  std::size_t first = channel_index_[li][ii];
  out_.clear();
  for (std::size_t c = 0; c < r.channels.size(); ++c) {
    const auto& reading = r.channels[c];
    pipeline::RawSample raw;
    raw.t = r.t_ms / 1000;
    raw.value = reading.value;
    raw.source_reasons = reason_of(reading.problem);
    if (clock_sync_ == ClockSync::unsynchronised)
      raw.source_reasons |= pipeline::reason::clock_unsynced;
    assembler_->push(first + c, raw, out_);
  }
  handle(out_);
}

void Station::flush_archive() {
  if (pending_archive_.empty() || !store_) return;
  store_->append_samples(std::move(pending_archive_), now_s());
  pending_archive_.clear();
}

void Station::handle(AssemblerOutput& out) {
  for (auto& s : out.samples)
    if (s.channel >= archived_until_.size() || s.sample.t > archived_until_[s.channel])
      pending_archive_.push_back(
          {channel_names_[s.channel], s.sample.t, s.sample.value, s.sample.flag, s.sample.reasons});
  // One archive transaction per poll cycle (flushed by the tick), not one
  // per instrument poll: commits are most of what the SD card is written.
  // A closing window (its samples go first), a reload, a stop or 4096
  // waiting samples flush earlier. A power cut loses at most the samples of
  // the cycle being read: one per channel.
  if (!out.windows.empty() || pending_archive_.size() >= 4096) flush_archive();
  if (!out.alerts.empty()) queue_alerts(out.alerts);
  if (!out.cleanings.empty()) queue_cleanings(out.cleanings);
  for (auto& w : out.windows) queue_window(w);
  if (!out.windows.empty()) save_state();
  bool any = !out.windows.empty() || !out.alerts.empty();
  out.clear();
  if (any) drain();
}

void Station::queue_window(const codec::Window& w, bool rebuilt) {
  codec::EncodeOptions opts;
  opts.mtu = packet_mtu();
  opts.windows_per_packet = 1;
  auto trial = codec::encode_windows(manifest_, std::span<const codec::Window>(&w, 1), 1, opts);
  if (!trial.ok()) {
    os::logger("station")->error("window {} not encoded: {}", iso_utc(w.start),
                                 trial.error().message);
    return;
  }
  std::size_t parts = trial->size();
  std::int64_t now = now_s();
  for (std::size_t i = 0; i < parts; ++i) {
    // The codec numbers split packets consecutively; each part is encoded
    // again with the sequence number the outbox assigns it.
    auto m = manifest_;
    store::PacketSource source = [m, w, opts, i](std::uint64_t seq) {
      auto r = codec::encode_windows(m, std::span<const codec::Window>(&w, 1), seq - i, opts);
      return r.ok() && r->size() > i ? (*r)[i].bytes : std::vector<std::uint8_t>{};
    };
    store_->insert_packet(source, store::Priority::normal, store::PacketKind::window,
                          w.start + cfg_.sampling.window_s, now);
  }
  if (rebuilt) return;
  windows_closed_++;
  os::logger("station")->debug("window {} closed{}, {} packet(s)", iso_utc(w.start),
                               w.partial ? " (partial)" : "", parts);
}

void Station::queue_alerts(const std::vector<pipeline::AlertEvent>& events) {
  std::vector<codec::AlertEvent> wire;
  for (auto& e : events) {
    codec::AlertEvent a;
    int ch = codec::channel_index(manifest_.manifest, e.channel);
    a.channel = std::uint16_t(ch < 0 ? 0 : ch);
    a.level = e.to_level;
    a.level_name = e.to_name;
    a.previous_level = e.from_level;
    a.statistic = e.value;
    a.window_start = e.window_start;
    a.rule_id = e.rule;
    if (e.change == pipeline::AlertChange::stale) {
      a.kind = codec::AlertKind::stale;
      a.cause = static_cast<codec::StaleCause>(e.stale_cause);
    } else if (e.change == pipeline::AlertChange::resumed) {
      a.kind = codec::AlertKind::resumed;
    }
    wire.push_back(a);
    alerts_raised_++;
    if (e.change == pipeline::AlertChange::stale) {
      // A standing level nobody can confirm: said louder than a change.
      os::logger("alerts")->warn(
          "{}: level {} is stale ({}): no usable {} of {} up to window {}; it stands unconfirmed",
          e.rule, e.from_name, pipeline::stale_cause_name(e.stale_cause),
          pipeline::statistic_name(e.statistic), e.channel, iso_utc(e.window_start));
      continue;
    }
    os::logger("alerts")->info(
        "{}: {} {} -> {} ({} {} = {:.3f}, window {})", e.rule,
        pipeline::alert_change_name(e.change), e.from_name.empty() ? "none" : e.from_name,
        e.to_name.empty() ? "none" : e.to_name, e.channel, pipeline::statistic_name(e.statistic),
        e.value, iso_utc(e.window_start));
  }
  auto m = manifest_;
  store::PacketSource source = [m, wire](std::uint64_t seq) {
    auto r = codec::encode_alerts(m, wire, seq);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  store_->insert_packet(source, store::Priority::alert, store::PacketKind::alert, now_s(), now_s());
}

void Station::queue_cleanings(const std::vector<codec::CleaningRecord>& records) {
  for (auto& r : records) {
    auto fmt = [](const std::optional<double>& v) {
      return v ? fmt::format("{:.3f}", *v) : std::string("none");
    };
    os::logger("station")->info("cleaning step of {}: median {} before ({} values), {} after ({})",
                                channel_names_[r.channel], fmt(r.before), r.n_before, fmt(r.after),
                                r.n_after);
  }
  // Data, not an alert: on the data topic in a packet of its own, at normal
  // priority. The shore corrects the drift between two cleanings from these.
  auto m = manifest_;
  store::PacketSource source = [m, records](std::uint64_t seq) {
    auto r = codec::encode_cleanings(m, records, seq);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  store_->insert_packet(source, store::Priority::normal, store::PacketKind::window, now_s(),
                        now_s());
}

std::size_t Station::packet_mtu() const {
  return std::min<std::size_t>(uplink_ ? uplink_->mtu() : codec::kMaxPacketBytes,
                               codec::kMaxPacketBytes);
}

void Station::queue_manifest_if_changed() {
  auto& archive = store_->archive();
  std::string hash = std::to_string(manifest_.hash);
  auto saved = archive.get_state("manifest_hash");
  if (saved.ok() && saved.value() && *saved.value() == hash) return;
  // Split to the link's MTU like the windows: a serial radio carries a few
  // hundred bytes per frame, and the shore needs every part to decode.
  const std::size_t mtu = packet_mtu();
  auto trial = codec::encode_manifest(manifest_, 1, mtu);
  if (!trial.ok()) {
    os::logger("station")->error("manifest not encoded: {}", trial.error().message);
    return;
  }
  for (std::size_t i = 0; i < trial->size(); ++i) {
    auto m = manifest_;
    store::PacketSource source = [m, i, mtu](std::uint64_t seq) {
      auto r = codec::encode_manifest(m, seq - i, mtu);
      return r.ok() && r->size() > i ? (*r)[i].bytes : std::vector<std::uint8_t>{};
    };
    store_->insert_packet(source, store::Priority::normal, store::PacketKind::manifest, now_s(),
                          now_s());
  }
  archive.put_state("manifest_hash", hash, now_s());
  os::logger("station")->info("channel manifest {:08x} queued ({} packet(s))", manifest_.hash,
                              trial->size());
}

void Station::save_state() {
  store_->archive().put_state("pipeline", assembler_->snapshot(), now_s());
}

void Station::schedule_tick() {
  // Every period: let the pipeline settle held samples and close windows on
  // time, and the store run its retention and budget.
  std::weak_ptr<bool> alive = alive_;
  std::int64_t p = std::int64_t(cfg_.sampling.period_s) * 1000;
  std::int64_t next = (clock_.wall_ms() / p + 1) * p + p / 2;
  tick_timer_.expires_after(clock_.real_delay_until(next));
  tick_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (ec || !alive.lock() || stopping_) return;
    check_clock();
    expire_maintenance();
    out_.clear();
    assembler_->advance(now_s(), out_);
    handle(out_);
    flush_archive();
    store_->maintain(now_s());
    schedule_tick();
  });
}

bool Station::budget_left() const {
  return policy_.daily_budget_bytes <= 0 || usage_.bytes < policy_.daily_budget_bytes;
}

void Station::send_counted(uplink::OutgoingPacket p, uplink::AckHandler done) {
  // Alerts are exempt from the daily budget; everything else counts.
  bool exempt = p.kind == uplink::PacketKind::alert;
  std::uint64_t before = uplink_->bytes_sent();
  uplink_->send(std::move(p), std::move(done));
  if (!exempt) {
    usage_.add(now_s(), std::int64_t(uplink_->bytes_sent() - before));
    usage_dirty_ = true;
  }
}

void Station::drain() {
  if (!uplink_ || !store_) return;
  std::weak_ptr<bool> alive = alive_;
  if (uplink_->state() == uplink::LinkState::up && uplink_->free_slots() > 0) {
    // Replies first (small, the shore waits), then alerts, shore-requested
    // resends, and the rest of the outbox while the daily budget lasts.
    while (!replies_.empty() && uplink_->free_slots() > 0) {
      Reply r = std::move(replies_.front());
      replies_.pop_front();
      uplink::OutgoingPacket out;
      out.kind = uplink::PacketKind::reply;
      out.payload = std::move(r.bytes);
      bool then_apply = r.then_apply;
      send_counted(std::move(out),
                   [this, alive, then_apply](std::uint64_t, bool ok, const std::string& err) {
                     if (!alive.lock()) return;
                     if (!ok) os::logger("downlink")->warn("reply not acknowledged: {}", err);
                     if (then_apply) apply_pending_config();
                   });
    }
    std::size_t free = uplink_->free_slots();
    auto batch = store_->outbox().next_batch(free + inflight_.size());
    bool budget = budget_left();
    auto send_outbox = [&](store::Packet& p) {
      uplink::OutgoingPacket out;
      out.sequence = p.sequence;
      out.kind = wire_kind(p.kind);
      out.payload = std::move(p.bytes);
      out.retained = p.kind == store::PacketKind::manifest;
      inflight_.insert(p.sequence);
      free--;
      send_counted(std::move(out),
                   [this, alive](std::uint64_t seq, bool ok, const std::string& err) {
                     if (!alive.lock()) return;
                     inflight_.erase(seq);
                     if (!store_) return;
                     if (ok) {
                       store_->outbox().mark_sent(seq, now_s());
                       packets_acked_++;
                       last_ack_t_ = now_s();
                     } else {
                       store_->outbox().record_attempt(seq, now_s(), err);
                       os::logger("uplink")->debug("packet {} not acknowledged: {}", seq, err);
                     }
                     if (stopping_ && stop_done_ && inflight_.empty()) {
                       auto c = store_->outbox().counts();
                       if (c.ok() && c.value().unsent == 0) {
                         auto d = std::move(stop_done_);
                         stop_done_ = nullptr;
                         // Posted, not called: this runs inside the backend's
                         // acknowledgement (for the radio, inside its frame
                         // splitter), and the stop tears the backend down.
                         asio::post(io_, std::move(d));
                         return;
                       }
                     }
                     // A refusal is tried again by the drain timer (200 ms), not
                     // at once: a packet the link keeps refusing must not spin
                     // the loop or write attempts to the card a thousand times a
                     // second.
                     if (ok) drain();
                   });
    };
    if (batch.ok()) {
      for (auto& p : batch.value())
        if (free && p.priority == store::Priority::alert && !inflight_.count(p.sequence))
          send_outbox(p);
      while (free && budget && !resend_.empty()) {
        store::Packet p = std::move(resend_.front());
        resend_.pop_front();
        uplink::OutgoingPacket out;
        out.sequence = p.sequence;
        out.kind = wire_kind(p.kind);
        out.payload = p.bytes;
        free--;
        resend_inflight_++;
        send_counted(std::move(out), [this, alive, p](std::uint64_t, bool ok, const std::string&) {
          if (!alive.lock()) return;
          resend_inflight_--;
          if (!ok) resend_.push_front(p);  // again on the next connection
        });
      }
      for (auto& p : batch.value())
        if (free && budget && p.priority != store::Priority::alert && !inflight_.count(p.sequence))
          send_outbox(p);
    }
  }
  // Link state changes arrive asynchronously: look again shortly.
  drain_timer_.expires_after(std::chrono::milliseconds(200));
  drain_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock()) drain();
  });
}

void Station::log_summaries() {
  // One line per instrument every 10 minutes of station time: never per sample.
  std::weak_ptr<bool> alive = alive_;
  summary_timer_.expires_after(clock_.real_duration(600000));
  summary_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (ec || !alive.lock()) return;
    for (auto& l : lines_) {
      if (!l) continue;
      for (auto& s : l->status())
        os::logger("line " + l->line().name)
            ->info("{}: {}, {} polls, {} errors{}", s.name, drivers::to_string(s.state), s.polls,
                   s.errors, s.last_error.empty() ? "" : ", last: " + s.last_error);
    }
    log_summaries();
  });
}

void Station::check_clock() {
  auto log = os::logger("clock");
  ClockSync now =
      health_opts_.clock_sync == "kernel" ? kernel_clock_sync(clock_) : ClockSync::synchronised;
  if (now != clock_sync_) {
    if (now == ClockSync::unsynchronised)
      log->warn("system clock is not synchronised (adjtimex); samples are marked clock_unsynced");
    else
      log->info("system clock {}", to_string(now));
    clock_sync_ = now;
  }
  // A step: wall time moved differently from monotonic time by more than 2 s,
  // or, at a test --speed, by more than a quarter real second of station time
  // (the two clocks are read one after the other: a thread preempted between
  // the reads at x120 would otherwise show a false step).
  std::int64_t w = clock_.wall_ms(), st = clock_.steady_ms();
  const std::int64_t limit = std::max<std::int64_t>(2000, std::int64_t(250 * clock_.speed()));
  if (last_wall_ms_) {
    std::int64_t drift = (w - last_wall_ms_) - (st - last_steady_ms_);
    if (drift > limit || drift < -limit) {
      clock_steps_++;
      last_step_ = iso_utc(w / 1000);
      log->warn(
          "clock stepped {} by {} s at {}; windows already closed are never reopened or "
          "sent again, samples older than the last one are dropped and counted",
          drift > 0 ? "forward" : "backward", (drift > 0 ? drift : -drift) / 1000, last_step_);
    }
  }
  last_wall_ms_ = w;
  last_steady_ms_ = st;
}

void Station::schedule_health() {
  std::weak_ptr<bool> alive = alive_;
  health_timer_.expires_after(clock_.real_duration(std::int64_t(health_opts_.interval_s) * 1000));
  health_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (ec || !alive.lock() || stopping_) return;
    publish_health();
    schedule_health();
  });
}

void Station::publish_health() {
  std::int64_t boots = health_.boot_count;
  health_ = read_health(clock_, health_opts_, cfg_.paths.state_dir);
  health_.boot_count = boots;
  if (!health_opts_.supply_channel.empty())
    for (std::size_t i = 0; i < channel_names_.size(); ++i)
      if (channel_names_[i] == health_opts_.supply_channel) {
        const auto& v = assembler_->view(i);
        if (v.last && v.last->value) health_.supply_v = *v.last->value;
      }
  codec::HealthRecord rec;
  rec.t = now_s();
  rec.board_temp_c = health_.board_temp_c;
  rec.disk_free_mib = health_.disk_free_mib;
  rec.supply_v = health_.supply_v;
  auto m = manifest_;
  bool unsynced = clock_sync_ == ClockSync::unsynchronised;
  store::PacketSource source = [m, rec, unsynced](std::uint64_t seq) {
    auto r = codec::encode_health(m, std::span<const codec::HealthRecord>(&rec, 1), seq, unsynced);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  store_->insert_packet(source, store::Priority::normal, store::PacketKind::health, now_s(),
                        now_s());
  drain();
}

Json Station::sparklines() const {
  // Hourly means of the last 6 hours per channel, from the archive (passed
  // samples only), oldest first; null where an hour has none.
  Json out = Json::object();
  if (!store_) return out;
  std::int64_t now = now_s(), span = 6 * 3600, step = 1800;
  std::int64_t from = now - span;
  for (auto& name : channel_names_) {
    std::vector<double> sum(std::size_t(span / step), 0.0);
    std::vector<int> n(sum.size(), 0);
    const_cast<store::StationStore&>(*store_).archive().for_each_sample(
        from, now, name, [&](const store::ArchivedSample& s) {
          if (s.flag == pipeline::Flag::pass && s.value) {
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

std::vector<std::string> Station::instrument_names() const {
  std::vector<std::string> v;
  for (auto& in : cfg_.instruments) v.push_back(in.name);
  return v;
}

std::string Station::maintenance(const config::MaintenanceArgs& a, const std::string& via) {
  Json ignore;
  return maintenance(a, via, ignore);
}

std::string Station::maintenance(const config::MaintenanceArgs& a, const std::string& via,
                                 Json& data) {
  if (auto why = maint_.check(a, instrument_names()); !why.empty()) return why;
  std::int64_t t = now_s();
  auto log = os::logger("station");
  if (a.start) {
    std::int64_t max_s = a.max_minutes ? *a.max_minutes * 60 : maint_opts_.max_duration_s;
    MaintenanceEntry& e = maint_.start(a, t, max_s);
    store::MaintenancePeriod row;
    row.start_t = e.start_t;
    row.note = e.note;
    row.instrument = e.instrument;
    row.until_t = e.until_t;
    if (auto id = store_->archive().add_maintenance(row); id.ok()) e.archive_id = id.value();
    log->info("maintenance of {} started ({}){}; it ends by itself at {}",
              maintenance_scope_name(e.instrument), via, e.note.empty() ? "" : ": " + e.note,
              iso_utc(e.until_t));
    data["started"] = {
        {"instrument", e.instrument}, {"since", iso_utc(e.start_t)}, {"until", iso_utc(e.until_t)}};
  } else {
    auto ended = maint_.stop(a.instrument, t);
    record_ended(ended);
    Json list = Json::array();
    for (auto& e : ended) {
      log->info("maintenance of {} ended ({})", maintenance_scope_name(e.instrument), via);
      list.push_back(e.instrument);
    }
    data["ended"] = list;
  }
  apply_maintenance();
  return {};
}

void Station::record_ended(const std::vector<MaintenanceEntry>& ended) {
  if (ended.empty() || !store_) return;
  auto& archive = store_->archive();
  for (auto& e : ended) {
    if (e.archive_id) {
      archive.end_maintenance(*e.archive_id, *e.end_t, e.ended_by);
      continue;
    }
    // Its row was not written (a store fault), or is unknown: close the open
    // rows of its scope.
    if (auto open = archive.maintenance_between(INT64_MIN, INT64_MAX); open.ok())
      for (auto& m : open.value())
        if (!m.end_t && m.instrument == e.instrument)
          archive.end_maintenance(m.id, *e.end_t, e.ended_by);
  }
}

// The pipeline follows the book: channels of the covered instruments in
// maintenance, the others not; then the state is saved, and the timer set
// for the next period to end by itself.
void Station::apply_maintenance() {
  if (!assembler_) return;
  std::set<std::string> scopes;
  for (auto& [scope, e] : maint_.open()) scopes.insert(scope);
  assembler_->set_maintenance(now_s(), scopes);
  save_state();
  schedule_maintenance_end();
}

void Station::schedule_maintenance_end() {
  maint_timer_.cancel();
  auto next = maint_.next_until();
  if (!next || stopping_) return;
  std::weak_ptr<bool> alive = alive_;
  // Station time (respects --speed); a clock step is caught by the tick too.
  maint_timer_.expires_after(clock_.real_delay_until(*next * 1000));
  maint_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock() && !stopping_) expire_maintenance();
  });
}

void Station::expire_maintenance() {
  auto ended = maint_.expire(now_s(), /*at_until=*/false);
  if (ended.empty()) return;
  record_ended(ended);
  for (auto& e : ended)
    os::logger("station")->warn(
        "maintenance of {} ended by itself after {} min (its maximum duration){}",
        maintenance_scope_name(e.instrument), (*e.end_t - e.start_t + 30) / 60,
        e.note.empty() ? "" : "; note: " + e.note);
  apply_maintenance();
}

void Station::restore_maintenance() {
  // The open rows of the archive are the open periods (a restart). Rows of
  // an older tarn have no instrument (the whole station) and no end of
  // their own: the config's maximum applies from their start.
  maint_.clear();
  auto& archive = store_->archive();
  if (auto open = archive.maintenance_between(INT64_MIN, INT64_MAX); open.ok()) {
    for (auto& m : open.value()) {
      if (m.end_t) continue;
      if (maint_.open().count(m.instrument)) {  // a duplicate: closed at its own start
        archive.end_maintenance(m.id, m.start_t, "stop");
        continue;
      }
      MaintenanceEntry e;
      e.instrument = m.instrument;
      e.start_t = m.start_t;
      e.until_t = m.until_t ? *m.until_t : m.start_t + maint_opts_.max_duration_s;
      e.note = m.note;
      e.archive_id = m.id;
      maint_.restore(std::move(e));
    }
  }
  if (auto last = archive.last_ended_maintenance(INT64_MAX); last.ok() && last.value()) {
    MaintenanceEntry e;
    e.instrument = last.value()->instrument;
    e.start_t = last.value()->start_t;
    e.end_t = last.value()->end_t;
    e.ended_by = last.value()->ended_by;
    e.note = last.value()->note;
    maint_.set_last_ended(std::move(e));
  }
  std::int64_t now = now_s();
  auto gone = maint_.drop_unknown(instrument_names(), now);
  record_ended(gone);
  for (auto& e : gone)
    os::logger("station")->warn("maintenance of {} ended: the instrument is no longer configured",
                                maintenance_scope_name(e.instrument));
  auto ended = maint_.expire(now, /*at_until=*/true);
  record_ended(ended);
  for (auto& e : ended)
    os::logger("station")->warn(
        "maintenance of {} ended by itself at {} (its maximum duration ran out while tarn was "
        "not running)",
        maintenance_scope_name(e.instrument), iso_utc(*e.end_t));
  for (auto& [scope, e] : maint_.open())
    os::logger("station")->info("maintenance of {} still active since {}, ends by itself at {}",
                                maintenance_scope_name(scope), iso_utc(e.start_t),
                                iso_utc(e.until_t));
  apply_maintenance();
}

void Station::stop(int deadline_ms, std::function<void()> done) {
  stopping_ = true;
  tick_timer_.cancel();
  maint_timer_.cancel();
  for (auto& l : lines_)
    if (l) l->stop();
  out_.clear();
  assembler_->stop(now_s(), out_);  // the open window, marked partial
  handle(out_);
  flush_archive();
  save_state();
  stop_done_ = [this, done] {
    drain_timer_.cancel();
    summary_timer_.cancel();
    health_timer_.cancel();
    teardown();
    done();
  };
  auto deadline = std::make_shared<asio::steady_timer>(io_, std::chrono::milliseconds(deadline_ms));
  std::weak_ptr<bool> alive = alive_;
  deadline->async_wait([this, alive, deadline](boost::system::error_code) {
    if (!alive.lock() || !stop_done_) return;
    auto c = store_->outbox().counts();
    os::logger("station")->info("stopping; {} packet(s) wait in the outbox for the next start",
                                c.ok() ? c.value().unsent : -1);
    auto d = std::move(stop_done_);
    stop_done_ = nullptr;
    d();
  });
  drain();
  auto c = store_->outbox().counts();
  if (c.ok() && c.value().unsent == 0 && inflight_.empty()) {
    auto d = std::move(stop_done_);
    stop_done_ = nullptr;
    asio::post(io_, d);
  }
}

void Station::reload(config::StationConfig cfg) {
  if (!overrides_.empty()) {
    std::swap(cfg_, cfg);  // config_with_overrides() reads cfg_.file
    auto res = config_with_overrides(overrides_);
    std::swap(cfg_, cfg);
    if (res.config)
      cfg = std::move(*res.config);
    else
      os::logger("downlink")
          ->warn("setting overrides {} not applied to the new config: {}", overrides_.dump(),
                 res.problems.render(cfg.file));
  }
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
      same = pipeline_fingerprint(cfg, cm->hash) == pipeline_fingerprint(cfg_, manifest_.hash);
  if (!same) {
    // Samples held for the spike test's look-ahead go to the archive first.
    out_.clear();
    assembler_->settle_held(out_);
    handle(out_);
    save_state();
  }
  flush_archive();  // the replay below reads the archive
  const bool same_link = uplink_ && link_fingerprint(cfg) == link_fp_;
  // The store's files stay open across a reload: its settings and the paths
  // apply at the next start.
  if (cfg.store != cfg_.store || cfg.paths.state_dir != cfg_.paths.state_dir ||
      cfg.paths.runtime_dir != cfg_.paths.runtime_dir) {
    os::logger("store")->warn(
        "the new config changes /store or /paths: they apply at the next start (systemctl "
        "restart tarn); the store runs on with the previous ones");
    cfg.store = cfg_.store;
    cfg.paths = cfg_.paths;
  }
  tick_timer_.cancel();
  teardown(same_link);
  cfg_ = std::move(cfg);
  os::set_log_level(cfg_.log_level);
  {
    config::Problems ignore;  // checked with the whole config before it got here
    const auto interval_before = health_opts_.interval_s;
    health_opts_ = read_health_options(cfg_, ignore);
    // Rescheduled only for a new interval: a reload every half hour must not
    // push an hourly health packet back for ever.
    if (health_opts_.interval_s != interval_before) {
      health_timer_.cancel();
      schedule_health();
    }
  }
  build(/*keep_assembler=*/same, same_link);
  queue_manifest_if_changed();
  if (same)
    os::logger("station")->info("pipeline unchanged by the new config: it carries on as it was");
  else
    resume_from_archive();
  {
    // Open periods keep the end they got at their start; a new maximum
    // applies to the next ones. An instrument the config dropped ends its.
    config::Problems ignore;
    maint_opts_ = read_maintenance_options(cfg_, ignore);
    auto gone = maint_.drop_unknown(instrument_names(), now_s());
    record_ended(gone);
    for (auto& e : gone)
      os::logger("station")->warn("maintenance of {} ended: the instrument is no longer configured",
                                  maintenance_scope_name(e.instrument));
    apply_maintenance();
  }
  make_downlink();
  start_lines();
  if (same_link)
    os::logger("uplink")->info("link unchanged by the new config: it stays {}",
                               uplink::to_string(uplink_->state()));
  else if (link_open_)
    uplink_->start();  // the link commands are not run again
  schedule_tick();
}

config::LoadResult Station::config_with_overrides(const Json& overrides) const {
  config::LoadResult res;
  std::ifstream in(cfg_.file);
  std::stringstream text;
  text << in.rdbuf();
  if (!in) {
    res.problems.add("", "cannot read the config file \"" + cfg_.file + "\"");
    return res;
  }
  Json root = Json::parse(text.str(), nullptr, false, /*ignore_comments=*/true);
  if (!root.is_object()) {
    res.problems.add("", "config file \"" + cfg_.file + "\" is not a JSON object");
    return res;
  }
  for (auto& [pointer, value] : overrides.items()) {
    try {
      root[Json::json_pointer(pointer)] = value;
    } catch (const std::exception&) {
      res.problems.add(pointer, "cannot be set in this config");
      return res;
    }
  }
  return load_and_check_text(root.dump(), cfg_.file);
}

void Station::make_downlink() {
  config::Problems p;
  auto key = uplink::read_command_key(cfg_, p);
  std::string nonces;
  if (auto n = store_->archive().get_state("downlink_nonces"); n.ok() && n.value())
    nonces = *n.value();
  auto next = std::make_unique<uplink::DownlinkReceiver>(cfg_.station.id, std::move(key),
                                                         config::kDefaultCommandWindowS, nonces);
  if (downlink_) next->carry_counts(*downlink_);
  downlink_ = std::move(next);
}

void Station::on_command(const std::vector<std::uint8_t>& payload) {
  if (!downlink_ || stopping_) return;
  std::string_view text(reinterpret_cast<const char*>(payload.data()), payload.size());
  uplink::DownlinkReply reply = downlink_->handle(text, *this);
  std::string bytes = reply.to_json().dump();
  if (replies_.size() >= 64) replies_.pop_front();  // bounded; the shore asks again
  replies_.push_back(
      {std::vector<std::uint8_t>(bytes.begin(), bytes.end()), pending_config_.has_value()});
  if (pending_config_ && (!uplink_ || uplink_->state() != uplink::LinkState::up)) {
    replies_.back().then_apply = false;
    apply_pending_config();
  }
  drain();
}

void Station::apply_pending_config() {
  if (!pending_config_) return;
  auto cfg = std::move(*pending_config_);
  pending_config_.reset();
  std::weak_ptr<bool> alive = alive_;
  // Not inside the backend's callback: reload replaces the backend.
  asio::post(io_, [this, alive, cfg = std::move(cfg)]() mutable {
    if (alive.lock() && !stopping_) apply_config(std::move(cfg));
  });
}

Json Station::ping() {
  Json d = {{"station_time", now_s()},
            {"version", TARN_VERSION},
            {"link", uplink_ ? uplink::to_string(uplink_->state()) : "down"}};
  auto c = store_->outbox().counts();
  if (c.ok()) d["unsent"] = c.value().unsent;
  return d;
}

std::string Station::resend_from_archive(std::int64_t from, std::int64_t to, Json& data) {
  // Bounded: each rebuilt window is one durable insert on the loop.
  constexpr std::int64_t max_span_s = 2 * 86400;
  if (to - from > max_span_s)
    return "no packets of this time range in the outbox, and the range is too long to rebuild "
           "from the archive; allowed: at most 2 days (172800 s) per request";
  flush_archive();
  std::vector<store::ArchivedSample> samples;
  std::int64_t w = cfg_.sampling.window_s;
  auto st = store_->archive().for_each_sample(codec::floor_div(from, w) * w, to + 1, "",
                                              [&](const store::ArchivedSample& x) {
                                                samples.push_back(x);
                                                return true;
                                              });
  if (!st.ok()) return "archive query failed: " + st.message();
  auto windows = windows_from_archive(manifest_.manifest, from, to + 1, samples);
  if (windows.empty())
    return "no packets of this time range in the outbox and no archived samples in it "
           "(the archive keeps store.archive retention)";
  for (auto& win : windows) queue_window(win, /*rebuilt=*/true);
  data["queued"] = 0;
  data["rebuilt_windows"] = windows.size();
  data["archived_samples"] = samples.size();
  os::logger("downlink")
      ->info("resend: {} window(s) rebuilt from {} archived samples", windows.size(),
             samples.size());
  drain();
  return {};
}

std::string Station::resend(const config::ResendArgs& a, Json& data) {
  auto found = a.by_time ? store_->outbox().by_created_time(a.from_t, a.to_t)
                         : store_->outbox().by_sequence(a.first_seq, a.last_seq);
  if (!found.ok()) return "outbox query failed: " + found.status().message();
  std::size_t sent = 0, unsent = 0;
  for (auto& p : found.value()) (p.sent_t ? sent : unsent)++;
  if (found.value().empty()) {
    if (a.by_time) return resend_from_archive(a.from_t, a.to_t, data);
    return "no packets of this sequence range in the outbox (sent packets are kept for "
           "store.outbox.sent_retention_s); allowed: a range by time (from_t, to_t), whose "
           "windows are then rebuilt from the archive";
  }
  if (resend_.size() + sent > 10000) return "resend queue full; allowed: at most 10000 packets";
  for (auto& p : found.value())
    if (p.sent_t) resend_.push_back(std::move(p));
  data["queued"] = sent;
  data["unsent_already_queued"] = unsent;
  os::logger("downlink")
      ->info("resend: {} sent packet(s) queued again, {} not yet sent", sent, unsent);
  drain();
  return {};
}

std::string Station::set_setting(const std::string& pointer, const Json& value) {
  if (cfg_.file.empty()) return "the config file is unknown; overrides need one";
  Json next = overrides_;
  next[pointer] = value;
  auto res = config_with_overrides(next);
  if (!res.config) {
    auto& q = res.problems.list().front();
    return (q.where.empty() ? std::string("/") : q.where) + ": " + q.message;
  }
  auto st = store_->archive().put_state("overrides", next.dump(), now_s());
  if (!st.ok()) return "override not persisted: " + st.message();
  overrides_ = std::move(next);
  pending_config_ = std::move(*res.config);
  os::logger("downlink")->info("setting {} = {} (persisted override)", pointer, value.dump());
  return {};
}

void Station::save_nonces(const std::string& serialized) {
  store_->archive().put_state("downlink_nonces", serialized, now_s());
}

void Station::policy_tick() {
  std::weak_ptr<bool> alive = alive_;
  policy_timer_.expires_after(std::chrono::milliseconds(250));
  policy_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock() && !stopping_) policy_tick();
  });
  if (!uplink_ || !store_ || runner_.running()) return;  // a link command is running
  std::int64_t now = now_s();
  usage_.roll(now);
  uplink::LinkView v;
  v.now = now;
  v.open = link_open_;
  v.up = uplink_->state() == uplink::LinkState::up;
  v.opened_t = opened_t_;
  v.budget_left = budget_left();
  auto c = store_->outbox().counts();
  std::int64_t unsent = c.ok() ? c.value().unsent : 0;
  v.unsent_alerts = c.ok() ? c.value().unsent_alerts : 0;
  v.unsent = (v.budget_left ? unsent + std::int64_t(resend_.size()) : v.unsent_alerts) +
             std::int64_t(replies_.size());
  bool empty = v.unsent == 0 && inflight_.empty() && resend_inflight_ == 0;
  if (link_open_ && v.up && empty)
    drained_t_ = drained_t_ ? drained_t_ : now;
  else
    drained_t_ = 0;
  v.drained_t = drained_t_;
  uplink::LinkDecision d = schedule_->decide(v);
  if (d.action == uplink::LinkAction::open)
    open_link(d.reason);
  else if (d.action == uplink::LinkAction::close)
    close_link(d.reason);
  else if (!d.reason.empty() && d.reason != last_policy_note_)
    os::logger("uplink")->info("{}", d.reason);
  last_policy_note_ = d.reason;
  if (usage_dirty_) {
    store_->archive().put_state("link_usage", usage_.serialize(), now);
    usage_dirty_ = false;
  }
}

void Station::open_link(const std::string& reason) {
  link_open_ = true;
  opened_t_ = now_s();
  drained_t_ = 0;
  os::logger("uplink")->info("opening the link: {}", reason);
  if (!policy_.link_up) {
    uplink_->start();
    return;
  }
  std::weak_ptr<bool> alive = alive_;
  runner_.run(*policy_.link_up, "link_up", [this, alive](const uplink::CommandOutcome&) {
    // Connect even when the command failed: the link may be up already (logged).
    if (alive.lock() && link_open_ && uplink_) uplink_->start();
  });
}

void Station::close_link(const std::string& reason) {
  link_open_ = false;
  os::logger("uplink")->info("closing the link: {}", reason);
  uplink_->stop();
  if (policy_.link_down) runner_.run(*policy_.link_down, "link_down", nullptr);
}

Json Station::status() const {
  Json s;
  std::int64_t now = clock_.wall_ms();
  s["ok"] = true;
  s["station"] = cfg_.station.id;
  s["version"] = TARN_VERSION;
  s["now"] = iso_utc(now / 1000);
  s["uptime_s"] = (now - started_ms_) / 1000;
  s["speed"] = clock_.speed();
  Json ins = Json::array();
  for (auto& l : lines_) {
    if (!l) continue;
    for (auto& st : l->status()) {
      Json i;
      i["name"] = st.name;
      i["line"] = l->line().name;
      i["state"] = drivers::to_string(st.state);
      i["polls"] = st.polls;
      i["errors"] = st.errors;
      i["last_error"] = st.last_error;
      if (st.last_ok_ms) i["last_ok"] = iso_utc(st.last_ok_ms / 1000);
      ins.push_back(i);
    }
  }
  s["instruments"] = ins;
  Json chans = Json::array();
  for (std::size_t i = 0; assembler_ && i < assembler_->channel_count(); ++i) {
    const ChannelView& v = assembler_->view(i);
    Json c;
    c["name"] = channel_names_[i];
    c["instrument"] = channel_instruments_[i];
    c["unit"] = channel_units_[i];
    c["maintenance"] = assembler_->channel_in_maintenance(i);
    c["value"] = v.last && v.last->value ? Json(*v.last->value) : Json(nullptr);
    c["flag"] = v.last ? int(v.last->flag) : 2;
    c["reasons"] = v.last ? v.last->reasons : 0;
    if (v.last) c["t"] = iso_utc(v.last->t);
    c["window"] = {{"pass", v.window_counts[0]},
                   {"not_evaluated", v.window_counts[1]},
                   {"suspect", v.window_counts[2]},
                   {"fail", v.window_counts[3]},
                   {"missing", v.window_counts[4]}};
    chans.push_back(c);
  }
  s["channels"] = chans;
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  s["window"] = {{"start", iso_utc(now / w * w / 1000)},
                 {"length_s", cfg_.sampling.window_s},
                 {"closed_total", windows_closed_}};
  Json alerts = Json::array();
  if (assembler_) {
    auto causes = assembler_->alert_stale_causes();
    std::size_t i = 0;
    // stale: why the standing level cannot be confirmed (null while it can).
    for (auto& [rule, level] : assembler_->alert_levels()) {
      const std::string& cause = causes[i++];
      alerts.push_back({{"rule", rule},
                        {"level", level.empty() ? "none" : level},
                        {"stale", cause.empty() ? Json(nullptr) : Json(cause)}});
    }
  }
  s["alerts"] = alerts;
  // Maintenance: true while any period is open (the whole station's or an
  // instrument's); the periods and the last one that ended.
  s["maintenance"] = maint_.any();
  Json periods = Json::array();
  for (auto& [scope, e] : maint_.open())
    periods.push_back({{"instrument", scope.empty() ? Json(nullptr) : Json(scope)},
                       {"since", iso_utc(e.start_t)},
                       {"until", iso_utc(e.until_t)},
                       {"note", e.note}});
  s["maintenance_periods"] = periods;
  if (auto& l = maint_.last_ended(); l && l->end_t)
    s["maintenance_last"] = {
        {"instrument", l->instrument.empty() ? Json(nullptr) : Json(l->instrument)},
        {"since", iso_utc(l->start_t)},
        {"ended", iso_utc(*l->end_t)},
        {"ended_by", l->ended_by},
        {"note", l->note}};
  Json st;
  if (store_) {
    auto c = const_cast<store::StationStore&>(*store_).outbox().counts();
    if (c.ok()) {
      st["unsent"] = c.value().unsent;
      st["sent_kept"] = c.value().sent_kept;
      if (c.value().oldest_unsent_created_t)
        st["oldest_unsent"] = iso_utc(*c.value().oldest_unsent_created_t);
    }
    st["condition"] = store_->condition();
    if (auto used = const_cast<store::StationStore&>(*store_).used_bytes(); used.ok())
      st["used_mib"] = std::round(double(used.value()) / (1 << 20) * 10) / 10;
    st["budget_mib"] = store_->options().limits.budget_bytes >> 20;
    // Both files count their own drops (packets in the outbox, samples in the
    // archive): the view shows them all.
    Json drops = Json::object();
    auto& store = const_cast<store::StationStore&>(*store_);
    for (auto counters : {store.outbox().counters(), store.archive().counters()})
      for (auto& [k, v] : counters)
        if (k.rfind("drop", 0) == 0) drops[k] = drops.value(k, std::int64_t(0)) + v;
    st["drops"] = drops;
  }
  s["store"] = st;
  s["health"] = health_.to_json();
  s["health"]["clock"] = to_string(clock_sync_);
  s["clock"] = {
      {"sync", to_string(clock_sync_)}, {"steps", clock_steps_}, {"last_step", last_step_}};
  s["sparklines"] = sparklines();
  s["link"] = {{"backend", cfg_.uplink.backend},
               {"state", uplink_ ? uplink::to_string(uplink_->state()) : "down"},
               {"last_error", uplink_ ? uplink_->last_error() : ""},
               {"in_flight", inflight_.size()},
               {"acknowledged", packets_acked_},
               {"last_ack", last_ack_t_ ? iso_utc(last_ack_t_) : ""},
               {"bytes_sent", uplink_ ? uplink_->bytes_sent() : 0}};
  auto next = schedule_ ? schedule_->next_due() : std::nullopt;
  Json pol = {{"mode", policy_.scheduled ? "scheduled" : "always"},
              {"open", link_open_},
              {"next_connection", next ? iso_utc(*next) : ""},
              {"usage_today_bytes", usage_.bytes},
              {"daily_budget_bytes", policy_.daily_budget_bytes},
              {"budget_left", budget_left()},
              {"resend_queued", resend_.size()}};
  if (runner_.last().started || !runner_.last().error.empty())
    pol["last_link_command"] = runner_.last().describe();
  s["link"]["policy"] = pol;
  s["downlink"] = {{"signed_only", downlink_ && downlink_->signed_only()},
                   {"accepted", downlink_ ? downlink_->accepted() : 0},
                   {"refused", downlink_ ? downlink_->refused() : 0}};
  s["settings"] = {{"period_s", cfg_.sampling.period_s},
                   {"window_s", cfg_.sampling.window_s},
                   {"overrides", overrides_}};
  return s;
}

std::string Station::status_line() const {
  std::size_t online = 0, total = 0;
  for (auto& l : lines_)
    if (l)
      for (auto& st : l->status()) {
        total++;
        online += st.state == drivers::InstrumentState::online;
      }
  std::string unsent = "?";
  if (store_) {
    auto c = const_cast<store::StationStore&>(*store_).outbox().counts();
    if (c.ok()) unsent = std::to_string(c.value().unsent);
  }
  return std::to_string(online) + "/" + std::to_string(total) + " instruments online, link " +
         (uplink_ ? uplink::to_string(uplink_->state()) : "down") + ", " + unsent + " unsent";
}

}  // namespace tarn::daemon
