// Disk full and read-only file systems: the store keeps working from memory,
// says so, drops by policy with counts, and recovers when space returns.
#include <catch2/catch.hpp>

#include <set>

#include "daemon/store/station_store.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;

namespace {
constexpr std::int64_t t0 = 1780272000;

StationStoreOptions options(bool reclaim) {
  StationStoreOptions o;
  o.outbox.sequence_block = 4;  // several sidecar writes during the test
  o.limits.reclaim_on_disk_full = reclaim;
  return o;
}

std::unique_ptr<StationStore> open_store(const std::string& dir, const StationStoreOptions& o) {
  auto r = StationStore::open(dir, o, t0);
  REQUIRE(r.ok());
  return std::move(r.value());
}

PacketSource big(std::string tag) {
  return [tag](std::uint64_t seq) {
    std::string s = tag + "#" + std::to_string(seq) + "#";
    s.resize(700, 'x');
    return std::vector<std::uint8_t>(s.begin(), s.end());
  };
}

void set_max_pages(SqliteDb& db, std::int64_t pages) {
  auto st = db.prepare("PRAGMA max_page_count=" + std::to_string(pages));
  REQUIRE(st.ok());
  REQUIRE(st->step().ok());
}

std::int64_t page_count(SqliteDb& db) {
  return db.query_int("PRAGMA page_count").value();
}

// Every packet in the file: sequence -> content.
std::map<std::uint64_t, std::string> file_packets(StationStore& s) {
  std::map<std::uint64_t, std::string> out;
  auto all = s.outbox().by_sequence(0, UINT64_MAX >> 1);
  REQUIRE(all.ok());
  for (auto& p : all.value()) {
    if (p.in_memory) continue;
    REQUIRE(out.emplace(p.sequence, text(p.bytes)).second);
  }
  return out;
}
}  // namespace

TEST_CASE("disk full (max_page_count): packets and samples held in memory, then written",
          "[store]") {
  TempDir dir;
  auto s = open_store(dir.path(), options(/*reclaim=*/false));
  for (int i = 0; i < 5; ++i)
    REQUIRE(s->insert_packet(big("before"), Priority::normal, PacketKind::window, t0 + i, t0 + i)
                .where == InsertReceipt::Where::stored);
  REQUIRE(s->append_samples(poll_cycle(t0), t0).stored);
  set_max_pages(s->outbox().database(), page_count(s->outbox().database()));
  set_max_pages(s->archive().database(), page_count(s->archive().database()));

  std::vector<std::uint64_t> held_seqs;
  for (int i = 0; i < 12; ++i) {
    auto r = s->insert_packet(big("full"), i % 4 == 0 ? Priority::alert : Priority::normal,
                              PacketKind::window, t0 + 100 + i, t0 + 100 + i);
    REQUIRE(r.where != InsertReceipt::Where::dropped);
    if (r.where == InsertReceipt::Where::held) {
      CHECK(r.cause.code() == StoreErrc::disk_full);
      REQUIRE(r.sequence);  // the sidecar is not on a full disk here: numbers still reserved
      held_seqs.push_back(*r.sequence);
    }
  }
  REQUIRE(held_seqs.size() >= 8);  // a page of spare room takes a few, then the file is full
  std::size_t held_samples = 0;
  for (int i = 1; i <= 400; ++i) {
    auto r = s->append_samples(poll_cycle(t0 + 60 * i), t0 + 60 * i);
    if (!r.stored) {
      held_samples += 4;
      CHECK(r.cause.code() == StoreErrc::disk_full);
    }
  }
  REQUIRE(held_samples > 0);
  CHECK(s->degraded());
  std::string cond = s->condition();
  INFO(cond);
  CHECK(cond.rfind("degraded: disk full, holding ", 0) == 0);
  CHECK(cond.find(std::to_string(s->outbox().held_packets()) + " packets and " +
                  std::to_string(held_samples) + " samples in memory") != std::string::npos);
  CHECK(format_stats(s->stats()).find("condition:        degraded: disk full") !=
        std::string::npos);

  // Held packets with a number can go out meanwhile; an acknowledgement while full is held too.
  auto batch = s->outbox().next_batch(100);
  REQUIRE(batch.ok());
  std::set<std::uint64_t> offered;
  for (auto& p : batch.value()) offered.insert(p.sequence);
  for (auto q : held_seqs) CHECK(offered.count(q));
  // An acknowledgement updates a row in place: it may fit, else it is held.
  Status ack = s->outbox().mark_sent(1, t0 + 500);
  CHECK((ack.ok() || ack.code() == StoreErrc::disk_full));
  CHECK(s->outbox().held_acks() == (ack.ok() ? 0u : 1u));
  auto again = s->outbox().next_batch(100);
  for (auto& p : again.value()) CHECK(p.sequence != 1);  // acknowledged: not offered again

  // Still full: maintain() changes nothing and loses nothing.
  s->maintain(t0 + 1000);
  CHECK(s->degraded());

  // Space returns.
  set_max_pages(s->outbox().database(), 1 << 30);
  set_max_pages(s->archive().database(), 1 << 30);
  s->maintain(t0 + 2000);
  CHECK_FALSE(s->degraded());
  CHECK(s->condition() == "ok");
  auto packets = file_packets(*s);
  CHECK(packets.size() == 17);
  for (auto q : held_seqs) {
    REQUIRE(packets.count(q));
    CHECK(packets[q].rfind("full#" + std::to_string(q) + "#", 0) == 0);
  }
  CHECK(s->outbox().by_sequence(1, 1)->front().sent_t == t0 + 500);
  CHECK(s->archive().counts()->samples == 401 * 4);
  CHECK(s->stats().counters[counter::dropped_unsent_normal] == 0);
}

