// The field tools' library side: the store config block, read-only stats
// beside a running store, export and packet text forms.
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <sstream>

#include "config/settings/reasons.h"
#include "daemon/store/store_config.h"
#include "daemon/store/store_export.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;
using tarn::codec::Flag;
namespace fs = std::filesystem;

namespace {
constexpr std::int64_t t0 = 1780272000;

std::string slurp(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream o;
  o << in.rdbuf();
  return o.str();
}
}  // namespace

TEST_CASE("store config block: defaults, values and every mistake named", "[store]") {
  tarn::config::Problems none;
  auto d = read_store_config(nullptr, "/store", none);
  CHECK(none.empty());
  CHECK(d.limits.budget_bytes == 256ll << 20);
  CHECK(d.limits.policy == BudgetPolicy::drop_oldest_normal);

  auto j = tarn::config::Json::parse(R"({"budget_mb": 32, "when_full": "thin_archive_first",
      "sent_retention_days": 2, "archive_retention_days": 30, "archive_max_mb": 16,
      "holding_packets": 50, "holding_samples": 5000, "reclaim_on_disk_full": false})");
  tarn::config::Problems p;
  auto o = read_store_config(&j, "/store", p);
  CHECK(p.empty());
  CHECK(o.limits.budget_bytes == 32ll << 20);
  CHECK(o.limits.policy == BudgetPolicy::thin_archive_first);
  CHECK_FALSE(o.limits.reclaim_on_disk_full);
  CHECK(o.outbox.sent_retention_s == 2 * 86400);
  CHECK(o.archive.max_age_s == 30 * 86400);
  CHECK(o.archive.max_bytes == 16ll << 20);
  CHECK(o.outbox.holding_max_packets == 50);
  CHECK(o.archive.holding_max_samples == 5000);

  auto bad = tarn::config::Json::parse(
      R"({"budget_mb": 0, "when_full": "drop_newest", "budgt_mb": 3, "holding_packets": "many"})");
  tarn::config::Problems q;
  read_store_config(&bad, "/store", q);
  std::string all = q.render("station.json");
  INFO(all);
  CHECK(q.size() == 4);
  CHECK(all.find("/store/budget_mb") != std::string::npos);
  CHECK(all.find("/store/when_full") != std::string::npos);
  CHECK(all.find("/store/budgt_mb") != std::string::npos);
  CHECK(all.find("/store/holding_packets") != std::string::npos);
}

TEST_CASE("read-only stats beside an open store change no byte of its files", "[store]") {
  TempDir dir;
  auto s = StationStore::open(dir.path(), StationStoreOptions{}, t0);
  REQUIRE(s.ok());
  auto& store = *s.value();
  for (int i = 0; i < 10; ++i) {
    store.insert_packet(tagged("p"), i == 3 ? Priority::alert : Priority::normal,
                        PacketKind::window, t0 + 600 * i, t0 + 600 * i);
    store.append_samples(poll_cycle(t0 + 60 * i), t0 + 60 * i);
  }
  REQUIRE(store.outbox().mark_sent(1, t0 + 5).ok());
  std::string before_db = slurp(dir.file("outbox.db")),
              before_wal = slurp(dir.file("outbox.db-wal"));
  std::string before_adb = slurp(dir.file("archive.db"));
  auto ro = read_store_stats(locate_store(dir.file("archive.db")));
  REQUIRE(ro.ok());
  CHECK(ro->outbox.unsent == 9);
  CHECK(ro->outbox.unsent_alerts == 1);
  CHECK(ro->outbox.sent_kept == 1);
  CHECK(ro->outbox.oldest_unsent_created_t == t0 + 600);
  CHECK(ro->archive.samples == 40);
  CHECK(ro->archive.newest_t == t0 + 540);
  CHECK(slurp(dir.file("outbox.db")) == before_db);
  CHECK(slurp(dir.file("outbox.db-wal")) == before_wal);
  CHECK(slurp(dir.file("archive.db")) == before_adb);
  std::string text = format_stats(ro.value());
  CHECK(text.find("unsent:         9 packets") != std::string::npos);
  CHECK(text.find("oldest unsent:  2026-06-01T00:10:00Z") != std::string::npos);
  auto live = stats_to_json(store.stats());
  CHECK(live["outbox"]["unsent"] == 9);
  CHECK(live["outbox"]["oldest_unsent"]["utc"] == "2026-06-01T00:10:00Z");
  CHECK(live["archive"]["samples"] == 40);
  CHECK(live["condition"] == "ok");
  CHECK(live["degraded"] == false);
  CHECK(live["policy"] == "drop_oldest_normal");
  // The store keeps working after the reader has been there.
  CHECK(store.insert_packet(tagged("q"), Priority::normal, PacketKind::window, t0, t0).where ==
        InsertReceipt::Where::stored);
}

TEST_CASE("stats of a directory without a store is a clear not_found", "[store]") {
  TempDir dir;
  auto r = read_store_stats(locate_store(dir.path()));
  REQUIRE_FALSE(r.ok());
  CHECK(r.error().code() == StoreErrc::not_found);
  CHECK(fs::is_empty(dir.path()));  // nothing created
}

TEST_CASE("export lines: CSV and JSON Lines forms of archived samples", "[store]") {
  std::ostringstream csv, jl;
  ArchivedSample a{"chl_a", t0, 3.52, Flag::pass, 0};
  ArchivedSample b{"odd,\"name\"", t0 + 60, std::nullopt, Flag::missing,
                   tarn::pipeline::reason::no_reply};
  ArchivedSample c{"temp", t0 + 120, 0.1, Flag::suspect, 1u << 11};
  write_sample_header(csv, SampleFormat::csv);
  for (auto* s : {&a, &b, &c}) {
    write_sample(csv, SampleFormat::csv, *s);
    write_sample(jl, SampleFormat::jsonl, *s);
  }
  CHECK(csv.str() ==
        "time_utc,t,channel,value,flag,reasons\n"
        "2026-06-01T00:00:00Z,1780272000,chl_a,3.52,1,0\n"
        "2026-06-01T00:01:00Z,1780272060,\"odd,\"\"name\"\"\",,9,1\n"
        "2026-06-01T00:02:00Z,1780272120,temp,0.1,3,2048\n");
  CHECK(jl.str() ==
        "{\"t\":1780272000,\"ch\":\"chl_a\",\"v\":3.52,\"f\":1,\"r\":0}\n"
        "{\"t\":1780272060,\"ch\":\"odd,\\\"name\\\"\",\"v\":null,\"f\":9,\"r\":1}\n"
        "{\"t\":1780272120,\"ch\":\"temp\",\"v\":0.1,\"f\":3,\"r\":2048}\n");
  // Each JSON line parses with nlohmann/json and keeps the value exactly.
  std::istringstream in(jl.str());
  std::string line;
  std::getline(in, line);
  auto j = tarn::config::Json::parse(line);
  CHECK(j["v"].get<double>() == 3.52);
}

TEST_CASE("packet lines: comment then hex, or hex only", "[store]") {
  Packet p;
  p.sequence = 42;
  p.priority = Priority::alert;
  p.kind = PacketKind::alert;
  p.created_t = t0 + 600;
  p.bytes = {0x00, 0x0f, 0xa5, 0xff};
  p.attempts = 2;
  std::ostringstream full, bare;
  write_packet(full, p, false);
  write_packet(bare, p, true);
  CHECK(full.str() ==
        "# seq=42 kind=alert priority=alert created=2026-06-01T00:10:00Z size=4 attempts=2\n"
        "000fa5ff\n");
  CHECK(bare.str() == "000fa5ff\n");
}
