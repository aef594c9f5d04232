// The Env implementations: SimEnv's timers (time order, timers started by
// callbacks, cancellation, clock steps) and scripted processes, and the real
// AsioEnv's timers, atomic file write and kernel readings.
#include <signal.h>
#include <unistd.h>

#include <catch2/catch.hpp>

#include <algorithm>
#include <boost/asio/io_context.hpp>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>

#include "drivers/os/asio_env.h"
#include "fake_instrument.h"
#include "sim_env.h"

using namespace tarn;

TEST_CASE("sim env: advance runs due timers in time order, new ones included", "[env]") {
  test::SimEnv env(1000, 50);
  std::vector<std::string> order;
  std::vector<std::int64_t> at;
  auto t3 = env.start_timer(300, [&] {
    order.push_back("c");
    at.push_back(env.wall_ms());
  });
  auto t1 = env.start_timer(100, [&] {
    order.push_back("a");
    at.push_back(env.wall_ms());
  });
  os::Timer inner;
  auto t2 = env.start_real_timer(200, [&] {
    order.push_back("b");
    at.push_back(env.wall_ms());
    // Started by a callback: due at 250, before c at 300, within this advance.
    inner = env.start_timer(50, [&] {
      order.push_back("b2");
      at.push_back(env.wall_ms());
    });
  });
  auto late = env.start_timer(1000, [&] { order.push_back("late"); });
  CHECK(env.pending_timers() == 4);
  env.advance(400);
  CHECK(order == std::vector<std::string>{"a", "b", "b2", "c"});
  CHECK(at == std::vector<std::int64_t>{1100, 1200, 1250, 1300});
  CHECK(env.wall_ms() == 1400);
  CHECK(env.steady_ms() == 450);
  CHECK(late.pending());
  CHECK_FALSE(t1.pending());
  CHECK(env.next_timer_in() == std::optional<std::int64_t>(600));
  late.cancel();
  CHECK_FALSE(late.pending());
  env.advance(10000);
  CHECK(order.size() == 4);  // the cancelled timer never ran
  CHECK_FALSE(env.next_timer_in());
}

TEST_CASE("sim env: a dropped handle cancels; a clock step moves wall time only", "[env]") {
  test::SimEnv env(5000, 0);
  int ran = 0;
  {
    auto t = env.start_timer(10, [&] { ++ran; });
  }
  env.advance(100);
  CHECK(ran == 0);
  auto t = env.start_timer(100, [&] { ++ran; });
  env.set_wall_ms(env.wall_ms() - 3600000);  // the wall clock steps back an hour
  env.advance(100);
  CHECK(ran == 1);  // timers run on the steady timeline
  CHECK(env.wall_ms() == 5000 + 200 - 3600000);
  CHECK(env.steady_ms() == 200);
}

TEST_CASE("sim env: scripted processes end as scripted, or by kill", "[env]") {
  test::SimEnv env;
  env.script("/usr/bin/modem-up", {500, 0, 0, false, "up\n", ""});
  env.script("/usr/bin/broken", {0, 0, 0, false, "", "Permission denied"});
  std::string err;
  os::ProcessResult got;
  int calls = 0;
  auto id = env.spawn(
      {"/usr/bin/modem-up"}, {.capture_output = true},
      [&](const os::ProcessResult& r) {
        got = r;
        ++calls;
      },
      err);
  REQUIRE(id > 0);
  env.advance(499);
  CHECK(calls == 0);
  env.advance(1);
  CHECK(calls == 1);
  CHECK(got.exit_code == 0);
  CHECK(got.output == "up\n");
  CHECK(env.spawn({"/usr/bin/broken"}, {}, nullptr, err) == 0);
  CHECK(err == "Permission denied");
  CHECK(env.spawn({"/usr/bin/unknown"}, {}, nullptr, err) == 0);
  CHECK(err == std::strerror(ENOENT));
  id = env.spawn(
      {"/usr/bin/modem-up"}, {},
      [&](const os::ProcessResult& r) {
        got = r;
        ++calls;
      },
      err);
  env.kill(id, SIGTERM);
  CHECK(calls == 1);  // never inside kill()
  env.advance(0);
  CHECK(calls == 2);
  CHECK(got.signal == SIGTERM);
  CHECK(got.output.empty());  // not captured
  env.advance(1000);
  CHECK(calls == 2);  // ended once
}

TEST_CASE("real env: timers run on the io_context, a cancelled one does not", "[env]") {
  boost::asio::io_context io;
  os::AsioEnv env(io, 10.0);
  std::vector<int> ran;
  auto a = env.start_real_timer(1, [&] { ran.push_back(1); });
  auto b = env.start_timer(20, [&] { ran.push_back(2); });  // 2 ms real at speed 10
  auto c = env.start_real_timer(5, [&] { ran.push_back(3); });
  c.cancel();
  CHECK(ran.empty());  // never inside start_timer()
  io.run();
  std::sort(ran.begin(), ran.end());
  CHECK(ran == std::vector<int>{1, 2});
  CHECK(env.real_duration(20).count() == 2);
  CHECK(env.speed() == 10.0);
}

TEST_CASE("real env: atomic write replaces the file whole and leaves no temporary", "[env]") {
  boost::asio::io_context io;
  os::AsioEnv env(io);
  test::TempDir dir;
  const std::string path = dir.path + "/state.json";
  CHECK_FALSE(env.exists(path));
  CHECK(env.write_file_atomic(path, "{\"a\": 1}\n") == "");
  CHECK(env.read_file(path) == std::optional<std::string>("{\"a\": 1}\n"));
  CHECK(env.write_file_atomic(path, "{}") == "");
  CHECK(env.read_file(path) == std::optional<std::string>("{}"));
  // rename(2) replaces the target in one step (POSIX.1-2017, rename()); the
  // temporary file beside it is gone.
  std::size_t files = 0;
  for (auto& e : std::filesystem::directory_iterator(dir.path)) files += e.is_regular_file();
  CHECK(files == 1);
  std::string e = env.write_file_atomic(dir.path + "/no/such/dir/x", "y");
  CHECK(e.find("cannot create a temporary file for " + dir.path + "/no/such/dir/x") == 0);
  CHECK(env.remove_file(path));
  CHECK_FALSE(env.exists(path));
  CHECK_FALSE(env.read_file(path));
}

TEST_CASE("real env: kernel readings are plausible", "[env]") {
  boost::asio::io_context io;
  os::AsioEnv env(io);
  auto up = env.uptime_s();
  REQUIRE(up);
  CHECK(*up > 0);
  auto load = env.load1();
  REQUIRE(load);
  CHECK(*load >= 0);
  auto mem = env.memory();
  REQUIRE(mem);
  CHECK(mem->total_bytes > 0);
  CHECK(mem->free_bytes <= mem->total_bytes);
  auto disk = env.disk_space("/");
  REQUIRE(disk);
  CHECK(disk->free_bytes <= disk->total_bytes);
  CHECK_FALSE(env.disk_space("/no/such/path"));
  CHECK_FALSE(env.cpu_temp_c(""));
  test::TempDir dir;
  {
    std::FILE* f = std::fopen((dir.path + "/temp").c_str(), "w");
    std::fputs("48250\n", f);  // millidegrees, as thermal_zone*/temp holds
    std::fclose(f);
  }
  CHECK(env.cpu_temp_c(dir.path + "/temp") == std::optional<double>(48.25));
}
