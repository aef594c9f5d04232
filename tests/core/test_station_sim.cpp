// The whole Station on simulated time (tests/support/sim_env.h): the demo
// station's config (demo/station.json) with its serial ports absent (the
// instruments are offline, so every slot still yields a sample, flagged) and
// the "spool" uplink into a temporary directory (no broker). Time moves only
// when the test moves it, so these tests cannot depend on machine load.
//
// They are the unit-level twins of tests/integration/test_clock_step.py and
// test_maintenance_reload.py, which stay as end-to-end checks on real time.
// Packets are read back from the spool and decoded with the station's codec;
// flags are IOOS QARTOD values (QARTOD manuals, flag table: 4 = fail,
// 9 = missing).
#include <spdlog/sinks/ringbuffer_sink.h>
#include <boost/asio/io_context.hpp>
#include <catch2/catch.hpp>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "codec/decoder.h"
#include "config/downlink_command.h"
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"
#include "daemon/core/station.h"
#include "drivers/os/logging.h"
#include "sim_env.h"

namespace fs = std::filesystem;
using namespace tarn;
using Json = nlohmann::json;

namespace {

// 2026-06-15T12:00:00Z: a summer noon (the QC's solar tests see daylight).
constexpr std::int64_t kStartWall = 1781524800000;
constexpr std::int64_t kPeriodS = 10, kWindowS = 60, kStepS = 360;

struct Scratch {
  Scratch() {
    char tmpl[] = "/tmp/tarn-station-sim-XXXXXX";
    path = ::mkdtemp(tmpl);
  }
  ~Scratch() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
  std::string path;
};

// The demo config for a scratch directory, with the spool uplink; `edit`
// changes its JSON before it is written and checked.
Json demo_config(const std::string& dir) {
  std::ifstream in(std::string(TARN_SOURCE_DIR) + "/demo/station.json");
  std::stringstream s;
  s << in.rdbuf();
  std::string text = s.str();
  for (std::size_t p; (p = text.find("@DIR@")) != std::string::npos;) text.replace(p, 5, dir);
  for (std::size_t p; (p = text.find("@MQTT_PORT@")) != std::string::npos;)
    text.replace(p, 11, "1883");
  Json j = Json::parse(text, nullptr, true, /*ignore_comments=*/true);
  j["uplink"] = {{"backend", "spool"}, {"options", {{"dir", dir + "/spool"}}}};
  // Ten-second polls and one-minute windows: the same code paths in a
  // tenth of the simulated time.
  j["sampling"] = {{"period_s", kPeriodS}, {"window_s", kWindowS}};
  for (auto& in : j["instruments"])
    for (auto& ch : in["channels"])
      if (ch.contains("qc"))
        for (auto& q : ch["qc"])
          if (q["kind"] == "timing") q["late_s"] = kPeriodS / 2;  // at most half a period
  return j;
}

config::StationConfig checked(const std::string& file, const Json& j) {
  std::ofstream(file) << j.dump(2);
  auto res = daemon::load_and_check(file);
  INFO(res.problems.render(file));
  REQUIRE(res.problems.empty());
  REQUIRE(res.config);
  return *res.config;
}

// A log line sink on the station's loggers.
std::shared_ptr<spdlog::sinks::ringbuffer_sink_mt> capture_logs() {
  auto sink = std::make_shared<spdlog::sinks::ringbuffer_sink_mt>(4096);
  for (const char* name : {"station", "uplink", "clock", "store"})
    os::logger(name)->sinks().push_back(sink);
  return sink;
}
void release_logs(const std::shared_ptr<spdlog::sinks::ringbuffer_sink_mt>& sink) {
  for (const char* name : {"station", "uplink", "clock", "store"}) {
    auto& v = os::logger(name)->sinks();
    std::erase(v, std::shared_ptr<spdlog::sinks::sink>(sink));
  }
}
std::size_t count_lines(const std::shared_ptr<spdlog::sinks::ringbuffer_sink_mt>& sink,
                        const std::string& part) {
  std::size_t n = 0;
  for (auto& l : sink->last_formatted())
    if (l.find(part) != std::string::npos) n++;
  return n;
}

struct Rig {
  explicit Rig(const std::function<void(Json&)>& edit = nullptr) {
    for (const char* d : {"/state", "/run", "/spool", "/dev"}) fs::create_directories(dir.path + d);
    cfg_json = demo_config(dir.path);
    if (edit) edit(cfg_json);
    config::StationConfig cfg = checked(dir.path + "/station.json", cfg_json);
    auto m = daemon::manifest_of_config(cfg);
    REQUIRE(m.ok());
    auto cm = codec::check_manifest(*m);
    REQUIRE(cm.ok());
    manifest = *cm;
    station = std::make_unique<daemon::Station>(io, env, std::move(cfg));
    station->start();
    pump();
  }
  ~Rig() {
    station.reset();
    pump();
  }

