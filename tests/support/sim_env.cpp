#include "sim_env.h"

#include <signal.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>

namespace tarn::test {

SimEnv::SimEnv(std::int64_t wall_ms, std::int64_t steady_ms)
    : wall_ms_(wall_ms), steady_ms_(steady_ms) {}

os::Timer SimEnv::start_timer(std::int64_t station_ms, Task fn) {
  auto state = std::make_shared<os::Timer::State>();
  timers_.emplace(std::make_pair(steady_ms_ + std::max<std::int64_t>(0, station_ms), seq_++),
                  Pending{state, std::move(fn)});
  return os::Timer(state);
}

os::Timer SimEnv::start_real_timer(std::int64_t real_ms, Task fn) {
  return start_timer(real_ms, std::move(fn));
}

std::size_t SimEnv::pending_timers() const {
  std::size_t n = 0;
  for (auto& [k, p] : timers_) n += p.state->live;
  return n;
}

std::optional<std::int64_t> SimEnv::next_timer_in() const {
  for (auto& [k, p] : timers_)
    if (p.state->live) return k.first - steady_ms_;
  return std::nullopt;
}

bool SimEnv::run_next() {
  while (!timers_.empty() && !timers_.begin()->second.state->live) timers_.erase(timers_.begin());
  if (timers_.empty()) return false;
  auto node = timers_.extract(timers_.begin());
  std::int64_t due = node.key().first;
  wall_ms_ += due - steady_ms_;
  steady_ms_ = due;
  node.mapped().state->live = false;
  node.mapped().fn();
  return true;
}

void SimEnv::advance(std::int64_t ms) {
  const std::int64_t target = steady_ms_ + std::max<std::int64_t>(0, ms);
  for (;;) {
    while (!timers_.empty() && !timers_.begin()->second.state->live) timers_.erase(timers_.begin());
    if (timers_.empty() || timers_.begin()->first.first > target) break;
    run_next();
  }
  wall_ms_ += target - steady_ms_;
  steady_ms_ = target;
}

std::optional<std::string> SimEnv::read_file(const std::string& path) {
  return os::read_whole_file(path);
}

std::string SimEnv::write_file_atomic(const std::string& path, const std::string& data) {
  if (!fail_writes.empty()) return fail_writes;
  return os::write_whole_file_atomic(path, data);
}

bool SimEnv::remove_file(const std::string& path) {
  return ::unlink(path.c_str()) == 0;
}

bool SimEnv::exists(const std::string& path) {
  return ::access(path.c_str(), F_OK) == 0;
}

os::ProcessId SimEnv::spawn(const std::vector<std::string>& argv, const os::SpawnOptions& options,
                            ProcessDone done, std::string& error) {
  if (argv.empty()) {
    error = std::strerror(EINVAL);
    return 0;
  }
  auto it = scripts_.find(argv[0]);
  if (it == scripts_.end()) {
    error = std::strerror(ENOENT);
    return 0;
  }
  if (!it->second.spawn_error.empty()) {
    error = it->second.spawn_error;
    return 0;
  }
  spawned_.push_back({argv, steady_ms_});
  os::ProcessId id = next_pid_++;
  Process p;
  p.script = it->second;
  if (!options.capture_output) p.script.output.clear();
  p.done = std::move(done);
  p.end = start_timer(p.script.run_ms, [this, id] {
    auto& s = processes_.at(id).script;
    end_process(id, s.signal ? -1 : s.exit_code, s.signal);
  });
  processes_.emplace(id, std::move(p));
  return id;
}

void SimEnv::kill(os::ProcessId id, int signal) {
  auto it = processes_.find(id);
  if (it == processes_.end()) return;
  kills.emplace_back(id, signal);
  if (signal == SIGKILL || (signal == SIGTERM && !it->second.script.ignores_term))
    it->second.end = start_timer(0, [this, id, signal] { end_process(id, -1, signal); });
}

void SimEnv::end_process(os::ProcessId id, int exit_code, int signal) {
  auto node = processes_.extract(id);
  if (node.empty()) return;
  os::ProcessResult r;
  r.exit_code = exit_code;
  r.signal = signal;
  r.output = node.mapped().script.output;
  if (node.mapped().done) node.mapped().done(r);
}

std::optional<os::DiskSpace> SimEnv::disk_space(const std::string& path) {
  auto it = disks.find(path);
  if (it == disks.end()) return std::nullopt;
  return it->second;
}

std::optional<double> SimEnv::cpu_temp_c(const std::string& file) {
  auto it = temperatures_c.find(file);
  if (it == temperatures_c.end()) return std::nullopt;
  return it->second;
}

}  // namespace tarn::test
