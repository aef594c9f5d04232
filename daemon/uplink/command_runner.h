// CommandRunner: runs a link-up / link-down program without a shell (the
// Env's spawn with the argv array from the config; stdin from /dev/null,
// stdout and stderr inherited, i.e. the journal), sends SIGTERM at the
// timeout and SIGKILL 2 s later, and logs the exit status.
// Timeouts are real time (a modem takes as long as it takes, whatever --speed).
// Thread-safety: the Env's event loop only. The callback runs on it, once.
#pragma once

#include <functional>
#include <memory>
#include <string>

#include "daemon/uplink/link_policy.h"
#include "drivers/os/env.h"

namespace tarn::uplink {

struct CommandOutcome {
  bool started = false;
  bool timed_out = false;
  int exit_code = -1;  // when it exited normally
  int signal = 0;      // when a signal ended it
  std::string error;   // spawn error
  std::int64_t real_ms = 0;
  bool ok() const { return started && !timed_out && signal == 0 && exit_code == 0; }
  std::string describe() const;  // "exit 0 after 12 ms", "timed out after 2000 ms, killed", ...
};

class CommandRunner {
 public:
  using Done = std::function<void(const CommandOutcome&)>;
  explicit CommandRunner(os::Env& env);
  ~CommandRunner();  // kills a running child (SIGKILL); the Env reaps it
  // REQUIRES: !running(). `name` is for the log ("link_up").
  void run(const CommandSpec& spec, const std::string& name, Done done);
  bool running() const { return pid_ > 0; }
  const CommandOutcome& last() const { return last_; }

 private:
  void on_timeout();
  void on_exit(const os::ProcessResult& r);
  void finish(CommandOutcome o);

  os::Env& env_;
  os::Timer timer_;
  os::ProcessId pid_ = -1;
  std::string name_;
  std::int64_t started_ms_ = 0;
  Done done_;
  CommandOutcome current_, last_;
  std::shared_ptr<bool> alive_;
};

}  // namespace tarn::uplink
