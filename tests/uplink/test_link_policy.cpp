// Link policy: config reading, planned connection times, open/close
// decisions (pure: times in, decisions out), daily usage, and the command
// runner: with real programs (/bin/true, /bin/false, sh -c) on the real Env,
// and its timeouts (SIGTERM, then SIGKILL) on simulated time with scripted
// programs, so no check depends on how busy the machine is.
#include <signal.h>

#include <cerrno>
#include <cstring>

#include <catch2/catch.hpp>

#include <boost/asio/io_context.hpp>

#include "daemon/uplink/command_runner.h"
#include "daemon/uplink/link_policy.h"
#include "drivers/os/asio_env.h"
#include "sim_env.h"

using namespace tarn;
using uplink::LinkAction;

namespace {

uplink::LinkPolicyConfig policy(const config::Json& j, config::Problems& p) {
  config::StationConfig cfg;
  cfg.uplink.policy = j;
  return uplink::read_link_policy(cfg, p);
}

// 2024-03-01T00:00:00Z = 1709251200 (checked with /usr/bin/python3:
// calendar.timegm((2024,3,1,0,0,0))).
constexpr std::int64_t kMar1 = 1709251200;

}  // namespace

TEST_CASE("link policy config is validated", "[link_policy]") {
  config::Problems p;
  auto o = policy({{"mode", "scheduled"},
                   {"interval_min", 60},
                   {"times_utc", {"06:30", "18:00", "06:30"}},
                   {"link_up", {{"argv", {"/bin/true"}}, {"timeout_s", 5}}},
                   {"daily_budget_bytes", 100000}},
                  p);
  CHECK(p.empty());
  CHECK(o.scheduled);
  CHECK(o.times_min == std::vector<int>{390, 1080});
  REQUIRE(o.link_up);
  CHECK(o.link_up->timeout_s == 5);

  auto first = [](const config::Json& j) {
    config::Problems q;
    policy(j, q);
    return q.empty() ? std::string() : q.list().front().where + ": " + q.list().front().message;
  };
  CHECK(first({{"mode", "sometimes"}}).find("/uplink/policy/mode") == 0);
  CHECK(first({{"mode", "scheduled"}}).find("without interval_min") != std::string::npos);
  CHECK(first({{"mode", "scheduled"}, {"times_utc", {"24:00"}}}).find("/times_utc/0") !=
        std::string::npos);
  CHECK(first({{"interval_min", 30}}).find("mode is \"always\"") != std::string::npos);
  CHECK(first({{"link_up", {{"argv", {"modem-on"}}}}}).find("/link_up/argv/0") !=
        std::string::npos);
  CHECK(first({{"link_up", {{"argv", config::Json::array()}}}}).find("/link_up/argv") !=
        std::string::npos);
  CHECK(first(nullptr).empty());
}

TEST_CASE("next planned connection", "[link_policy]") {
  uplink::LinkPolicyConfig p;
  CHECK_FALSE(uplink::next_planned(p, kMar1));  // always: none
  p.scheduled = true;
  p.interval_min = 180;
  CHECK(*uplink::next_planned(p, kMar1) == kMar1);  // aligned to UTC multiples
  CHECK(*uplink::next_planned(p, kMar1 + 1) == kMar1 + 3 * 3600);
  p.times_min = {90};  // 01:30
  CHECK(*uplink::next_planned(p, kMar1 + 1) == kMar1 + 5400);
  p.interval_min = 0;
  p.times_min = {60, 1380};  // 01:00 and 23:00
  CHECK(*uplink::next_planned(p, kMar1 + 23 * 3600 + 1) == kMar1 + 86400 + 3600);  // next day
}

