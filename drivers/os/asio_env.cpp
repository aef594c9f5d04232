#include "drivers/os/asio_env.h"

#include <fcntl.h>
#include <signal.h>
#include <spawn.h>
#include <sys/statvfs.h>
#include <sys/sysinfo.h>
#include <sys/timex.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include <boost/asio/post.hpp>

extern char** environ;

namespace tarn::os {

namespace asio = boost::asio;

std::optional<std::string> read_whole_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return std::nullopt;
  std::ostringstream s;
  s << in.rdbuf();
  if (in.bad()) return std::nullopt;
  return s.str();
}

std::string write_whole_file_atomic(const std::string& path, const std::string& data) {
  auto fail = [&](const std::string& what) {
    return "cannot " + what + " " + path + ": " + std::strerror(errno);
  };
  // Hidden beside the target ("<dir>/.<name>.tmp"): readers of the
  // directory (a spool's uploader) skip names starting with '.'.
  const std::filesystem::path target(path);
  std::string tmp = (target.parent_path() / ("." + target.filename().string() + ".tmp")).string();
  int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) return fail("create a temporary file for");
  std::size_t done = 0;
  while (done < data.size()) {
    ssize_t n = ::write(fd, data.data() + done, data.size() - done);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) {
      std::string e = fail("write");
      ::close(fd);
      ::unlink(tmp.c_str());
      return e;
    }
    done += std::size_t(n);
  }
  if (::fsync(fd) != 0) {
    std::string e = fail("fsync");
    ::close(fd);
    ::unlink(tmp.c_str());
    return e;
  }
  ::close(fd);
  if (::rename(tmp.c_str(), path.c_str()) != 0) {
    std::string e = fail("rename the temporary file over");
    ::unlink(tmp.c_str());
    return e;
  }
  std::string dir = std::filesystem::path(path).parent_path().string();
  if (dir.empty()) dir = ".";
  int dfd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) return fail("open the directory of");
  int rc = ::fsync(dfd);
  ::close(dfd);
  if (rc != 0) return fail("fsync the directory of");
  return {};
}

AsioEnv::AsioEnv(asio::io_context& io, double speed, std::optional<std::int64_t> origin_ms)
    : io_(io), clock_(speed, origin_ms), child_timer_(io) {}

AsioEnv::~AsioEnv() {
  *alive_ = false;
  child_timer_.cancel();
  for (auto& [pid, c] : children_) {
    ::kill(pid, SIGKILL);
    int st = 0;
    ::waitpid(pid, &st, 0);
    if (c.out_fd >= 0) ::close(c.out_fd);
  }
}

std::int64_t AsioEnv::real_ms() const {
  return std::chrono::duration_cast<std::chrono::milliseconds>(
             std::chrono::steady_clock::now().time_since_epoch())
      .count();
}

Timer AsioEnv::start_real_timer(std::int64_t real_ms, Task fn) {
  auto state = std::make_shared<Timer::State>();
  auto timer = std::make_shared<asio::steady_timer>(io_);
  timer->expires_after(std::chrono::milliseconds(std::max<std::int64_t>(0, real_ms)));
  std::weak_ptr<asio::steady_timer> weak = timer;
  state->on_cancel = [weak] {
    if (auto t = weak.lock()) t->cancel();
  };
  timer->async_wait([state, timer, fn = std::move(fn)](boost::system::error_code) {
    if (!state->live) return;
    state->live = false;
    state->on_cancel = nullptr;
    fn();
  });
  return Timer(state);
}

Timer AsioEnv::start_timer(std::int64_t station_ms, Task fn) {
  return start_real_timer(clock_.real_duration(std::max<std::int64_t>(0, station_ms)).count(),
                          std::move(fn));
}

std::optional<std::string> AsioEnv::read_file(const std::string& path) {
  return read_whole_file(path);
}

std::string AsioEnv::write_file_atomic(const std::string& path, const std::string& data) {
  return write_whole_file_atomic(path, data);
}

bool AsioEnv::remove_file(const std::string& path) {
  return ::unlink(path.c_str()) == 0;
}

bool AsioEnv::exists(const std::string& path) {
  return ::access(path.c_str(), F_OK) == 0;
}

