// ArchiveStore: batches, queries by time, maintenance, state, retention.
#include <catch2/catch.hpp>

#include <cmath>

#include "config/settings/reasons.h"
#include "daemon/store/archive_store.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;
using tarn::codec::Flag;
namespace reason = tarn::pipeline::reason;

namespace {
constexpr std::int64_t t0 = 1780272000;  // 2026-06-01T00:00:00Z

std::unique_ptr<ArchiveStore> open_archive(const std::string& path, ArchiveOptions o = {}) {
  auto r = ArchiveStore::open(path, o, t0);
  REQUIRE(r.ok());
  return std::move(r.value());
}
}  // namespace

TEST_CASE("archive keeps every sample of a batch with value, flag and reasons", "[store]") {
  TempDir dir;
  auto a = open_archive(dir.file("archive.db"));
  std::vector<ArchivedSample> batch = {
      {"chl_a", t0, 3.52, Flag::pass, 0},
      {"phycocyanin", t0, std::nullopt, Flag::missing, reason::no_reply},
      {"temp_water", t0, -0.125, Flag::suspect, reason::spike | reason::clock_unsynced},
  };
  REQUIRE(a->append(batch).stored);
  REQUIRE(a->append(poll_cycle(t0 + 60, 2)).stored);
  std::vector<ArchivedSample> got;
  REQUIRE(a->for_each_sample(t0, t0 + 60, {}, [&](const ArchivedSample& s) {
             got.push_back(s);
             return true;
           }).ok());
  REQUIRE(got.size() == 3);
  CHECK(got[0].channel == "chl_a");
  CHECK(got[0].value == 3.52);
  CHECK(got[1].channel == "phycocyanin");
  CHECK_FALSE(got[1].value);
  CHECK(got[1].flag == Flag::missing);
  CHECK(got[1].reasons == reason::no_reply);
  CHECK(got[2].value == -0.125);
  CHECK(got[2].flag == Flag::suspect);
  CHECK(got[2].reasons == (reason::spike | reason::clock_unsynced));

  auto since = a->samples_since(t0 + 60);
  REQUIRE(since.ok());
  CHECK(since->size() == 2);
  std::size_t chl = 0;
  REQUIRE(a->for_each_sample(0, INT64_MAX, "chl_a", [&](const ArchivedSample&) {
             ++chl;
             return true;
           }).ok());
  CHECK(chl == 1);
  auto c = a->counts();
  REQUIRE(c.ok());
  CHECK(c->samples == 5);
  CHECK(c->channels == 5);  // chl_a, phycocyanin, temp_water, ch0, ch1
  CHECK(c->oldest_t == t0);
  CHECK(c->newest_t == t0 + 60);
}

TEST_CASE("archive survives reopen and resumes 'samples since T'", "[store]") {
  TempDir dir;
  {
    auto a = open_archive(dir.file("archive.db"));
    for (int i = 0; i < 15; ++i) REQUIRE(a->append(poll_cycle(t0 + 60 * i)).stored);
  }
  auto a = open_archive(dir.file("archive.db"));
  // The current 600 s window started at t0 + 600: 5 poll cycles of 4 channels since.
  auto since = a->samples_since(t0 + 600);
  REQUIRE(since.ok());
  CHECK(since->size() == 20);
  CHECK(since->front().t == t0 + 600);
  CHECK(since->back().t == t0 + 840);
}

TEST_CASE("maintenance periods are recorded, closed and found by overlap", "[store]") {
  TempDir dir;
  auto a = open_archive(dir.file("archive.db"));
  auto id = a->add_maintenance(t0 + 100, std::nullopt, "wiper replaced");
  REQUIRE(id.ok());
  auto closed = a->add_maintenance(t0 - 5000, t0 - 4000, "calibration");
  REQUIRE(closed.ok());
  auto open_now = a->maintenance_between(t0, t0 + 1000);
  REQUIRE(open_now.ok());
  REQUIRE(open_now->size() == 1);
  CHECK(open_now->front().note == "wiper replaced");
  CHECK_FALSE(open_now->front().end_t);
  REQUIRE(a->end_maintenance(id.value(), t0 + 700).ok());
  CHECK(a->end_maintenance(12345, t0).code() == StoreErrc::not_found);
  auto after = a->maintenance_between(t0 + 800, t0 + 900);
  REQUIRE(after.ok());
  CHECK(after->empty());
  auto all = a->maintenance_between(0, INT64_MAX);
  REQUIRE(all.ok());
  CHECK(all->size() == 2);
}

