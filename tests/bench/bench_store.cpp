// bench_store: what the station store costs on this machine.
//
//  1. durable packet inserts per second (WAL, synchronous=FULL), against a
//     reference measured in the same run: 100 bytes + fdatasync() on a plain
//     file in the same directory, appended (the file grows: the file system
//     journals the size) and overwritten in place (as SQLite reuses its WAL);
//  2. archive samples per second in batched transactions: one poll cycle of
//     8 channels per transaction, and one minute of 8 channels polled every
//     second (480 samples) per transaction;
//  3. bytes written per day for the demo station (4 channels sampled every
//     60 s, 600 s windows, one packet of ~80 bytes per window, acknowledged at
//     once, archive written once per poll cycle), measured over a simulated
//     day with /proc/self/io (write_bytes: bytes this process caused to be
//     sent to the block layer; wchar: bytes passed to write()), and for
//     comparison the same day with the archive written once per window.
//
// Medians of several runs. Usage: bench_store [--dir DIR] [--runs N] [--keep DIR]
// (--keep leaves the simulated demo day's store in DIR for trying the tools).
#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include <spdlog/spdlog.h>

#include "daemon/store/station_store.h"

using namespace tarn::store;
namespace fs = std::filesystem;
using Clock = std::chrono::steady_clock;

namespace {

constexpr std::int64_t t0 = 1780272000;  // 2026-06-01T00:00:00Z

double seconds_since(Clock::time_point start) {
  return std::chrono::duration<double>(Clock::now() - start).count();
}

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.size() % 2 ? v[v.size() / 2] : (v[v.size() / 2 - 1] + v[v.size() / 2]) / 2;
}

struct Io {
  long long write_bytes = 0, wchar = 0;
};

Io read_io() {
  Io io;
  std::ifstream in("/proc/self/io");
  std::string key;
  long long v;
  while (in >> key >> v) {
    if (key == "write_bytes:") io.write_bytes = v;
    if (key == "wchar:") io.wchar = v;
  }
  return io;
}

std::string fresh_dir(const std::string& base, const std::string& name) {
  std::string d = base + "/" + name;
  fs::remove_all(d);
  fs::create_directories(d);
  return d;
}

double reference_fsync_per_s(const std::string& dir, int n, bool append) {
  std::string path = dir + "/reference.bin";
  int fd = ::open(path.c_str(), O_WRONLY | O_CREAT | O_TRUNC | (append ? O_APPEND : 0), 0644);
  if (fd < 0) return 0;
  char buf[100];
  std::memset(buf, 'r', sizeof buf);
  auto start = Clock::now();
  for (int i = 0; i < n; ++i) {
    ssize_t w = append ? ::write(fd, buf, sizeof buf) : ::pwrite(fd, buf, sizeof buf, 0);
    if (w != ssize_t(sizeof buf) || ::fdatasync(fd) != 0) break;
  }
  double s = seconds_since(start);
  ::close(fd);
  fs::remove(path);
  return n / s;
}

std::vector<std::uint8_t> packet_bytes(std::uint64_t seq, std::size_t n) {
  std::vector<std::uint8_t> v(n);
  for (std::size_t i = 0; i < n; ++i) v[i] = std::uint8_t(seq * 31 + i);
  return v;
}

double packet_inserts_per_s(const std::string& dir, int n) {
  StationStoreOptions o;
  auto s = StationStore::open(dir, o, t0);
  if (!s.ok()) return 0;
  auto start = Clock::now();
  for (int i = 0; i < n; ++i)
    s.value()->outbox().insert([](std::uint64_t q) { return packet_bytes(q, 80); },
                               Priority::normal, PacketKind::window, t0 + i);
  return n / seconds_since(start);
}

std::vector<ArchivedSample> cycle(std::int64_t t, int channels) {
  std::vector<ArchivedSample> v;
  for (int c = 0; c < channels; ++c)
    v.push_back({"ch" + std::to_string(c), t, 2.0 + 0.01 * double((t + c) % 500),
                 tarn::codec::Flag::pass, 0});
  return v;
}

double samples_per_s(const std::string& dir, int batches, int polls_per_batch, int channels) {
  auto s = StationStore::open(dir, StationStoreOptions{}, t0);
  if (!s.ok()) return 0;
  auto start = Clock::now();
  std::int64_t t = t0;
  for (int b = 0; b < batches; ++b) {
    std::vector<ArchivedSample> batch;
    for (int p = 0; p < polls_per_batch; ++p, ++t) {
      auto c = cycle(t, channels);
      batch.insert(batch.end(), c.begin(), c.end());
    }
    s.value()->archive().append(std::move(batch));
  }
  return double(batches) * polls_per_batch * channels / seconds_since(start);
}

struct Day {
  Io io;
  std::int64_t outbox_file = 0, archive_file = 0;
  double seconds = 0;
};

