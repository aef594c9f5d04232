// Store-level power cut: a child process inserts packets, acknowledges some
// and appends sample batches in a loop and is killed with SIGKILL at random
// moments. After each kill the store is reopened and checked: integrity_check
// is ok, no sequence number was used twice for different content, every
// packet and sample batch whose insert had returned is present, and every
// acknowledgement that had returned is recorded. (SIGKILL leaves the page
// cache intact, so this tests the store's own ordering, not the disk's; the
// daemon-level power-cut test runs the whole daemon the same way.)
#include <catch2/catch.hpp>

#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <filesystem>
#include <map>
#include <random>
#include <set>
#include <sstream>
#include <thread>

#include "daemon/store/station_store.h"
#include "store_test_support.h"

using namespace tarn::store;
using namespace tarn::store::testing;

namespace {

constexpr std::int64_t t0 = 1780272000;

StationStoreOptions child_options() {
  StationStoreOptions o;
  o.outbox.sequence_block = 5;  // many sidecar rewrites, so kills land inside them too
  return o;
}

void say(int fd, const std::string& line) {
  // One write() per line: atomic on a pipe below PIPE_BUF.
  if (::write(fd, line.data(), line.size()) != ssize_t(line.size())) ::_exit(3);
}

[[noreturn]] void child_loop(const std::string& dir, int run, int fd) {
  auto opened = StationStore::open(dir, child_options(), t0);
  if (!opened.ok()) ::_exit(2);
  StationStore& s = *opened.value();
  for (std::int64_t k = 0;; ++k) {
    std::string tag = "run" + std::to_string(run) + "-" + std::to_string(k);
    std::int64_t now = t0 + run * 100000 + k;
    auto r = s.insert_packet(tagged(tag), k % 7 == 0 ? Priority::alert : Priority::normal,
                             PacketKind::window, now, now);
    if (r.where != InsertReceipt::Where::stored) ::_exit(4);
    say(fd,
        "P " + std::to_string(*r.sequence) + " " + tag + "#" + std::to_string(*r.sequence) + "\n");
    if (k % 3 == 1) {
      if (!s.outbox().mark_sent(*r.sequence, now).ok()) ::_exit(5);
      say(fd, "S " + std::to_string(*r.sequence) + "\n");
    }
    std::int64_t t = (run * 100000 + k) * 60;
    if (!s.append_samples(poll_cycle(t), now).stored) ::_exit(6);
    say(fd, "A " + std::to_string(t) + "\n");
  }
}

// Read-write, as the restarted daemon opens it: a read-only connection cannot
// recover the WAL index a killed writer left behind (SQLITE_READONLY_RECOVERY,
// https://www.sqlite.org/wal.html "read-only databases"), which would be a
// failure of the check, not of the store (seen once in CI under load).
std::string integrity(const std::string& path) {
  auto db = SqliteDb::open(path, SqliteDb::Mode::read_write_create);
  if (!db.ok()) return db.error().describe();
  auto r = db->query_text("PRAGMA integrity_check");
  return r.ok() ? r.value() : r.error().describe();
}

}  // namespace