TEST_CASE("maintenance periods keep instrument, end by itself and who ended them", "[store]") {
  TempDir dir;
  auto a = open_archive(dir.file("archive.db"));
  MaintenancePeriod m;
  m.start_t = t0;
  m.instrument = "fluorometer";
  m.until_t = t0 + 7200;
  m.note = "optics wiped";
  auto id = a->add_maintenance(m);
  REQUIRE(id.ok());
  auto station = a->add_maintenance(t0 - 900, t0 - 600, "old-style row");
  REQUIRE(station.ok());
  auto open = a->maintenance_between(t0, t0 + 1);
  REQUIRE(open.ok());
  REQUIRE(open->size() == 1);
  CHECK(open->front().instrument == "fluorometer");
  CHECK(open->front().until_t == t0 + 7200);
  CHECK(open->front().ended_by.empty());
  REQUIRE(a->end_maintenance(id.value(), t0 + 7200, "time_limit").ok());
  auto last = a->last_ended_maintenance(INT64_MAX);
  REQUIRE(last.ok());
  REQUIRE(last.value());
  CHECK(last.value()->instrument == "fluorometer");
  CHECK(last.value()->end_t == t0 + 7200);
  CHECK(last.value()->ended_by == "time_limit");
  // The row written without the new columns: the whole station, no own end.
  auto before = a->last_ended_maintenance(t0);
  REQUIRE(before.ok());
  REQUIRE(before.value());
  CHECK(before.value()->instrument.empty());
  CHECK_FALSE(before.value()->until_t);
  CHECK(a->database().query_int("PRAGMA user_version").value() == 3);
}

TEST_CASE("state values persist, update and erase", "[store]") {
  TempDir dir;
  {
    auto a = open_archive(dir.file("archive.db"));
    REQUIRE(a->put_state("alert.chl_a", R"({"level":"watch"})", t0).ok());
    REQUIRE(a->put_state("alert.chl_a", R"({"level":"alert"})", t0 + 1).ok());
    REQUIRE(a->put_state("qc.snapshot", "x", t0).ok());
    REQUIRE(a->erase_state("qc.snapshot").ok());
  }
  auto a = open_archive(dir.file("archive.db"));
  auto v = a->get_state("alert.chl_a");
  REQUIRE(v.ok());
  CHECK(v.value() == std::optional<std::string>(R"({"level":"alert"})"));
  CHECK_FALSE(a->get_state("qc.snapshot").value());
  CHECK_FALSE(a->get_state("never").value());
}

TEST_CASE("archive retention by age and by size", "[store]") {
  TempDir dir;
  ArchiveOptions o;
  o.max_age_s = 3600;
  o.max_bytes = 1ll << 40;
  auto a = open_archive(dir.file("archive.db"), o);
  for (int i = 0; i < 120; ++i) REQUIRE(a->append(poll_cycle(t0 + 60 * i)).stored);
  auto removed = a->prune(t0 + 120 * 60);
  REQUIRE(removed.ok());
  CHECK(removed.value() == 60 * 4);  // everything before t0 + 3600
  CHECK(a->counts()->oldest_t == t0 + 3600);

  SECTION("size") {
    ArchiveOptions small = o;
    small.max_age_s = 1ll << 40;
    small.max_bytes = 64 * 1024;
    TempDir d2;
    auto b = open_archive(d2.file("archive.db"), small);
    for (int i = 0; i < 3000; ++i) REQUIRE(b->append(poll_cycle(t0 + 60 * i)).stored);
    auto before = b->used_bytes();
    REQUIRE(before.value() > small.max_bytes);
    auto n = b->prune(t0 + 3000 * 60);
    REQUIRE(n.ok());
    CHECK(n.value() > 0);
    CHECK(b->used_bytes().value() <= small.max_bytes);
    // Oldest went first: the newest sample is still there.
    CHECK(b->counts()->newest_t == t0 + 2999 * 60);
    CHECK(b->counts()->oldest_t > t0);
    CHECK(b->counters()["pruned.archive_size"] == n.value());
  }
}
