#include "daemon/uplink/command_runner.h"

#include <fcntl.h>
#include <signal.h>
#include <spawn.h>
#include <sys/wait.h>

#include <cstring>
#include <vector>

#include "drivers/os/logging.h"

extern char** environ;

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

CommandRunner::CommandRunner(boost::asio::io_context& io)
    : timer_(io), alive_(std::make_shared<bool>(true)) {}

CommandRunner::~CommandRunner() {
  *alive_ = false;
  timer_.cancel();
  if (pid_ > 0) {
    ::kill(pid_, SIGKILL);
    int st = 0;
    ::waitpid(pid_, &st, 0);
  }
}

void CommandRunner::run(const CommandSpec& spec, const std::string& name, Done done) {
  name_ = name;
  done_ = std::move(done);
  current_ = {};
  started_ = std::chrono::steady_clock::now();
  deadline_ = started_ + std::chrono::seconds(spec.timeout_s);
  term_sent_ = false;
  std::vector<char*> argv;
  for (auto& a : spec.argv) argv.push_back(const_cast<char*>(a.c_str()));
  argv.push_back(nullptr);
  posix_spawn_file_actions_t fa;
  posix_spawn_file_actions_init(&fa);
  posix_spawn_file_actions_addopen(&fa, 0, "/dev/null", O_RDONLY, 0);
  pid_t pid = -1;
  int rc =
      spec.argv.empty() ? EINVAL : ::posix_spawn(&pid, argv[0], &fa, nullptr, argv.data(), environ);
  posix_spawn_file_actions_destroy(&fa);
  if (rc != 0) {
    current_.error =
        std::string(spec.argv.empty() ? "no program" : spec.argv[0]) + ": " + std::strerror(rc);
    finish(current_);
    return;
  }
  pid_ = pid;
  current_.started = true;
  os::logger("uplink")->info("{}: started {} (pid {})", name_, spec.argv[0], pid_);
  poll();
}

void CommandRunner::poll() {
  int st = 0;
  pid_t r = ::waitpid(pid_, &st, WNOHANG);
  auto now = std::chrono::steady_clock::now();
  if (r == pid_ || (r < 0 && errno == ECHILD)) {
    current_.real_ms =
        std::chrono::duration_cast<std::chrono::milliseconds>(now - started_).count();
    if (r == pid_ && WIFEXITED(st)) current_.exit_code = WEXITSTATUS(st);
    if (r == pid_ && WIFSIGNALED(st)) current_.signal = WTERMSIG(st);
    pid_ = -1;
    finish(current_);
    return;
  }
  if (!term_sent_ && now >= deadline_) {
    current_.timed_out = true;
    term_sent_ = true;
    ::kill(pid_, SIGTERM);
    kill_at_ = now + std::chrono::seconds(2);
  } else if (term_sent_ && now >= kill_at_) {
    ::kill(pid_, SIGKILL);
    kill_at_ = now + std::chrono::hours(1);
  }
  timer_.expires_after(std::chrono::milliseconds(20));
  std::weak_ptr<bool> alive = alive_;
  timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock()) poll();
  });
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
