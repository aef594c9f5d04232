// Windows rebuilt from archived flagged samples: for a shore's resend request
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

#include <cstdint>
#include <vector>

#include "codec/manifest.h"
#include "codec/window.h"
#include "daemon/store/archive_store.h"

namespace tarn::daemon {

// REQUIRES: codec::validate(m).ok(); from <= to.
std::vector<codec::Window> windows_from_archive(const codec::Manifest& m, std::int64_t from,
                                                std::int64_t to,
                                                const std::vector<store::ArchivedSample>& samples);

}  // namespace tarn::daemon