  // Runs what the timers made ready on the event loop (the bus schedulers'
  // coroutines, the spool's acknowledgements).
  void pump() {
    io.restart();
    io.poll();
  }
  // Moves simulated time by `ms`, one due timer at a time, running the event
  // loop after each.
  void run_for(std::int64_t ms) {
    const std::int64_t end = env.steady_ms() + ms;
    while (auto next = env.next_timer_in()) {
      if (env.steady_ms() + *next > end) break;
      env.run_next();
      pump();
    }
    env.advance(end - env.steady_ms());
    pump();
  }
  std::int64_t now_s() const { return env.wall_ms() / 1000; }

  // The windows in the spool: (window start, manifest channel) -> the packet
  // sequences that carried it; per channel, starts in sequence order.
  struct Spooled {
    std::map<std::pair<std::int64_t, std::size_t>, std::set<std::uint64_t>> carriers;
    std::map<std::size_t, std::vector<std::int64_t>> starts_by_channel;
    std::size_t packets = 0;
  };
  Spooled spooled() const {
    std::map<std::uint64_t, codec::DecodedPacket> by_seq;
    for (auto& e : fs::directory_iterator(dir.path + "/spool")) {
      std::string name = e.path().filename().string();
      if (name.empty() || name[0] == '.' || e.path().extension() != ".pkt") continue;
      std::ifstream in(e.path(), std::ios::binary);
      std::vector<std::uint8_t> bytes((std::istreambuf_iterator<char>(in)),
                                      std::istreambuf_iterator<char>());
      auto d = codec::decode_packet(bytes, &manifest);
      REQUIRE(d.ok());
      by_seq[d->header.sequence] = *d;
    }
    Spooled s;
    s.packets = by_seq.size();
    for (auto& [seq, d] : by_seq)
      for (auto& w : d.windows)
        for (std::size_t i = 0; i < w.channels.size(); ++i) {
          std::size_t ch = w.first_channel + i;
          s.carriers[{w.start, ch}].insert(seq);
          s.starts_by_channel[ch].push_back(w.start);
        }
    return s;
  }

  Scratch dir;
  Json cfg_json;
  boost::asio::io_context io;
  test::SimEnv env{kStartWall, 5000000};
  codec::CheckedManifest manifest;
  std::unique_ptr<daemon::Station> station;
};

// No window travels twice, and per channel the window starts rise strictly
// in sequence order (a window for a period already covered would overlap).
void check_no_window_twice(const Rig::Spooled& s) {
  for (auto& [key, seqs] : s.carriers) {
    INFO("window " << key.first << " channel " << key.second);
    CHECK(seqs.size() == 1);
  }
  for (auto& [ch, starts] : s.starts_by_channel)
    for (std::size_t i = 1; i < starts.size(); ++i) {
      INFO("channel " << ch << " windows " << starts[i - 1] << " then " << starts[i]);
      CHECK(starts[i] > starts[i - 1]);
    }
}

std::size_t windows_from(const Rig::Spooled& s, std::int64_t from) {
  std::set<std::int64_t> starts;
  for (auto& [key, seqs] : s.carriers)
    if (key.first >= from) starts.insert(key.first);
  return starts.size();
}

}  // namespace

