// Station health from the Env's kernel readings: the figures the test sets
// on a SimEnv come out in the reading, in the units the health packet uses
// (MiB, degrees Celsius, volts), and what the kernel does not say is null.
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>

#include "daemon/core/health.h"
#include "sim_env.h"

using namespace tarn;

TEST_CASE("health: readings come from the Env", "[health]") {
  test::SimEnv env;
  auto dir = std::filesystem::temp_directory_path() / "tarn-health-test";
  std::filesystem::create_directories(dir);
  const std::string supply = (dir / "in1_input").string();
  std::ofstream(supply) << "12640\n";  // millivolts, as a hwmon in*_input file holds
  daemon::HealthOptions o;
  o.board_temp_file = "/sys/class/thermal/thermal_zone0/temp";
  o.supply_file = supply;
  o.supply_scale = 0.001;
  env.temperatures_c[o.board_temp_file] = 41.5;
  env.disks["/var/lib/tarn"] = {std::uint64_t(512) << 20, std::uint64_t(2048) << 20};
  env.load = 0.25;
  env.uptime = 86400;
  env.sync = os::ClockSync::unsynchronised;
  auto h = daemon::read_health(env, o, "/var/lib/tarn");
  REQUIRE(h.board_temp_c);
  CHECK(*h.board_temp_c == Approx(41.5));
  CHECK(h.disk_free_mib == std::optional<std::uint64_t>(512));
  CHECK(h.disk_total_mib == std::optional<std::uint64_t>(2048));
  CHECK(h.load1 == std::optional<double>(0.25));
  CHECK(h.uptime_s == std::optional<std::int64_t>(86400));
  REQUIRE(h.supply_v);
  CHECK(*h.supply_v == Approx(12.64));
  CHECK(h.clock == daemon::ClockSync::unsynchronised);
  CHECK(daemon::kernel_clock_sync(env) == daemon::ClockSync::unsynchronised);
  auto j = h.to_json();
  CHECK(j["clock"] == "not synchronised");
  CHECK(j["disk_free_mib"] == 512);

  // Nothing known: nulls, not zeros.
  test::SimEnv bare;
  daemon::HealthOptions none;
  none.board_temp_file = (dir / "missing").string();
  auto n = daemon::read_health(bare, none, "/nowhere");
  CHECK_FALSE(n.board_temp_c);
  CHECK_FALSE(n.disk_free_mib);
  CHECK_FALSE(n.load1);
  CHECK_FALSE(n.uptime_s);
  CHECK_FALSE(n.supply_v);
  CHECK(n.clock == daemon::ClockSync::unknown);
  CHECK(n.to_json()["load1"].is_null());
  std::filesystem::remove_all(dir);
}