TEST_CASE("disk full with reclaim: oldest normal packets make room, alerts stay, drops counted",
          "[store]") {
  TempDir dir;
  auto s = open_store(dir.path(), options(/*reclaim=*/true));
  std::vector<std::uint64_t> alerts;
  for (int i = 0; i < 30; ++i) {
    auto p = i % 5 == 0 ? Priority::alert : Priority::normal;
    auto r = s->insert_packet(big("old"), p, PacketKind::window, t0 + i, t0 + i);
    REQUIRE(r.where == InsertReceipt::Where::stored);
    if (p == Priority::alert) alerts.push_back(*r.sequence);
  }
  set_max_pages(s->outbox().database(), page_count(s->outbox().database()));
  for (int i = 0; i < 30; ++i) {
    auto r = s->insert_packet(big("new"), Priority::normal, PacketKind::window, t0 + 100 + i,
                              t0 + 100 + i);
    CHECK(r.where != InsertReceipt::Where::dropped);
  }
  s->maintain(t0 + 200);
  CHECK(s->outbox().held_packets() == 0);
  auto k = s->stats().counters;
  CHECK(k[counter::dropped_unsent_normal] > 0);
  auto c = s->outbox().counts();
  CHECK(c->unsent_alerts == std::int64_t(alerts.size()));
  CHECK(c->unsent == 60 - k[counter::dropped_unsent_normal]);
  auto packets = file_packets(*s);
  for (auto a : alerts) CHECK(packets.count(a));
}

TEST_CASE("holding queue is bounded: oldest held normal packets dropped first, counted",
          "[store]") {
  TempDir dir;
  StationStoreOptions o = options(false);
  o.outbox.holding_max_packets = 4;
  auto s = open_store(dir.path(), o);
  REQUIRE(s->insert_packet(big("a"), Priority::normal, PacketKind::window, t0, t0).where ==
          InsertReceipt::Where::stored);
  set_max_pages(s->outbox().database(), page_count(s->outbox().database()));
  int held = 0, dropped = 0;
  std::vector<std::uint64_t> alert_seqs;
  for (int i = 0; i < 12; ++i) {
    auto p = i < 2 ? Priority::alert : Priority::normal;
    auto r = s->insert_packet(big("h"), p, PacketKind::window, t0 + i, t0 + i);
    if (r.where == InsertReceipt::Where::held) ++held;
    if (r.where == InsertReceipt::Where::dropped) ++dropped;
    if (p == Priority::alert && r.where == InsertReceipt::Where::held)
      alert_seqs.push_back(*r.sequence);
  }
  CHECK(s->outbox().held_packets() <= 4);
  std::int64_t n = s->stats().counters[counter::dropped_held_normal];
  CHECK(n > 0);
  CHECK(s->stats().counters[counter::dropped_held_alert] == 0);
  auto batch = s->outbox().next_batch(100);
  std::set<std::uint64_t> offered;
  for (auto& p : batch.value()) offered.insert(p.sequence);
  for (auto a : alert_seqs) CHECK(offered.count(a));  // held alerts survive the bound
  set_max_pages(s->outbox().database(), 1 << 30);
  s->maintain(t0 + 100);
  // The drop counts are written once the file takes writes again.
  auto stored = read_counters(s->outbox().database());
  REQUIRE(stored.ok());
  CHECK(stored.value()[counter::dropped_held_normal] == n);
}

