// OutboxStore: the durable queue of packets waiting for the link.
//
// A packet is inserted (synchronous=FULL: on disk before insert returns) with
// the next per-station sequence number (see sequence_sidecar.h), a priority
// (alerts first), a kind and its creation time. next_batch() gives unsent
// packets ordered by priority, then sequence. A packet is marked sent only when
// the uplink reports the link's acknowledgement; sent packets are kept for
// `sent_retention_s` so a shore request can have them again (by_sequence,
// by_created_time), then prune_sent() removes them.
//
// Faults: when the file cannot be written (disk full, read-only remount, I/O
// error) insert() keeps the packet in a bounded in-memory holding queue and
// says so in its receipt; retry_held() writes held packets (and held
// acknowledgements) when the file accepts writes again. A held packet that has
// a sequence number is durable in its number (the sidecar) and may be sent
// from memory; one that could not get a number waits unencoded for one.
// When the holding queue is full, the oldest held normal-priority packet is
// dropped (counted); an alert is dropped only when nothing but alerts is held.
//
// Thread-safety: one thread (the daemon's event loop). Methods run at most
// one SQLite transaction each (retry_held: one per held packet).
#pragma once

#include <cstdint>
#include <deque>
#include <functional>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "codec/packet_kind.h"
#include "daemon/store/sequence_sidecar.h"
#include "daemon/store/sqlite_db.h"
#include "daemon/store/store_common.h"
#include "daemon/store/store_file.h"

namespace tarn::store {

enum class Priority : std::uint8_t { alert = 0, normal = 1 };
// What a packet is: the station's one packet kind, codec/packet_kind.h (its
// numbers are the `kind` column).
using codec::PacketKind;

std::string_view priority_name(Priority p);
std::string_view kind_name(PacketKind k);

// Encodes the packet once its sequence number is known (the codec puts the
// number in the packet header). Must not fail; called at most once per packet.
using PacketSource = std::function<std::vector<std::uint8_t>(std::uint64_t sequence)>;

struct Packet {
  std::uint64_t sequence = 0;
  Priority priority = Priority::normal;
  PacketKind kind = PacketKind::window;
  std::int64_t created_t = 0;
  std::vector<std::uint8_t> bytes;
  int attempts = 0;
  std::optional<std::int64_t> last_attempt_t;
  std::string last_error;
  std::optional<std::int64_t> sent_t;
  bool in_memory = false;  // held: not yet written to the file
};

struct InsertReceipt {
  enum class Where { stored, held, dropped };
  Where where = Where::stored;
  std::optional<std::uint64_t> sequence;  // empty when held without a number yet
  Status cause;                           // why held or dropped
};

struct OutboxCounts {
  std::int64_t unsent = 0;
  std::int64_t unsent_bytes = 0;
  std::int64_t unsent_alerts = 0;
  std::optional<std::int64_t> oldest_unsent_created_t;
  std::int64_t sent_kept = 0;
  std::int64_t sent_kept_bytes = 0;
  std::uint64_t highest_sequence = 0;
};

struct OutboxOptions {
  std::int64_t sent_retention_s = 7 * 86400;  // keep acknowledged packets this long
  std::uint64_t sequence_block = 64;          // numbers reserved per sidecar write
  std::size_t holding_max_packets = 1000;     // in-memory bound while the file is not writable
  StoreFileOptions file;
};

// Counter names kept in the file (table counters) and shown by stats.
namespace counter {
inline constexpr const char* dropped_unsent_normal = "dropped.unsent_normal";  // budget/disk policy
inline constexpr const char* dropped_held_normal = "dropped.held_normal";      // holding queue full
inline constexpr const char* dropped_held_alert = "dropped.held_alert";  // holding full of alerts
inline constexpr const char* pruned_sent_early =
    "pruned.sent_early";  // sent, removed before retention
inline constexpr const char* dropped_archive_samples =
    "dropped.archive_samples";                                               // budget/disk policy
inline constexpr const char* dropped_held_samples = "dropped.held_samples";  // holding queue full
inline constexpr const char* damaged_files_moved = "damaged_files_moved";
}  // namespace counter

class OutboxStore {
 public:
  // Opens or creates `path` (see store_file.h), continues the sequence after
  // max(file, sidecar `<path>.seq`, `sequence_floor` from the archive).
  static Result<std::unique_ptr<OutboxStore>> open(const std::string& path,
                                                   const OutboxOptions& options,
                                                   std::uint64_t sequence_floor, std::int64_t now);
  ~OutboxStore();

