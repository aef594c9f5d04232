// AsioEnv: the real Env. Time from a SystemClock (optionally sped up with
// `tarn run --speed`), timers and child-process watching on a Boost.Asio
// io_context, files and kernel readings from the kernel itself.
// Children are watched with waitpid(WNOHANG) every 20 ms of real time while
// any runs; those still running when the env is destroyed are killed
// (SIGKILL) and reaped.
// Thread-safety: the io_context's thread only.
#pragma once

#include <sys/types.h>

#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <map>

#include "drivers/os/env.h"

namespace tarn::os {

class AsioEnv final : public Env {
 public:
  explicit AsioEnv(boost::asio::io_context& io, double speed = 1.0,
                   std::optional<std::int64_t> origin_ms = std::nullopt);
  ~AsioEnv() override;

  std::int64_t wall_ms() const override { return clock_.wall_ms(); }
  std::int64_t steady_ms() const override { return clock_.steady_ms(); }
  std::chrono::milliseconds real_delay_until(std::int64_t t_ms) const override {
    return clock_.real_delay_until(t_ms);
  }
  std::chrono::milliseconds real_duration(std::int64_t station_ms) const override {
    return clock_.real_duration(station_ms);
  }
  double speed() const override { return clock_.speed(); }
  // Shifts wall time by `delta_ms` (tests at --speed: a simulated clock step).
  void step(std::int64_t delta_ms) { clock_.step(delta_ms); }

  std::int64_t real_ms() const override;
  Timer start_timer(std::int64_t station_ms, Task fn) override;
  Timer start_real_timer(std::int64_t real_ms, Task fn) override;

  std::optional<std::string> read_file(const std::string& path) override;
  std::string write_file_atomic(const std::string& path, const std::string& data) override;
  bool remove_file(const std::string& path) override;
  bool exists(const std::string& path) override;

  ProcessId spawn(const std::vector<std::string>& argv, const SpawnOptions& options,
                  ProcessDone done, std::string& error) override;
  void kill(ProcessId id, int signal) override;

  std::optional<std::int64_t> uptime_s() override;
  std::optional<double> load1() override;
  std::optional<MemoryInfo> memory() override;
  std::optional<DiskSpace> disk_space(const std::string& path) override;
  std::optional<double> cpu_temp_c(const std::string& file) override;
  ClockSync clock_sync() override;

 private:
  struct Child {
    ProcessDone done;
    int out_fd = -1;  // read end of the stdout pipe when captured
    std::string output;
  };
  void watch_children();
  static void drain(Child& c);

  boost::asio::io_context& io_;
  SystemClock clock_;
  std::map<pid_t, Child> children_;
  boost::asio::steady_timer child_timer_;
  bool watching_ = false;
  std::shared_ptr<bool> alive_ = std::make_shared<bool>(true);
};

}  // namespace tarn::os
