// StationStore: the outbox and the archive of one station in one directory,
// under one size budget, with the policy that decides what gives way.
//
// Files in `dir`: outbox.db (+ -wal, -shm), outbox.db.seq (sequence sidecar),
// archive.db (+ -wal, -shm). See daemon/store/README.md for the schema.
//
// Budget: the pages in use in both files (free pages not counted; each WAL adds
// at most StoreFileOptions::wal_size_limit beyond) are kept at or under
// StoreLimits::budget_bytes. When a write would pass it, or (with
// reclaim_on_disk_full) the disk is full, space is reclaimed in this order:
//   1. acknowledged packets kept for resends, oldest first (pruned.sent_early);
//   2. policy drop_oldest_normal: unsent normal-priority packets, oldest first
//      (dropped.unsent_normal), then archived samples, oldest first
//      (dropped.archive_samples);
//      policy thin_archive_first: archived samples first, then unsent normal
//      packets.
// Unsent alerts are never dropped by the budget. Every drop is counted in the
// files (table counters), logged on "store" at most once per hour, and shown in
// stats().
//
// Faults: see OutboxStore and ArchiveStore: writes that fail are held in
// memory (bounded) and retried by maintain(); condition() says so.
//
// Thread-safety: one thread (the daemon's event loop). Times are passed in
// (UTC seconds) so the store reads no clock.
#pragma once

#include <cstdint>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/store/archive_store.h"
#include "daemon/store/outbox_store.h"
#include "daemon/store/store_log.h"

namespace tarn::store {

enum class BudgetPolicy { drop_oldest_normal, thin_archive_first };
std::string_view policy_name(BudgetPolicy p);
std::optional<BudgetPolicy> parse_policy(std::string_view name);

struct StoreLimits {
  std::int64_t budget_bytes = 256ll << 20;
  BudgetPolicy policy = BudgetPolicy::drop_oldest_normal;
  // Apply the policy also when the file system is full (SQLite then reuses the
  // freed pages); false: only hold in memory and wait for space.
  bool reclaim_on_disk_full = true;
};

struct StationStoreOptions {
  OutboxOptions outbox;
  ArchiveOptions archive;
  StoreLimits limits;
  std::int64_t prune_interval_s = 600;  // retention runs at most this often in maintain()
};

struct StoreStats {
  std::string outbox_path, archive_path;
  bool outbox_present = false, archive_present = false;
  OutboxCounts outbox;
  ArchiveCounts archive;
  std::int64_t outbox_used_bytes = 0, archive_used_bytes = 0;
  std::int64_t outbox_file_bytes = 0, archive_file_bytes = 0;
  std::int64_t budget_bytes = 0;  // 0: unknown (read from files only)
  std::string policy;
  std::uint64_t next_sequence = 0;               // 0: unknown
  std::map<std::string, std::int64_t> counters;  // outbox and archive merged
  std::size_t held_packets = 0, held_acks = 0, held_samples = 0;
  std::string
      condition;  // "ok", "degraded: disk full, holding 3 packets and 120 samples in memory"
  std::vector<std::string> notes;
};

// "key: value" lines, one screen, for `tarn store stats` and `tarn status`.
std::string format_stats(const StoreStats& s);

struct StorePaths {
  std::string given;  // what the user named
  std::string dir, outbox, archive;
};
// `arg` is the store directory or either of its .db files.
StorePaths locate_store(const std::string& arg);

// Read-only: opens the files read-only with a busy timeout (safe beside a
// running daemon), never writes. Missing files are reported, not created.
Result<StoreStats> read_store_stats(const StorePaths& paths);

class StationStore {
 public:
  // REQUIRES: `dir` exists and is writable (else the error is returned).
  static Result<std::unique_ptr<StationStore>> open(const std::string& dir,
                                                    const StationStoreOptions& options,
                                                    std::int64_t now);

  // Durable insert of one packet (see OutboxStore::insert), after making room by the budget.
  InsertReceipt insert_packet(const PacketSource& source, Priority priority, PacketKind kind,
                              std::int64_t created_t, std::int64_t now);
  // One poll cycle's samples in one transaction (see ArchiveStore::append).
  AppendReceipt append_samples(std::vector<ArchivedSample> batch, std::int64_t now);

  // Call periodically (e.g. every 30 s): retries held writes, runs retention at
  // most every prune_interval_s, keeps the budget, logs rate-limited notices.
  void maintain(std::int64_t now);
  // Reclaims space until the budget holds. Returns the first error met.
  Status enforce_budget(std::int64_t now);

  // "ok" or "degraded: <why>, holding N packets and M samples in memory".
  std::string condition() const;
  bool degraded() const;
  StoreStats stats();

  OutboxStore& outbox() { return *outbox_; }
  ArchiveStore& archive() { return *archive_; }
  const StationStoreOptions& options() const { return options_; }
  // Pages in use in both files (what the budget counts), in bytes.
  Result<std::int64_t> used_bytes();

 private:
  StationStore(StationStoreOptions options, std::unique_ptr<OutboxStore> outbox,
               std::unique_ptr<ArchiveStore> archive);
  // One reclaim step in the order above. Returns rows removed (0: nothing left to remove).
  Result<std::int64_t> reclaim_step();
  void after_fault(std::int64_t now);
  void log_notices(std::int64_t now);

  StationStoreOptions options_;
  std::unique_ptr<OutboxStore> outbox_;
  std::unique_ptr<ArchiveStore> archive_;
  std::int64_t last_prune_ = INT64_MIN;
  RateLimit drop_notice_{3600}, fault_notice_{3600}, alerts_only_notice_{3600};
  std::map<std::string, std::int64_t> drops_since_notice_;
  bool over_budget_with_alerts_only_ = false;
  bool was_degraded_ = false;
};

}  // namespace tarn::store