  InsertReceipt insert(const PacketSource& source, Priority priority, PacketKind kind,
                       std::int64_t created_t);
  // For packets whose bytes do not carry the sequence number.
  InsertReceipt insert_bytes(std::vector<std::uint8_t> bytes, Priority priority, PacketKind kind,
                             std::int64_t created_t);

  // Unsent packets (file and held with a number), alerts first, then by sequence.
  // Stops before `max_packets` or before the bytes would pass `max_bytes`
  // (always at least one packet when any is unsent).
  Result<std::vector<Packet>> next_batch(std::size_t max_packets, std::size_t max_bytes = SIZE_MAX);
  // Marks one packet sent at `t` (the link's acknowledgement). not_found for an
  // unknown number; sending twice keeps the first time. When the file is not
  // writable the acknowledgement is held and written by retry_held().
  Status mark_sent(std::uint64_t sequence, std::int64_t t);
  // Counts a send attempt; `error` empty when the attempt itself went out.
  Status record_attempt(std::uint64_t sequence, std::int64_t t, std::string_view error);

  // Packets with first <= sequence <= last, or from <= created_t <= to, sent or not.
  Result<std::vector<Packet>> by_sequence(std::uint64_t first, std::uint64_t last);
  Result<std::vector<Packet>> by_created_time(std::int64_t from, std::int64_t to);

  Result<OutboxCounts> counts();
  // Removes packets sent before now - sent_retention_s. Returns how many.
  Result<std::int64_t> prune_sent(std::int64_t now);
  // Budget policy steps, oldest first, each one transaction. Return how many went.
  Result<std::int64_t> drop_oldest_sent(std::int64_t max_rows);
  Result<std::int64_t> drop_oldest_unsent_normal(std::int64_t max_rows);

  // Writes held packets and acknowledgements, oldest first; stops at the first failure.
  Status retry_held();
  std::size_t held_packets() const { return held_.size(); }
  std::size_t held_acks() const { return held_sent_.size(); }
  // ok() while the last write succeeded; else why the file is not writable.
  const Status& write_fault() const { return fault_; }

  Result<std::int64_t> used_bytes() { return tarn::store::used_bytes(db_); }
  std::int64_t file_bytes() const;  // db + wal + shm on disk
  std::uint64_t next_sequence() const { return alloc_.next(); }
  std::uint64_t highest_sequence() const { return alloc_.next() - 1; }
  // Persisted counters plus counts not yet written.
  std::map<std::string, std::int64_t> counters();
  void add_counter(const std::string& name, std::int64_t delta) { counter_delta_[name] += delta; }
  const OpenReport& open_report() const { return report_; }
  const std::string& path() const { return path_; }
  // For tests (e.g. PRAGMA max_page_count) and read-only queries; never write through it.
  SqliteDb& database() { return db_; }

 private:
  struct Held {
    std::optional<std::uint64_t> sequence;
    std::vector<std::uint8_t> bytes;  // set once a number is known
    PacketSource source;              // set while no number is known
    Priority priority = Priority::normal;
    PacketKind kind = PacketKind::window;
    std::int64_t created_t = 0;
    int attempts = 0;
    std::optional<std::int64_t> last_attempt_t;
    std::string last_error;
  };

  OutboxStore(SqliteDb db, std::string path, OutboxOptions options, SequenceAllocator alloc);
  Status write_packet(const Held& h);
  InsertReceipt hold(Held h, Status cause);
  void note_fault(const Status& s);

  SqliteDb db_;
  std::string path_;
  OutboxOptions options_;
  SequenceAllocator alloc_;
  OpenReport report_;
  std::deque<Held> held_;
  std::map<std::uint64_t, std::int64_t> held_sent_;  // sequence -> ack time, not yet written
  std::map<std::string, std::int64_t> counter_delta_;
  Status fault_;
};

// Read-only queries shared with the field tools (any connection, also read-only).
Result<OutboxCounts> read_outbox_counts(SqliteDb& db);
// Packets matching `where` (an SQL condition on the packets table, with ?1 ?2 bound to a, b).
Result<std::vector<Packet>> read_packets(SqliteDb& db, std::string_view where, std::int64_t a,
                                         std::int64_t b, std::string_view order = "seq");

// The outbox schema, version 1 first (for migration tests).
const Schema& outbox_schema();

}  // namespace tarn::store