TEST_CASE("scheduled mode opens on plan and on alerts, closes when drained", "[link_policy]") {
  uplink::LinkPolicyConfig p;
  p.scheduled = true;
  p.interval_min = 60;
  p.linger_s = 20;
  p.max_connected_s = 600;
  uplink::LinkSchedule s(p, kMar1 + 10);
  CHECK(*s.next_due() == kMar1 + 3600);
  uplink::LinkView v;
  v.now = kMar1 + 100;
  v.unsent = 5;
  CHECK(s.decide(v).action == LinkAction::none);  // backlog waits for the plan
  v.unsent_alerts = 1;
  auto d = s.decide(v);
  CHECK(d.action == LinkAction::open);  // an alert opens at once
  CHECK(d.reason == "alert waiting");
  v.unsent_alerts = 0;
  v.now = kMar1 + 3600;
  d = s.decide(v);
  CHECK(d.action == LinkAction::open);
  CHECK(*s.next_due() == kMar1 + 7200);
  v.open = true;
  v.up = true;
  v.opened_t = kMar1 + 3600;
  v.now += 5;
  CHECK(s.decide(v).action == LinkAction::none);  // still sending
  v.drained_t = v.now;
  v.now += 19;
  CHECK(s.decide(v).action == LinkAction::none);  // lingering for commands
  v.now += 1;
  CHECK(s.decide(v).action == LinkAction::close);
  // A backlog that never drains is cut at max_connected_s, unless alerts wait.
  v.drained_t = 0;
  v.now = v.opened_t + 600;
  v.unsent_alerts = 2;
  CHECK(s.decide(v).action == LinkAction::none);
  v.unsent_alerts = 0;
  CHECK(s.decide(v).reason == "max_connected_s reached");
}

TEST_CASE("budget used: the planned connection is skipped, alerts still open", "[link_policy]") {
  uplink::LinkPolicyConfig p;
  p.scheduled = true;
  p.interval_min = 60;
  uplink::LinkSchedule s(p, kMar1);
  uplink::LinkView v;
  v.now = kMar1;
  v.budget_left = false;
  auto d = s.decide(v);
  CHECK(d.action == LinkAction::none);
  CHECK(d.reason.find("budget") != std::string::npos);
  CHECK(*s.next_due() == kMar1 + 3600);
  v.unsent_alerts = 1;
  CHECK(s.decide(v).action == LinkAction::open);
}

TEST_CASE("always mode opens and never closes", "[link_policy]") {
  uplink::LinkSchedule s({}, kMar1);
  uplink::LinkView v;
  v.now = kMar1;
  CHECK(s.decide(v).action == LinkAction::open);
  v.open = v.up = true;
  v.drained_t = kMar1;
  v.now = kMar1 + 86400;
  CHECK(s.decide(v).action == LinkAction::none);
}

TEST_CASE("daily usage rolls over at 00:00 UTC and survives a restart", "[link_policy]") {
  uplink::DailyUsage u;
  u.add(kMar1 + 100, 500);
  u.add(kMar1 + 86399, 250);
  CHECK(u.bytes == 750);
  auto saved = u.serialize();
  CHECK(uplink::DailyUsage::parse(saved, kMar1 + 50000).bytes == 750);  // same day
  CHECK(uplink::DailyUsage::parse(saved, kMar1 + 86400).bytes == 0);    // next day
  CHECK(uplink::DailyUsage::parse("junk", kMar1).bytes == 0);
  u.add(kMar1 + 86400, 10);
  CHECK(u.bytes == 10);
}

namespace {

uplink::CommandOutcome run_one(std::vector<std::string> argv, int timeout_s) {
  boost::asio::io_context io;
  os::AsioEnv env(io);
  uplink::CommandRunner r(env);
  uplink::CommandOutcome got;
  bool called = false;
  r.run({std::move(argv), timeout_s}, "test", [&](const uplink::CommandOutcome& o) {
    got = o;
    called = true;
  });
  io.run();
  REQUIRE(called);
  CHECK_FALSE(r.running());
  return got;
}

// The same on simulated time: runs the Env's timers until the runner is done.
uplink::CommandOutcome run_sim(test::SimEnv& env, std::vector<std::string> argv, int timeout_s) {
  uplink::CommandRunner r(env);
  uplink::CommandOutcome got;
  bool called = false;
  r.run({std::move(argv), timeout_s}, "test", [&](const uplink::CommandOutcome& o) {
    got = o;
    called = true;
  });
  while (!called && env.run_next()) {
  }
  REQUIRE(called);
  CHECK_FALSE(r.running());
  return got;
}

}  // namespace