ProcessId AsioEnv::spawn(const std::vector<std::string>& argv, const SpawnOptions& options,
                         ProcessDone done, std::string& error) {
  if (argv.empty()) {
    error = std::strerror(EINVAL);
    return 0;
  }
  std::vector<char*> args;
  for (auto& a : argv) args.push_back(const_cast<char*>(a.c_str()));
  args.push_back(nullptr);
  int pipe_fds[2] = {-1, -1};
  if (options.capture_output && ::pipe2(pipe_fds, O_CLOEXEC) != 0) {
    error = std::string("cannot make a pipe: ") + std::strerror(errno);
    return 0;
  }
  posix_spawn_file_actions_t fa;
  posix_spawn_file_actions_init(&fa);
  posix_spawn_file_actions_addopen(&fa, 0, "/dev/null", O_RDONLY, 0);
  if (options.capture_output) posix_spawn_file_actions_adddup2(&fa, pipe_fds[1], 1);
  pid_t pid = -1;
  int rc = ::posix_spawn(&pid, args[0], &fa, nullptr, args.data(), environ);
  posix_spawn_file_actions_destroy(&fa);
  if (options.capture_output) ::close(pipe_fds[1]);
  if (rc != 0) {
    if (options.capture_output) ::close(pipe_fds[0]);
    error = std::strerror(rc);
    return 0;
  }
  Child c;
  c.done = std::move(done);
  if (options.capture_output) {
    c.out_fd = pipe_fds[0];
    ::fcntl(c.out_fd, F_SETFL, ::fcntl(c.out_fd, F_GETFL) | O_NONBLOCK);
  }
  children_.emplace(pid, std::move(c));
  if (!watching_) {
    watching_ = true;
    // First look at once: a program that fails fast is reported without delay.
    asio::post(io_, [this, alive = std::weak_ptr<bool>(alive_)] {
      if (alive.lock()) watch_children();
    });
  }
  return pid;
}

void AsioEnv::kill(ProcessId id, int signal) {
  if (id > 0 && children_.count(id)) ::kill(id, signal);
}

void AsioEnv::drain(Child& c) {
  if (c.out_fd < 0) return;
  char buf[4096];
  for (;;) {
    ssize_t n = ::read(c.out_fd, buf, sizeof buf);
    if (n > 0) {
      c.output.append(buf, std::size_t(n));
      continue;
    }
    if (n < 0 && errno == EINTR) continue;
    break;
  }
}

void AsioEnv::watch_children() {
  std::vector<std::pair<ProcessDone, ProcessResult>> ended;
  for (auto it = children_.begin(); it != children_.end();) {
    int st = 0;
    pid_t r = ::waitpid(it->first, &st, WNOHANG);
    drain(it->second);
    if (r == it->first || (r < 0 && errno == ECHILD)) {
      ProcessResult res;
      if (r == it->first && WIFEXITED(st)) res.exit_code = WEXITSTATUS(st);
      if (r == it->first && WIFSIGNALED(st)) res.signal = WTERMSIG(st);
      res.output = std::move(it->second.output);
      if (it->second.out_fd >= 0) ::close(it->second.out_fd);
      ended.emplace_back(std::move(it->second.done), std::move(res));
      it = children_.erase(it);
    } else {
      ++it;
    }
  }
  watching_ = !children_.empty();
  if (watching_) {
    child_timer_.expires_after(std::chrono::milliseconds(20));
    child_timer_.async_wait(
        [this, alive = std::weak_ptr<bool>(alive_)](boost::system::error_code ec) {
          if (!ec && alive.lock()) watch_children();
        });
  }
  for (auto& [done, res] : ended)
    if (done) done(res);
}

std::optional<std::int64_t> AsioEnv::uptime_s() {
  // sysinfo(2), not /proc/uptime: the unit's ProcSubset=pid hides that file.
  struct sysinfo si {};
  if (::sysinfo(&si) != 0) return std::nullopt;
  return std::int64_t(si.uptime);
}

std::optional<double> AsioEnv::load1() {
  struct sysinfo si {};
  if (::sysinfo(&si) != 0) return std::nullopt;
  return std::round(double(si.loads[0]) / double(1u << SI_LOAD_SHIFT) * 100) / 100;
}

std::optional<MemoryInfo> AsioEnv::memory() {
  struct sysinfo si {};
  if (::sysinfo(&si) != 0) return std::nullopt;
  return MemoryInfo{std::uint64_t(si.totalram) * si.mem_unit,
                    std::uint64_t(si.freeram) * si.mem_unit};
}

std::optional<DiskSpace> AsioEnv::disk_space(const std::string& path) {
  struct statvfs vfs {};
  if (::statvfs(path.c_str(), &vfs) != 0) return std::nullopt;
  return DiskSpace{std::uint64_t(vfs.f_bavail) * vfs.f_frsize,
                   std::uint64_t(vfs.f_blocks) * vfs.f_frsize};
}

std::optional<double> AsioEnv::cpu_temp_c(const std::string& file) {
  if (file.empty()) return std::nullopt;
  std::ifstream in(file);
  double v = 0;
  if (in >> v) return v / 1000.0;
  return std::nullopt;
}

ClockSync AsioEnv::clock_sync() {
  timex tx{};
  int state = ::adjtimex(&tx);
  if (state < 0) return ClockSync::unknown;
  if (state == TIME_ERROR || (tx.status & STA_UNSYNC)) return ClockSync::unsynchronised;
  return ClockSync::synchronised;
}

}  // namespace tarn::os
