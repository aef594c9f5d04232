// OutboxStore: sequence numbers, priority order, acknowledgements, retention.
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <set>

#include "daemon/store/outbox_store.h"
#include "daemon/store/sequence_sidecar.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;
namespace fs = std::filesystem;

namespace {

std::unique_ptr<OutboxStore> open_outbox(const std::string& path, std::uint64_t floor = 0,
                                         OutboxOptions o = quiet_outbox()) {
  auto r = OutboxStore::open(path, o, floor, 1780272000);
  REQUIRE(r.ok());
  return std::move(r.value());
}

std::uint64_t insert_one(OutboxStore& s, const std::string& tag, Priority p = Priority::normal,
                         std::int64_t t = 1780272000) {
  auto r =
      s.insert(tagged(tag), p, p == Priority::alert ? PacketKind::alert : PacketKind::window, t);
  REQUIRE(r.where == InsertReceipt::Where::stored);
  REQUIRE(r.sequence);
  return *r.sequence;
}

}  // namespace

TEST_CASE("crc32 of the sidecar matches the catalogue check value", "[store]") {
  // CRC-32/ISO-HDLC check value 0xCBF43926 for "123456789": the CRC catalogue
  // (reveng), and Python's zlib.crc32(b"123456789") == 0xcbf43926 (run with /usr/bin/python3).
  CHECK(crc32_ieee("123456789", 9) == 0xCBF43926u);
}

TEST_CASE("outbox numbers packets 1, 2, 3 and never reuses a number after reopening", "[store]") {
  TempDir dir;
  std::string path = dir.file("outbox.db");
  std::set<std::uint64_t> used;
  std::uint64_t highest = 0;
  {
    auto s = open_outbox(path);
    CHECK(insert_one(*s, "a") == 1);
    CHECK(insert_one(*s, "b") == 2);
    CHECK(insert_one(*s, "c") == 3);
    highest = 3;
    used = {1, 2, 3};
  }
  for (int round = 0; round < 5; ++round) {
    auto s = open_outbox(path);
    std::uint64_t seq = insert_one(*s, "r" + std::to_string(round));
    CHECK(seq > highest);  // numbers reserved and unused before the reopen are skipped
    CHECK(used.insert(seq).second);
    highest = seq;
  }
  // The packets written before are all still there with their own content.
  auto s = open_outbox(path);
  auto all = s->by_sequence(0, 1000);
  REQUIRE(all.ok());
  CHECK(all->size() == used.size());
  for (auto& p : all.value())
    CHECK(text(p.bytes).find("#" + std::to_string(p.sequence)) != std::string::npos);
}

TEST_CASE("deleting the outbox database does not bring sequence numbers back", "[store]") {
  TempDir dir;
  std::string path = dir.file("outbox.db");
  std::uint64_t last = 0;
  {
    auto s = open_outbox(path);
    for (int i = 0; i < 20; ++i) last = insert_one(*s, "x");  // crosses two sidecar blocks of 8
  }
  for (const char* suffix : {"", "-wal", "-shm"}) fs::remove(path + suffix);
  REQUIRE(fs::exists(path + ".seq"));
  {
    auto s = open_outbox(path);
    CHECK(insert_one(*s, "after delete") > last);
  }
  SECTION("without the sidecar the archive's record still holds") {
    std::uint64_t prev = 0;
    {
      auto s = open_outbox(path);
      prev = s->highest_sequence();
    }
    for (const char* suffix : {"", "-wal", "-shm", ".seq"}) fs::remove(path + suffix);
    auto s = open_outbox(path, /*floor from archive=*/prev);
    CHECK(insert_one(*s, "after both") == prev + 1);
  }
  SECTION("a damaged sidecar is ignored; the database's record holds") {
    std::uint64_t prev = 0;
    {
      auto s = open_outbox(path);
      prev = insert_one(*s, "before");
    }
    std::ofstream(path + ".seq", std::ios::trunc) << "garbage";
    auto s = open_outbox(path);
    CHECK(insert_one(*s, "after") > prev);
  }
}

TEST_CASE("sidecar is reserved ahead of use and written in its documented format", "[store]") {
  TempDir dir;
  std::string path = dir.file("outbox.db");
  auto s = open_outbox(path);
  auto seq = insert_one(*s, "a");
  auto reserved = SequenceSidecar(path + ".seq").read();
  REQUIRE(reserved.ok());
  CHECK(reserved.value() >= seq);
  CHECK(reserved.value() == seq + 7);  // block of 8 reserved at open
  std::ifstream in(path + ".seq");
  std::string line;
  std::getline(in, line);
  CHECK(line.size() == 40);
  CHECK(line.rfind("tarn-seq 1 00000000000000000008 ", 0) == 0);
  for (int i = 0; i < 8; ++i) insert_one(*s, "b");
  CHECK(SequenceSidecar(path + ".seq").read().value() == 16);
}

TEST_CASE("next batch gives alerts first, then by sequence", "[store]") {
  TempDir dir;
  auto s = open_outbox(dir.file("outbox.db"));
  auto n1 = insert_one(*s, "n1");
  auto n2 = insert_one(*s, "n2");
  auto a1 = insert_one(*s, "a1", Priority::alert);
  auto n3 = insert_one(*s, "n3");
  auto a2 = insert_one(*s, "a2", Priority::alert);
  auto batch = s->next_batch(10);
  REQUIRE(batch.ok());
  std::vector<std::uint64_t> order;
  for (auto& p : batch.value()) order.push_back(p.sequence);
  CHECK(order == std::vector<std::uint64_t>{a1, a2, n1, n2, n3});
  CHECK(batch->front().priority == Priority::alert);
  CHECK(batch->front().kind == PacketKind::alert);

  auto two = s->next_batch(2);
  REQUIRE(two.ok());
  CHECK(two->size() == 2);
  // Byte limit: each packet is 4..5 bytes; 9 bytes allow two.
  auto by_bytes = s->next_batch(10, 9);
  REQUIRE(by_bytes.ok());
  CHECK(by_bytes->size() == 2);
  auto at_least_one = s->next_batch(10, 1);
  REQUIRE(at_least_one.ok());
  CHECK(at_least_one->size() == 1);
}

