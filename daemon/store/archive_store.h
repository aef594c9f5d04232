// ArchiveStore: every flagged sample, maintenance periods and a small
// key-value table of persisted daemon state, in one SQLite file (WAL,
// synchronous=FULL) beside the outbox.
//
// Samples are written in batches: one transaction per append() call (the
// daemon calls it once per poll cycle, so a power cut loses at most the poll
// being read). Queries by time serve the field export and the resume of the
// current window after a restart ("samples since T").
//
// Retention: prune() removes samples older than max_age_s and, while the file
// uses more than max_bytes, the oldest samples in chunks. The station store's
// budget policy may remove more (drop_oldest_samples, counted).
//
// Faults: a batch that cannot be written (disk full, read-only, I/O) is held in
// memory up to holding_max_samples (oldest held samples dropped beyond, counted);
// state values likewise (last value per key). retry_held() writes them.
//
// Thread-safety: one thread (the daemon's event loop).
#pragma once

#include <cstdint>
#include <deque>
#include <functional>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <unordered_map>
#include <vector>

#include "daemon/pipeline/sample.h"
#include "daemon/store/sqlite_db.h"
#include "daemon/store/store_common.h"
#include "daemon/store/store_file.h"

namespace tarn::store {

struct ArchivedSample {
  std::string channel;  // channel name from the config
  std::int64_t t = 0;   // UTC seconds
  std::optional<double> value;
  codec::Flag flag = codec::Flag::not_evaluated;
  std::uint32_t reasons = 0;
};

struct MaintenancePeriod {
  std::int64_t id = 0;
  std::int64_t start_t = 0;
  std::optional<std::int64_t> end_t;  // empty while the period is open
  std::string note;
  // Schema version 3:
  std::string instrument;               // empty: the whole station
  std::optional<std::int64_t> until_t;  // when the period ends by itself (its maximum duration)
  std::string ended_by;  // "stop" (a command), "time_limit" (ended by itself), "config"; "" open
};

struct ArchiveCounts {
  std::int64_t samples = 0;
  std::optional<std::int64_t> oldest_t, newest_t;
  std::int64_t channels = 0;
  std::int64_t maintenance_periods = 0;
  std::int64_t state_keys = 0;
};

struct ArchiveOptions {
  std::int64_t max_age_s = 400 * 86400;      // keep samples this long
  std::int64_t max_bytes = 512ll << 20;      // and the file under this many used bytes
  std::size_t holding_max_samples = 100000;  // in memory while the file is not writable
  StoreFileOptions file;
};

struct AppendReceipt {
  bool stored = false;      // false: held in memory (see cause)
  std::size_t dropped = 0;  // held samples dropped to keep within the bound
  Status cause;
};

class ArchiveStore {
 public:
  static Result<std::unique_ptr<ArchiveStore>> open(const std::string& path,
                                                    const ArchiveOptions& options,
                                                    std::int64_t now);
  ~ArchiveStore();

  // One transaction for the whole batch.
  AppendReceipt append(std::vector<ArchivedSample> batch);

  // Samples with from <= t < to, in time order, held ones included;
  // `channel` empty = all. `fn` returns false to stop early.
  Status for_each_sample(std::int64_t from, std::int64_t to, const std::string& channel,
                         const std::function<bool(const ArchivedSample&)>& fn);
  Result<std::vector<ArchivedSample>> samples_since(std::int64_t t);

  // Maintenance periods: start (end may follow later), and those overlapping [from, to).
  Result<std::int64_t> add_maintenance(std::int64_t start_t, std::optional<std::int64_t> end_t,
                                       std::string_view note);
  Status end_maintenance(std::int64_t id, std::int64_t end_t);
  // With the version-3 columns: m.id is ignored; returns the new id.
  Result<std::int64_t> add_maintenance(const MaintenancePeriod& m);
  Status end_maintenance(std::int64_t id, std::int64_t end_t, std::string_view ended_by);
  // The period that ended last (end_t <= to), if any.
  Result<std::optional<MaintenancePeriod>> last_ended_maintenance(std::int64_t to);
  Result<std::vector<MaintenancePeriod>> maintenance_between(std::int64_t from, std::int64_t to);

  // Persisted daemon state (alert state, QC snapshots, overrides): small text values.
  Status put_state(const std::string& key, const std::string& value, std::int64_t now);
  Result<std::optional<std::string>> get_state(const std::string& key);
  Status erase_state(const std::string& key);

  // The outbox's highest sequence number, written with the next transaction
  // here so a lost outbox file cannot bring numbers back.
  void note_highest_sequence(std::uint64_t seq);
  Result<std::uint64_t> recorded_highest_sequence();

  // Retention by age and size. Returns samples removed.
  Result<std::int64_t> prune(std::int64_t now);
  // Budget policy step: removes the `n` oldest samples, counted as dropped.
  Result<std::int64_t> drop_oldest_samples(std::int64_t n);

  Status retry_held();
  std::size_t held_samples() const { return held_samples_; }
  std::size_t held_batches() const { return held_.size(); }
  const Status& write_fault() const { return fault_; }

  Result<ArchiveCounts> counts();
  Result<std::int64_t> used_bytes() { return tarn::store::used_bytes(db_); }
  std::int64_t file_bytes() const;
  std::map<std::string, std::int64_t> counters();
  void add_counter(const std::string& name, std::int64_t delta) { counter_delta_[name] += delta; }
  const OpenReport& open_report() const { return report_; }
  const std::string& path() const { return path_; }
  // For tests and read-only queries; never write through it.
  SqliteDb& database() { return db_; }

 private:
  ArchiveStore(SqliteDb db, std::string path, ArchiveOptions options);
  Status write_batch(const std::vector<ArchivedSample>& batch);
  Status write_pending_in_txn();
  void note_fault(const Status& s);
  Result<std::int64_t> delete_oldest(std::int64_t n, const char* counter_name);

  SqliteDb db_;
  std::string path_;
  ArchiveOptions options_;
  OpenReport report_;
  std::unordered_map<std::string, std::int64_t> channel_ids_;
  std::deque<std::vector<ArchivedSample>> held_;
  std::size_t held_samples_ = 0;
  std::map<std::string, std::optional<std::string>> held_state_;  // nullopt: erase
  std::int64_t held_state_t_ = 0;
  std::uint64_t pending_highest_seq_ = 0;
  std::map<std::string, std::int64_t> counter_delta_;
  Status fault_;
};

// Read-only queries shared with the field tools.
Result<ArchiveCounts> read_archive_counts(SqliteDb& db);
Status read_samples(SqliteDb& db, std::int64_t from, std::int64_t to, const std::string& channel,
                    const std::function<bool(const ArchivedSample&)>& fn);

// The archive schema, version 1 first.
const Schema& archive_schema();

// State key holding the outbox's highest sequence number.
inline constexpr const char* highest_sequence_key = "outbox.highest_sequence";

}  // namespace tarn::store