TEST_CASE("command runner: exit status and spawn failure of real programs", "[command_runner]") {
  auto t = run_one({"/bin/true"}, 5);
  CHECK(t.ok());
  CHECK(t.exit_code == 0);
  auto f = run_one({"/bin/false"}, 5);
  CHECK_FALSE(f.ok());
  CHECK(f.exit_code == 1);
  CHECK(f.describe().find("exit 1") == 0);
  // Arguments reach the program as given, no shell: "exit 3" is one argument to sh -c.
  auto a = run_one({"/bin/sh", "-c", "exit 3"}, 5);
  CHECK(a.exit_code == 3);
  auto missing = run_one({"/nonexistent/modem-on"}, 5);
  CHECK_FALSE(missing.started);
  CHECK(missing.describe().find("not started") == 0);
  CHECK(missing.describe().find("/nonexistent/modem-on: No such file or directory") !=
        std::string::npos);
  // A program killed by a signal (its own): the signal is reported, not an exit code.
  auto killed = run_one({"/bin/sh", "-c", "kill -TERM $$"}, 5);
  CHECK(killed.signal == SIGTERM);
  CHECK_FALSE(killed.ok());
}

TEST_CASE("command runner: timeout with kill, on simulated time", "[command_runner]") {
  test::SimEnv env;
  env.script("/bin/sleep", {30000, 0, 0, false, "", ""});
  env.script("/bin/stubborn", {30000, 0, 0, true, "", ""});
  env.script("/bin/quick", {250, 4, 0, false, "", ""});
  // A program that ends before its timeout: its exit code and duration, no kill.
  auto q = run_sim(env, {"/bin/quick"}, 1);
  CHECK(q.exit_code == 4);
  CHECK_FALSE(q.timed_out);
  CHECK(q.real_ms == 250);
  CHECK(env.kills.empty());
  CHECK(env.pending_timers() == 0);  // the timeout timer was cancelled
  // SIGTERM at the timeout ends it.
  auto slow = run_sim(env, {"/bin/sleep", "30"}, 1);
  CHECK(slow.timed_out);
  CHECK(slow.signal == SIGTERM);
  CHECK(slow.real_ms >= 1000);
  CHECK(slow.real_ms < 5000);
  CHECK(slow.real_ms == 1000);
  CHECK(slow.describe() == "timed out, killed after 1000 ms");
  REQUIRE(env.kills.size() == 1);
  CHECK(env.kills[0].second == SIGTERM);
  // A program that ignores SIGTERM is killed 2 s later.
  env.kills.clear();
  auto stubborn = run_sim(env, {"/bin/stubborn"}, 1);
  CHECK(stubborn.timed_out);
  CHECK(stubborn.signal == SIGKILL);
  CHECK(stubborn.real_ms >= 3000);
  CHECK(stubborn.real_ms == 3000);
  REQUIRE(env.kills.size() == 2);
  CHECK(env.kills[0].second == SIGTERM);
  CHECK(env.kills[1].second == SIGKILL);
  CHECK(env.spawned().size() == 3);
  CHECK(env.spawned()[1].argv == std::vector<std::string>{"/bin/sleep", "30"});
}

TEST_CASE("real env: a spawned program's output is captured when asked", "[env]") {
  boost::asio::io_context io;
  os::AsioEnv env(io);
  std::string err;
  os::ProcessResult got;
  bool done = false;
  os::ProcessId id = env.spawn(
      {"/bin/sh", "-c", "echo hello; echo lake; exit 2"}, {.capture_output = true},
      [&](const os::ProcessResult& r) {
        got = r;
        done = true;
      },
      err);
  REQUIRE(id > 0);
  CHECK(err.empty());
  io.run();
  REQUIRE(done);
  CHECK(got.exit_code == 2);
  CHECK(got.output == "hello\nlake\n");
  CHECK(env.spawn({}, {}, nullptr, err) == 0);
  CHECK(err == std::strerror(EINVAL));
  // kill() reaches the process: a long sleep ends by the signal sent.
  done = false;
  id = env.spawn(
      {"/bin/sleep", "30"}, {},
      [&](const os::ProcessResult& r) {
        got = r;
        done = true;
      },
      err);
  REQUIRE(id > 0);
  env.kill(id, SIGTERM);
  io.restart();
  io.run();
  REQUIRE(done);
  CHECK(got.signal == SIGTERM);
  CHECK(got.exit_code == -1);
}
