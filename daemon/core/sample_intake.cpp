#include "daemon/core/sample_intake.h"

#include <algorithm>
#include <limits>
#include <map>

#include "config/settings/reasons.h"
#include "daemon/core/outbox_drain.h"
#include "daemon/core/packet_queue.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

void SampleIntake::flush_archive() {
  if (pending_archive_.empty() || !ctx_.store) return;
  ctx_.store->append_samples(std::move(pending_archive_), ctx_.now_s());
  pending_archive_.clear();
}

void SampleIntake::handle(AssemblerOutput& out) {
  for (auto& s : out.samples)
    if (s.channel >= archived_until_.size() || s.sample.t > archived_until_[s.channel])
      pending_archive_.push_back({ctx_.channel_names[s.channel], s.sample.t, s.sample.value,
                                  s.sample.flag, s.sample.reasons});
  // One archive transaction per poll cycle (flushed by the tick), not one
  // per instrument poll: commits are most of what the SD card is written.
  // A closing window (its samples go first), a reload, a stop or 4096
  // waiting samples flush earlier. A power cut loses at most the samples of
  // the cycle being read: one per channel.
  if (!out.windows.empty() || pending_archive_.size() >= 4096) flush_archive();
  if (!out.alerts.empty()) packets_.alerts(out.alerts);
  if (!out.cleanings.empty()) packets_.cleanings(out.cleanings);
  for (auto& w : out.windows) packets_.window(w);
  if (!out.windows.empty()) ctx_.save_state();
  bool any = !out.windows.empty() || !out.alerts.empty();
  out.clear();
  if (any) drain_.drain();
}

void SampleIntake::resume_from_archive() {
  auto& archive = ctx_.store->archive();
  auto& assembler = *ctx_.assembler;
  auto& out = ctx_.out;
  auto saved = archive.get_state("pipeline");
  std::int64_t t = ctx_.now_s();
  if (saved.ok() && saved.value()) {
    for (auto& note : assembler.restore(*saved.value()))
      os::logger("station")->warn("restore: {}", note);
  }
  // Samples archived after the last saved state (a power cut, a kill) are
  // replayed, so the current window (and one closed by nobody before the
  // kill) resumes where it was. The pipeline starts at the first of them.
  std::int64_t w = ctx_.cfg.sampling.window_s;
  std::int64_t from = (t / w) * w - w;
  if (auto rp = assembler.resume_point(); rp && *rp < from && *rp >= t - 6 * w) from = *rp;
  auto samples = archive.samples_since(from);
  std::int64_t start_t = t;
  if (samples.ok() && !samples.value().empty()) start_t = std::min(t, samples.value().front().t);
  out.clear();
  assembler.start(start_t, out);
  std::size_t replayed = 0;
  const auto& names = ctx_.channel_names;
  archived_until_.assign(names.size(), std::numeric_limits<std::int64_t>::min());
  if (samples.ok()) {
    std::map<std::string, std::size_t> index;
    for (std::size_t i = 0; i < names.size(); ++i) index[names[i]] = i;
    constexpr std::uint32_t driver_bits =
        pipeline::reason::no_reply | pipeline::reason::garbled | pipeline::reason::offline |
        pipeline::reason::instrument_status | pipeline::reason::warming_up |
        pipeline::reason::poll_missed | pipeline::reason::clock_unsynced;
    for (auto& s : samples.value()) {
      auto it = index.find(s.channel);
      if (it == index.end()) continue;
      pipeline::RawSample raw{s.t, s.value, s.reasons & driver_bits};
      archived_until_[it->second] = std::max(archived_until_[it->second], s.t);
      std::size_t before = out.samples.size();
      assembler.push(it->second, raw, out);
      replayed += out.samples.size() > before ? 1 : 0;
    }
  }
  // Replayed samples are in the archive already: only windows and alerts go on.
  out.samples.clear();
  // Cleaning steps completed before the cut were sent then.
  out.cleanings.clear();
  handle(out);
  if (replayed)
    os::logger("station")->info("resumed the current window from the archive ({} samples)",
                                replayed);
}

}  // namespace tarn::daemon
