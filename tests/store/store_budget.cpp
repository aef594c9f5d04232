// StationStore budget policies: what gives way when the store is full.
#include <catch2/catch.hpp>

#include <set>

#include "daemon/store/station_store.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;

namespace {
constexpr std::int64_t t0 = 1780272000;

std::vector<std::uint8_t> payload(std::size_t n, std::uint64_t seq) {
  std::vector<std::uint8_t> v(n, std::uint8_t(seq));
  v[0] = std::uint8_t(seq >> 8);
  return v;
}

PacketSource sized(std::size_t n) {
  return [n](std::uint64_t seq) { return payload(n, seq); };
}

std::unique_ptr<StationStore> open_store(const std::string& dir, BudgetPolicy policy,
                                         std::int64_t budget) {
  StationStoreOptions o;
  o.outbox.sequence_block = 16;
  o.limits.budget_bytes = budget;
  o.limits.policy = policy;
  auto r = StationStore::open(dir, o, t0);
  REQUIRE(r.ok());
  return std::move(r.value());
}

std::int64_t used(StationStore& s) {
  return s.outbox().used_bytes().value() + s.archive().used_bytes().value();
}
}  // namespace

TEST_CASE("policy names parse and print", "[store]") {
  CHECK(parse_policy("drop_oldest_normal") == BudgetPolicy::drop_oldest_normal);
  CHECK(parse_policy("thin_archive_first") == BudgetPolicy::thin_archive_first);
  CHECK_FALSE(parse_policy("drop-oldest"));
  CHECK(policy_name(BudgetPolicy::thin_archive_first) == "thin_archive_first");
}

TEST_CASE("drop_oldest_normal drops the oldest unsent normal packets, never alerts, and counts",
          "[store]") {
  TempDir dir;
  const std::int64_t budget = 160 * 1024;
  auto s = open_store(dir.path(), BudgetPolicy::drop_oldest_normal, budget);
  std::vector<std::uint64_t> alerts, normals;
  for (int i = 0; i < 400; ++i) {
    bool alert = i % 10 == 0;
    auto r = s->insert_packet(sized(500), alert ? Priority::alert : Priority::normal,
                              alert ? PacketKind::alert : PacketKind::window, t0 + i * 600,
                              t0 + i * 600);
    REQUIRE(r.where == InsertReceipt::Where::stored);
    (alert ? alerts : normals).push_back(*r.sequence);
  }
  s->enforce_budget(t0 + 400 * 600);
  CHECK(used(*s) <= budget);
  auto c = s->outbox().counts();
  REQUIRE(c.ok());
  CHECK(c->unsent_alerts == std::int64_t(alerts.size()));  // every alert is still there
  auto dropped = s->stats().counters[counter::dropped_unsent_normal];
  CHECK(dropped > 0);
  CHECK(c->unsent == std::int64_t(alerts.size() + normals.size()) - dropped);
  // The oldest normal packets went, the newest stayed.
  auto left = s->outbox().by_sequence(0, 100000);
  REQUIRE(left.ok());
  std::set<std::uint64_t> present;
  for (auto& p : left.value()) present.insert(p.sequence);
  CHECK(present.count(normals.back()));
  CHECK_FALSE(present.count(normals.front()));
  for (std::size_t i = 0; i + 1 < normals.size(); ++i)
    if (present.count(normals[i]))
      CHECK(present.count(normals[i + 1]));  // no hole after a kept one
  // The counter is persisted: it survives a reopen.
  s.reset();
  auto again = open_store(dir.path(), BudgetPolicy::drop_oldest_normal, budget);
  CHECK(again->stats().counters[counter::dropped_unsent_normal] == dropped);
  CHECK(format_stats(again->stats()).find("dropped.unsent_normal: " + std::to_string(dropped)) !=
        std::string::npos);
}

TEST_CASE("delivered packets kept for resends go before anything unsent", "[store]") {
  TempDir dir;
  const std::int64_t budget = 120 * 1024;
  auto s = open_store(dir.path(), BudgetPolicy::drop_oldest_normal, budget);
  // Fill to about the budget with sent packets, then keep inserting unsent ones.
  for (int i = 0; i < 150; ++i) {
    auto r = s->insert_packet(sized(500), Priority::normal, PacketKind::window, t0 + i, t0 + i);
    REQUIRE(s->outbox().mark_sent(*r.sequence, t0 + i).ok());
  }
  for (int i = 0; i < 60; ++i)
    s->insert_packet(sized(500), Priority::normal, PacketKind::window, t0 + 1000 + i,
                     t0 + 1000 + i);
  s->enforce_budget(t0 + 2000);
  auto k = s->stats().counters;
  CHECK(k[counter::pruned_sent_early] > 0);
  CHECK(k[counter::dropped_unsent_normal] == 0);
  CHECK(s->outbox().counts()->unsent == 60);
}

TEST_CASE("thin_archive_first prunes archived samples before any packet", "[store]") {
  TempDir dir;
  const std::int64_t budget = 200 * 1024;
  auto s = open_store(dir.path(), BudgetPolicy::thin_archive_first, budget);
  for (int i = 0; i < 40; ++i)
    REQUIRE(s->insert_packet(sized(400), Priority::normal, PacketKind::window, t0 + i * 600,
                             t0 + i * 600)
                .where == InsertReceipt::Where::stored);
  for (int i = 0; i < 2500; ++i)
    REQUIRE(s->append_samples(poll_cycle(t0 + 60 * i), t0 + 60 * i).stored);
  s->enforce_budget(t0 + 2500 * 60);
  CHECK(used(*s) <= budget);
  auto k = s->stats().counters;
  CHECK(k[counter::dropped_archive_samples] > 0);
  CHECK(k[counter::dropped_unsent_normal] == 0);
  CHECK(s->outbox().counts()->unsent == 40);
  // Oldest samples went: the newest poll cycle is there.
  CHECK(s->archive().counts()->newest_t == t0 + 2499 * 60);
  CHECK(s->archive().counts()->oldest_t > t0);
}

TEST_CASE("over budget with only alerts left: nothing dropped, condition says so", "[store]") {
  TempDir dir;
  auto s = open_store(dir.path(), BudgetPolicy::drop_oldest_normal, 40 * 1024);
  for (int i = 0; i < 100; ++i)
    REQUIRE(
        s->insert_packet(sized(500), Priority::alert, PacketKind::alert, t0 + i, t0 + i).where ==
        InsertReceipt::Where::stored);
  s->enforce_budget(t0 + 200);
  CHECK(s->outbox().counts()->unsent_alerts == 100);
  CHECK(s->condition() == "ok (over budget: only alerts left)");
}

TEST_CASE("rate limit lets a notice through at most once per hour", "[store]") {
  RateLimit r(3600);
  CHECK(r.due(t0));
  CHECK_FALSE(r.due(t0 + 1));
  CHECK_FALSE(r.due(t0 + 3599));
  CHECK(r.due(t0 + 3600));
  CHECK_FALSE(r.due(t0 + 4000));
  CHECK(r.due(t0 - 100));  // the clock stepped back: do not stay silent for the step
}
