#include "drivers/bus_scheduler.h"

#include <spdlog/spdlog.h>

#include <algorithm>
#include <utility>

#include <boost/asio/co_spawn.hpp>
#include <boost/asio/detached.hpp>
#include <boost/asio/redirect_error.hpp>
#include <boost/asio/use_awaitable.hpp>

namespace tarn::drivers {

namespace asio = boost::asio;

const char* to_string(ReadProblem p) {
  switch (p) {
    case ReadProblem::none:
      return "ok";
    case ReadProblem::no_reply:
      return "no reply";
    case ReadProblem::garbled:
      return "garbled reply";
    case ReadProblem::offline:
      return "offline";
    case ReadProblem::instrument_error:
      return "instrument error";
    case ReadProblem::warming_up:
      return "warming up";
    case ReadProblem::missed:
      return "poll missed";
  }
  return "?";
}

const char* to_string(InstrumentState s) {
  switch (s) {
    case InstrumentState::starting:
      return "starting";
    case InstrumentState::online:
      return "online";
    case InstrumentState::warming_up:
      return "warming up";
    case InstrumentState::no_reply:
      return "not answering";
    case InstrumentState::offline:
      return "offline";
  }
  return "?";
}

static std::shared_ptr<spdlog::logger> line_logger(const std::string& name) {
  auto l = spdlog::get("line " + name);
  if (!l) {
    l = spdlog::default_logger()->clone("line " + name);
    spdlog::register_logger(l);
  }
  return l;
}

BusScheduler::BusScheduler(asio::io_context& io, os::Env& env, config::Line line,
                           std::vector<Member> members, Sink sink)
    : io_(io),
      env_(env),
      port_(io, std::move(line)),
      members_(std::move(members)),
      sink_(std::move(sink)),
      wake_(io),
      alive_(std::make_shared<bool>(true)) {
  for (auto& m : members_) {
    InstrumentStatus s;
    s.name = m.instrument.name;
    status_.push_back(s);
  }
  next_due_ms_.assign(members_.size(), 0);
  warm_until_ms_.assign(members_.size(), 0);
  catch_up_from_ms_.assign(members_.size(), 0);
}

BusScheduler::~BusScheduler() {
  *alive_ = false;
  sleep_.cancel();
  port_.close();
}

void BusScheduler::start(const std::map<std::string, std::int64_t>& last_slot_ms) {
  std::int64_t now = env_.wall_ms();
  for (std::size_t i = 0; i < members_.size(); ++i) {
    std::int64_t p = std::int64_t(members_[i].period_s) * 1000;
    next_due_ms_[i] = (now / p + 1) * p;  // first aligned slot after start
    // Only on the same slot grid (a changed period starts afresh) and for a
    // short break: a longer one is a gap the QC timing test reports.
    constexpr std::int64_t max_catch_up = 60;
    auto it = last_slot_ms.find(members_[i].instrument.name);
    catch_up_from_ms_[i] = 0;
    if (it != last_slot_ms.end() && it->second % p == 0 && it->second + p < next_due_ms_[i] &&
        next_due_ms_[i] - it->second <= (max_catch_up + 1) * p)
      catch_up_from_ms_[i] = it->second + p;
  }
  try_open(now);
  asio::co_spawn(io_, run(), asio::detached);
}

void BusScheduler::stop() {
  stopping_ = true;
  sleep_.cancel();
  wake_.cancel();
}

asio::awaitable<void> BusScheduler::sleep(std::int64_t ms, bool station_time) {
  auto alive = alive_;
  wake_.expires_at(asio::steady_timer::time_point::max());
  auto wake = [this] { wake_.cancel(); };
  sleep_ = station_time ? env_.start_timer(ms, wake) : env_.start_real_timer(ms, wake);
  waiting_ = true;
  boost::system::error_code ec;
  co_await wake_.async_wait(asio::redirect_error(asio::use_awaitable, ec));
  if (*alive) waiting_ = false;
}

void BusScheduler::try_open(std::int64_t now_ms, bool on_backoff) {
  auto log = line_logger(port_.line().name);
  ++open_attempts_;
  std::string err = port_.open();
  if (err.empty()) {
    log->info("port {} open ({} baud)", port_.device(), port_.line().baud);
    backoff_ms_ = 1000;
    reported_closed_ = false;
    was_open_ = true;
    for (std::size_t i = 0; i < members_.size(); ++i)
      warm_until_ms_[i] = now_ms + std::int64_t(members_[i].instrument.warmup_s) * 1000;
    return;
  }
  if (!reported_closed_) {
    log->warn("{}; instruments on this line are offline, retrying with backoff up to 60 s", err);
    reported_closed_ = true;
  } else {
    log->debug("reopen failed: {}", err);
  }
  if (!on_backoff) return;
  reopen_at_ms_ = now_ms + backoff_ms_;
  backoff_ms_ = std::min<std::int64_t>(backoff_ms_ * 2, 60000);
}

PollResult BusScheduler::placeholder(std::size_t i, std::int64_t t_ms, ReadProblem p,
                                     std::string why) const {
  PollResult r;
  r.t_ms = t_ms;
  r.channels.resize(members_[i].instrument.channels.size());
  for (auto& c : r.channels) c.problem = p;
  r.error = std::move(why);
  return r;
}

void BusScheduler::note(std::size_t i, const PollResult& r) {
  auto& s = status_[i];
  s.polls++;
  bool any_ok = false, all_offline = true, any_warm = false, all_missed = !r.channels.empty();
  for (auto& c : r.channels) {
    all_missed &= c.problem == ReadProblem::missed;
    any_ok |= c.problem == ReadProblem::none;
    any_warm |= c.problem == ReadProblem::warming_up;
    all_offline &= c.problem == ReadProblem::offline;
  }
  InstrumentState next = any_ok        ? InstrumentState::online
                         : any_warm    ? InstrumentState::warming_up
                         : all_offline ? InstrumentState::offline
                                       : InstrumentState::no_reply;
  if (!r.error.empty()) {
    s.errors++;
    s.last_error = r.error;
  }
  if (any_ok || any_warm) s.last_ok_ms = r.t_ms;
  // A slot the scheduler could not serve in time says nothing about the
  // instrument (the line or the daemon was busy): its state stays.
  if (all_missed) next = s.state;
  if (next != s.state) {
    auto log = line_logger(port_.line().name);
    auto level = next == InstrumentState::online || next == InstrumentState::warming_up
                     ? spdlog::level::info
                     : spdlog::level::warn;
    log->log(level, "{}: {} -> {}{}", s.name, to_string(s.state), to_string(next),
             r.error.empty() ? "" : " (" + r.error + ")");
    s.state = next;
  }
  s.last = r;
}

asio::awaitable<void> BusScheduler::run() {
  auto alive = alive_;
  // Cleared when the coroutine ends (the guard lives in the coroutine frame).
  struct RunningGuard {
    std::shared_ptr<bool> flag;
    ~RunningGuard() { *flag = false; }
  } guard{running_};
  *guard.flag = true;
  auto log = line_logger(port_.line().name);
  // Slots the replaced scheduler left unserved (see start()). Not noted in
  // the instrument's status: the instrument did nothing wrong.
  for (std::size_t i = 0; i < members_.size(); ++i) {
    std::int64_t period = std::int64_t(members_[i].period_s) * 1000;
    std::int64_t from = std::exchange(catch_up_from_ms_[i], 0);
    for (std::int64_t s = from; from && s < next_due_ms_[i]; s += period) {
      sink_(i, placeholder(i, s, ReadProblem::missed, "poll missed: config reload"));
      if (!*alive || stopping_) co_return;
    }
  }
  while (!stopping_) {
    std::int64_t due = *std::min_element(next_due_ms_.begin(), next_due_ms_.end());
    // A closed port is retried on its own backoff, not only at poll slots, so
    // a replugged instrument is back by its next slot after the backoff.
    if (!port_.is_open()) due = std::min(due, reopen_at_ms_);
    co_await sleep(due - env_.wall_ms(), true);
    if (!*alive || stopping_) co_return;
    std::int64_t now = env_.wall_ms();
    if (!port_.is_open() && now >= reopen_at_ms_) try_open(now);
    bool slot_due = false;
    for (std::int64_t d : next_due_ms_) slot_due |= d <= now;
    if (!port_.is_open() && slot_due) try_open(now, false);
    for (std::size_t i = 0; i < members_.size() && !stopping_; ++i) {
      if (next_due_ms_[i] > now) continue;
      std::int64_t period = std::int64_t(members_[i].period_s) * 1000;
      std::int64_t slot = next_due_ms_[i];
      PollResult r;
      if (!port_.is_open()) {
        r = placeholder(i, slot, ReadProblem::offline, "port closed");
      } else {
        r = co_await members_[i].driver->poll(port_, nullptr);
        if (!*alive || stopping_) co_return;
        r.t_ms = slot;
        bool lost = !r.channels.empty() && r.channels[0].problem == ReadProblem::offline;
        if (lost) {
          log->warn("port {} lost ({}); closing, instruments offline", port_.device(), r.error);
          port_.close();
          reported_closed_ = true;
          std::int64_t t = env_.wall_ms();
          reopen_at_ms_ = t + 1000;
          backoff_ms_ = 2000;
        } else if (slot < warm_until_ms_[i]) {
          for (auto& c : r.channels)
            if (c.problem == ReadProblem::none) c.problem = ReadProblem::warming_up;
        }
      }
      note(i, r);
      sink_(i, r);
      // Slots this instrument could not be served in (the line was busy
      // beyond a period) become readings flagged missed, never holes.
      std::int64_t after = env_.wall_ms();
      next_due_ms_[i] = slot + period;
      while (next_due_ms_[i] + period <= after) {
        PollResult m =
            placeholder(i, next_due_ms_[i], ReadProblem::missed, "poll missed: line busy");
        note(i, m);
        sink_(i, m);
        next_due_ms_[i] += period;
      }
      if (port_.is_open() && port_.line().gap_ms > 0) {
        co_await sleep(port_.line().gap_ms, false);
        if (!*alive || stopping_) co_return;
      }
    }
  }
}

}  // namespace tarn::drivers
