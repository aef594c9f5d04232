// OutboxDrain: hands packets to the uplink while it is up and has free
// slots, in this order: replies to shore commands (small, the shore waits),
// alerts, packets the shore asked to resend, then the rest of the outbox
// while the daily byte budget lasts (alerts are exempt from it). Marks
// acknowledged packets sent in the outbox; refused ones are tried again by
// the drain timer (200 ms). During an orderly stop it calls the stop's
// continuation once the outbox is empty and nothing is in flight.
// Owns: the reply and resend queues, the packets in flight, the ack counts,
// the daily usage (bytes sent today, kept in the archive state "link_usage")
// and the drain timer.
// Called by: SampleIntake, HealthReporter and ShoreCommands after queueing,
// Station (start, stop); LinkControl reads the queue sizes and the budget;
// StatusReport reads the counts.
// Thread-safety: io_context thread only; acknowledgements arrive there.
#pragma once

#include <cstddef>
#include <cstdint>
#include <deque>
#include <functional>
#include <set>
#include <vector>

#include "daemon/core/station_context.h"
#include "daemon/uplink/link_policy.h"

namespace tarn::daemon {

class LinkControl;
class ShoreCommands;

class OutboxDrain {
 public:
  OutboxDrain(StationContext& ctx, const LinkControl& link, ShoreCommands& shore);

  void drain();
  void cancel() { timer_.cancel(); }

  // A reply to a shore command; then_apply: the pending config is applied
  // once the reply went out.
  void push_reply(std::vector<std::uint8_t> bytes, bool then_apply);
  void queue_resend(store::Packet p) { resend_.push_back(std::move(p)); }
  // The backend went away (teardown): its packets in flight are forgotten.
  void forget_inflight() { inflight_.clear(); }

  // Daily budget (the link policy's daily_budget_bytes; 0: none).
  void restore_usage();  // from the archive, at start
  void roll_usage(std::int64_t now) { usage_.roll(now); }
  void save_usage_if_changed(std::int64_t now);
  bool budget_left() const;

  // Orderly stop: `done` runs (posted) once nothing is left to send.
  void set_stop_done(std::function<void()> done) { stop_done_ = std::move(done); }
  std::function<void()> take_stop_done();

  std::size_t replies_waiting() const { return replies_.size(); }
  std::size_t resend_queued() const { return resend_.size(); }
  std::size_t resend_inflight() const { return resend_inflight_; }
  const std::set<std::uint64_t>& inflight() const { return inflight_; }
  std::uint64_t packets_acked() const { return packets_acked_; }
  std::int64_t last_ack_t() const { return last_ack_t_; }
  const uplink::DailyUsage& usage() const { return usage_; }

 private:
  struct Reply {
    std::vector<std::uint8_t> bytes;
    bool then_apply = false;  // apply the pending config once it went out
  };
  void send_counted(uplink::OutgoingPacket p, uplink::AckHandler done);
  void send_outbox(store::Packet& p, std::size_t& free);

  StationContext& ctx_;
  const LinkControl& link_;
  ShoreCommands& shore_;
  os::Timer timer_;  // real time: looks again at the link (every 200 ms)
  std::deque<Reply> replies_;
  std::deque<store::Packet> resend_;
  std::size_t resend_inflight_ = 0;
  std::set<std::uint64_t> inflight_;
  std::uint64_t packets_acked_ = 0;
  std::int64_t last_ack_t_ = 0;
  uplink::DailyUsage usage_;
  bool usage_dirty_ = false;
  std::function<void()> stop_done_;
};

}  // namespace tarn::daemon