TEST_CASE("kill -9 at random moments: no number reused, nothing acknowledged lost",
          "[store][slow]") {
  TempDir dir;
  const int kills = 50;
  const unsigned seed = 20260601;
  std::mt19937 rng(seed);
  std::uniform_int_distribution<int> delay_us(2000, 150000);

  std::map<std::uint64_t, std::string> content;  // every number ever reported, with its content
  std::set<std::uint64_t> acked;                 // reported marked sent
  std::set<std::int64_t> batches;                // reported appended sample batches
  std::int64_t reused = 0, lost_packets = 0, lost_acks = 0, lost_batches = 0, damaged = 0;
  std::uint64_t deleted_below = 0;  // the outbox file is deleted once, halfway

  for (int run = 0; run < kills; ++run) {
    int fds[2];
    REQUIRE(::pipe(fds) == 0);
    pid_t pid = ::fork();
    REQUIRE(pid >= 0);
    if (pid == 0) {
      ::close(fds[0]);
      child_loop(dir.path(), run, fds[1]);
    }
    ::close(fds[1]);
    // The kill comes at a random moment after the child's first stored packet
    // (its first line), however slowly a loaded machine starts it: every run
    // does some work, so the check below cannot fail for want of CPU.
    std::string lines;
    char buf[4096];
    pollfd first{fds[0], POLLIN, 0};
    REQUIRE(::poll(&first, 1, 60000) == 1);
    if (ssize_t n = ::read(fds[0], buf, sizeof buf); n > 0) lines.append(buf, std::size_t(n));
    std::this_thread::sleep_for(std::chrono::microseconds(delay_us(rng)));
    ::kill(pid, SIGKILL);
    int status = 0;
    ::waitpid(pid, &status, 0);
    // A child that exited by itself hit an error: that is a failure, not a kill.
    REQUIRE((WIFSIGNALED(status) && WTERMSIG(status) == SIGKILL));
    for (ssize_t n; (n = ::read(fds[0], buf, sizeof buf)) > 0;) lines.append(buf, std::size_t(n));
    ::close(fds[0]);
    std::istringstream in(lines);
    std::string kind;
    while (in >> kind) {
      if (kind == "P") {
        std::uint64_t seq;
        std::string c;
        in >> seq >> c;
        auto [it, fresh] = content.emplace(seq, c);
        if (!fresh && it->second != c) ++reused;
      } else if (kind == "S") {
        std::uint64_t seq;
        in >> seq;
        acked.insert(seq);
      } else if (kind == "A") {
        std::int64_t t;
        in >> t;
        batches.insert(t);
      }
    }

    // Reopen (as the restarted daemon would) and check.
    for (const char* f : {"outbox.db", "archive.db"}) {
      if (!std::filesystem::exists(dir.file(f))) continue;  // killed before it was created
      std::string r = integrity(dir.file(f));
      if (r != "ok") {
        ++damaged;
        UNSCOPED_INFO(f << " after kill " << run << ": " << r);
      }
    }
    {
      auto s = StationStore::open(dir.path(), child_options(), t0);
      REQUIRE(s.ok());
      auto all = s.value()->outbox().by_sequence(0, UINT64_MAX >> 1);
      REQUIRE(all.ok());
      std::map<std::uint64_t, const Packet*> present;
      for (auto& p : all.value()) present[p.sequence] = &p;
      for (auto& [seq, c] : content) {
        if (seq < deleted_below) continue;
        auto it = present.find(seq);
        if (it == present.end() || text(it->second->bytes) != c)
          ++lost_packets;
        else if (acked.count(seq) && !it->second->sent_t)
          ++lost_acks;
      }
      std::set<std::int64_t> stored_t;
      REQUIRE(s.value()
                  ->archive()
                  .for_each_sample(0, INT64_MAX, "ch0",
                                   [&](const ArchivedSample& x) {
                                     stored_t.insert(x.t);
                                     return true;
                                   })
                  .ok());
      for (auto t : batches)
        if (!stored_t.count(t)) ++lost_batches;
      CHECK(s.value()->archive().counts()->samples == std::int64_t(stored_t.size()) * 4);
    }
    if (run == kills / 2) {
      // The operator deletes the outbox: numbering must still never go back.
      deleted_below = content.empty() ? 0 : content.rbegin()->first + 1;
      for (const char* suffix : {"", "-wal", "-shm"})
        std::filesystem::remove(dir.file(std::string("outbox.db") + suffix));
    }
  }
  std::printf(
      "store power cut: %d kills (seed %u), %zu packets inserted, %zu acknowledged, "
      "%zu sample batches; reused numbers %lld, lost packets %lld, lost acknowledgements "
      "%lld, lost batches %lld, failed integrity checks %lld\n",
      kills, seed, content.size(), acked.size(), batches.size(), static_cast<long long>(reused),
      static_cast<long long>(lost_packets), static_cast<long long>(lost_acks),
      static_cast<long long>(lost_batches), static_cast<long long>(damaged));
  CHECK(content.size() >= std::size_t(kills));  // every child stored a packet before its kill
  CHECK(reused == 0);
  CHECK(lost_packets == 0);
  CHECK(lost_acks == 0);
  CHECK(lost_batches == 0);
  CHECK(damaged == 0);
}
