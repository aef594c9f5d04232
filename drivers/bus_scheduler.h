// BusScheduler: polls the instruments of one line, one request at a time.
// Polls fall on slots aligned to multiples of each instrument's period in UTC.
// A dead instrument costs the others at most its timeout (times retries); a
// slot that cannot be served in time becomes a reading flagged missed, and a
// poll while the port is closed becomes a reading flagged offline: a missed
// poll is never a hole. A lost port is reopened with backoff, 1 s doubling to
// 60 s (station time), and also tried once at each poll slot that finds it
// closed, so a replugged instrument is read again at the first slot after
// replug whatever the backoff has grown to.
// Time and timers come from an os::Env (slots and backoff in station time, the
// line's gap in real time); instrument I/O runs on the io_context.
// Thread-safety: io_context thread only (the Env's event loop).
#pragma once

#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <functional>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "config/station_config.h"
#include "drivers/driver.h"
#include "drivers/os/env.h"
#include "drivers/serial_port.h"

namespace tarn::drivers {

enum class InstrumentState { starting, online, warming_up, no_reply, offline };
const char* to_string(InstrumentState s);

struct InstrumentStatus {
  std::string name;
  InstrumentState state = InstrumentState::starting;
  std::uint64_t polls = 0, errors = 0;
  std::string last_error;
  std::int64_t last_ok_ms = 0;
  PollResult last;
};

class BusScheduler {
 public:
  using Sink = std::function<void(std::size_t instrument, const PollResult&)>;
  struct Member {
    config::Instrument instrument;
    std::unique_ptr<InstrumentDriver> driver;
    int period_s = 60;
  };

  BusScheduler(boost::asio::io_context& io, os::Env& env, config::Line line,
               std::vector<Member> members, Sink sink);
  ~BusScheduler();

  // last_slot_ms: an instrument's last poll slot under the scheduler this
  // one replaces (a config reload), by instrument name. The slots between it
  // and this scheduler's first poll were served by nobody: they become
  // readings flagged missed, so a reload leaves no hole.
  void start(const std::map<std::string, std::int64_t>& last_slot_ms = {});
  // Stops after the current exchange; no further sink calls.
  void stop();
  const std::vector<InstrumentStatus>& status() const { return status_; }
  const config::Line& line() const { return port_.line(); }
  bool port_open() const { return port_.is_open(); }
  // True while the polling coroutine runs (also for a while after stop(): an
  // exchange in progress finishes first). Destroy the scheduler only once false.
  bool busy() const { return *running_; }
  // Opens tried since start (the first included), for tests and status.
  std::uint64_t open_attempts() const { return open_attempts_; }
  // True while the polling coroutine waits for an Env timer (a slot, a reopen
  // or the line's gap) and talks to no instrument. Tests on simulated time
  // move the time on only then.
  bool waiting() const { return waiting_; }

 private:
  boost::asio::awaitable<void> run();
  // Waits `ms` of station time (or real time) on the Env; stop() ends it early.
  boost::asio::awaitable<void> sleep(std::int64_t ms, bool station_time);
  // on_backoff: a failure schedules the next try and doubles the backoff;
  // a try at a poll slot (on_backoff false) leaves the backoff as it is.
  void try_open(std::int64_t now_ms, bool on_backoff = true);
  PollResult placeholder(std::size_t i, std::int64_t t_ms, ReadProblem p, std::string why) const;
  void note(std::size_t i, const PollResult& r);

  boost::asio::io_context& io_;
  os::Env& env_;
  SerialPort port_;
  std::vector<Member> members_;
  std::vector<InstrumentStatus> status_;
  std::vector<std::int64_t> next_due_ms_;
  std::vector<std::int64_t> warm_until_ms_;
  std::vector<std::int64_t> catch_up_from_ms_;  // first slot nobody served, 0: none
  Sink sink_;
  boost::asio::steady_timer wake_;  // never expires: the Env timer cancels it
  os::Timer sleep_;
  bool waiting_ = false;
  std::shared_ptr<bool> alive_;
  std::shared_ptr<bool> running_ = std::make_shared<bool>(false);
  std::int64_t reopen_at_ms_ = 0;
  std::int64_t backoff_ms_ = 1000;
  bool was_open_ = false;
  bool reported_closed_ = false;
  bool stopping_ = false;
  std::uint64_t open_attempts_ = 0;
};

}  // namespace tarn::drivers
