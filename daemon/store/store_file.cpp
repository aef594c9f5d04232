#include "daemon/store/store_file.h"

#include <fcntl.h>
#include <spdlog/spdlog.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <filesystem>
#include <system_error>

#include "daemon/store/store_log.h"
#include "drivers/os/utc_text.h"

namespace tarn::store {
namespace fs = std::filesystem;

namespace {

// Empty string when the file is sound; else what is wrong. `fatal` is set for
// errors that say nothing about the file (busy, I/O): those are returned.
std::string check_file(const std::string& path, int busy_ms, Status& fatal) {
  auto db = SqliteDb::open(path, SqliteDb::Mode::read_write_create, busy_ms);
  if (!db.ok()) {
    if (db.error().code() == StoreErrc::damaged) return db.error().message();
    fatal = db.error();
    return {};
  }
  auto st = db->prepare("PRAGMA quick_check");
  if (!st.ok()) {
    if (st.error().code() == StoreErrc::damaged) return st.error().message();
    fatal = st.error();
    return {};
  }
  std::string problems;
  int rows = 0;
  for (;;) {
    auto row = st->step();
    if (!row.ok()) {
      if (row.error().code() == StoreErrc::damaged) return row.error().message();
      fatal = row.error();
      return {};
    }
    if (!row.value()) break;
    std::string line = st->column_text(0);
    if (++rows == 1 && line == "ok") continue;
    if (rows <= 3) problems += (problems.empty() ? "" : "; ") + line;
  }
  if (rows == 0) return "quick_check returned nothing";
  return problems;
}

std::string move_aside(const std::string& path, std::int64_t now, Status& err) {
  std::string base = path + ".damaged-" + os::format_utc_compact(now);
  std::string target = base;
  std::error_code ec;
  for (int n = 1; fs::exists(target, ec); ++n) target = base + "." + std::to_string(n);
  fs::rename(path, target, ec);
  if (ec) {
    err = Status(ec.value() == EROFS ? StoreErrc::read_only : StoreErrc::io,
                 "cannot move damaged " + path + " aside: " + ec.message());
    return {};
  }
  // A WAL beside a new file would be replayed into it: it goes with the old file.
  for (const char* suffix : {"-wal", "-shm"}) {
    if (fs::exists(path + suffix, ec)) fs::rename(path + suffix, target + suffix, ec);
  }
  sync_directory(fs::path(path).parent_path().string());
  return target;
}

Status apply_settings(SqliteDb& db, const StoreFileOptions& o) {
  auto mode = db.query_text("PRAGMA journal_mode=WAL");
  if (!mode.ok()) return mode.error();
  if (mode.value() != "wal")
    return {StoreErrc::io, db.path() + ": cannot switch to WAL mode (got " + mode.value() + ")"};
  for (std::string pragma :
       {std::string("PRAGMA synchronous=FULL"),
        "PRAGMA wal_autocheckpoint=" + std::to_string(o.wal_autocheckpoint_pages),
        "PRAGMA journal_size_limit=" + std::to_string(o.wal_size_limit),
        std::string("PRAGMA trusted_schema=OFF")}) {
    auto st = db.prepare(pragma);  // some PRAGMAs return a row: step, do not exec
    if (!st.ok()) return st.error();
    if (auto r = st->step(); !r.ok()) return r.error();
  }
  return {};
}

}  // namespace

Status sync_directory(const std::string& dir) {
  int fd = ::open(dir.empty() ? "." : dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd < 0) return {StoreErrc::io, "open directory " + dir + ": " + std::strerror(errno)};
  int rc = ::fsync(fd);
  int e = errno;
  ::close(fd);
  if (rc != 0 && e != EINVAL)  // some file systems cannot fsync a directory: nothing to do there
    return {e == EROFS ? StoreErrc::read_only : StoreErrc::io,
            "fsync directory " + dir + ": " + std::strerror(e)};
  return {};
}

Status migrate(SqliteDb& db, const Schema& schema, int stop_at_version, int& from_version) {
  auto v = db.query_int("PRAGMA user_version");
  if (!v.ok()) return v.error();
  from_version = int(v.value());
  int target = stop_at_version > 0 ? stop_at_version : schema.current();
  if (from_version > schema.current())
    return {StoreErrc::invalid, db.path() + ": " + std::string(schema.name) + " schema version " +
                                    std::to_string(from_version) +
                                    " is newer than this tarn knows (" +
                                    std::to_string(schema.current()) + "); use a newer tarn"};
  for (const Migration& m : schema.migrations) {
    if (m.version <= from_version || m.version > target) continue;
    Transaction txn(db);
    if (auto s = txn.begin(); !s.ok()) return s;
    if (auto s = db.exec(m.sql); !s.ok()) return s;
    if (auto s = db.exec("PRAGMA user_version=" + std::to_string(m.version)); !s.ok()) return s;
    if (auto s = txn.commit(); !s.ok()) return s;
  }
  return {};
}

Result<std::int64_t> used_bytes(SqliteDb& db) {
  auto pages = db.query_int("PRAGMA page_count");
  if (!pages.ok()) return pages.error();
  auto free_pages = db.query_int("PRAGMA freelist_count");
  if (!free_pages.ok()) return free_pages.error();
  auto size = db.query_int("PRAGMA page_size");
  if (!size.ok()) return size.error();
  return (pages.value() - free_pages.value()) * size.value();
}

Result<SqliteDb> reopen_store_file(const std::string& path, const Schema& schema,
                                   const StoreFileOptions& options) {
  auto db = SqliteDb::open(path, SqliteDb::Mode::read_write_create, options.busy_timeout_ms);
  if (!db.ok()) return db.error();
  if (db->read_only()) return Status(StoreErrc::read_only, path + ": still read-only");
  if (auto s = apply_settings(db.value(), options); !s.ok()) return s;
  int from = 0;
  if (auto s = migrate(db.value(), schema, options.stop_at_version, from); !s.ok()) return s;
  return db;
}

Result<SqliteDb> open_store_file(const std::string& path, const Schema& schema,
                                 const StoreFileOptions& options, std::int64_t now,
                                 OpenReport& report) {
  report = OpenReport{};
  std::error_code ec;
  bool exists = fs::exists(path, ec) && fs::file_size(path, ec) > 0;
  if (exists) {
    Status fatal;
    std::string damage = check_file(path, options.busy_timeout_ms, fatal);
    if (!fatal.ok()) return fatal;
    if (!damage.empty()) {
      Status err;
      std::string moved = move_aside(path, now, err);
      if (!err.ok()) return err;
      report.moved_aside_to = moved;
      report.damage = damage;
      os::logger("store")->error(
          "{} store file {} is damaged ({}); moved it aside to {} and started a "
          "new one: the packets or samples in it are not in use any more",
          schema.name, path, damage, moved);
      exists = false;
    }
  }
  report.created = !exists;
  auto db = SqliteDb::open(path, SqliteDb::Mode::read_write_create, options.busy_timeout_ms);
  if (!db.ok()) return db.error();
  if (db->read_only()) {
    // SQLite fell back to read-only (read-only file system): usable for
    // reading; writes fail with read_only and are held until reopened.
    os::logger("store")->error(
        "{} store file {} is read-only: new data is held in memory until it "
        "is writable",
        schema.name, path);
    return db;
  }
  if (auto s = apply_settings(db.value(), options); !s.ok()) return s;
  int from = 0;
  if (auto s = migrate(db.value(), schema, options.stop_at_version, from); !s.ok()) return s;
  if (from != 0 &&
      from < (options.stop_at_version > 0 ? options.stop_at_version : schema.current())) {
    report.migrated_from = from;
    os::logger("store")->info("{} store file {} migrated from schema {} to {}", schema.name, path,
                              from, schema.current());
  }
  if (report.created) sync_directory(fs::path(path).parent_path().string());
  return db;
}

}  // namespace tarn::store
