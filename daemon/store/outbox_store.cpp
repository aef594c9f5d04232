#include "daemon/store/outbox_store.h"

#include <spdlog/spdlog.h>

#include <algorithm>
#include <filesystem>

#include "daemon/store/store_log.h"

namespace tarn::store {
namespace {

constexpr Migration outbox_migrations[] = {
    {1, R"sql(
CREATE TABLE packets(
  seq INTEGER PRIMARY KEY,
  priority INTEGER NOT NULL,
  kind INTEGER NOT NULL,
  created_t INTEGER NOT NULL,
  size INTEGER NOT NULL,
  bytes BLOB NOT NULL,
  attempts INTEGER NOT NULL DEFAULT 0,
  last_error TEXT,
  sent_t INTEGER
);
CREATE INDEX packets_unsent ON packets(priority, seq) WHERE sent_t IS NULL;
CREATE TABLE meta(key TEXT PRIMARY KEY, value INTEGER NOT NULL);
)sql"},
    {2, R"sql(
ALTER TABLE packets ADD COLUMN last_attempt_t INTEGER;
CREATE INDEX packets_sent ON packets(sent_t) WHERE sent_t IS NOT NULL;
CREATE TABLE counters(name TEXT PRIMARY KEY, value INTEGER NOT NULL DEFAULT 0);
CREATE TABLE sequence_gaps(first INTEGER NOT NULL, last INTEGER NOT NULL,
                           noted_t INTEGER NOT NULL, reason TEXT NOT NULL);
)sql"},
};

constexpr Schema schema{"outbox", outbox_migrations};

constexpr const char* packet_columns =
    "seq, priority, kind, created_t, bytes, attempts, last_attempt_t, last_error, sent_t";

Packet packet_from_row(const Statement& st) {
  Packet p;
  p.sequence = std::uint64_t(st.column_int(0));
  p.priority = st.column_int(1) == 0 ? Priority::alert : Priority::normal;
  p.kind = PacketKind(st.column_int(2));
  p.created_t = st.column_int(3);
  p.bytes = st.column_blob(4);
  p.attempts = int(st.column_int(5));
  if (!st.column_is_null(6)) p.last_attempt_t = st.column_int(6);
  p.last_error = st.column_text(7);
  if (!st.column_is_null(8)) p.sent_t = st.column_int(8);
  return p;
}

bool before(const Packet& a, const Packet& b) {
  if (a.priority != b.priority) return a.priority < b.priority;
  return a.sequence < b.sequence;
}

}  // namespace

const Schema& outbox_schema() {
  return schema;
}

std::string_view priority_name(Priority p) {
  return p == Priority::alert ? "alert" : "normal";
}

std::string_view kind_name(PacketKind k) {
  switch (k) {
    case PacketKind::window:
      return "window";
    case PacketKind::alert:
      return "alert";
    case PacketKind::manifest:
      return "manifest";
    case PacketKind::health:
      return "health";
    case PacketKind::reply:
      return "reply";
    case PacketKind::provisional:
      return "provisional";
  }
  return "unknown";
}

// ---- read-only queries ----

Result<std::vector<Packet>> read_packets(SqliteDb& db, std::string_view where, std::int64_t a,
                                         std::int64_t b, std::string_view order) {
  std::string sql = std::string("SELECT ") + packet_columns + " FROM packets WHERE " +
                    std::string(where) + " ORDER BY " + std::string(order);
  auto st = db.prepare(sql);
  if (!st.ok()) return st.error();
  if (sql.find("?1") != std::string::npos) st->bind(1, a);
  if (sql.find("?2") != std::string::npos) st->bind(2, b);
  std::vector<Packet> out;
  for (;;) {
    auto row = st->step();
    if (!row.ok()) return row.error();
    if (!row.value()) break;
    out.push_back(packet_from_row(st.value()));
  }
  return out;
}

Result<OutboxCounts> read_outbox_counts(SqliteDb& db) {
  OutboxCounts c;
  auto st = db.prepare(
      "SELECT COUNT(*), COALESCE(SUM(size),0), COALESCE(SUM(priority=0),0), MIN(created_t) "
      "FROM packets WHERE sent_t IS NULL");
  if (!st.ok()) return st.error();
  if (auto r = st->step(); !r.ok()) return r.error();
  c.unsent = st->column_int(0);
  c.unsent_bytes = st->column_int(1);
  c.unsent_alerts = st->column_int(2);
  if (!st->column_is_null(3)) c.oldest_unsent_created_t = st->column_int(3);
  auto sent =
      db.prepare("SELECT COUNT(*), COALESCE(SUM(size),0) FROM packets WHERE sent_t IS NOT NULL");
  if (!sent.ok()) return sent.error();
  if (auto r = sent->step(); !r.ok()) return r.error();
  c.sent_kept = sent->column_int(0);
  c.sent_kept_bytes = sent->column_int(1);
  auto high = db.query_int(
      "SELECT MAX(COALESCE((SELECT value FROM meta WHERE key='highest_sequence'),0),"
      " COALESCE((SELECT MAX(seq) FROM packets),0))");
  if (!high.ok()) return high.error();
  c.highest_sequence = std::uint64_t(high.value());
  return c;
}

// ---- OutboxStore ----

OutboxStore::OutboxStore(SqliteDb db, std::string path, OutboxOptions options,
                         SequenceAllocator alloc)
    : db_(std::move(db)),
      path_(std::move(path)),
      options_(std::move(options)),
      alloc_(std::move(alloc)) {}

OutboxStore::~OutboxStore() {
  if (!held_.empty() || !held_sent_.empty())
    os::logger("store")->error(
        "outbox {} closed with {} packets and {} acknowledgements only in "
        "memory: they are lost",
        path_, held_.size(), held_sent_.size());
}

Result<std::unique_ptr<OutboxStore>> OutboxStore::open(const std::string& path,
                                                       const OutboxOptions& options,
                                                       std::uint64_t sequence_floor,
                                                       std::int64_t now) {
  OpenReport report;
  auto db = open_store_file(path, schema, options.file, now, report);
  if (!db.ok()) return db.error();
  std::uint64_t highest = sequence_floor;
  if (options.file.stop_at_version == 0 || options.file.stop_at_version >= schema.current()) {
    auto counts = read_outbox_counts(db.value());
    if (!counts.ok()) return counts.error();
    highest = std::max(highest, counts->highest_sequence);
  }
  SequenceAllocator alloc(SequenceSidecar(path + ".seq"),
                          std::max<std::uint64_t>(1, options.sequence_block));
  Status reserve = alloc.start(highest);
  std::unique_ptr<OutboxStore> store(
      new OutboxStore(std::move(db.value()), path, options, std::move(alloc)));
  store->report_ = report;
  if (store->db_.read_only())
    store->note_fault(Status(StoreErrc::read_only, path + ": opened read-only"));
  if (!reserve.ok()) {
    store->note_fault(reserve);
    os::logger("store")->error(
        "outbox {}: cannot reserve sequence numbers ({}); packets are held in "
        "memory until it can",
        path, reserve.describe());
  }
  if (!report.moved_aside_to.empty()) store->add_counter(counter::damaged_files_moved, 1);
  const auto& a = store->alloc_;
  if (a.skipped_first() <= a.skipped_last()) {
    // Numbers reserved before the restart and never written: record so a shore
    // request for them can be answered "never used".
    auto st = store->db_.prepare(
        "INSERT INTO sequence_gaps(first, last, noted_t, reason) VALUES(?,?,?,?)");
    if (st.ok()) {
      st->bind(1, std::int64_t(a.skipped_first()))
          .bind(2, std::int64_t(a.skipped_last()))
          .bind(3, now)
          .bind_text(4, "reserved before restart, never used");
      if (Status s = st->run(); !s.ok()) store->note_fault(s);
    }
  }
  store->retry_held();  // writes the counters noted above
  return store;
}

void OutboxStore::note_fault(const Status& s) {
  if (s.ok()) return;
  if (fault_.ok() || fault_.code() != s.code())
    os::logger("store")->warn("outbox {} not writable: {}", path_, s.describe());
  fault_ = s;
}

Status OutboxStore::write_packet(const Held& h) {
  Transaction txn(db_);
  if (Status s = txn.begin(); !s.ok()) return s;
  auto st = db_.prepare(
      "INSERT INTO packets(seq, priority, kind, created_t, size, bytes, attempts, "
      "last_attempt_t, last_error) VALUES(?,?,?,?,?,?,?,?,?)");
  if (!st.ok()) return st.error();
  st->bind(1, std::int64_t(*h.sequence))
      .bind(2, std::int64_t(h.priority))
      .bind(3, std::int64_t(h.kind))
      .bind(4, h.created_t)
      .bind(5, std::int64_t(h.bytes.size()))
      .bind_blob(6, h.bytes)
      .bind(7, std::int64_t(h.attempts));
  if (h.last_attempt_t)
    st->bind(8, *h.last_attempt_t);
  else
    st->bind_null(8);
  if (h.last_error.empty())
    st->bind_null(9);
  else
    st->bind_text(9, h.last_error);
  if (Status s = st->run(); !s.ok()) return s;
  auto meta = db_.prepare(
      "INSERT INTO meta(key, value) VALUES('highest_sequence', ?1) "
      "ON CONFLICT(key) DO UPDATE SET value = MAX(value, excluded.value)");
  if (!meta.ok()) return meta.error();
  meta->bind(1, std::int64_t(*h.sequence));
  if (Status s = meta->run(); !s.ok()) return s;
  if (Status s = write_counters_in_txn(db_, counter_delta_); !s.ok()) return s;
  if (Status s = txn.commit(); !s.ok()) return s;
  counter_delta_.clear();
  return {};
}

InsertReceipt OutboxStore::hold(Held h, Status cause) {
  note_fault(cause);
  if (held_.size() >= options_.holding_max_packets) {
    auto victim = std::find_if(held_.begin(), held_.end(),
                               [](const Held& x) { return x.priority == Priority::normal; });
    bool alert = victim == held_.end();
    if (alert) victim = held_.begin();
    if (h.priority == Priority::normal && alert) {
      // Only alerts are held: the new normal packet is the one that goes.
      add_counter(counter::dropped_held_normal, 1);
      return {InsertReceipt::Where::dropped, h.sequence, cause};
    }
    add_counter(alert ? counter::dropped_held_alert : counter::dropped_held_normal, 1);
    os::logger("store")->error(
        "outbox holding queue full ({} packets): dropped held {} packet {}", held_.size(),
        alert ? "alert" : "normal",
        victim->sequence ? std::to_string(*victim->sequence) : "(unnumbered)");
    held_.erase(victim);
  }
  auto seq = h.sequence;
  held_.push_back(std::move(h));
  return {InsertReceipt::Where::held, seq, cause};
}

InsertReceipt OutboxStore::insert(const PacketSource& source, Priority priority, PacketKind kind,
                                  std::int64_t created_t) {
  if (!held_.empty() || !held_sent_.empty()) retry_held();  // keeps the order of numbers
  Held h;
  h.priority = priority;
  h.kind = kind;
  h.created_t = created_t;
  auto seq = alloc_.take();
  if (!seq.ok()) {
    h.source = source;
    return hold(std::move(h), seq.error());
  }
  h.sequence = seq.value();
  h.bytes = source(seq.value());
  if (!held_.empty()) return hold(std::move(h), fault_);  // the file still refuses writes
  Status s = write_packet(h);
  if (!s.ok()) return hold(std::move(h), s);
  fault_ = {};
  return {InsertReceipt::Where::stored, seq.value(), {}};
}

InsertReceipt OutboxStore::insert_bytes(std::vector<std::uint8_t> bytes, Priority priority,
                                        PacketKind kind, std::int64_t created_t) {
  auto shared = std::make_shared<std::vector<std::uint8_t>>(std::move(bytes));
  return insert([shared](std::uint64_t) { return *shared; }, priority, kind, created_t);
}

Status OutboxStore::retry_held() {
  if (Status s = reopen_if_read_only(db_, path_, schema, options_.file); !s.ok())
    return note_fault(s), s;
  // Acknowledgements first: they make room in nothing, but must not be lost.
  while (!held_sent_.empty()) {
    auto it = held_sent_.begin();
    auto st = db_.prepare("UPDATE packets SET sent_t = ?2 WHERE seq = ?1 AND sent_t IS NULL");
    if (!st.ok()) return note_fault(st.error()), st.error();
    st->bind(1, std::int64_t(it->first)).bind(2, it->second);
    if (Status s = st->run(); !s.ok()) return note_fault(s), s;
    held_sent_.erase(it);
  }
  std::sort(held_.begin(), held_.end(), [](const Held& a, const Held& b) {
    if (a.sequence.has_value() != b.sequence.has_value()) return a.sequence.has_value();
    return a.sequence.value_or(0) < b.sequence.value_or(0);
  });
  while (!held_.empty()) {
    Held& h = held_.front();
    if (!h.sequence) {
      auto seq = alloc_.take();
      if (!seq.ok()) return note_fault(seq.error()), seq.error();
      h.sequence = seq.value();
      h.bytes = h.source(seq.value());
      h.source = nullptr;
    }
    if (Status s = write_packet(h); !s.ok()) return note_fault(s), s;
    held_.pop_front();
  }
  if (!counter_delta_.empty()) {
    Transaction txn(db_);
    Status s = txn.begin();
    if (s.ok()) s = write_counters_in_txn(db_, counter_delta_);
    if (s.ok()) s = txn.commit();
    if (!s.ok()) return note_fault(s), s;
    counter_delta_.clear();
  }
  if (!fault_.ok()) os::logger("store")->info("outbox {} writable again", path_);
  fault_ = {};
  return {};
}

Result<std::vector<Packet>> OutboxStore::next_batch(std::size_t max_packets,
                                                    std::size_t max_bytes) {
  auto rows = read_packets(db_, "sent_t IS NULL", 0, 0, "priority, seq");
  if (!rows.ok()) return rows.error();
  std::vector<Packet> all;
  for (auto& p : rows.value())
    if (!held_sent_.count(p.sequence)) all.push_back(std::move(p));
  for (const Held& h : held_) {
    if (!h.sequence || held_sent_.count(*h.sequence)) continue;
    Packet p;
    p.sequence = *h.sequence;
    p.priority = h.priority;
    p.kind = h.kind;
    p.created_t = h.created_t;
    p.bytes = h.bytes;
    p.attempts = h.attempts;
    p.last_attempt_t = h.last_attempt_t;
    p.last_error = h.last_error;
    p.in_memory = true;
    all.push_back(std::move(p));
  }
  std::sort(all.begin(), all.end(), before);
  std::vector<Packet> out;
  std::size_t bytes = 0;
  for (auto& p : all) {
    if (out.size() >= max_packets) break;
    if (!out.empty() && bytes + p.bytes.size() > max_bytes) break;
    bytes += p.bytes.size();
    out.push_back(std::move(p));
  }
  return out;
}

Status OutboxStore::mark_sent(std::uint64_t sequence, std::int64_t t) {
  for (auto it = held_.begin(); it != held_.end(); ++it) {
    if (it->sequence == sequence) {
      held_.erase(it);  // delivered straight from memory: nothing left to write
      return {};
    }
  }
  auto st = db_.prepare("UPDATE packets SET sent_t = COALESCE(sent_t, ?2) WHERE seq = ?1");
  if (!st.ok()) return st.error();
  st->bind(1, std::int64_t(sequence)).bind(2, t);
  Status s = st->run();
  if (s.ok()) {
    if (db_.changes() == 0)
      return {StoreErrc::not_found,
              path_ + ": no packet with sequence " + std::to_string(sequence)};
    return {};
  }
  if (is_transient(s.code())) {
    held_sent_[sequence] = t;  // not re-sent meanwhile: next_batch skips it
    note_fault(s);
  }
  return s;
}

Status OutboxStore::record_attempt(std::uint64_t sequence, std::int64_t t, std::string_view error) {
  for (Held& h : held_) {
    if (h.sequence == sequence) {
      ++h.attempts;
      h.last_attempt_t = t;
      h.last_error = std::string(error);
      return {};
    }
  }
  auto st = db_.prepare(
      "UPDATE packets SET attempts = attempts + 1, last_attempt_t = ?2, last_error = ?3 "
      "WHERE seq = ?1");
  if (!st.ok()) return st.error();
  st->bind(1, std::int64_t(sequence)).bind(2, t);
  if (error.empty())
    st->bind_null(3);
  else
    st->bind_text(3, error);
  Status s = st->run();
  if (s.ok() && db_.changes() == 0)
    return {StoreErrc::not_found, path_ + ": no packet with sequence " + std::to_string(sequence)};
  return s;  // an attempt count lost to a full disk is not worth holding
}

Result<std::vector<Packet>> OutboxStore::by_sequence(std::uint64_t first, std::uint64_t last) {
  auto rows = read_packets(db_, "seq BETWEEN ?1 AND ?2", std::int64_t(first), std::int64_t(last));
  if (!rows.ok()) return rows;
  for (const Held& h : held_)
    if (h.sequence && *h.sequence >= first && *h.sequence <= last)
      rows->push_back(Packet{*h.sequence, h.priority, h.kind, h.created_t, h.bytes, h.attempts,
                             h.last_attempt_t, h.last_error, std::nullopt, true});
  std::sort(rows->begin(), rows->end(),
            [](const Packet& a, const Packet& b) { return a.sequence < b.sequence; });
  return rows;
}

Result<std::vector<Packet>> OutboxStore::by_created_time(std::int64_t from, std::int64_t to) {
  auto rows = read_packets(db_, "created_t BETWEEN ?1 AND ?2", from, to);
  if (!rows.ok()) return rows;
  for (const Held& h : held_)
    if (h.sequence && h.created_t >= from && h.created_t <= to)
      rows->push_back(Packet{*h.sequence, h.priority, h.kind, h.created_t, h.bytes, h.attempts,
                             h.last_attempt_t, h.last_error, std::nullopt, true});
  std::sort(rows->begin(), rows->end(),
            [](const Packet& a, const Packet& b) { return a.sequence < b.sequence; });
  return rows;
}

Result<OutboxCounts> OutboxStore::counts() {
  auto c = read_outbox_counts(db_);
  if (!c.ok()) return c;
  c->highest_sequence = std::max(c->highest_sequence, highest_sequence());
  for (const Held& h : held_) {
    ++c->unsent;
    c->unsent_bytes += std::int64_t(h.bytes.size());
    if (h.priority == Priority::alert) ++c->unsent_alerts;
    if (!c->oldest_unsent_created_t || h.created_t < *c->oldest_unsent_created_t)
      c->oldest_unsent_created_t = h.created_t;
  }
  return c;
}

Result<std::int64_t> OutboxStore::prune_sent(std::int64_t now) {
  auto st = db_.prepare("DELETE FROM packets WHERE sent_t IS NOT NULL AND sent_t < ?1");
  if (!st.ok()) return st.error();
  st->bind(1, now - options_.sent_retention_s);
  if (Status s = st->run(); !s.ok()) return note_fault(s), s;
  return db_.changes();
}

Result<std::int64_t> OutboxStore::drop_oldest_sent(std::int64_t max_rows) {
  Transaction txn(db_);
  if (Status s = txn.begin(); !s.ok()) return s;
  auto st = db_.prepare(
      "DELETE FROM packets WHERE seq IN (SELECT seq FROM packets WHERE sent_t IS NOT NULL "
      "ORDER BY sent_t, seq LIMIT ?1)");
  if (!st.ok()) return st.error();
  st->bind(1, max_rows);
  if (Status s = st->run(); !s.ok()) return s;
  std::int64_t n = db_.changes();
  if (n > 0) add_counter(counter::pruned_sent_early, n);
  Status s = write_counters_in_txn(db_, counter_delta_);
  if (s.ok()) s = txn.commit();
  if (s.ok()) counter_delta_.clear();
  // On failure the rows are still there; the counter delta stays in memory but
  // describes rows that were not deleted: take it back.
  if (!s.ok() && n > 0) counter_delta_[counter::pruned_sent_early] -= n;
  if (!s.ok()) return s;
  return n;
}

Result<std::int64_t> OutboxStore::drop_oldest_unsent_normal(std::int64_t max_rows) {
  Transaction txn(db_);
  if (Status s = txn.begin(); !s.ok()) return s;
  auto st = db_.prepare(
      "DELETE FROM packets WHERE seq IN (SELECT seq FROM packets WHERE sent_t IS NULL "
      "AND priority <> 0 ORDER BY seq LIMIT ?1)");
  if (!st.ok()) return st.error();
  st->bind(1, max_rows);
  if (Status s = st->run(); !s.ok()) return s;
  std::int64_t n = db_.changes();
  if (n > 0) add_counter(counter::dropped_unsent_normal, n);
  Status s = write_counters_in_txn(db_, counter_delta_);
  if (s.ok()) s = txn.commit();
  if (s.ok()) counter_delta_.clear();
  if (!s.ok() && n > 0) counter_delta_[counter::dropped_unsent_normal] -= n;
  if (!s.ok()) return s;
  return n;
}

std::map<std::string, std::int64_t> OutboxStore::counters() {
  return counters_with_pending(db_, counter_delta_);
}

std::int64_t OutboxStore::file_bytes() const {
  return file_bytes_on_disk(path_);
}

}  // namespace tarn::store
