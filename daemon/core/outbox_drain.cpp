#include "daemon/core/outbox_drain.h"

#include <boost/asio/post.hpp>

#include "daemon/core/link_control.h"
#include "daemon/core/shore_commands.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

OutboxDrain::OutboxDrain(StationContext& ctx, const LinkControl& link, ShoreCommands& shore)
    : ctx_(ctx), link_(link), shore_(shore) {}

void OutboxDrain::push_reply(std::vector<std::uint8_t> bytes, bool then_apply) {
  if (replies_.size() >= 64) replies_.pop_front();  // bounded; the shore asks again
  replies_.push_back({std::move(bytes), then_apply});
}

void OutboxDrain::restore_usage() {
  if (auto u = ctx_.store->archive().get_state("link_usage"); u.ok() && u.value())
    usage_ = uplink::DailyUsage::parse(*u.value(), ctx_.now_s());
  else
    usage_.roll(ctx_.now_s());
}

void OutboxDrain::save_usage_if_changed(std::int64_t now) {
  if (!usage_dirty_) return;
  ctx_.store->archive().put_state("link_usage", usage_.serialize(), now);
  usage_dirty_ = false;
}

bool OutboxDrain::budget_left() const {
  const auto budget = link_.policy().daily_budget_bytes;
  return budget <= 0 || usage_.bytes < budget;
}

std::function<void()> OutboxDrain::take_stop_done() {
  auto d = std::move(stop_done_);
  stop_done_ = nullptr;
  return d;
}

void OutboxDrain::send_counted(uplink::OutgoingPacket p, uplink::AckHandler done) {
  // Alerts are exempt from the daily budget; everything else counts.
  bool exempt = p.kind == uplink::PacketKind::alert;
  std::uint64_t before = ctx_.uplink->bytes_sent();
  ctx_.uplink->send(std::move(p), std::move(done));
  if (!exempt) {
    usage_.add(ctx_.now_s(), std::int64_t(ctx_.uplink->bytes_sent() - before));
    usage_dirty_ = true;
  }
}

void OutboxDrain::send_outbox(store::Packet& p, std::size_t& free) {
  std::weak_ptr<bool> alive = ctx_.alive;
  uplink::OutgoingPacket out;
  out.sequence = p.sequence;
  out.kind = p.kind;
  out.payload = std::move(p.bytes);
  out.retained = p.kind == store::PacketKind::manifest;
  inflight_.insert(p.sequence);
  free--;
  send_counted(std::move(out), [this, alive](std::uint64_t seq, bool ok, const std::string& err) {
    if (!alive.lock()) return;
    inflight_.erase(seq);
    if (!ctx_.store) return;
    if (ok) {
      ctx_.store->outbox().mark_sent(seq, ctx_.now_s());
      packets_acked_++;
      last_ack_t_ = ctx_.now_s();
    } else {
      ctx_.store->outbox().record_attempt(seq, ctx_.now_s(), err);
      os::logger("uplink")->debug("packet {} not acknowledged: {}", seq, err);
    }
    if (ctx_.stopping && stop_done_ && inflight_.empty()) {
      auto c = ctx_.store->outbox().counts();
      if (c.ok() && c.value().unsent == 0) {
        // Posted, not called: this runs inside the backend's acknowledgement
        // (for the radio, inside its frame splitter), and the stop tears the
        // backend down.
        boost::asio::post(ctx_.io, take_stop_done());
        return;
      }
    }
    // A refusal is tried again by the drain timer (200 ms), not at once: a
    // packet the link keeps refusing must not spin the loop or write
    // attempts to the card a thousand times a second.
    if (ok) drain();
  });
}

void OutboxDrain::drain() {
  if (!ctx_.uplink || !ctx_.store) return;
  std::weak_ptr<bool> alive = ctx_.alive;
  auto& up = *ctx_.uplink;
  if (up.state() == uplink::LinkState::up && up.free_slots() > 0) {
    // Replies first (small, the shore waits), then alerts, shore-requested
    // resends, and the rest of the outbox while the daily budget lasts.
    while (!replies_.empty() && up.free_slots() > 0) {
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
                     if (then_apply) shore_.apply_pending_config();
                   });
    }
    std::size_t free = up.free_slots();
    auto batch = ctx_.store->outbox().next_batch(free + inflight_.size());
    bool budget = budget_left();
    if (batch.ok()) {
      for (auto& p : batch.value())
        if (free && p.priority == store::Priority::alert && !inflight_.count(p.sequence))
          send_outbox(p, free);
      while (free && budget && !resend_.empty()) {
        store::Packet p = std::move(resend_.front());
        resend_.pop_front();
        uplink::OutgoingPacket out;
        out.sequence = p.sequence;
        out.kind = p.kind;
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
          send_outbox(p, free);
    }
  }
  // Link state changes arrive asynchronously: look again shortly.
  timer_ = ctx_.clock.start_real_timer(200, [this, alive] {
    if (alive.lock()) drain();
  });
}

}  // namespace tarn::daemon
