// Samples placed into the manifest's windows, and windows rebuilt from
// archived flagged samples with it: for a shore's resend request
// by time that reaches beyond the outbox's retention of sent packets. Pure:
// samples in, windows out; no clock, file or port.
//
// Every window [start, start + window_s) of the manifest that overlaps
// [from, to) and holds at least one archived sample of a manifest channel is
// rebuilt. Per channel, slot i is the archived sample at start + i * period_s
// (a sample off the slot grid goes to the slot its time falls in; a second
// sample for a slot is ignored). A slot without an archived sample is flagged
// missing (9), and the window is then marked partial (not observed in full).
// A sample flagged missing carries no value on the wire (FORMAT.md), even if
// the archive kept one. Statistics follow FORMAT.md §4.4 (codec::summarise:
// over passed samples), which may differ from the live window's statistics
// where a channel counts suspect samples too (`window.include_suspect`).
// clock_unsynced is set when any sample carries that reason.
// Thread-safety: plain function.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <utility>
#include <vector>

#include "codec/manifest.h"
#include "codec/window.h"
#include "daemon/store/archive_store.h"

namespace tarn::daemon {

// One sample to place: a manifest channel's value, flag and reasons at time t.
struct SlotSample {
  std::int64_t t = 0;
  std::size_t channel = 0;  // index into the manifest's channels
  std::optional<double> value;
  codec::Flag flag = codec::Flag::missing;
  std::uint32_t reasons = 0;
};

// A window the samples reached: every manifest channel with every slot (a slot
// without a sample: no value, flag missing, reason 0; reasons one entry per
// slot); statistics not yet computed. filled[channel][slot] tells which slots
// received a sample.
struct PlacedWindow {
  codec::Window window;
  std::vector<std::vector<bool>> filled;
};

struct Placement {
  std::vector<PlacedWindow> windows;  // ascending start
  // Samples that met an already filled slot, in input order: (index of the
  // later sample, index of the sample that filled the slot). The first stays.
  std::vector<std::pair<std::size_t, std::size_t>> duplicates;
};

// The one way samples go into windows (`tarn encode` and the archive's
// resends): window start = floor(t / window_s) * window_s (UTC-aligned), slot
// = (t - start) / period_s, so a sample off the slot grid goes to the slot its
// time falls in. Values and flags are placed as given.
// REQUIRES: codec::validate(m).ok(); every channel < m.channels.size().
Placement place_samples(const codec::Manifest& m, const std::vector<SlotSample>& samples);

// REQUIRES: codec::validate(m).ok(); from <= to.
std::vector<codec::Window> windows_from_archive(const codec::Manifest& m, std::int64_t from,
                                                std::int64_t to,
                                                const std::vector<store::ArchivedSample>& samples);

}  // namespace tarn::daemon