TEST_CASE("station on simulated time: a backward clock step neither reopens nor resends a window",
          "[station][clock]") {
  auto logs = capture_logs();
  {
    Rig rig;
    const std::int64_t window_s = kWindowS;
    rig.run_for(150 * 1000);  // two windows closed and sent
    CHECK(rig.station->status()["clock"]["steps"] == 0);
    auto before = rig.spooled();
    REQUIRE(windows_from(before, 0) >= 2);
    const std::int64_t t_step = rig.now_s();
    const std::int64_t open_start = t_step - t_step % window_s;

    rig.env.set_wall_ms(rig.env.wall_ms() - kStepS * 1000);  // back six windows
    // The repeated span: its samples are older than the last ones, so nothing
    // new closes; the open window stays open.
    rig.run_for(300 * 1000);
    Json st = rig.station->status();
    CHECK(st["clock"]["steps"] == 1);
    CHECK(st["clock"]["last_step"] != "");
    CHECK(count_lines(logs, "clock stepped backward by 360 s") == 1);
    auto during = rig.spooled();
    CHECK(during.carriers == before.carriers);

    // Past the step's station time again: windows go on from the open one.
    rig.run_for(285 * 1000);
    CHECK(rig.station->status()["clock"]["steps"] == 1);
    auto after = rig.spooled();
    check_no_window_twice(after);
    for (auto& [key, seqs] : before.carriers) CHECK(after.carriers.at(key) == seqs);
    CHECK(after.carriers.count({open_start, 0}) == 1);  // the open window, once
    CHECK(windows_from(after, open_start + window_s) >= 2);
  }
  release_logs(logs);
}

TEST_CASE("station on simulated time: after a forward clock step windows go on, none twice",
          "[station][clock]") {
  auto logs = capture_logs();
  {
    Rig rig;
    rig.run_for(150 * 1000);
    CHECK(rig.station->status()["clock"]["steps"] == 0);
    const std::int64_t after_step = rig.now_s() + kStepS;
    rig.env.set_wall_ms(rig.env.wall_ms() + kStepS * 1000);  // forward six windows
    rig.run_for(200 * 1000);

    Json st = rig.station->status();
    CHECK(st["clock"]["steps"] == 1);
    CHECK(count_lines(logs, "clock stepped forward by 360 s") == 1);
    auto after = rig.spooled();
    check_no_window_twice(after);
    // New windows start after the step and keep coming (no timer armed an
    // hour away, no pipeline waiting for time to pass).
    CHECK(windows_from(after, after_step - after_step % kWindowS + kWindowS) >= 2);
  }
  release_logs(logs);
}

TEST_CASE("clock watch and window assembler: samples older than the last are dropped and counted",
          "[station][clock]") {
  // The unit under the station's clock handling: the pipeline is fed at
  // the clock's wall time, as BusLines feeds it, and the clock watch checks
  // each period, as the station's tick does.
  Scratch dir;
  for (const char* d : {"/state", "/run", "/spool"}) fs::create_directories(dir.path + d);
  config::StationConfig cfg = checked(dir.path + "/station.json", demo_config(dir.path));
  auto m = daemon::manifest_of_config(cfg);
  REQUIRE(m.ok());
  test::SimEnv env(kStartWall);
  daemon::ClockWatch watch(env);
  daemon::WindowAssembler assembler(cfg, *m);
  daemon::AssemblerOutput out;
  std::map<std::pair<std::int64_t, std::size_t>, int> sent;  // (start, channel) -> times
  auto collect = [&] {
    for (auto& w : out.windows)
      for (std::size_t i = 0; i < w.channels.size(); ++i) sent[{w.start, w.first_channel + i}]++;
    out.clear();
  };
  assembler.start(env.wall_ms() / 1000, out);
  collect();
  std::size_t flagged = 0;  // samples that came out of QC (the archive's)
  auto period = [&](int n) {
    for (int k = 0; k < n; ++k) {
      env.advance(kPeriodS * 1000);
      watch.check("");
      for (std::size_t c = 0; c < assembler.channel_count(); ++c) {
        pipeline::RawSample raw;
        raw.t = env.wall_ms() / 1000;
        raw.value = 1000.0 + double(c);
        assembler.push(c, raw, out);
      }
      assembler.advance(env.wall_ms() / 1000, out);
      flagged += out.samples.size();
      collect();
    }
  };
  period(25);
  CHECK(watch.steps() == 0);
  CHECK(flagged > 0);
  auto before = sent;
  REQUIRE(before.size() >= 2 * assembler.channel_count());

  env.set_wall_ms(env.wall_ms() - kStepS * 1000);
  const std::size_t flagged_before = flagged;
  period(10);  // ten periods inside the repeated span
  CHECK(watch.steps() == 1);
  CHECK(watch.last_step() != "");
  // Older than the last accepted ones: dropped by the QC (and counted in its
  // dropped_out_of_order, daemon/pipeline/channel_qc.h), none archived.
  CHECK(flagged == flagged_before);
  CHECK(sent == before);  // nothing reopened, nothing sent again

  period(60);  // past the step's time again
  CHECK(watch.steps() == 1);
  CHECK(flagged > flagged_before);
  CHECK(sent.size() > before.size());
  for (auto& [key, n] : sent) CHECK(n == 1);
}