TEST_CASE("a real small file system: ENOSPC, then read-only, then recovery", "[store][tmpfs]") {
  SmallFileSystem fs("512k");
  if (!fs.ok()) {
    WARN("skipped: cannot mount a 512 KiB tmpfs here (" << fs.reason()
                                                        << "); the max_page_count tests still ran");
    return;
  }
  auto s = open_store(fs.path(), options(/*reclaim=*/false));
  std::map<std::uint64_t, std::string> expected;  // every packet the store accepted
  bool full = false;
  int i = 0;
  for (; i < 3000 && !full; ++i) {
    auto r = s->insert_packet(tagged("t" + std::to_string(i)), Priority::normal, PacketKind::window,
                              t0 + i, t0 + i);
    if (r.sequence)
      expected[*r.sequence] = "t" + std::to_string(i) + "#" + std::to_string(*r.sequence);
    auto a = s->append_samples(poll_cycle(t0 + i, 8), t0 + i);
    full = r.where != InsertReceipt::Where::stored || !a.stored;
  }
  REQUIRE(full);
  INFO(s->condition());
  CHECK(s->condition().rfind("degraded: disk full", 0) == 0);
  // Keep sampling while full; packets get numbers while the sidecar can be rewritten in place.
  for (int k = 0; k < 20; ++k, ++i) {
    auto r = s->insert_packet(tagged("t" + std::to_string(i)), Priority::normal, PacketKind::window,
                              t0 + i, t0 + i);
    CHECK(r.where == InsertReceipt::Where::held);
    if (r.sequence)
      expected[*r.sequence] = "t" + std::to_string(i) + "#" + std::to_string(*r.sequence);
    s->append_samples(poll_cycle(t0 + i, 8), t0 + i);
  }
  CHECK(s->degraded());

  SECTION("space returns") {
    REQUIRE(fs.remount(false, "8m"));
    s->maintain(t0 + 10000);
    INFO(s->condition());
    CHECK_FALSE(s->degraded());
    auto got = file_packets(*s);
    std::size_t unnumbered = 20 + 1;  // at most those that could not get a number
    CHECK(got.size() >= expected.size());
    CHECK(got.size() <= expected.size() + unnumbered);
    for (auto& [seq, content] : expected) {
      REQUIRE(got.count(seq));
      CHECK(got[seq] == content);
    }
  }
  SECTION("a store opened on a read-only file system holds, then writes when writable") {
    // Linux refuses to remount read-only while files are open for writing:
    // close the store first (what was held only in memory is lost, logged as
    // an error), then remount and start again, as after a reboot.
    s.reset();
    REQUIRE(fs.remount(true, "512k"));
    auto r = StationStore::open(fs.path(), options(false), t0);
    REQUIRE(r.ok());  // SQLite opens the files read-only: readable, writes held
    auto& ro = *r.value();
    INFO(ro.condition());
    CHECK(ro.degraded());
    CHECK(ro.condition().find("degraded: read-only file system") == 0);
    auto held = ro.insert_packet(tagged("ro"), Priority::alert, PacketKind::alert, t0, t0);
    CHECK(held.where == InsertReceipt::Where::held);
    CHECK_FALSE(held.sequence);  // no number can be reserved on a read-only disk
    CHECK_FALSE(ro.append_samples(poll_cycle(t0 + 1), t0 + 1).stored);
    auto before = file_packets(ro);
    for (auto& [seq, content] : before) CHECK(expected[seq] == content);
    REQUIRE(fs.remount(false, "8m"));
    ro.maintain(t0 + 30000);
    INFO(ro.condition());
    CHECK(ro.condition() == "ok");
    auto after = file_packets(ro);
    CHECK(after.size() == before.size() + 1);
    CHECK(after.rbegin()->first > expected.rbegin()->first);  // a new number, above all used
    CHECK(after.rbegin()->second.rfind("ro#", 0) == 0);
  }
}

TEST_CASE("read-only while running (query_only): held, then written when writable", "[store]") {
  TempDir dir;
  auto s = open_store(dir.path(), options(false));
  REQUIRE(s->insert_packet(big("a"), Priority::normal, PacketKind::window, t0, t0).where ==
          InsertReceipt::Where::stored);
  // PRAGMA query_only makes every write fail with SQLITE_READONLY, as a file
  // system remounted read-only under a running daemon does.
  REQUIRE(s->outbox().database().exec("PRAGMA query_only=1").ok());
  REQUIRE(s->archive().database().exec("PRAGMA query_only=1").ok());
  auto r = s->insert_packet(big("b"), Priority::alert, PacketKind::alert, t0 + 1, t0 + 1);
  CHECK(r.where == InsertReceipt::Where::held);
  CHECK(r.cause.code() == StoreErrc::read_only);
  CHECK_FALSE(s->append_samples(poll_cycle(t0 + 60), t0 + 60).stored);
  CHECK(s->condition() ==
        "degraded: read-only file system, holding 1 packets and 4 samples in memory");
  REQUIRE(s->outbox().database().exec("PRAGMA query_only=0").ok());
  REQUIRE(s->archive().database().exec("PRAGMA query_only=0").ok());
  s->maintain(t0 + 120);
  CHECK(s->condition() == "ok");
  CHECK(file_packets(*s).size() == 2);
  CHECK(s->archive().counts()->samples == 4);
}
