// Start-up checks: damaged files are moved aside and a new one started; the
// schema migrates forward and refuses files from a newer tarn.
#include <catch2/catch.hpp>

#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <filesystem>
#include <fstream>

#include "daemon/store/station_store.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;
namespace fs = std::filesystem;

namespace {
constexpr std::int64_t t0 = 1780272000;  // 20260601T000000Z

std::uint64_t fill(const std::string& dir, int packets) {
  StationStoreOptions o;
  auto s = StationStore::open(dir, o, t0);
  REQUIRE(s.ok());
  std::uint64_t last = 0;
  for (int i = 0; i < packets; ++i) {
    auto r = s.value()->insert_packet(
        [](std::uint64_t seq) { return std::vector<std::uint8_t>(300, std::uint8_t(seq)); },
        Priority::normal, PacketKind::window, t0 + i, t0 + i);
    REQUIRE(r.where == InsertReceipt::Where::stored);
    last = *r.sequence;
    REQUIRE(s.value()->append_samples(poll_cycle(t0 + 60 * i), t0 + 60 * i).stored);
  }
  return last;  // closing checkpoints the WAL into the file
}

std::vector<std::string> aside(const std::string& dir, const std::string& name) {
  std::vector<std::string> out;
  for (auto& e : fs::directory_iterator(dir)) {
    auto f = e.path().filename().string();
    if (f.rfind(name + ".damaged-", 0) == 0) out.push_back(f);
  }
  std::sort(out.begin(), out.end());
  return out;
}

void overwrite(const std::string& path, std::size_t offset, std::size_t n, char byte) {
  std::fstream f(path, std::ios::in | std::ios::out | std::ios::binary);
  REQUIRE(f);
  f.seekp(std::streamoff(offset));
  std::string junk(n, byte);
  f.write(junk.data(), std::streamsize(n));
}

// Opens the store again and checks a damaged outbox was replaced and numbering goes on.
void expect_outbox_replaced(const std::string& dir, std::uint64_t last) {
  auto s = StationStore::open(dir, StationStoreOptions{}, t0 + 86400);
  REQUIRE(s.ok());
  auto& st = *s.value();
  CHECK(st.outbox().open_report().created);
  CHECK_FALSE(st.outbox().open_report().moved_aside_to.empty());
  INFO(st.outbox().open_report().damage);
  auto moved = aside(dir, "outbox.db");
  REQUIRE(moved.size() == 1);
  CHECK(moved[0] == "outbox.db.damaged-20260602T000000Z");
  CHECK(st.outbox().counts()->unsent == 0);
  CHECK(st.stats().counters[counter::damaged_files_moved] == 1);
  CHECK(format_stats(st.stats()).find("damaged file moved aside at start") != std::string::npos);
  auto r = st.insert_packet(tagged("new"), Priority::normal, PacketKind::window, t0, t0);
  REQUIRE(r.where == InsertReceipt::Where::stored);
  CHECK(*r.sequence > last);  // the sidecar and the archive outlive the damaged file
  // The archive was not touched.
  CHECK(st.archive().counts()->samples > 0);
  CHECK(st.archive().open_report().moved_aside_to.empty());
}
}  // namespace

TEST_CASE("a truncated outbox is moved aside and a new one started", "[store]") {
  TempDir dir;
  auto last = fill(dir.path(), 200);
  auto path = dir.file("outbox.db");
  REQUIRE_FALSE(fs::exists(path + "-wal"));
  auto size = fs::file_size(path);
  REQUIRE(size > 16 * 4096);
  fs::resize_file(path, size / 2);
  expect_outbox_replaced(dir.path(), last);
}

TEST_CASE("an overwritten outbox (not a database) is moved aside", "[store]") {
  TempDir dir;
  auto last = fill(dir.path(), 50);
  overwrite(dir.file("outbox.db"), 0, 4096, '\xab');
  expect_outbox_replaced(dir.path(), last);
}

TEST_CASE("an outbox that fails quick_check is moved aside", "[store]") {
  TempDir dir;
  auto last = fill(dir.path(), 200);
  // Keep the header page, scribble over pages in the middle of the b-tree.
  overwrite(dir.file("outbox.db"), 4096 * 3, 4096 * 2, '\x5a');
  expect_outbox_replaced(dir.path(), last);
}

