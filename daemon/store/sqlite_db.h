// A small RAII wrapper over the SQLite C API: one connection (SqliteDb), its
// prepared statements (Statement) and write transactions (Transaction).
// Every failure comes back as a Status whose code says what kind of failure it
// was (disk full, read-only, damaged...), classified from SQLite's result code
// and, for I/O errors, the OS errno SQLite saw (sqlite3_system_errno).
//
// Thread-safety: a connection and its statements belong to one thread (the
// daemon's event loop). Different SqliteDb objects may live on different threads.
#pragma once

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/store/store_status.h"

struct sqlite3;
struct sqlite3_stmt;

namespace tarn::store {

// Maps an SQLite result code (and errno for SQLITE_IOERR / SQLITE_CANTOPEN) to a Status.
// `db` may be null. `what` names the operation for the message.
Status sqlite_status(sqlite3* db, int rc, std::string_view what);

class Statement {
 public:
  Statement() = default;
  Statement(sqlite3* db, sqlite3_stmt* stmt) : db_(db), stmt_(stmt) {}
  Statement(Statement&& o) noexcept;
  Statement& operator=(Statement&& o) noexcept;
  Statement(const Statement&) = delete;
  Statement& operator=(const Statement&) = delete;
  ~Statement();

  // Parameters are 1-based, as in SQLite. A failed bind is reported by the next step().
  Statement& bind(int i, std::int64_t v);
  Statement& bind(int i, double v);
  Statement& bind(int i, std::optional<double> v);
  Statement& bind_null(int i);
  Statement& bind_text(int i, std::string_view v);
  Statement& bind_blob(int i, std::span<const std::uint8_t> v);

  // true: a row is available through column_*(); false: the statement is done.
  Result<bool> step();
  // Steps to completion (for statements that return no rows), then resets.
  Status run();
  void reset();

  bool column_is_null(int i) const;
  std::int64_t column_int(int i) const;
  double column_double(int i) const;
  std::optional<double> column_optional_double(int i) const;
  std::string column_text(int i) const;
  std::vector<std::uint8_t> column_blob(int i) const;

 private:
  sqlite3* db_ = nullptr;
  sqlite3_stmt* stmt_ = nullptr;
  int bind_rc_ = 0;
};

class SqliteDb {
 public:
  enum class Mode { read_write_create, read_only };

  SqliteDb() = default;
  SqliteDb(SqliteDb&& o) noexcept;
  SqliteDb& operator=(SqliteDb&& o) noexcept;
  SqliteDb(const SqliteDb&) = delete;
  SqliteDb& operator=(const SqliteDb&) = delete;
  ~SqliteDb();

  // Opens (read_write_create: creates) the file. Sets extended result codes and
  // `busy_timeout_ms`. Does not read the file yet: damage shows on first use.
  static Result<SqliteDb> open(const std::string& path, Mode mode, int busy_timeout_ms = 2000);

  bool is_open() const { return db_ != nullptr; }
  const std::string& path() const { return path_; }
  sqlite3* handle() const { return db_; }
  void close();

  // Runs one or more statements that return no rows.
  Status exec(std::string_view sql);
  Result<Statement> prepare(std::string_view sql);
  // The first column of the first row of a query (e.g. a PRAGMA); not_found when no row.
  Result<std::int64_t> query_int(std::string_view sql);
  Result<std::string> query_text(std::string_view sql);
  // Rows changed by the last INSERT/UPDATE/DELETE.
  std::int64_t changes() const;
  std::int64_t last_insert_rowid() const;
  // True when SQLite could open the file for reading only (e.g. a read-only file system).
  bool read_only() const;
  // Status for `rc` on this connection, naming the file.
  Status status(int rc, std::string_view what) const;

 private:
  sqlite3* db_ = nullptr;
  std::string path_;
};

// A write transaction: BEGIN IMMEDIATE on construction via begin(); rolled
// back on destruction unless commit() succeeded.
class Transaction {
 public:
  explicit Transaction(SqliteDb& db) : db_(db) {}
  Transaction(const Transaction&) = delete;
  Transaction& operator=(const Transaction&) = delete;
  ~Transaction();
  Status begin();
  Status commit();

 private:
  SqliteDb& db_;
  bool active_ = false;
};

}  // namespace tarn::store
