// CommandRunner: runs a link-up / link-down program without a shell
// (posix_spawn with the argv array from the config; stdin from /dev/null,
// stdout and stderr inherited, i.e. the journal), waits for it on the
// io_context with a poll timer (waitpid WNOHANG every 20 ms), sends SIGTERM
// at the timeout and SIGKILL 2 s later, and logs the exit status.
// Timeouts are real time (a modem takes as long as it takes, whatever --speed).
// Thread-safety: io_context thread only. The callback runs on it, once.
#pragma once

#include <sys/types.h>

#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <chrono>
#include <functional>
#include <memory>
#include <string>

#include "daemon/uplink/link_policy.h"

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
  explicit CommandRunner(boost::asio::io_context& io);
  ~CommandRunner();  // kills a running child (SIGKILL) and reaps it
  // REQUIRES: !running(). `name` is for the log ("link_up").
  void run(const CommandSpec& spec, const std::string& name, Done done);
  bool running() const { return pid_ > 0; }
  const CommandOutcome& last() const { return last_; }

 private:
  void poll();
  void finish(CommandOutcome o);

  boost::asio::steady_timer timer_;
  pid_t pid_ = -1;
  std::string name_;
  std::chrono::steady_clock::time_point started_, deadline_, kill_at_;
  bool term_sent_ = false;
  Done done_;
  CommandOutcome current_, last_;
  std::shared_ptr<bool> alive_;
};

}  // namespace tarn::uplink