// One demo-station day: archive batch every `archive_every` poll cycles.
Day demo_day(const std::string& dir, int archive_every) {
  Day d;
  auto s = StationStore::open(dir, StationStoreOptions{}, t0);
  if (!s.ok()) return d;
  StationStore& st = *s.value();
  Io before = read_io();
  auto start = Clock::now();
  std::vector<ArchivedSample> pending;
  for (int i = 0; i < 1440; ++i) {
    std::int64_t now = t0 + 60 * i;
    auto c = cycle(now, 4);
    pending.insert(pending.end(), c.begin(), c.end());
    if ((i + 1) % archive_every == 0) {
      st.append_samples(std::move(pending), now);
      pending.clear();
    }
    if ((i + 1) % 10 == 0) {  // a 600 s window closed
      auto r = st.insert_packet([](std::uint64_t q) { return packet_bytes(q, 80); },
                                Priority::normal, PacketKind::window, now, now);
      if (r.sequence) st.outbox().mark_sent(*r.sequence, now + 5);
      st.maintain(now);
    }
  }
  d.seconds = seconds_since(start);
  Io after = read_io();
  d.io.write_bytes = after.write_bytes - before.write_bytes;
  d.io.wchar = after.wchar - before.wchar;
  d.outbox_file = st.outbox().file_bytes();
  d.archive_file = st.archive().file_bytes();
  return d;
}

}  // namespace

int main(int argc, char** argv) {
  std::string base = "/tmp/tarn-bench-store";
  std::string keep;
  int runs = 5;
  for (int i = 1; i + 1 < argc; i += 2) {
    std::string a = argv[i];
    if (a == "--dir")
      base = argv[i + 1];
    else if (a == "--runs")
      runs = std::max(1, std::atoi(argv[i + 1]));
    else if (a == "--keep")
      keep = argv[i + 1];
  }
  fs::create_directories(base);
  spdlog::set_level(spdlog::level::warn);  // the store logs its opens at info
  std::printf("bench_store: %d runs per figure, files in %s\n\n", runs, base.c_str());

  std::vector<double> ref, ref_in_place, ins, s8, s480;
  for (int r = 0; r < runs; ++r) {
    ref.push_back(reference_fsync_per_s(fresh_dir(base, "ref"), 200, true));
    ref_in_place.push_back(reference_fsync_per_s(fresh_dir(base, "ref"), 200, false));
    ins.push_back(packet_inserts_per_s(fresh_dir(base, "ins"), 200));
    s8.push_back(samples_per_s(fresh_dir(base, "s8"), 200, 1, 8));
    s480.push_back(samples_per_s(fresh_dir(base, "s480"), 20, 60, 8));
  }
  double mref = median(ref), mins = median(ins);
  std::printf("%-58s %12.0f /s\n", "reference: 100-byte append + fdatasync (file grows)", mref);
  std::printf("%-58s %12.0f /s\n", "reference: 100-byte overwrite + fdatasync (in place)",
              median(ref_in_place));
  std::printf("%-58s %12.0f /s  (%.2f x reference)\n",
              "durable packet inserts (80 B, WAL, synchronous=FULL)", mins, mins / mref);
  std::printf("%-58s %12.0f samples/s (%.0f transactions/s)\n",
              "archive, batch = one poll cycle of 8 channels", median(s8), median(s8) / 8);
  std::printf("%-58s %12.0f samples/s (%.1f transactions/s)\n",
              "archive, batch = one minute of 8 channels at 1 s", median(s480), median(s480) / 480);

  std::vector<double> wb_cycle, wc_cycle, wb_window, wc_window;
  Day last{};
  for (int r = 0; r < std::min(runs, 3); ++r) {
    Day a = demo_day(fresh_dir(base, "day-cycle"), 1);
    Day b = demo_day(fresh_dir(base, "day-window"), 10);
    wb_cycle.push_back(double(a.io.write_bytes));
    wc_cycle.push_back(double(a.io.wchar));
    wb_window.push_back(double(b.io.write_bytes));
    wc_window.push_back(double(b.io.wchar));
    last = a;
  }
  const double mib = 1 << 20;
  std::printf(
      "\ndemo station day (4 channels / 60 s, 600 s windows, 144 packets of 80 B, each "
      "acknowledged):\n");
  std::printf("  payload: 5760 samples, 11520 packet bytes\n");
  std::printf("  %-52s write_bytes %7.2f MiB/day, wchar %7.2f MiB/day\n",
              "archive once per poll cycle (60 s):", median(wb_cycle) / mib,
              median(wc_cycle) / mib);
  std::printf("  %-52s write_bytes %7.2f MiB/day, wchar %7.2f MiB/day\n",
              "archive once per window (600 s), for comparison:", median(wb_window) / mib,
              median(wc_window) / mib);
  std::printf(
      "  files after the day: outbox %.1f KiB, archive %.1f KiB (incl. -wal, -shm); "
      "one simulated day took %.1f s\n",
      double(last.outbox_file) / 1024, double(last.archive_file) / 1024, last.seconds);
  std::printf("  per year at one batch per poll cycle: %.1f GiB written (write_bytes)\n",
              median(wb_cycle) * 365 / (1024.0 * 1024 * 1024));
  if (!keep.empty()) {
    fs::remove_all(keep);
    fs::create_directories(keep);
    demo_day(keep, 1);
    std::printf("\nkept a demo day's store in %s\n", keep.c_str());
  }
  fs::remove_all(base);
  return 0;
}
