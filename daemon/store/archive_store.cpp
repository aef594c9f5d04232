#include "daemon/store/archive_store.h"

#include <spdlog/spdlog.h>

#include <algorithm>
#include <filesystem>

#include "daemon/store/outbox_store.h"
#include "daemon/store/store_log.h"

namespace tarn::store {
namespace {

constexpr Migration archive_migrations[] = {
    {1, R"sql(
CREATE TABLE channels(id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE);
CREATE TABLE samples(
  t INTEGER NOT NULL,
  channel INTEGER NOT NULL REFERENCES channels(id),
  value REAL,
  flag INTEGER NOT NULL,
  reasons INTEGER NOT NULL
);
CREATE INDEX samples_t ON samples(t);
CREATE TABLE maintenance(id INTEGER PRIMARY KEY, start_t INTEGER NOT NULL, end_t INTEGER,
                         note TEXT NOT NULL DEFAULT '');
CREATE TABLE state(key TEXT PRIMARY KEY, value TEXT NOT NULL, updated_t INTEGER NOT NULL);
)sql"},
    {2, R"sql(
CREATE TABLE counters(name TEXT PRIMARY KEY, value INTEGER NOT NULL DEFAULT 0);
)sql"},
    {3, R"sql(
ALTER TABLE maintenance ADD COLUMN instrument TEXT NOT NULL DEFAULT '';
ALTER TABLE maintenance ADD COLUMN until_t INTEGER;
ALTER TABLE maintenance ADD COLUMN ended_by TEXT NOT NULL DEFAULT '';
)sql"},
};

constexpr Schema schema{"archive", archive_migrations};

constexpr std::int64_t end_of_time = INT64_MAX;

}  // namespace

const Schema& archive_schema() {
  return schema;
}

Result<ArchiveCounts> read_archive_counts(SqliteDb& db) {
  ArchiveCounts c;
  auto st = db.prepare(
      "SELECT (SELECT COUNT(*) FROM samples), (SELECT MIN(t) FROM samples), "
      "(SELECT MAX(t) FROM samples), (SELECT COUNT(*) FROM channels), "
      "(SELECT COUNT(*) FROM maintenance), (SELECT COUNT(*) FROM state)");
  if (!st.ok()) return st.error();
  if (auto r = st->step(); !r.ok()) return r.error();
  c.samples = st->column_int(0);
  if (!st->column_is_null(1)) c.oldest_t = st->column_int(1);
  if (!st->column_is_null(2)) c.newest_t = st->column_int(2);
  c.channels = st->column_int(3);
  c.maintenance_periods = st->column_int(4);
  c.state_keys = st->column_int(5);
  return c;
}

Status read_samples(SqliteDb& db, std::int64_t from, std::int64_t to, const std::string& channel,
                    const std::function<bool(const ArchivedSample&)>& fn) {
  std::string sql =
      "SELECT s.t, c.name, s.value, s.flag, s.reasons FROM samples s JOIN channels c "
      "ON c.id = s.channel WHERE s.t >= ?1 AND s.t < ?2";
  if (!channel.empty()) sql += " AND c.name = ?3";
  sql += " ORDER BY s.t, s.rowid";
  auto st = db.prepare(sql);
  if (!st.ok()) return st.error();
  st->bind(1, from).bind(2, to);
  if (!channel.empty()) st->bind_text(3, channel);
  ArchivedSample s;
  for (;;) {
    auto row = st->step();
    if (!row.ok()) return row.error();
    if (!row.value()) break;
    s.t = st->column_int(0);
    s.channel = st->column_text(1);
    s.value = st->column_optional_double(2);
    s.flag = codec::Flag(st->column_int(3));
    s.reasons = std::uint32_t(st->column_int(4));
    if (!fn(s)) break;
  }
  return {};
}

ArchiveStore::ArchiveStore(SqliteDb db, std::string path, ArchiveOptions options)
    : db_(std::move(db)), path_(std::move(path)), options_(std::move(options)) {}

ArchiveStore::~ArchiveStore() {
  if (held_samples_ > 0 || !held_state_.empty())
    os::logger("store")->error(
        "archive {} closed with {} samples and {} state values only in memory: "
        "they are lost",
        path_, held_samples_, held_state_.size());
}

Result<std::unique_ptr<ArchiveStore>> ArchiveStore::open(const std::string& path,
                                                         const ArchiveOptions& options,
                                                         std::int64_t now) {
  OpenReport report;
  auto db = open_store_file(path, schema, options.file, now, report);
  if (!db.ok()) return db.error();
  std::unique_ptr<ArchiveStore> store(new ArchiveStore(std::move(db.value()), path, options));
  store->report_ = report;
  if (store->db_.read_only())
    store->note_fault(Status(StoreErrc::read_only, path + ": opened read-only"));
  if (!report.moved_aside_to.empty()) {
    store->add_counter(counter::damaged_files_moved, 1);
    store->retry_held();
  }
  return store;
}

void ArchiveStore::note_fault(const Status& s) {
  if (s.ok()) return;
  if (fault_.ok() || fault_.code() != s.code())
    os::logger("store")->warn("archive {} not writable: {}", path_, s.describe());
  fault_ = s;
}

Status ArchiveStore::write_pending_in_txn() {
  if (Status s = write_counters_in_txn(db_, counter_delta_); !s.ok()) return s;
  if (pending_highest_seq_ > 0) {
    held_state_[highest_sequence_key] = std::to_string(pending_highest_seq_);
  }
  if (!held_state_.empty()) {
    auto put = db_.prepare(
        "INSERT INTO state(key, value, updated_t) VALUES(?1, ?2, ?3) ON CONFLICT(key) DO UPDATE "
        "SET value = excluded.value, updated_t = excluded.updated_t");
    auto del = db_.prepare("DELETE FROM state WHERE key = ?1");
    if (!put.ok()) return put.error();
    if (!del.ok()) return del.error();
    for (auto& [key, value] : held_state_) {
      Status s;
      if (value) {
        put->bind_text(1, key).bind_text(2, *value).bind(3, held_state_t_);
        s = put->run();
      } else {
        del->bind_text(1, key);
        s = del->run();
      }
      if (!s.ok()) return s;
    }
  }
  return {};
}

Status ArchiveStore::write_batch(const std::vector<ArchivedSample>& batch) {
  Transaction txn(db_);
  if (Status s = txn.begin(); !s.ok()) return s;
  std::unordered_map<std::string, std::int64_t> new_ids;
  auto add_channel = db_.prepare("INSERT INTO channels(name) VALUES(?1) ON CONFLICT DO NOTHING");
  auto get_channel = db_.prepare("SELECT id FROM channels WHERE name = ?1");
  auto ins = db_.prepare(
      "INSERT INTO samples(t, channel, value, flag, reasons) VALUES(?1, ?2, ?3, ?4, ?5)");
  if (!add_channel.ok()) return add_channel.error();
  if (!get_channel.ok()) return get_channel.error();
  if (!ins.ok()) return ins.error();
  for (const ArchivedSample& s : batch) {
    std::int64_t id = 0;
    if (auto it = channel_ids_.find(s.channel); it != channel_ids_.end()) {
      id = it->second;
    } else if (auto jt = new_ids.find(s.channel); jt != new_ids.end()) {
      id = jt->second;
    } else {
      add_channel->bind_text(1, s.channel);
      if (Status st = add_channel->run(); !st.ok()) return st;
      get_channel->bind_text(1, s.channel);
      auto row = get_channel->step();
      if (!row.ok()) return row.error();
      id = get_channel->column_int(0);
      get_channel->reset();
      new_ids[s.channel] = id;
    }
    ins->bind(1, s.t)
        .bind(2, id)
        .bind(3, s.value)
        .bind(4, std::int64_t(s.flag))
        .bind(5, std::int64_t(s.reasons));
    if (Status st = ins->run(); !st.ok()) return st;
  }
  if (Status s = write_pending_in_txn(); !s.ok()) return s;
  if (Status s = txn.commit(); !s.ok()) return s;
  channel_ids_.insert(new_ids.begin(), new_ids.end());
  counter_delta_.clear();
  held_state_.clear();
  pending_highest_seq_ = 0;
  return {};
}

AppendReceipt ArchiveStore::append(std::vector<ArchivedSample> batch) {
  AppendReceipt r;
  if (!held_.empty()) retry_held();
  if (held_.empty()) {
    Status s = write_batch(batch);
    if (s.ok()) {
      if (!fault_.ok()) os::logger("store")->info("archive {} writable again", path_);
      fault_ = {};
      r.stored = true;
      return r;
    }
    note_fault(s);
  }
  r.cause = fault_;
  held_samples_ += batch.size();
  held_.push_back(std::move(batch));
  while (held_samples_ > options_.holding_max_samples && !held_.empty()) {
    auto& oldest = held_.front();
    std::size_t n = std::min(oldest.size(), held_samples_ - options_.holding_max_samples);
    oldest.erase(oldest.begin(), oldest.begin() + std::ptrdiff_t(n));
    held_samples_ -= n;
    r.dropped += n;
    if (oldest.empty()) held_.pop_front();
  }
  if (r.dropped > 0) add_counter(counter::dropped_held_samples, std::int64_t(r.dropped));
  return r;
}

Status ArchiveStore::retry_held() {
  if (Status s = reopen_if_read_only(db_, path_, schema, options_.file); !s.ok())
    return note_fault(s), s;
  while (!held_.empty()) {
    if (Status s = write_batch(held_.front()); !s.ok()) return note_fault(s), s;
    held_samples_ -= held_.front().size();
    held_.pop_front();
  }
  if (!counter_delta_.empty() || !held_state_.empty() || pending_highest_seq_ > 0) {
    if (Status s = write_batch({}); !s.ok()) return note_fault(s), s;
  }
  if (!fault_.ok()) os::logger("store")->info("archive {} writable again", path_);
  fault_ = {};
  return {};
}

Status ArchiveStore::for_each_sample(std::int64_t from, std::int64_t to, const std::string& channel,
                                     const std::function<bool(const ArchivedSample&)>& fn) {
  bool go_on = true;
  Status s = read_samples(db_, from, to, channel, [&](const ArchivedSample& x) {
    go_on = fn(x);
    return go_on;
  });
  if (!s.ok() || !go_on) return s;
  for (const auto& batch : held_)
    for (const ArchivedSample& x : batch)
      if (x.t >= from && x.t < to && (channel.empty() || x.channel == channel))
        if (!fn(x)) return {};
  return {};
}

Result<std::vector<ArchivedSample>> ArchiveStore::samples_since(std::int64_t t) {
  std::vector<ArchivedSample> out;
  Status s = for_each_sample(t, end_of_time, {}, [&](const ArchivedSample& x) {
    out.push_back(x);
    return true;
  });
  if (!s.ok()) return s;
  return out;
}

Result<std::int64_t> ArchiveStore::add_maintenance(std::int64_t start_t,
                                                   std::optional<std::int64_t> end_t,
                                                   std::string_view note) {
  auto st = db_.prepare("INSERT INTO maintenance(start_t, end_t, note) VALUES(?1, ?2, ?3)");
  if (!st.ok()) return st.error();
  st->bind(1, start_t).bind_text(3, note);
  if (end_t)
    st->bind(2, *end_t);
  else
    st->bind_null(2);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  return db_.last_insert_rowid();
}

Result<std::int64_t> ArchiveStore::add_maintenance(const MaintenancePeriod& m) {
  auto st = db_.prepare(
      "INSERT INTO maintenance(start_t, end_t, note, instrument, until_t, ended_by) "
      "VALUES(?1, ?2, ?3, ?4, ?5, ?6)");
  if (!st.ok()) return st.error();
  st->bind(1, m.start_t).bind_text(3, m.note).bind_text(4, m.instrument).bind_text(6, m.ended_by);
  if (m.end_t)
    st->bind(2, *m.end_t);
  else
    st->bind_null(2);
  if (m.until_t)
    st->bind(5, *m.until_t);
  else
    st->bind_null(5);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  return db_.last_insert_rowid();
}

Status ArchiveStore::end_maintenance(std::int64_t id, std::int64_t end_t,
                                     std::string_view ended_by) {
  auto st = db_.prepare("UPDATE maintenance SET end_t = ?2, ended_by = ?3 WHERE id = ?1");
  if (!st.ok()) return st.error();
  st->bind(1, id).bind(2, end_t).bind_text(3, ended_by);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  if (db_.changes() == 0)
    return {StoreErrc::not_found, path_ + ": no maintenance period " + std::to_string(id)};
  return {};
}

Status ArchiveStore::end_maintenance(std::int64_t id, std::int64_t end_t) {
  auto st = db_.prepare("UPDATE maintenance SET end_t = ?2 WHERE id = ?1");
  if (!st.ok()) return st.error();
  st->bind(1, id).bind(2, end_t);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  if (db_.changes() == 0)
    return {StoreErrc::not_found, path_ + ": no maintenance period " + std::to_string(id)};
  return {};
}

Result<std::vector<MaintenancePeriod>> ArchiveStore::maintenance_between(std::int64_t from,
                                                                         std::int64_t to) {
  auto st = db_.prepare(
      "SELECT id, start_t, end_t, note, instrument, until_t, ended_by FROM maintenance WHERE "
      "start_t < ?2 AND (end_t IS NULL OR end_t >= ?1) ORDER BY start_t, id");
  if (!st.ok()) return st.error();
  st->bind(1, from).bind(2, to);
  std::vector<MaintenancePeriod> out;
  for (;;) {
    auto row = st->step();
    if (!row.ok()) return row.error();
    if (!row.value()) break;
    MaintenancePeriod m;
    m.id = st->column_int(0);
    m.start_t = st->column_int(1);
    if (!st->column_is_null(2)) m.end_t = st->column_int(2);
    m.note = st->column_text(3);
    m.instrument = st->column_text(4);
    if (!st->column_is_null(5)) m.until_t = st->column_int(5);
    m.ended_by = st->column_text(6);
    out.push_back(std::move(m));
  }
  return out;
}

Result<std::optional<MaintenancePeriod>> ArchiveStore::last_ended_maintenance(std::int64_t to) {
  auto st = db_.prepare(
      "SELECT id, start_t, end_t, note, instrument, until_t, ended_by FROM maintenance WHERE "
      "end_t IS NOT NULL AND end_t <= ?1 ORDER BY end_t DESC, id DESC LIMIT 1");
  if (!st.ok()) return st.error();
  st->bind(1, to);
  auto row = st->step();
  if (!row.ok()) return row.error();
  if (!row.value()) return std::optional<MaintenancePeriod>{};
  MaintenancePeriod m;
  m.id = st->column_int(0);
  m.start_t = st->column_int(1);
  m.end_t = st->column_int(2);
  m.note = st->column_text(3);
  m.instrument = st->column_text(4);
  if (!st->column_is_null(5)) m.until_t = st->column_int(5);
  m.ended_by = st->column_text(6);
  return std::optional<MaintenancePeriod>(std::move(m));
}

Status ArchiveStore::put_state(const std::string& key, const std::string& value, std::int64_t now) {
  held_state_[key] = value;
  held_state_t_ = now;
  Status s = retry_held();
  return s.ok() ? s : Status(s.code(), s.message() + " (value held in memory)");
}

Status ArchiveStore::erase_state(const std::string& key) {
  held_state_[key] = std::nullopt;
  return retry_held();
}

Result<std::optional<std::string>> ArchiveStore::get_state(const std::string& key) {
  if (auto it = held_state_.find(key); it != held_state_.end()) return it->second;
  auto st = db_.prepare("SELECT value FROM state WHERE key = ?1");
  if (!st.ok()) return st.error();
  st->bind_text(1, key);
  auto row = st->step();
  if (!row.ok()) return row.error();
  if (!row.value()) return std::optional<std::string>();
  return std::optional<std::string>(st->column_text(0));
}

void ArchiveStore::note_highest_sequence(std::uint64_t seq) {
  pending_highest_seq_ = std::max(pending_highest_seq_, seq);
}

Result<std::uint64_t> ArchiveStore::recorded_highest_sequence() {
  auto v = get_state(highest_sequence_key);
  if (!v.ok()) return v.error();
  std::uint64_t stored = v.value() ? std::stoull(*v.value()) : 0;
  return std::max(stored, pending_highest_seq_);
}

Result<std::int64_t> ArchiveStore::delete_oldest(std::int64_t n, const char* counter_name) {
  Transaction txn(db_);
  if (Status s = txn.begin(); !s.ok()) return s;
  auto st = db_.prepare(
      "DELETE FROM samples WHERE rowid IN (SELECT rowid FROM samples ORDER BY t LIMIT ?1)");
  if (!st.ok()) return st.error();
  st->bind(1, n);
  if (Status s = st->run(); !s.ok()) return s;
  std::int64_t removed = db_.changes();
  if (removed > 0) counter_delta_[counter_name] += removed;
  Status s = write_pending_in_txn();
  if (s.ok()) s = txn.commit();
  if (!s.ok()) {
    if (removed > 0) counter_delta_[counter_name] -= removed;
    return s;
  }
  counter_delta_.clear();
  held_state_.clear();
  pending_highest_seq_ = 0;
  return removed;
}

Result<std::int64_t> ArchiveStore::drop_oldest_samples(std::int64_t n) {
  return delete_oldest(n, counter::dropped_archive_samples);
}

Result<std::int64_t> ArchiveStore::prune(std::int64_t now) {
  std::int64_t removed = 0;
  auto st = db_.prepare("DELETE FROM samples WHERE t < ?1");
  if (!st.ok()) return st.error();
  st->bind(1, now - options_.max_age_s);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  removed += db_.changes();
  auto mt = db_.prepare("DELETE FROM maintenance WHERE end_t IS NOT NULL AND end_t < ?1");
  if (!mt.ok()) return mt.error();
  mt->bind(1, now - options_.max_age_s);
  if (Status s = mt->run(); !s.ok()) return note_fault(s), s;
  for (int round = 0; round < 1000; ++round) {
    auto used = used_bytes();
    if (!used.ok()) return used.error();
    if (used.value() <= options_.max_bytes) break;
    auto n = delete_oldest(256, "pruned.archive_size");
    if (!n.ok()) return note_fault(n.error()), n.error();
    if (n.value() == 0) break;
    removed += n.value();
  }
  return removed;
}

Result<ArchiveCounts> ArchiveStore::counts() {
  auto c = read_archive_counts(db_);
  if (!c.ok()) return c;
  for (const auto& batch : held_)
    for (const ArchivedSample& s : batch) {
      ++c->samples;
      if (!c->oldest_t || s.t < *c->oldest_t) c->oldest_t = s.t;
      if (!c->newest_t || s.t > *c->newest_t) c->newest_t = s.t;
    }
  return c;
}

std::map<std::string, std::int64_t> ArchiveStore::counters() {
  return counters_with_pending(db_, counter_delta_);
}

std::int64_t ArchiveStore::file_bytes() const {
  return file_bytes_on_disk(path_);
}

}  // namespace tarn::store
