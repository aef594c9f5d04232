// What the archive and the outbox files share, written once: the way back to
// writing after a read-only spell, the counters table (both files keep one:
// name -> value, deltas gathered in memory and added inside the next write
// transaction), and the bytes a file takes on disk.
// Thread-safety: the caller's connection, on the event loop thread.
#pragma once

#include <cstdint>
#include <map>
#include <string>

#include "daemon/store/sqlite_db.h"
#include "daemon/store/store_file.h"
#include "daemon/store/store_status.h"

namespace tarn::store {

using CounterMap = std::map<std::string, std::int64_t>;

// When `db` is read-only (the file system was), closes it and opens the file at
// `path` again for writing (reopen_store_file). On failure `db` is a plain
// read-write connection again if one could be had, and the error is returned.
// Logs "<path> reopened for writing" on success. A writable `db`: nothing.
Status reopen_if_read_only(SqliteDb& db, const std::string& path, const Schema& schema,
                           const StoreFileOptions& options);

// Adds each delta to its counter. REQUIRES: inside the caller's transaction.
Status write_counters_in_txn(SqliteDb& db, const CounterMap& delta);

// The counters table (any connection, also read-only).
Result<CounterMap> read_counters(SqliteDb& db);

// The stored counters plus `pending` (deltas not yet written); stored ones
// count as none when they cannot be read.
CounterMap counters_with_pending(SqliteDb& db, const CounterMap& pending);

// Bytes of the file with its -wal and -shm files (those missing count 0).
std::int64_t file_bytes_on_disk(const std::string& path);

}  // namespace tarn::store
