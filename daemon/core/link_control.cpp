#include "daemon/core/link_control.h"

#include <filesystem>
#include <functional>

#include "daemon/core/outbox_drain.h"
#include "daemon/core/shore_commands.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

namespace {

// What the link is built from: the station id (client id, topics), the uplink
// section, and the contents of the files it names (CA, certificate, key,
// secrets: a changed password applies at the next reload), read through the
// Env. A reload that leaves all of it
// unchanged keeps the link up: no reconnect on a metered modem, and no
// orderly disconnect blocking the event loop.
std::string link_fingerprint(os::Env& env, const config::StationConfig& c) {
  Json j = {c.station.id, c.uplink.backend, c.uplink.options, c.uplink.policy};
  Json files = Json::array();
  std::function<void(const Json&)> walk = [&](const Json& v) {
    if (v.is_structured()) {
      for (auto& e : v) walk(e);
    } else if (v.is_string()) {
      const std::string& path = v.get_ref<const std::string&>();
      // Regular files only: a device named in the options (the radio's
      // serial port) is never read (a tty read blocks).
      std::error_code ec;
      if (path.empty() || !std::filesystem::is_regular_file(path, ec) || !env.exists(path)) return;
      if (auto text = env.read_file(path))
        files.push_back({path, text->size(), std::hash<std::string>{}(*text)});
    }
  };
  walk(c.uplink.options);
  j.push_back(files);
  return j.dump();
}

}  // namespace

LinkControl::LinkControl(StationContext& ctx, OutboxDrain& drain, ShoreCommands& shore)
    : ctx_(ctx), drain_(drain), shore_(shore), runner_(ctx.clock) {}

void LinkControl::build() {
  fingerprint_ = link_fingerprint(ctx_.clock, ctx_.cfg);
  uplink::BackendContext bctx{ctx_.io, ctx_.clock, ctx_.cfg, ctx_.boot_time};
  ctx_.uplink = uplink::find_backend(ctx_.cfg.uplink.backend)->create(bctx);
  std::weak_ptr<bool> alive = ctx_.alive;
  ctx_.uplink->on_command([this, alive](const std::vector<std::uint8_t>& payload) {
    if (alive.lock()) shore_.on_command(payload);
  });
  policy_ = ctx_.cfg.settings.get<uplink::LinkPolicyConfig>();
  schedule_ = std::make_unique<uplink::LinkSchedule>(policy_, ctx_.now_s());
}

void LinkControl::drop() {
  if (ctx_.uplink) ctx_.uplink->stop();
  ctx_.uplink.reset();
  drain_.forget_inflight();
}

bool LinkControl::same_link(const config::StationConfig& next) const {
  return ctx_.uplink && link_fingerprint(ctx_.clock, next) == fingerprint_;
}

std::optional<std::int64_t> LinkControl::next_due() const {
  return schedule_ ? schedule_->next_due() : std::nullopt;
}

void LinkControl::reconnect_if_open() {
  if (open_) ctx_.uplink->start();  // the link commands are not run again
}

void LinkControl::tick() {
  std::weak_ptr<bool> alive = ctx_.alive;
  timer_ = ctx_.clock.start_real_timer(250, [this, alive] {
    if (alive.lock() && !ctx_.stopping) tick();
  });
  if (!ctx_.uplink || !ctx_.store || runner_.running()) return;  // a link command is running
  std::int64_t now = ctx_.now_s();
  drain_.roll_usage(now);
  uplink::LinkView v;
  v.now = now;
  v.open = open_;
  v.up = ctx_.uplink->state() == uplink::LinkState::up;
  v.opened_t = opened_t_;
  v.budget_left = drain_.budget_left();
  auto c = ctx_.store->outbox().counts();
  std::int64_t unsent = c.ok() ? c.value().unsent : 0;
  v.unsent_alerts = c.ok() ? c.value().unsent_alerts : 0;
  v.unsent = (v.budget_left ? unsent + std::int64_t(drain_.resend_queued()) : v.unsent_alerts) +
             std::int64_t(drain_.replies_waiting());
  bool empty = v.unsent == 0 && drain_.inflight().empty() && drain_.resend_inflight() == 0;
  if (open_ && v.up && empty)
    drained_t_ = drained_t_ ? drained_t_ : now;
  else
    drained_t_ = 0;
  v.drained_t = drained_t_;
  uplink::LinkDecision d = schedule_->decide(v);
  if (d.action == uplink::LinkAction::open)
    open(d.reason);
  else if (d.action == uplink::LinkAction::close)
    close(d.reason);
  else if (!d.reason.empty() && d.reason != last_note_)
    os::logger("uplink")->info("{}", d.reason);
  last_note_ = d.reason;
  drain_.save_usage_if_changed(now);
}

void LinkControl::open(const std::string& reason) {
  open_ = true;
  opened_t_ = ctx_.now_s();
  drained_t_ = 0;
  os::logger("uplink")->info("opening the link: {}", reason);
  if (!policy_.link_up) {
    ctx_.uplink->start();
    return;
  }
  std::weak_ptr<bool> alive = ctx_.alive;
  runner_.run(*policy_.link_up, "link_up", [this, alive](const uplink::CommandOutcome&) {
    // Connect even when the command failed: the link may be up already (logged).
    if (alive.lock() && open_ && ctx_.uplink) ctx_.uplink->start();
  });
}

void LinkControl::close(const std::string& reason) {
  open_ = false;
  os::logger("uplink")->info("closing the link: {}", reason);
  ctx_.uplink->stop();
  if (policy_.link_down) runner_.run(*policy_.link_down, "link_down", nullptr);
}

}  // namespace tarn::daemon
