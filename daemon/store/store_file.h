// Opening a store file for writing: integrity check, moving a damaged file
// aside, connection settings and forward schema migrations.
//
// On open:
//  1. An existing, non-empty file is checked with PRAGMA quick_check. A file
//     that is not a database, is truncated or fails the check is renamed to
//     `<name>.damaged-<UTC yyyymmddThhmmssZ>` (its -wal and -shm with it), an
//     error is logged on the "store" logger, and a new empty file is started.
//     Busy or I/O errors are returned, never taken for damage.
//  2. Settings: journal_mode=WAL, synchronous=FULL, wal_autocheckpoint and
//     journal_size_limit from StoreFileOptions.
//  3. PRAGMA user_version is read; each Migration above it is applied in its
//     own transaction that also sets user_version. A file written by a newer
//     schema is refused (invalid): a downgrade must never destroy data.
//
// Thread-safety: call from one thread.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>

#include "daemon/store/sqlite_db.h"

namespace tarn::store {

// Brings a file from schema `version - 1` to `version`.
struct Migration {
  int version;
  std::string_view sql;
};

struct Schema {
  std::string_view name;                  // "outbox", "archive": for messages
  std::span<const Migration> migrations;  // ascending, starting at version 1
  int current() const { return migrations.empty() ? 0 : migrations.back().version; }
};

struct StoreFileOptions {
  int wal_autocheckpoint_pages = 256;     // checkpoint when the WAL holds this many pages
  std::int64_t wal_size_limit = 1 << 20;  // truncate the WAL to this after a checkpoint
  int busy_timeout_ms = 2000;
  // Applies migrations only up to this version (tests build old files); 0 = latest.
  int stop_at_version = 0;
};

struct OpenReport {
  bool created = false;        // no usable file existed: a new one was started
  std::string moved_aside_to;  // set when a damaged file was moved aside
  std::string damage;          // what quick_check or SQLite said about it
  int migrated_from = -1;      // user_version before migration, -1 when none ran
};

// REQUIRES: the parent directory exists. `now` (UTC seconds) names a moved-aside file.
Result<SqliteDb> open_store_file(const std::string& path, const Schema& schema,
                                 const StoreFileOptions& options, std::int64_t now,
                                 OpenReport& report);

// Opens the file again without the start-up check (after the file system
// became writable under a connection SQLite had opened read-only).
Result<SqliteDb> reopen_store_file(const std::string& path, const Schema& schema,
                                   const StoreFileOptions& options);

// Applies the migrations above the file's user_version (used by open_store_file).
Status migrate(SqliteDb& db, const Schema& schema, int stop_at_version, int& from_version);

// Used pages * page size: the bytes the file needs, free pages not counted.
Result<std::int64_t> used_bytes(SqliteDb& db);

// fsync of a directory, so a rename or a new file in it is durable.
Status sync_directory(const std::string& dir);

}  // namespace tarn::store
