// Env: everything the daemon asks of the operating system, behind one
// interface: wall and steady time (Clock), timers on the event loop, files
// (read, atomic write, remove, exists), child processes (spawn, exit status,
// output, kill) and kernel readings (uptime, load, memory, disk, CPU
// temperature, clock synchronisation). Code outside drivers/os reads no
// std::chrono clock and calls no posix_spawn/statvfs/adjtimex/sysinfo: it asks
// an Env. The daemon runs on AsioEnv (drivers/os/asio_env.h); unit tests run
// on SimEnv (tests/support/sim_env.h), whose time moves only when the test
// says so.
// Thread-safety: an Env is used from its event loop's thread only; timer and
// process callbacks run there, never inside the call that started them.
#pragma once

#include <chrono>
#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "drivers/os/clock.h"

namespace tarn::os {

// A started one-shot timer. cancel() or destroying the handle keeps its
// function from running; a default-constructed handle is not pending.
class Timer {
 public:
  struct State {
    bool live = true;                 // false once fired or cancelled
    std::function<void()> on_cancel;  // the implementation's own cleanup
  };
  Timer() = default;
  explicit Timer(std::shared_ptr<State> s) : state_(std::move(s)) {}
  Timer(Timer&& o) noexcept = default;
  Timer& operator=(Timer&& o) noexcept {
    if (this != &o) {
      cancel();
      state_ = std::move(o.state_);
    }
    return *this;
  }
  Timer(const Timer&) = delete;
  Timer& operator=(const Timer&) = delete;
  ~Timer() { cancel(); }
  void cancel() {
    if (!state_ || !state_->live) return;
    state_->live = false;
    if (auto f = std::move(state_->on_cancel)) f();
  }
  bool pending() const { return state_ && state_->live; }

 private:
  std::shared_ptr<State> state_;
};

// How a child process ended.
struct ProcessResult {
  int exit_code = -1;  // when it exited normally
  int signal = 0;      // when a signal ended it
  std::string output;  // its standard output, when captured
};

struct SpawnOptions {
  bool capture_output = false;  // otherwise stdout/stderr are inherited (the journal)
};

using ProcessId = int;  // > 0 for a started process

enum class ClockSync { synchronised, unsynchronised, unknown };

struct DiskSpace {
  std::uint64_t free_bytes = 0;  // available to an unprivileged user
  std::uint64_t total_bytes = 0;
};

struct MemoryInfo {
  std::uint64_t total_bytes = 0;
  std::uint64_t free_bytes = 0;
};

class Env : public Clock {
 public:
  using Task = std::function<void()>;
  using ProcessDone = std::function<void(const ProcessResult&)>;

  // ---- time (wall_ms, steady_ms, speed: see Clock)
  // Monotonic milliseconds of real time, not scaled by --speed (modem and
  // program timeouts, radio retransmissions: the far end takes real time).
  virtual std::int64_t real_ms() const = 0;

  // ---- timers: `fn` runs once on the event loop after the span.
  // A span of station time (scaled by --speed on the real env).
  virtual Timer start_timer(std::int64_t station_ms, Task fn) = 0;
  // A span of real time.
  virtual Timer start_real_timer(std::int64_t real_ms, Task fn) = 0;

  // ---- files
  virtual std::optional<std::string> read_file(const std::string& path) = 0;
  // Writes a temporary file beside `path` ("<dir>/.<name>.tmp", hidden from
  // readers of the directory), fsyncs it, renames it over `path`
  // and fsyncs the directory. Returns an error in words, empty on success.
  virtual std::string write_file_atomic(const std::string& path, const std::string& data) = 0;
  virtual bool remove_file(const std::string& path) = 0;
  virtual bool exists(const std::string& path) = 0;

  // ---- processes
  // Starts argv[0] (a path; no shell, no PATH search) with stdin from
  // /dev/null. Returns its id, or 0 with `error` in words (then `done` is
  // never called). `done` is called once, on the event loop, when it ends.
  virtual ProcessId spawn(const std::vector<std::string>& argv, const SpawnOptions& options,
                          ProcessDone done, std::string& error) = 0;
  // Sends `signal` to a started process that has not ended yet.
  virtual void kill(ProcessId id, int signal) = 0;

  // ---- kernel readings; nullopt when the kernel does not say
  virtual std::optional<std::int64_t> uptime_s() = 0;
  virtual std::optional<double> load1() = 0;
  virtual std::optional<MemoryInfo> memory() = 0;
  virtual std::optional<DiskSpace> disk_space(const std::string& path) = 0;
  // From a thermal zone or hwmon file holding millidegrees Celsius.
  virtual std::optional<double> cpu_temp_c(const std::string& file) = 0;
  // adjtimex(2): STA_UNSYNC or TIME_ERROR mean not synchronised.
  virtual ClockSync clock_sync() = 0;
};

// The real file operations, shared by every Env implementation that works on
// real files. Errors in words.
std::optional<std::string> read_whole_file(const std::string& path);
std::string write_whole_file_atomic(const std::string& path, const std::string& data);

}  // namespace tarn::os
