// Reason bits carried with every flagged sample. The bit positions are part of
// the wire format (codec/FORMAT.md) and the archive: never renumber, only add.
#pragma once

#include <cstdint>
#include <string_view>

namespace tarn::pipeline::reason {

// Set by the driver side (drivers -> pipeline).
inline constexpr std::uint32_t no_reply = 1u << 0;           // poll timed out / no answer
inline constexpr std::uint32_t garbled = 1u << 1;            // reply unparsable, bad checksum/CRC
inline constexpr std::uint32_t offline = 1u << 2;            // port lost / instrument offline
inline constexpr std::uint32_t instrument_status = 1u << 3;  // instrument reported an error
inline constexpr std::uint32_t warming_up = 1u << 4;         // within warm-up after power/reconnect
inline constexpr std::uint32_t poll_missed = 1u << 5;        // scheduler could not poll in time
// Set by the QC tests (pipeline).
inline constexpr std::uint32_t gross_range_sensor = 1u << 8;
inline constexpr std::uint32_t gross_range_operator = 1u << 9;
inline constexpr std::uint32_t climatology = 1u << 10;
inline constexpr std::uint32_t spike = 1u << 11;
inline constexpr std::uint32_t rate_of_change = 1u << 12;
inline constexpr std::uint32_t flat_line = 1u << 13;
inline constexpr std::uint32_t attenuated = 1u << 14;
inline constexpr std::uint32_t solar_quenching = 1u << 15;
inline constexpr std::uint32_t maintenance = 1u << 16;
inline constexpr std::uint32_t fouling_drift = 1u << 17;
inline constexpr std::uint32_t timing_gap = 1u << 18;  // synthesised for a poll that never came
// Taken more than late_s from its due time (QARTOD test 1): flag 4, value kept.
// Bit 19 was called timing_off_schedule (flag 9) before; same bit.
inline constexpr std::uint32_t late = 1u << 19;
inline constexpr std::uint32_t clock_unsynced = 1u << 24;  // taken before the clock was synced

}  // namespace tarn::pipeline::reason
