#include "daemon/store/sqlite_db.h"

#include <sqlite3.h>

#include <cerrno>
#include <cstring>

namespace tarn::store {

Status sqlite_status(sqlite3* db, int rc, std::string_view what) {
  if (rc == SQLITE_OK || rc == SQLITE_DONE || rc == SQLITE_ROW) return {};
  int sys = db ? sqlite3_system_errno(db) : 0;
  std::string msg(what);
  msg += ": ";
  msg += db ? sqlite3_errmsg(db) : sqlite3_errstr(rc);
  if (sys != 0 && ((rc & 0xff) == SQLITE_IOERR || (rc & 0xff) == SQLITE_CANTOPEN ||
                   (rc & 0xff) == SQLITE_FULL)) {
    msg += " (";
    msg += std::strerror(sys);
    msg += ")";
  }
  StoreErrc code = StoreErrc::io;
  switch (rc & 0xff) {
    case SQLITE_FULL:
      code = StoreErrc::disk_full;
      break;
    case SQLITE_READONLY:
      code = StoreErrc::read_only;
      break;
    case SQLITE_BUSY:
    case SQLITE_LOCKED:
      code = StoreErrc::busy;
      break;
    case SQLITE_CORRUPT:
    case SQLITE_NOTADB:
      code = StoreErrc::damaged;
      break;
    case SQLITE_MISUSE:
    case SQLITE_RANGE:
    case SQLITE_CONSTRAINT:
    case SQLITE_MISMATCH:
    case SQLITE_TOOBIG:
      code = StoreErrc::invalid;
      break;
    case SQLITE_IOERR:
    case SQLITE_CANTOPEN:
      if (sys == ENOSPC || sys == EDQUOT)
        code = StoreErrc::disk_full;
      else if (sys == EROFS || sys == EACCES || sys == EPERM)
        code = StoreErrc::read_only;
      else
        code = StoreErrc::io;
      break;
    default:
      code = StoreErrc::io;
      break;
  }
  return {code, std::move(msg)};
}

// ---- Statement ----

Statement::Statement(Statement&& o) noexcept : db_(o.db_), stmt_(o.stmt_), bind_rc_(o.bind_rc_) {
  o.stmt_ = nullptr;
}

Statement& Statement::operator=(Statement&& o) noexcept {
  if (this != &o) {
    sqlite3_finalize(stmt_);
    db_ = o.db_;
    stmt_ = o.stmt_;
    bind_rc_ = o.bind_rc_;
    o.stmt_ = nullptr;
  }
  return *this;
}

Statement::~Statement() {
  sqlite3_finalize(stmt_);
}

static void keep_first(int& first, int rc) {
  if (first == SQLITE_OK && rc != SQLITE_OK) first = rc;
}

Statement& Statement::bind(int i, std::int64_t v) {
  keep_first(bind_rc_, sqlite3_bind_int64(stmt_, i, v));
  return *this;
}
Statement& Statement::bind(int i, double v) {
  keep_first(bind_rc_, sqlite3_bind_double(stmt_, i, v));
  return *this;
}
Statement& Statement::bind(int i, std::optional<double> v) {
  return v ? bind(i, *v) : bind_null(i);
}
Statement& Statement::bind_null(int i) {
  keep_first(bind_rc_, sqlite3_bind_null(stmt_, i));
  return *this;
}
Statement& Statement::bind_text(int i, std::string_view v) {
  keep_first(bind_rc_,
             sqlite3_bind_text64(stmt_, i, v.data(), v.size(), SQLITE_TRANSIENT, SQLITE_UTF8));
  return *this;
}
Statement& Statement::bind_blob(int i, std::span<const std::uint8_t> v) {
  // A zero-length blob must still be a blob, not NULL: pass a non-null pointer.
  static const std::uint8_t empty = 0;
  keep_first(bind_rc_, sqlite3_bind_blob64(stmt_, i, v.empty() ? &empty : v.data(), v.size(),
                                           SQLITE_TRANSIENT));
  return *this;
}

Result<bool> Statement::step() {
  if (bind_rc_ != SQLITE_OK) {
    int rc = bind_rc_;
    bind_rc_ = SQLITE_OK;
    return sqlite_status(db_, rc, "bind");
  }
  int rc = sqlite3_step(stmt_);
  if (rc == SQLITE_ROW) return true;
  if (rc == SQLITE_DONE) return false;
  Status s = sqlite_status(db_, rc, "step");
  sqlite3_reset(stmt_);
  return s;
}

Status Statement::run() {
  for (;;) {
    auto r = step();
    if (!r.ok()) return r.error();
    if (!r.value()) break;
  }
  reset();
  return {};
}

void Statement::reset() {
  sqlite3_reset(stmt_);
  sqlite3_clear_bindings(stmt_);
}

bool Statement::column_is_null(int i) const {
  return sqlite3_column_type(stmt_, i) == SQLITE_NULL;
}
std::int64_t Statement::column_int(int i) const {
  return sqlite3_column_int64(stmt_, i);
}
double Statement::column_double(int i) const {
  return sqlite3_column_double(stmt_, i);
}
std::optional<double> Statement::column_optional_double(int i) const {
  if (column_is_null(i)) return std::nullopt;
  return column_double(i);
}
std::string Statement::column_text(int i) const {
  auto p = sqlite3_column_text(stmt_, i);
  int n = sqlite3_column_bytes(stmt_, i);
  return p ? std::string(reinterpret_cast<const char*>(p), std::size_t(n)) : std::string();
}
std::vector<std::uint8_t> Statement::column_blob(int i) const {
  auto p = static_cast<const std::uint8_t*>(sqlite3_column_blob(stmt_, i));
  int n = sqlite3_column_bytes(stmt_, i);
  return p ? std::vector<std::uint8_t>(p, p + n) : std::vector<std::uint8_t>();
}

// ---- SqliteDb ----

SqliteDb::SqliteDb(SqliteDb&& o) noexcept : db_(o.db_), path_(std::move(o.path_)) {
  o.db_ = nullptr;
}

SqliteDb& SqliteDb::operator=(SqliteDb&& o) noexcept {
  if (this != &o) {
    close();
    db_ = o.db_;
    path_ = std::move(o.path_);
    o.db_ = nullptr;
  }
  return *this;
}

SqliteDb::~SqliteDb() {
  close();
}

void SqliteDb::close() {
  if (db_) sqlite3_close_v2(db_);
  db_ = nullptr;
}

Result<SqliteDb> SqliteDb::open(const std::string& path, Mode mode, int busy_timeout_ms) {
  int flags =
      mode == Mode::read_only ? SQLITE_OPEN_READONLY : (SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE);
  flags |= SQLITE_OPEN_NOMUTEX;
  sqlite3* raw = nullptr;
  int rc = sqlite3_open_v2(path.c_str(), &raw, flags, nullptr);
  SqliteDb db;
  db.db_ = raw;  // sqlite3_open_v2 gives a handle even on failure; the destructor closes it
  db.path_ = path;
  if (rc != SQLITE_OK) return sqlite_status(raw, rc, "open " + path);
  sqlite3_extended_result_codes(raw, 1);
  sqlite3_busy_timeout(raw, busy_timeout_ms);
  return db;
}

Status SqliteDb::status(int rc, std::string_view what) const {
  std::string w = path_ + ": ";
  w += what;
  return sqlite_status(db_, rc, w);
}

static Status closed_error(const std::string& path) {
  return {StoreErrc::io, path + ": the connection is closed (reopening failed)"};
}

Status SqliteDb::exec(std::string_view sql) {
  if (!db_) return closed_error(path_);
  std::string s(sql);
  int rc = sqlite3_exec(db_, s.c_str(), nullptr, nullptr, nullptr);
  if (rc != SQLITE_OK) return status(rc, s.substr(0, 60));
  return {};
}

Result<Statement> SqliteDb::prepare(std::string_view sql) {
  if (!db_) return closed_error(path_);
  sqlite3_stmt* st = nullptr;
  int rc = sqlite3_prepare_v2(db_, sql.data(), int(sql.size()), &st, nullptr);
  if (rc != SQLITE_OK) {
    sqlite3_finalize(st);
    return status(rc, std::string("prepare ") + std::string(sql.substr(0, 60)));
  }
  return Statement(db_, st);
}

Result<std::int64_t> SqliteDb::query_int(std::string_view sql) {
  auto st = prepare(sql);
  if (!st.ok()) return st.error();
  auto row = st->step();
  if (!row.ok()) return row.error();
  if (!row.value()) return Status(StoreErrc::not_found, path_ + ": no row: " + std::string(sql));
  return st->column_int(0);
}

Result<std::string> SqliteDb::query_text(std::string_view sql) {
  auto st = prepare(sql);
  if (!st.ok()) return st.error();
  auto row = st->step();
  if (!row.ok()) return row.error();
  if (!row.value()) return Status(StoreErrc::not_found, path_ + ": no row: " + std::string(sql));
  return st->column_text(0);
}

std::int64_t SqliteDb::changes() const {
  return db_ ? sqlite3_changes64(db_) : 0;
}

bool SqliteDb::read_only() const {
  return db_ && sqlite3_db_readonly(db_, "main") == 1;
}

std::int64_t SqliteDb::last_insert_rowid() const {
  return db_ ? sqlite3_last_insert_rowid(db_) : 0;
}

// ---- Transaction ----

Transaction::~Transaction() {
  if (active_) sqlite3_exec(db_.handle(), "ROLLBACK", nullptr, nullptr, nullptr);
}

Status Transaction::begin() {
  Status s = db_.exec("BEGIN IMMEDIATE");
  active_ = s.ok();
  return s;
}

Status Transaction::commit() {
  Status s = db_.exec("COMMIT");
  if (s.ok()) {
    active_ = false;
  } else if (sqlite3_get_autocommit(db_.handle())) {
    active_ = false;  // SQLite already rolled back
  }
  return s;
}

}  // namespace tarn::store