TEST_CASE("mark_sent affects exactly one packet and only on its number", "[store]") {
  TempDir dir;
  auto s = open_outbox(dir.file("outbox.db"));
  auto a = insert_one(*s, "a");
  auto b = insert_one(*s, "b");
  auto c = insert_one(*s, "c");
  REQUIRE(s->mark_sent(b, 1780272100).ok());
  auto batch = s->next_batch(10);
  REQUIRE(batch.ok());
  REQUIRE(batch->size() == 2);
  CHECK(batch.value()[0].sequence == a);
  CHECK(batch.value()[1].sequence == c);
  CHECK(s->mark_sent(999, 1780272100).code() == StoreErrc::not_found);
  // A second acknowledgement keeps the first time.
  REQUIRE(s->mark_sent(b, 1780279999).ok());
  auto got = s->by_sequence(b, b);
  REQUIRE(got.ok());
  REQUIRE(got->size() == 1);
  CHECK(got->front().sent_t == 1780272100);
  auto counts = s->counts();
  REQUIRE(counts.ok());
  CHECK(counts->unsent == 2);
  CHECK(counts->sent_kept == 1);
  CHECK(counts->highest_sequence == c);
}

TEST_CASE("attempts and last error are recorded per packet", "[store]") {
  TempDir dir;
  auto s = open_outbox(dir.file("outbox.db"));
  auto a = insert_one(*s, "a");
  auto b = insert_one(*s, "b");
  REQUIRE(s->record_attempt(a, 1780272010, "broker refused: not authorised").ok());
  REQUIRE(s->record_attempt(a, 1780272020, "").ok());
  CHECK(s->record_attempt(77, 1780272020, "x").code() == StoreErrc::not_found);
  auto got = s->by_sequence(a, b);
  REQUIRE(got.ok());
  REQUIRE(got->size() == 2);
  CHECK(got.value()[0].attempts == 2);
  CHECK(got.value()[0].last_attempt_t == 1780272020);
  CHECK(got.value()[0].last_error.empty());
  CHECK(got.value()[1].attempts == 0);
  CHECK_FALSE(got.value()[1].last_attempt_t);
}

TEST_CASE("sent packets are kept for the retention time, unsent ones always", "[store]") {
  TempDir dir;
  OutboxOptions o = quiet_outbox();
  o.sent_retention_s = 3600;
  auto s = open_outbox(dir.file("outbox.db"), 0, o);
  const std::int64_t t0 = 1780272000;
  auto old_sent = insert_one(*s, "old", Priority::normal, t0);
  auto new_sent = insert_one(*s, "new", Priority::normal, t0 + 600);
  auto unsent = insert_one(*s, "unsent", Priority::normal, t0);
  REQUIRE(s->mark_sent(old_sent, t0 + 10).ok());
  REQUIRE(s->mark_sent(new_sent, t0 + 3000).ok());
  auto pruned = s->prune_sent(t0 + 3700);
  REQUIRE(pruned.ok());
  CHECK(pruned.value() == 1);
  auto left = s->by_sequence(0, 100);
  REQUIRE(left.ok());
  REQUIRE(left->size() == 2);
  CHECK(left.value()[0].sequence == new_sent);
  CHECK(left.value()[1].sequence == unsent);
  // Resend by time range finds the kept sent packet.
  auto by_time = s->by_created_time(t0 + 600, t0 + 600);
  REQUIRE(by_time.ok());
  REQUIRE(by_time->size() == 1);
  CHECK(text(by_time->front().bytes) == "new#" + std::to_string(new_sent));
  // Far in the future: the sent one goes, the unsent one stays.
  REQUIRE(s->prune_sent(t0 + 10 * 86400).ok());
  auto last = s->by_sequence(0, 100);
  REQUIRE(last.ok());
  REQUIRE(last->size() == 1);
  CHECK(last->front().sequence == unsent);
  // A fresh counts() after pruning still knows the highest number ever used.
  CHECK(s->counts()->highest_sequence == unsent);
}

TEST_CASE("insert_bytes keeps the caller's bytes exactly", "[store]") {
  TempDir dir;
  auto s = open_outbox(dir.file("outbox.db"));
  std::vector<std::uint8_t> bytes = {0x00, 0xff, 0x10, 0x00};
  auto r = s->insert_bytes(bytes, Priority::normal, PacketKind::manifest, 5);
  REQUIRE(r.where == InsertReceipt::Where::stored);
  auto got = s->by_sequence(*r.sequence, *r.sequence);
  REQUIRE(got.ok());
  CHECK(got->front().bytes == bytes);
  CHECK(got->front().kind == PacketKind::manifest);
  auto empty = s->insert_bytes({}, Priority::normal, PacketKind::health, 6);
  REQUIRE(empty.where == InsertReceipt::Where::stored);
  CHECK(s->by_sequence(*empty.sequence, *empty.sequence)->front().bytes.empty());
}
