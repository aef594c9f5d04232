#include "daemon/uplink/command_runner.h"

#include <signal.h>

#include <cstring>

#include "drivers/os/logging.h"

namespace tarn::uplink {

std::string CommandOutcome::describe() const {
  if (!started) return "not started: " + error;
  std::string s;
  if (timed_out)
    s = "timed out, killed";
  else if (signal)
    s = std::string("ended by signal ") + ::strsignal(signal);
  else
    s = "exit " + std::to_string(exit_code);
  return s + " after " + std::to_string(real_ms) + " ms";
}

CommandRunner::CommandRunner(os::Env& env) : env_(env), alive_(std::make_shared<bool>(true)) {}

CommandRunner::~CommandRunner() {
  *alive_ = false;
  timer_.cancel();
  if (pid_ > 0) env_.kill(pid_, SIGKILL);
}

void CommandRunner::run(const CommandSpec& spec, const std::string& name, Done done) {
  name_ = name;
  done_ = std::move(done);
  current_ = {};
  started_ms_ = env_.real_ms();
  std::string err;
  std::weak_ptr<bool> alive = alive_;
  os::ProcessId pid = env_.spawn(
      spec.argv, {},
      [this, alive](const os::ProcessResult& r) {
        if (alive.lock()) on_exit(r);
      },
      err);
  if (pid <= 0) {
    current_.error = std::string(spec.argv.empty() ? "no program" : spec.argv[0]) + ": " + err;
    finish(current_);
    return;
  }
  pid_ = pid;
  current_.started = true;
  os::logger("uplink")->info("{}: started {} (pid {})", name_, spec.argv[0], pid_);
  timer_ = env_.start_real_timer(std::int64_t(spec.timeout_s) * 1000, [this] { on_timeout(); });
}

void CommandRunner::on_timeout() {
  current_.timed_out = true;
  env_.kill(pid_, SIGTERM);
  timer_ = env_.start_real_timer(2000, [this] { env_.kill(pid_, SIGKILL); });
}

void CommandRunner::on_exit(const os::ProcessResult& r) {
  timer_.cancel();
  current_.real_ms = env_.real_ms() - started_ms_;
  current_.exit_code = r.exit_code;
  current_.signal = r.signal;
  pid_ = -1;
  finish(current_);
}

void CommandRunner::finish(CommandOutcome o) {
  last_ = o;
  auto log = os::logger("uplink");
  if (o.ok())
    log->info("{}: {}", name_, o.describe());
  else
    log->warn("{}: {}", name_, o.describe());
  auto d = std::move(done_);
  done_ = nullptr;
  if (d) d(o);
}

}  // namespace tarn::uplink
