#include "daemon/core/packet_queue.h"

#include <algorithm>
#include <optional>
#include <span>
#include <string>

#include "codec/encoder.h"
#include "drivers/os/utc_text.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

void PacketQueue::window(const codec::Window& w, bool rebuilt) {
  codec::EncodeOptions opts;
  opts.mtu = packet_mtu();
  opts.windows_per_packet = 1;
  auto trial = codec::encode_windows(ctx_.manifest, std::span<const codec::Window>(&w, 1), 1, opts);
  if (!trial.ok()) {
    os::logger("station")->error("window {} not encoded: {}", os::format_utc(w.start),
                                 trial.error().message);
    return;
  }
  std::size_t parts = trial->size();
  std::int64_t now = ctx_.now_s();
  for (std::size_t i = 0; i < parts; ++i) {
    // The codec numbers split packets consecutively; each part is encoded
    // again with the sequence number the outbox assigns it.
    auto m = ctx_.manifest;
    store::PacketSource source = [m, w, opts, i](std::uint64_t seq) {
      auto r = codec::encode_windows(m, std::span<const codec::Window>(&w, 1), seq - i, opts);
      return r.ok() && r->size() > i ? (*r)[i].bytes : std::vector<std::uint8_t>{};
    };
    ctx_.store->insert_packet(source, store::Priority::normal, store::PacketKind::window,
                              w.start + ctx_.cfg.sampling.window_s, now);
  }
  if (rebuilt) return;
  windows_closed_++;
  os::logger("station")->debug("window {} closed{}, {} packet(s)", os::format_utc(w.start),
                               w.partial ? " (partial)" : "", parts);
}

void PacketQueue::alerts(const std::vector<pipeline::AlertEvent>& events) {
  std::vector<codec::AlertEvent> wire;
  for (auto& e : events) {
    codec::AlertEvent a;
    int ch = codec::channel_index(ctx_.manifest.manifest, e.channel);
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
          pipeline::statistic_name(e.statistic), e.channel, os::format_utc(e.window_start));
      continue;
    }
    os::logger("alerts")->info(
        "{}: {} {} -> {} ({} {} = {:.3f}, window {})", e.rule,
        pipeline::alert_change_name(e.change), e.from_name.empty() ? "none" : e.from_name,
        e.to_name.empty() ? "none" : e.to_name, e.channel, pipeline::statistic_name(e.statistic),
        e.value, os::format_utc(e.window_start));
  }
  auto m = ctx_.manifest;
  store::PacketSource source = [m, wire](std::uint64_t seq) {
    auto r = codec::encode_alerts(m, wire, seq);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  ctx_.store->insert_packet(source, store::Priority::alert, store::PacketKind::alert, ctx_.now_s(),
                            ctx_.now_s());
}

void PacketQueue::cleanings(const std::vector<codec::CleaningRecord>& records) {
  for (auto& r : records) {
    auto fmt = [](const std::optional<double>& v) {
      return v ? fmt::format("{:.3f}", *v) : std::string("none");
    };
    os::logger("station")->info("cleaning step of {}: median {} before ({} values), {} after ({})",
                                ctx_.channel_names[r.channel], fmt(r.before), r.n_before,
                                fmt(r.after), r.n_after);
  }
  // Data, not an alert: on the data topic in a packet of its own, at normal
  // priority. The shore corrects the drift between two cleanings from these.
  auto m = ctx_.manifest;
  store::PacketSource source = [m, records](std::uint64_t seq) {
    auto r = codec::encode_cleanings(m, records, seq);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  ctx_.store->insert_packet(source, store::Priority::normal, store::PacketKind::window,
                            ctx_.now_s(), ctx_.now_s());
}

void PacketQueue::health(const codec::HealthRecord& rec, bool unsynced) {
  auto m = ctx_.manifest;
  store::PacketSource source = [m, rec, unsynced](std::uint64_t seq) {
    auto r = codec::encode_health(m, std::span<const codec::HealthRecord>(&rec, 1), seq, unsynced);
    return r.ok() ? *r : std::vector<std::uint8_t>{};
  };
  ctx_.store->insert_packet(source, store::Priority::normal, store::PacketKind::health,
                            ctx_.now_s(), ctx_.now_s());
}

std::size_t PacketQueue::packet_mtu() const {
  return std::min<std::size_t>(ctx_.uplink ? ctx_.uplink->mtu() : codec::kMaxPacketBytes,
                               codec::kMaxPacketBytes);
}

void PacketQueue::manifest_if_changed() {
  auto& archive = ctx_.store->archive();
  std::string hash = std::to_string(ctx_.manifest.hash);
  auto saved = archive.get_state("manifest_hash");
  if (saved.ok() && saved.value() && *saved.value() == hash) return;
  // Split to the link's MTU like the windows: a serial radio carries a few
  // hundred bytes per frame, and the shore needs every part to decode.
  const std::size_t mtu = packet_mtu();
  auto trial = codec::encode_manifest(ctx_.manifest, 1, mtu);
  if (!trial.ok()) {
    os::logger("station")->error("manifest not encoded: {}", trial.error().message);
    return;
  }
  for (std::size_t i = 0; i < trial->size(); ++i) {
    auto m = ctx_.manifest;
    store::PacketSource source = [m, i, mtu](std::uint64_t seq) {
      auto r = codec::encode_manifest(m, seq - i, mtu);
      return r.ok() && r->size() > i ? (*r)[i].bytes : std::vector<std::uint8_t>{};
    };
    ctx_.store->insert_packet(source, store::Priority::normal, store::PacketKind::manifest,
                              ctx_.now_s(), ctx_.now_s());
  }
  archive.put_state("manifest_hash", hash, ctx_.now_s());
  os::logger("station")->info("channel manifest {:08x} queued ({} packet(s))", ctx_.manifest.hash,
                              trial->size());
}

}  // namespace tarn::daemon
