#include "daemon/core/bus_lines.h"

#include "config/settings/reasons.h"
#include "daemon/core/clock_watch.h"
#include "daemon/core/sample_intake.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

namespace {

std::uint32_t reason_of(drivers::ReadProblem p) {
  namespace r = pipeline::reason;
  switch (p) {
    case drivers::ReadProblem::none:
      return 0;
    case drivers::ReadProblem::no_reply:
      return r::no_reply;
    case drivers::ReadProblem::garbled:
      return r::garbled;
    case drivers::ReadProblem::offline:
      return r::offline;
    case drivers::ReadProblem::instrument_error:
      return r::instrument_status;
    case drivers::ReadProblem::warming_up:
      return r::warming_up;
    case drivers::ReadProblem::missed:
      return r::poll_missed;
  }
  return 0;
}

}  // namespace

BusLines::BusLines(StationContext& ctx, SampleIntake& intake, const ClockWatch& clock_watch)
    : ctx_(ctx), intake_(intake), clock_watch_(clock_watch) {}

void BusLines::build(const std::map<std::string, std::size_t>& first_of_instrument) {
  const auto& cfg = ctx_.cfg;
  channel_index_.clear();
  for (std::size_t li = 0; li < cfg.lines.size(); ++li) {
    const auto& line = cfg.lines[li];
    std::vector<drivers::BusScheduler::Member> members;
    std::vector<std::size_t> first;
    for (auto& in : cfg.instruments) {
      if (in.line != line.name) continue;
      const drivers::DriverFactory* f = drivers::find_driver(in.driver);
      drivers::BusScheduler::Member mem;
      mem.instrument = in;
      mem.driver = f->create(in, line);
      mem.period_s = in.period_s ? in.period_s : cfg.sampling.period_s;
      members.push_back(std::move(mem));
      first.push_back(first_of_instrument.at(in.name));
    }
    channel_index_.push_back(first);
    if (members.empty()) {
      lines_.push_back(nullptr);
      continue;
    }
    std::weak_ptr<bool> alive = ctx_.alive;
    lines_.push_back(std::make_unique<drivers::BusScheduler>(
        ctx_.io, ctx_.clock, line, std::move(members),
        [this, alive, li](std::size_t i, const drivers::PollResult& r) {
          if (alive.lock()) on_poll(li, i, r);
        }));
  }
  // A reload that drops an instrument forgets its last slot: added again
  // later, it must not get the time between filled with missed readings.
  std::erase_if(last_slot_ms_, [&](const auto& e) { return !first_of_instrument.count(e.first); });
}

void BusLines::retire() {
  for (auto& l : lines_)
    if (l) {
      l->stop();
      retired_.push_back(std::move(l));
    }
  lines_.clear();
  reap_retired();
}

void BusLines::stop() {
  for (auto& l : lines_)
    if (l) l->stop();
}

void BusLines::start() {
  // A retired scheduler still inside a poll holds its port (and the lock):
  // the new ones start once the old ones let go, so a reload does not show
  // the lines offline for a moment.
  if (!retired_.empty()) {
    waiting_ = true;
    return;
  }
  waiting_ = false;
  if (ctx_.stopping) return;
  for (auto& l : lines_)
    if (l) l->start(last_slot_ms_);
}

void BusLines::reap_retired() {
  std::erase_if(retired_, [](auto& l) { return !l->busy(); });
  if (retired_.empty()) {
    if (waiting_) start();
    return;
  }
  std::weak_ptr<bool> alive = ctx_.alive;
  retire_timer_ = ctx_.clock.start_real_timer(200, [this, alive] {
    if (alive.lock()) reap_retired();
  });
}

void BusLines::on_poll(std::size_t li, std::size_t ii, const drivers::PollResult& r) {
  if (ctx_.stopping) return;
  if (lines_[li]) last_slot_ms_[lines_[li]->status()[ii].name] = r.t_ms;
  std::size_t first = channel_index_[li][ii];
  auto& out = ctx_.out;
  out.clear();
  for (std::size_t c = 0; c < r.channels.size(); ++c) {
    const auto& reading = r.channels[c];
    pipeline::RawSample raw;
    raw.t = r.t_ms / 1000;
    raw.value = reading.value;
    raw.source_reasons = reason_of(reading.problem);
    if (clock_watch_.sync() == ClockSync::unsynchronised)
      raw.source_reasons |= pipeline::reason::clock_unsynced;
    ctx_.assembler->push(first + c, raw, out);
  }
  intake_.handle(out);
}

void BusLines::log_summaries() {
  // One line per instrument every 10 minutes of station time: never per sample.
  std::weak_ptr<bool> alive = ctx_.alive;
  summary_timer_ = ctx_.clock.start_timer(600000, [this, alive] {
    if (!alive.lock()) return;
    for (auto& l : lines_) {
      if (!l) continue;
      for (auto& s : l->status())
        os::logger("line " + l->line().name)
            ->info("{}: {}, {} polls, {} errors{}", s.name, drivers::to_string(s.state), s.polls,
                   s.errors, s.last_error.empty() ? "" : ", last: " + s.last_error);
    }
    log_summaries();
  });
}

}  // namespace tarn::daemon
