#include "daemon/core/shore_commands.h"

#include <boost/asio/post.hpp>

#include "codec/window.h"
#include "daemon/core/archive_windows.h"
#include "daemon/core/config_check.h"
#include "daemon/core/maintenance_control.h"
#include "daemon/core/outbox_drain.h"
#include "daemon/core/packet_queue.h"
#include "daemon/core/sample_intake.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

namespace {

// The config file `file` with `overrides` (JSON pointer -> value) set in its
// JSON, loaded and checked like the file itself.
config::LoadResult config_with_overrides(os::Env& env, const std::string& file,
                                         const Json& overrides) {
  config::LoadResult res;
  auto text = env.read_file(file);
  if (!text) {
    res.problems.add("", "cannot read the config file \"" + file + "\"");
    return res;
  }
  Json root = Json::parse(*text, nullptr, false, /*ignore_comments=*/true);
  if (!root.is_object()) {
    res.problems.add("", "config file \"" + file + "\" is not a JSON object");
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
  return load_and_check_text(root.dump(), file);
}

}  // namespace

ShoreCommands::ShoreCommands(StationContext& ctx, SampleIntake& intake, PacketQueue& packets,
                             OutboxDrain& drain, MaintenanceControl& maintenance,
                             std::function<void(config::StationConfig)> apply_config)
    : ctx_(ctx),
      intake_(intake),
      packets_(packets),
      drain_(drain),
      maintenance_(maintenance),
      apply_config_(std::move(apply_config)) {}

void ShoreCommands::load_overrides() {
  if (auto o = ctx_.store->archive().get_state("overrides"); o.ok() && o.value()) {
    overrides_ = Json::parse(*o.value(), nullptr, false);
    if (!overrides_.is_object()) overrides_ = Json::object();
  }
  if (overrides_.empty()) return;
  auto res = config_with_overrides(ctx_.clock, ctx_.cfg.file, overrides_);
  if (res.config) {
    ctx_.cfg = std::move(*res.config);
    os::logger("downlink")->info("setting overrides applied: {}", overrides_.dump());
  } else {
    os::logger("downlink")
        ->warn("setting overrides {} not applied: {}", overrides_.dump(),
               res.problems.render(ctx_.cfg.file));
  }
}

void ShoreCommands::add_overrides(config::StationConfig& cfg) const {
  if (overrides_.empty()) return;
  auto res = config_with_overrides(ctx_.clock, cfg.file, overrides_);
  if (res.config)
    cfg = std::move(*res.config);
  else
    os::logger("downlink")
        ->warn("setting overrides {} not applied to the new config: {}", overrides_.dump(),
               res.problems.render(cfg.file));
}

void ShoreCommands::make_downlink() {
  config::Problems p;
  auto key = uplink::read_command_key(ctx_.cfg, p);
  std::string nonces;
  if (auto n = ctx_.store->archive().get_state("downlink_nonces"); n.ok() && n.value())
    nonces = *n.value();
  auto next = std::make_unique<uplink::DownlinkReceiver>(ctx_.cfg.station.id, std::move(key),
                                                         config::kDefaultCommandWindowS, nonces);
  if (downlink_) next->carry_counts(*downlink_);
  downlink_ = std::move(next);
}

void ShoreCommands::on_command(const std::vector<std::uint8_t>& payload) {
  if (!downlink_ || ctx_.stopping) return;
  std::string_view text(reinterpret_cast<const char*>(payload.data()), payload.size());
  uplink::DownlinkReply reply = downlink_->handle(text, *this);
  std::string bytes = reply.to_json().dump();
  // A set's new config is applied once its reply went out; at once when the
  // link is not up to take the reply.
  const bool apply_now =
      pending_config_ && (!ctx_.uplink || ctx_.uplink->state() != uplink::LinkState::up);
  drain_.push_reply(std::vector<std::uint8_t>(bytes.begin(), bytes.end()),
                    pending_config_.has_value() && !apply_now);
  if (apply_now) apply_pending_config();
  drain_.drain();
}

void ShoreCommands::apply_pending_config() {
  if (!pending_config_) return;
  auto cfg = std::move(*pending_config_);
  pending_config_.reset();
  std::weak_ptr<bool> alive = ctx_.alive;
  // Not inside the backend's callback: reload replaces the backend.
  boost::asio::post(ctx_.io, [this, alive, cfg = std::move(cfg)]() mutable {
    if (alive.lock() && !ctx_.stopping) apply_config_(std::move(cfg));
  });
}

Json ShoreCommands::ping() {
  Json d = {{"station_time", ctx_.now_s()}, {"version", TARN_VERSION}, {"link", ctx_.link_state()}};
  auto c = ctx_.store->outbox().counts();
  if (c.ok()) d["unsent"] = c.value().unsent;
  return d;
}

std::string ShoreCommands::resend_from_archive(std::int64_t from, std::int64_t to, Json& data) {
  // Bounded: each rebuilt window is one durable insert on the loop.
  constexpr std::int64_t max_span_s = 2 * 86400;
  if (to - from > max_span_s)
    return "no packets of this time range in the outbox, and the range is too long to rebuild "
           "from the archive; allowed: at most 2 days (172800 s) per request";
  intake_.flush_archive();
  std::vector<store::ArchivedSample> samples;
  std::int64_t w = ctx_.cfg.sampling.window_s;
  auto st = ctx_.store->archive().for_each_sample(codec::floor_div(from, w) * w, to + 1, "",
                                                  [&](const store::ArchivedSample& x) {
                                                    samples.push_back(x);
                                                    return true;
                                                  });
  if (!st.ok()) return "archive query failed: " + st.message();
  auto windows = windows_from_archive(ctx_.manifest.manifest, from, to + 1, samples);
  if (windows.empty())
    return "no packets of this time range in the outbox and no archived samples in it "
           "(the archive keeps store.archive retention)";
  for (auto& win : windows) packets_.window(win, /*rebuilt=*/true);
  data["queued"] = 0;
  data["rebuilt_windows"] = windows.size();
  data["archived_samples"] = samples.size();
  os::logger("downlink")
      ->info("resend: {} window(s) rebuilt from {} archived samples", windows.size(),
             samples.size());
  drain_.drain();
  return {};
}

std::string ShoreCommands::resend(const config::ResendArgs& a, Json& data) {
  auto& outbox = ctx_.store->outbox();
  auto found = a.by_time ? outbox.by_created_time(a.from_t, a.to_t)
                         : outbox.by_sequence(a.first_seq, a.last_seq);
  if (!found.ok()) return "outbox query failed: " + found.error().message();
  std::size_t sent = 0, unsent = 0;
  for (auto& p : found.value()) (p.sent_t ? sent : unsent)++;
  if (found.value().empty()) {
    if (a.by_time) return resend_from_archive(a.from_t, a.to_t, data);
    return "no packets of this sequence range in the outbox (sent packets are kept for "
           "store.outbox.sent_retention_s); allowed: a range by time (from_t, to_t), whose "
           "windows are then rebuilt from the archive";
  }
  if (drain_.resend_queued() + sent > 10000)
    return "resend queue full; allowed: at most 10000 packets";
  for (auto& p : found.value())
    if (p.sent_t) drain_.queue_resend(std::move(p));
  data["queued"] = sent;
  data["unsent_already_queued"] = unsent;
  os::logger("downlink")
      ->info("resend: {} sent packet(s) queued again, {} not yet sent", sent, unsent);
  drain_.drain();
  return {};
}

std::string ShoreCommands::maintenance(const config::MaintenanceArgs& a, const std::string& via) {
  Json ignore;
  return maintenance_.request(a, via, ignore);
}

std::string ShoreCommands::set_setting(const std::string& pointer, const Json& value) {
  if (ctx_.cfg.file.empty()) return "the config file is unknown; overrides need one";
  Json next = overrides_;
  next[pointer] = value;
  auto res = config_with_overrides(ctx_.clock, ctx_.cfg.file, next);
  if (!res.config) {
    auto& q = res.problems.list().front();
    return (q.where.empty() ? std::string("/") : q.where) + ": " + q.message;
  }
  auto st = ctx_.store->archive().put_state("overrides", next.dump(), ctx_.now_s());
  if (!st.ok()) return "override not persisted: " + st.message();
  overrides_ = std::move(next);
  pending_config_ = std::move(*res.config);
  os::logger("downlink")->info("setting {} = {} (persisted override)", pointer, value.dump());
  return {};
}

void ShoreCommands::save_nonces(const std::string& serialized) {
  ctx_.store->archive().put_state("downlink_nonces", serialized, ctx_.now_s());
}

}  // namespace tarn::daemon
