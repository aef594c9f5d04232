// Encoder: windows, alerts, health records and the manifest into packets
// (codec/FORMAT.md). Pure: no clock, no I/O.
//
// Sequence numbers are the caller's (the outbox store assigns them); a call
// that yields several packets numbers them first_sequence, first_sequence+1, ...
// Thread-safety: pure functions, safe to call from any thread.
#pragma once

#include <cstdint>
#include <span>
#include <vector>

#include "codec/packet.h"

namespace tarn::codec {

struct EncodeOptions {
  std::size_t mtu = kMaxPacketBytes;   // hard limit on the bytes of one packet
  std::size_t windows_per_packet = 6;  // 1..255; fewer when the MTU demands
  bool stats_only = false;             // statistics section instead of samples
  bool with_reasons = true;            // reason-bits section (samples mode only)
};

struct EncodedPacket {
  std::uint64_t sequence = 0;
  std::vector<std::uint8_t> bytes;
  std::size_t first_window = 0, window_count = 0;    // indices into the input span
  std::size_t first_channel = 0, channel_count = 0;  // manifest channels carried
};

// Encodes `windows` into packets of at most opts.mtu bytes. A run of windows
// that does not fit is split into fewer windows per packet, a single window
// that does not fit into groups of channels; every packet decodes on its own.
// REQUIRES (checked, Errc::invalid_input otherwise):
//  - windows sorted by strictly increasing start, each start a multiple of window_s;
//  - slots in 1..window_s/period_s, fewer only when partial;
//  - channels.size() == manifest channels, first_channel == 0;
//  - samples mode: values/flags per slot, a value exactly when the flag is not
//    missing, |value / resolution| < 2^53; reasons empty or per slot;
//  - stats-only mode: stats as summarise() defines them (counts add up to slots,
//    basis not_evaluated exactly when no slot passed and some are not evaluated).
// Errc::too_large when one channel of one window does not fit the MTU.
Result<std::vector<EncodedPacket>> encode_windows(const CheckedManifest& m,
                                                  std::span<const Window> windows,
                                                  std::uint64_t first_sequence,
                                                  const EncodeOptions& opts = {});

// One packet with the events. REQUIRES: channel indices within the manifest,
// window_start aligned, texts at most 255 bytes, kind and cause known values, cause
// none for change events and not none for stale events.
Result<std::vector<std::uint8_t>> encode_alerts(const CheckedManifest& m,
                                                std::span<const AlertEvent> events,
                                                std::uint64_t sequence,
                                                bool clock_unsynced = false);

// One packet with the cleaning records (FORMAT.md §6.3). REQUIRES: channel indices
// within the manifest, times in 1900..2300 with start <= end, a median present exactly
// when its count is > 0, medians finite.
Result<std::vector<std::uint8_t>> encode_cleanings(const CheckedManifest& m,
                                                   std::span<const CleaningRecord> records,
                                                   std::uint64_t sequence,
                                                   bool clock_unsynced = false);

Result<std::vector<std::uint8_t>> encode_health(const CheckedManifest& m,
                                                std::span<const HealthRecord> records,
                                                std::uint64_t sequence,
                                                bool clock_unsynced = false);

// The manifest as one or more packets of at most `mtu` bytes (mtu >= 32).
Result<std::vector<EncodedPacket>> encode_manifest(const CheckedManifest& m,
                                                   std::uint64_t first_sequence,
                                                   std::size_t mtu = kMaxPacketBytes);

}  // namespace tarn::codec