TEST_CASE("a damaged archive is moved aside with its WAL; the outbox is kept", "[store]") {
  TempDir dir;
  fill(dir.path(), 20);
  overwrite(dir.file("archive.db"), 0, 100, '\0');
  std::ofstream(dir.file("archive.db-wal")) << "stale";
  auto s = StationStore::open(dir.path(), StationStoreOptions{}, t0);
  REQUIRE(s.ok());
  auto moved = aside(dir.path(), "archive.db");
  CHECK(moved.size() >= 1);  // the file (SQLite itself may have discarded the invalid WAL)
  // The stale WAL is not beside the new file any more.
  if (fs::exists(dir.file("archive.db-wal"))) {
    std::ifstream in(dir.file("archive.db-wal"));
    std::string head(5, ' ');
    in.read(head.data(), 5);
    CHECK(head != "stale");
  }
  CHECK(s.value()->outbox().counts()->unsent == 20);
  CHECK(s.value()->archive().counts()->samples == 0);
  CHECK(s.value()->archive().counters()[counter::damaged_files_moved] == 1);
}

TEST_CASE("two damaged files in the same second get distinct names", "[store]") {
  TempDir dir;
  for (int i = 0; i < 2; ++i) {
    std::ofstream(dir.file("outbox.db"), std::ios::trunc) << std::string(5000, 'z');
    auto s = StationStore::open(dir.path(), StationStoreOptions{}, t0);
    REQUIRE(s.ok());
  }
  auto moved = aside(dir.path(), "outbox.db");
  REQUIRE(moved.size() == 2);
  CHECK(moved[0] == "outbox.db.damaged-20260601T000000Z");
  CHECK(moved[1] == "outbox.db.damaged-20260601T000000Z.1");
}

TEST_CASE("schema migrates forward from version 1, keeping the data", "[store]") {
  TempDir dir;
  {
    StoreFileOptions v1;
    v1.stop_at_version = 1;
    OpenReport report;
    auto ob = open_store_file(dir.file("outbox.db"), outbox_schema(), v1, t0, report);
    REQUIRE(ob.ok());
    REQUIRE(ob->query_int("PRAGMA user_version").value() == 1);
    REQUIRE(ob->exec("INSERT INTO packets(seq, priority, kind, created_t, size, bytes) "
                     "VALUES(41, 1, 1, 1780272000, 3, x'010203');"
                     "INSERT INTO meta VALUES('highest_sequence', 41)")
                .ok());
    auto ar = open_store_file(dir.file("archive.db"), archive_schema(), v1, t0, report);
    REQUIRE(ar.ok());
    REQUIRE(ar->exec("INSERT INTO channels(id, name) VALUES(1, 'chl_a');"
                     "INSERT INTO samples VALUES(1780272000, 1, 2.5, 1, 0)")
                .ok());
  }
  auto s = StationStore::open(dir.path(), StationStoreOptions{}, t0);
  REQUIRE(s.ok());
  auto& st = *s.value();
  CHECK(st.outbox().open_report().migrated_from == 1);
  CHECK(st.archive().open_report().migrated_from == 1);
  CHECK(st.outbox().database().query_int("PRAGMA user_version").value() ==
        outbox_schema().current());
  auto p = st.outbox().by_sequence(41, 41);
  REQUIRE(p.ok());
  REQUIRE(p->size() == 1);
  CHECK(p->front().bytes == std::vector<std::uint8_t>{1, 2, 3});
  CHECK_FALSE(p->front().last_attempt_t);  // the column version 2 added
  REQUIRE(st.outbox().record_attempt(41, t0 + 5, "timeout").ok());
  auto r = st.insert_packet(tagged("v2"), Priority::normal, PacketKind::window, t0, t0);
  CHECK(*r.sequence == 42);
  auto since = st.archive().samples_since(0);
  REQUIRE(since.ok());
  REQUIRE(since->size() == 1);
  CHECK(since->front().channel == "chl_a");
  CHECK(since->front().value == 2.5);
}

TEST_CASE("a file from a newer schema is refused, not moved aside", "[store]") {
  TempDir dir;
  fill(dir.path(), 3);
  {
    auto db = SqliteDb::open(dir.file("outbox.db"), SqliteDb::Mode::read_write_create);
    REQUIRE(db.ok());
    REQUIRE(db->exec("PRAGMA user_version=99").ok());
  }
  auto s = StationStore::open(dir.path(), StationStoreOptions{}, t0);
  REQUIRE_FALSE(s.ok());
  CHECK(s.error().code() == StoreErrc::invalid);
  CHECK(s.error().message().find("newer than this tarn knows") != std::string::npos);
  CHECK(aside(dir.path(), "outbox.db").empty());
}
