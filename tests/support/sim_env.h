// SimEnv: the Env of unit tests. Time stands still until the test moves it:
// advance(ms) moves wall and steady time together and runs the timers that
// fall due, in time order (timers started by those callbacks included, when
// they fall due before the end); set_wall_ms() steps the wall clock alone (a
// clock step). Speed is 1: station time and real time are the same
// simulated time. Processes are scripted by program path; kernel readings
// are set by the test; files are real files (tests use a temporary
// directory), with an optional failure for atomic writes.
// Thread-safety: one thread (the test's).
#pragma once

#include <map>
#include <set>
#include <tuple>

#include "drivers/os/env.h"

namespace tarn::test {

class SimEnv final : public os::Env {
 public:
  // A scripted program: ends `run_ms` after it starts with `exit_code` (or by
  // `signal`), unless killed first. SIGTERM ends it unless it ignores TERM;
  // SIGKILL always does.
  struct Script {
    std::int64_t run_ms = 0;
    int exit_code = 0;
    int signal = 0;
    bool ignores_term = false;
    std::string output;
    std::string spawn_error;  // non-empty: the spawn fails with this
  };

  explicit SimEnv(std::int64_t wall_ms = 1780000000000, std::int64_t steady_ms = 1000000);

  // ---- moving time
  void advance(std::int64_t ms);
  // Runs the next pending timer (moving time to it); false when none.
  bool run_next();
  // Station milliseconds until the next pending timer.
  std::optional<std::int64_t> next_timer_in() const;
  std::size_t pending_timers() const;
  void set_wall_ms(std::int64_t t) { wall_ms_ = t; }

  // ---- scripting
  void script(const std::string& program, Script s) { scripts_[program] = std::move(s); }
  struct Spawned {
    std::vector<std::string> argv;
    std::int64_t at_ms;
  };
  const std::vector<Spawned>& spawned() const { return spawned_; }
  std::vector<std::pair<os::ProcessId, int>> kills;  // signals sent, in order
  std::optional<std::int64_t> uptime;
  std::optional<double> load;
  std::optional<os::MemoryInfo> mem;
  std::map<std::string, os::DiskSpace> disks;    // by path
  std::map<std::string, double> temperatures_c;  // by sensor file
  os::ClockSync sync = os::ClockSync::unknown;
  std::string fail_writes;  // non-empty: write_file_atomic fails with this

  // ---- os::Clock
  std::int64_t wall_ms() const override { return wall_ms_; }
  std::int64_t steady_ms() const override { return steady_ms_; }
  std::chrono::milliseconds real_delay_until(std::int64_t t_ms) const override {
    return std::chrono::milliseconds(std::max<std::int64_t>(0, t_ms - wall_ms_));
  }
  std::chrono::milliseconds real_duration(std::int64_t station_ms) const override {
    return std::chrono::milliseconds(station_ms);
  }
  double speed() const override { return 1.0; }

  // ---- os::Env
  std::int64_t real_ms() const override { return steady_ms_; }
  os::Timer start_timer(std::int64_t station_ms, Task fn) override;
  os::Timer start_real_timer(std::int64_t real_ms, Task fn) override;
  std::optional<std::string> read_file(const std::string& path) override;
  std::string write_file_atomic(const std::string& path, const std::string& data) override;
  bool remove_file(const std::string& path) override;
  bool exists(const std::string& path) override;
  os::ProcessId spawn(const std::vector<std::string>& argv, const os::SpawnOptions& options,
                      ProcessDone done, std::string& error) override;
  void kill(os::ProcessId id, int signal) override;
  std::optional<std::int64_t> uptime_s() override { return uptime; }
  std::optional<double> load1() override { return load; }
  std::optional<os::MemoryInfo> memory() override { return mem; }
  std::optional<os::DiskSpace> disk_space(const std::string& path) override;
  std::optional<double> cpu_temp_c(const std::string& file) override;
  os::ClockSync clock_sync() override { return sync; }

 private:
  struct Pending {
    std::shared_ptr<os::Timer::State> state;
    Task fn;
  };
  struct Process {
    Script script;
    ProcessDone done;
    os::Timer end;
  };
  // Ends a process now (from a zero-delay timer, never inside the caller).
  void end_process(os::ProcessId id, int exit_code, int signal);

  std::int64_t wall_ms_, steady_ms_;
  std::uint64_t seq_ = 0;
  std::map<std::pair<std::int64_t, std::uint64_t>, Pending> timers_;  // (due steady, order)
  std::map<std::string, Script> scripts_;
  std::map<os::ProcessId, Process> processes_;
  std::vector<Spawned> spawned_;
  os::ProcessId next_pid_ = 100;
};

}  // namespace tarn::test