namespace {
bool in_maintenance(const Rig& rig) {
  return rig.station->status()["maintenance"] == true;
}
std::string start_maintenance(Rig& rig) {
  config::MaintenanceArgs a;
  a.start = true;
  a.note = "sensor cleaning (test)";
  Json data;
  return rig.station->maintenance(a, "test", data);
}
}  // namespace

TEST_CASE("station on simulated time: a reload that leaves pipeline and link keeps both",
          "[station][reload]") {
  auto logs = capture_logs();
  {
    Rig rig;
    rig.run_for(72 * 1000);
    REQUIRE(start_maintenance(rig) == "");
    rig.run_for(18 * 1000);
    CHECK(in_maintenance(rig));

    Json j = rig.cfg_json;
    j["log"]["level"] = "debug";
    rig.station->reload(checked(rig.dir.path + "/station.json", j));
    rig.pump();
    CHECK(count_lines(logs, "pipeline unchanged by the new config") == 1);
    CHECK(count_lines(logs, "link unchanged by the new config: it stays up") == 1);
    CHECK(in_maintenance(rig));
    CHECK(rig.station->config().log_level == "debug");

    rig.run_for(180 * 1000);
    CHECK(in_maintenance(rig));
    check_no_window_twice(rig.spooled());
    CHECK(rig.station->status()["link"]["state"] == "up");
  }
  os::set_log_level("info");
  release_logs(logs);
}

TEST_CASE("station on simulated time: a reload with a new pipeline or link keeps maintenance",
          "[station][reload]") {
  auto logs = capture_logs();
  {
    Rig rig;
    rig.run_for(72 * 1000);
    REQUIRE(start_maintenance(rig) == "");
    rig.run_for(18 * 1000);
    const std::int64_t open_start = rig.now_s() - rig.now_s() % kWindowS;

    SECTION("a changed alert threshold rebuilds the pipeline, the link stays") {
      Json j = rig.cfg_json;
      j["alerts"]["rules"][0]["levels"][2]["threshold"] = 14.0;
      rig.station->reload(checked(rig.dir.path + "/station.json", j));
      rig.pump();
      CHECK(count_lines(logs, "pipeline unchanged by the new config") == 0);
      CHECK(count_lines(logs, "link unchanged by the new config") == 1);
    }
    SECTION("a changed spool limit rebuilds the link, the pipeline stays") {
      Json j = rig.cfg_json;
      j["uplink"]["options"]["max_files"] = 5000;
      rig.station->reload(checked(rig.dir.path + "/station.json", j));
      rig.pump();
      CHECK(count_lines(logs, "pipeline unchanged by the new config") == 1);
      CHECK(count_lines(logs, "link unchanged by the new config") == 0);
    }
    CHECK(in_maintenance(rig));
    rig.run_for(180 * 1000);
    CHECK(in_maintenance(rig));
    CHECK(rig.station->status()["link"]["state"] == "up");
    auto s = rig.spooled();
    check_no_window_twice(s);
    // The window open at the reload is sent once, whole: not cut in two.
    CHECK(s.carriers.count({open_start, 0}) == 1);
  }
  release_logs(logs);
}
