#include "daemon/store/store_common.h"

#include <filesystem>
#include <system_error>
#include <utility>

#include "drivers/os/logging.h"

namespace tarn::store {

Status reopen_if_read_only(SqliteDb& db, const std::string& path, const Schema& schema,
                           const StoreFileOptions& options) {
  if (!db.read_only()) return {};
  // Close first: SQLite reuses a closed connection's file descriptor, which
  // would keep the file read-only.
  db.close();
  auto reopened = reopen_store_file(path, schema, options);
  if (!reopened.ok()) {
    auto fallback =
        SqliteDb::open(path, SqliteDb::Mode::read_write_create, options.busy_timeout_ms);
    if (fallback.ok()) db = std::move(fallback.value());
    return reopened.error();
  }
  db = std::move(reopened.value());
  os::logger("store")->info("{} reopened for writing", path);
  return {};
}

Status write_counters_in_txn(SqliteDb& db, const CounterMap& delta) {
  if (delta.empty()) return {};
  auto st = db.prepare(
      "INSERT INTO counters(name, value) VALUES(?1, ?2) "
      "ON CONFLICT(name) DO UPDATE SET value = value + excluded.value");
  if (!st.ok()) return st.error();
  for (auto& [name, d] : delta) {
    st->bind_text(1, name).bind(2, d);
    if (Status s = st->run(); !s.ok()) return s;
  }
  return {};
}

Result<CounterMap> read_counters(SqliteDb& db) {
  CounterMap out;
  auto st = db.prepare("SELECT name, value FROM counters");
  if (!st.ok()) return st.error();
  for (;;) {
    auto row = st->step();
    if (!row.ok()) return row.error();
    if (!row.value()) break;
    out[st->column_text(0)] = st->column_int(1);
  }
  return out;
}

CounterMap counters_with_pending(SqliteDb& db, const CounterMap& pending) {
  auto stored = read_counters(db);
  CounterMap out = stored.ok() ? stored.value() : CounterMap{};
  for (auto& [k, v] : pending) out[k] += v;
  return out;
}

std::int64_t file_bytes_on_disk(const std::string& path) {
  std::int64_t total = 0;
  std::error_code ec;
  for (const char* suffix : {"", "-wal", "-shm"}) {
    auto n = std::filesystem::file_size(path + suffix, ec);
    if (!ec) total += std::int64_t(n);
  }
  return total;
}

}  // namespace tarn::store
