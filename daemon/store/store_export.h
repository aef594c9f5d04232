// Text forms of archived samples and outbox packets for the field tools
// (`tarn store export`, `tarn store packets`). Pure formatting on streams.
//
// Samples, CSV (RFC 4180 quoting; header line first):
//   time_utc,t,channel,value,flag,reasons
//   2026-06-01T00:00:00Z,1780272000,chl_a,3.52,1,0
// `value` is empty when missing; `flag` is the QARTOD flag (1,2,3,4,9);
// `reasons` the reason bit set in decimal (config/settings/reasons.h).
// Samples, JSON Lines: the schema of `tarn encode`'s input plus the reasons:
//   {"t":1780272000,"ch":"chl_a","v":3.52,"f":1,"r":0}
// Values are printed in the shortest form that reads back to the same double.
//
// Packets: per packet one comment line, then the packet as lower-case hex:
//   # seq=42 kind=window priority=normal created=2026-06-01T00:10:00Z size=84 attempts=2
//   0a1b2c...
// With bare=true only the hex lines (for tools that take one hex packet per line).
#pragma once

#include <ostream>
#include <string>

#include "config/json_reader.h"
#include "daemon/store/archive_store.h"
#include "daemon/store/outbox_store.h"
#include "daemon/store/station_store.h"

namespace tarn::store {

enum class SampleFormat { csv, jsonl };

void write_sample_header(std::ostream& out, SampleFormat f);
void write_sample(std::ostream& out, SampleFormat f, const ArchivedSample& s);
void write_packet(std::ostream& out, const Packet& p, bool bare);

std::string to_hex(const std::vector<std::uint8_t>& bytes);

// The stats as one JSON object for `tarn status --json` (times as UTC text and
// unix seconds; absent values as null).
config::Json stats_to_json(const StoreStats& s);
// Shortest round-trip decimal form of a double.
std::string number_text(double v);

}  // namespace tarn::store
