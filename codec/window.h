// The records the codec carries: flagged sample windows with their
// statistics, alert events and station health. Pure data; the codec knows
// nothing of the daemon, whose pipeline fills these from its own types.
// Times are UTC seconds since the Unix epoch. Thread-safety: plain values.
#pragma once

#include <array>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "codec/qartod_flag.h"

namespace tarn::codec {

// Which samples a channel-window's statistics cover (FORMAT.md §4.4): the passed
// samples (`used`), or, in a window without a passed sample, its not-evaluated
// samples (a channel without QC tests, or in warm-up).
enum class StatsBasis : std::uint8_t { used = 0, not_evaluated = 1 };

// Statistics of one channel over one window (FORMAT.md §4.4 defines them).
struct ChannelStats {
  std::array<std::uint32_t, 5> counts{};  // slots per flag, indexed by flag_slot()
  // Over the samples of `basis`; empty when there are none.
  std::optional<double> mean, min, max;
  std::optional<double> sd;                     // sample standard deviation (n - 1); 0 for n == 1
  std::optional<std::int64_t> first_t, last_t;  // times of the first and last sample of the basis
  std::uint32_t reasons_any = 0;                // OR of the reason bits of all slots
  // not_evaluated exactly when no slot passed and at least one is flagged 2 (so has a value).
  StatsBasis basis = StatsBasis::used;
  bool operator==(const ChannelStats&) const = default;
};

// One channel of one window.
struct ChannelWindow {
  // One entry per slot; empty in a statistics-only window. A value is present
  // exactly when the flag is not `missing`.
  std::vector<std::optional<double>> values;
  std::vector<Flag> flags;
  std::vector<std::uint32_t> reasons;  // per slot; empty means all zero
  ChannelStats stats;
  bool operator==(const ChannelWindow&) const = default;
};

struct Window {
  std::int64_t start = 0;           // UTC seconds, a multiple of the manifest's window_s
  std::uint32_t slots = 0;          // slot i is the sample at start + i * period_s
  bool partial = false;             // the window was not observed in full
  bool clock_unsynced = false;      // taken before the station clock was synchronised
  bool stats_only = false;          // decoded from a statistics section: no per-slot data
  std::uint16_t first_channel = 0;  // channels[i] is manifest channel first_channel + i
  std::vector<ChannelWindow> channels;
  bool operator==(const Window&) const = default;
};

// Statistics of a channel's slots as FORMAT.md §4.4 defines them (format version 2:
// a window without a passed sample but with not-evaluated ones gets statistics over
// those, basis not_evaluated). `passed_only` gives the version 1 rule (passed samples
// only, basis always used), for packets of version 1.
// REQUIRES: c.values and c.flags hold one entry per slot; c.reasons is empty or the same size.
ChannelStats summarise(const ChannelWindow& c, std::int64_t start, std::uint32_t period_s,
                       bool passed_only = false);

// What an alert event says (FORMAT.md §6.1).
enum class AlertKind : std::uint8_t {
  change = 0,   // the level was raised, lowered, cleared or a reminder sent
  stale = 1,    // a raised level has had no usable statistic for too many windows
  resumed = 2,  // a stale level has a usable statistic again
};
// Why a level went stale.
enum class StaleCause : std::uint8_t {
  none = 0,
  instrument_offline = 1,  // the instrument does not answer
  no_values = 2,           // samples without values (sensor failed)
  all_failed_qc = 3,       // every sample failed QC
};

// A bloom alert event raised by a rule on a closed window.
struct AlertEvent {
  std::uint16_t channel = 0;  // manifest channel index
  std::uint32_t level = 0;    // index of the new level (0 = no alert)
  std::string level_name;     // e.g. "watch"
  std::uint32_t previous_level = 0;
  // The value the rule compared, in channel units; for stale and resumed events the
  // last usable statistic.
  double statistic = 0;
  std::int64_t window_start = 0;  // the window that triggered the event
  std::string rule_id;            // the config's name for the rule
  AlertKind kind = AlertKind::change;
  StaleCause cause = StaleCause::none;  // none for change events; set for stale events
  bool operator==(const AlertEvent&) const = default;
};

// The readings around one cleaning of a channel's sensor (FORMAT.md §6.3): medians of
// the last readings before maintenance began and of the first after it ended, so the
// shore can correct the drift between cleanings.
struct CleaningRecord {
  std::uint16_t channel = 0;                                // manifest channel index
  std::int64_t maintenance_start = 0, maintenance_end = 0;  // UTC seconds, start <= end
  std::optional<double> before, after;                      // channel units; empty when n = 0
  std::uint8_t n_before = 0, n_after = 0;  // readings in each median (0 exactly when empty)
  bool operator==(const CleaningRecord&) const = default;
};

// Station health snapshot.
struct HealthRecord {
  std::int64_t t = 0;                  // UTC seconds
  std::optional<double> board_temp_c;  // 0.1 Cel steps
  std::optional<std::uint64_t> disk_free_mib;
  std::optional<double> supply_v;  // 0.001 V steps
  bool operator==(const HealthRecord&) const = default;
};

// Window starts and other times are carried as offsets from this epoch,
// 2024-01-01T00:00:00Z (FORMAT.md §1.4).
inline constexpr std::int64_t kTimeEpoch = 1704067200;

// Floor division for times before the Unix epoch.
constexpr std::int64_t floor_div(std::int64_t a, std::int64_t b) {
  return a / b - ((a % b != 0) && ((a < 0) != (b < 0)));
}

}  // namespace tarn::codec
