#include "daemon/core/station.h"

#include <boost/asio/post.hpp>
#include <cmath>
#include <ctime>
#include <limits>

#include "daemon/core/logging.h"
#include "daemon/core/time_format.h"

namespace tarn::daemon {

namespace asio = boost::asio;

// Provisional window statistics per channel: replaced by the QC pipeline.
struct Station::ChannelWindow {
  std::uint32_t expected = 0, passed = 0, missing = 0, other = 0;
  double sum = 0, sum2 = 0, min = std::numeric_limits<double>::infinity(),
         max = -std::numeric_limits<double>::infinity();
};

struct Station::ChannelRuntime {
  const config::Channel* channel = nullptr;
  std::string instrument;
  ChannelWindow window;
  std::optional<double> last_value;
  int last_flag = 2;
  std::int64_t last_t_ms = 0;
  std::uint64_t samples = 0;
};

Station::Station(asio::io_context& io, const drivers::Clock& clock, config::StationConfig cfg)
    : io_(io),
      clock_(clock),
      cfg_(std::move(cfg)),
      window_timer_(io),
      drain_timer_(io),
      summary_timer_(io),
      alive_(std::make_shared<bool>(true)) {}

Station::~Station() {
  *alive_ = false;
  teardown();
}

void Station::build() {
  channels_.clear();
  channel_index_.clear();
  instrument_of_line_.clear();
  for (std::size_t li = 0; li < cfg_.lines.size(); ++li) {
    const auto& line = cfg_.lines[li];
    std::vector<drivers::BusScheduler::Member> members;
    std::vector<std::size_t> first;
    std::vector<std::size_t> instr;
    for (auto& in : cfg_.instruments) {
      if (in.line != line.name) continue;
      const drivers::DriverFactory* f = drivers::find_driver(in.driver);
      drivers::BusScheduler::Member m;
      m.instrument = in;
      m.driver = f->create(in, line);
      m.period_s = in.period_s ? in.period_s : cfg_.sampling.period_s;
      members.push_back(std::move(m));
      first.push_back(channels_.size());
      for (auto& ch : in.channels) {
        ChannelRuntime rt;
        rt.channel = &ch;
        rt.instrument = in.name;
        channels_.push_back(rt);
      }
    }
    channel_index_.push_back(first);
    if (members.empty()) {
      lines_.push_back(nullptr);
      continue;
    }
    std::weak_ptr<bool> alive = alive_;
    lines_.push_back(std::make_unique<drivers::BusScheduler>(
        io_, clock_, line, std::move(members),
        [this, alive, li](std::size_t i, const drivers::PollResult& r) {
          if (alive.lock()) on_poll(li, i, r);
        }));
  }
  uplink::BackendContext ctx{io_, clock_, cfg_, boot_time_};
  uplink_ = uplink::find_backend(cfg_.uplink.backend)->create(ctx);
}

void Station::teardown() {
  for (auto& l : lines_)
    if (l) l->stop();
  lines_.clear();
  if (uplink_) uplink_->stop();
  uplink_.reset();
}

void Station::start() {
  started_ms_ = clock_.wall_ms();
  boot_time_ = iso_utc(started_ms_ / 1000);
  build();
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  window_start_ms_ = started_ms_ / w * w;
  window_partial_start_ = started_ms_ % w != 0;
  for (auto& l : lines_)
    if (l) l->start();
  uplink_->start();
  schedule_window_close();
  drain();
  log_summaries();
  logger("station")->info(
      "station {} started: {} lines, {} instruments, {} channels, {} s period, {} s windows, speed "
      "x{}",
      cfg_.station.id, cfg_.lines.size(), cfg_.instruments.size(), channels_.size(),
      cfg_.sampling.period_s, cfg_.sampling.window_s, clock_.speed());
}

void Station::on_poll(std::size_t li, std::size_t ii, const drivers::PollResult& r) {
  if (stopping_) return;
  std::size_t first = channel_index_[li][ii];
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  bool in_window = r.t_ms >= window_start_ms_ && r.t_ms < window_start_ms_ + w;
  for (std::size_t c = 0; c < r.channels.size(); ++c) {
    ChannelRuntime& rt = channels_[first + c];
    const auto& reading = r.channels[c];
    rt.samples++;
    rt.last_t_ms = r.t_ms;
    rt.last_value = reading.value;
    rt.last_flag = reading.problem == drivers::ReadProblem::none         ? 1
                   : reading.problem == drivers::ReadProblem::warming_up ? 2
                                                                         : 9;
    if (!in_window) continue;  // a late sample for a closed window (counted below)
    auto& cw = rt.window;
    if (rt.last_flag == 1 && reading.value) {
      double v = *reading.value;
      cw.passed++;
      cw.sum += v;
      cw.sum2 += v * v;
      cw.min = std::min(cw.min, v);
      cw.max = std::max(cw.max, v);
    } else if (rt.last_flag == 9) {
      cw.missing++;
    } else {
      cw.other++;
    }
  }
}

void Station::schedule_window_close() {
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  // Close a little after the window's end, so that the poll of its last slot
  // (taken one period before the end) has landed.
  std::int64_t grace = std::min<std::int64_t>(std::int64_t(cfg_.sampling.period_s) * 500, 30000);
  window_timer_.expires_after(clock_.real_delay_until(window_start_ms_ + w + grace));
  std::weak_ptr<bool> alive = alive_;
  window_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (ec || !alive.lock() || stopping_) return;
    close_window(false);
    schedule_window_close();
  });
}

void Station::close_window(bool partial) {
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  Json win;
  win["station"] = cfg_.station.id;
  win["start"] = iso_utc(window_start_ms_ / 1000);
  win["start_t"] = window_start_ms_ / 1000;
  win["length_s"] = cfg_.sampling.window_s;
  win["partial"] = partial || window_partial_start_;
  Json chans = Json::array();
  for (auto& rt : channels_) {
    auto& cw = rt.window;
    Json c;
    c["name"] = rt.channel->name;
    c["unit"] = rt.channel->unit;
    c["passed"] = cw.passed;
    c["missing"] = cw.missing;
    c["other"] = cw.other;
    if (cw.passed) {
      double mean = cw.sum / cw.passed;
      c["mean"] = mean;
      c["min"] = cw.min;
      c["max"] = cw.max;
      c["sd"] = std::sqrt(std::max(0.0, cw.sum2 / cw.passed - mean * mean));
    }
    chans.push_back(c);
    cw = ChannelWindow{};
  }
  win["channels"] = chans;
  std::string text = win.dump();
  uplink::OutgoingPacket p;
  p.sequence = next_sequence_++;
  p.kind = uplink::PacketKind::provisional;
  p.payload.assign(text.begin(), text.end());
  // Provisional bounded queue (the outbox issue makes this durable).
  if (queue_.size() >= 1000) {
    queue_.pop_front();
    packets_dropped_++;
  }
  queue_.push_back(std::move(p));
  windows_closed_++;
  logger("station")->debug("window {} closed{}", iso_utc(window_start_ms_ / 1000),
                           partial ? " (partial)" : "");
  window_start_ms_ += w;
  window_partial_start_ = false;
  drain();
}

void Station::drain() {
  if (!uplink_) return;
  std::weak_ptr<bool> alive = alive_;
  while (!queue_.empty() && uplink_->state() == uplink::LinkState::up &&
         uplink_->free_slots() > 0) {
    uplink::OutgoingPacket p = queue_.front();
    queue_.pop_front();
    uplink_->send(p, [this, alive, p](std::uint64_t, bool ok, const std::string& err) {
      if (!alive.lock()) return;
      if (ok) {
        packets_acked_++;
      } else {
        logger("uplink")->debug("packet {} not acknowledged: {}; queued again", p.sequence, err);
        queue_.push_front(p);
      }
      if (stopping_ && queue_.empty() && stop_done_) {
        auto d = std::move(stop_done_);
        stop_done_ = nullptr;
        d();
      }
    });
  }
  // Re-check a little later (link state changes arrive asynchronously).
  drain_timer_.expires_after(std::chrono::milliseconds(200));
  drain_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (!ec && alive.lock()) drain();
  });
}

void Station::log_summaries() {
  // One line per instrument every 10 minutes of station time: never per sample.
  std::weak_ptr<bool> alive = alive_;
  summary_timer_.expires_after(clock_.real_duration(600000));
  summary_timer_.async_wait([this, alive](boost::system::error_code ec) {
    if (ec || !alive.lock()) return;
    for (auto& l : lines_) {
      if (!l) continue;
      for (auto& s : l->status())
        logger("line " + l->line().name)
            ->info("{}: {}, {} polls, {} errors{}", s.name, drivers::to_string(s.state), s.polls,
                   s.errors, s.last_error.empty() ? "" : ", last: " + s.last_error);
    }
    log_summaries();
  });
}

void Station::stop(int deadline_ms, std::function<void()> done) {
  stopping_ = true;
  window_timer_.cancel();
  for (auto& l : lines_)
    if (l) l->stop();
  close_window(true);
  stop_done_ = [this, done] {
    drain_timer_.cancel();
    summary_timer_.cancel();
    teardown();
    done();
  };
  auto deadline = std::make_shared<asio::steady_timer>(io_, std::chrono::milliseconds(deadline_ms));
  std::weak_ptr<bool> alive = alive_;
  deadline->async_wait([this, alive, deadline](boost::system::error_code) {
    if (!alive.lock() || !stop_done_) return;
    logger("station")->warn("stopping with {} windows not yet sent", queue_.size());
    auto d = std::move(stop_done_);
    stop_done_ = nullptr;
    d();
  });
  if (queue_.empty() || !uplink_ || uplink_->state() != uplink::LinkState::up) {
    // Nothing to wait for (or no link): the deadline or the next ack ends it.
    if (queue_.empty()) {
      auto d = std::move(stop_done_);
      stop_done_ = nullptr;
      asio::post(io_, d);
    }
  }
}

void Station::reload(config::StationConfig cfg) {
  logger("station")->info("applying new config from {}", cfg.file);
  close_window(true);
  window_timer_.cancel();
  teardown();
  cfg_ = std::move(cfg);
  set_log_level(cfg_.log_level);
  build();
  std::int64_t now = clock_.wall_ms();
  std::int64_t w = std::int64_t(cfg_.sampling.window_s) * 1000;
  window_start_ms_ = now / w * w;
  window_partial_start_ = true;
  for (auto& l : lines_)
    if (l) l->start();
  uplink_->start();
  schedule_window_close();
}

Json Station::status() const {
  Json s;
  std::int64_t now = clock_.wall_ms();
  s["ok"] = true;
  s["station"] = cfg_.station.id;
  s["version"] = TARN_VERSION;
  s["now"] = iso_utc(now / 1000);
  s["uptime_s"] = (now - started_ms_) / 1000;
  s["speed"] = clock_.speed();
  Json ins = Json::array();
  for (auto& l : lines_) {
    if (!l) continue;
    for (auto& st : l->status()) {
      Json i;
      i["name"] = st.name;
      i["line"] = l->line().name;
      i["state"] = drivers::to_string(st.state);
      i["polls"] = st.polls;
      i["errors"] = st.errors;
      i["last_error"] = st.last_error;
      if (st.last_ok_ms) i["last_ok"] = iso_utc(st.last_ok_ms / 1000);
      ins.push_back(i);
    }
  }
  s["instruments"] = ins;
  Json chans = Json::array();
  for (auto& rt : channels_) {
    Json c;
    c["name"] = rt.channel->name;
    c["instrument"] = rt.instrument;
    c["unit"] = rt.channel->unit;
    if (rt.last_value)
      c["value"] = *rt.last_value;
    else
      c["value"] = nullptr;
    c["flag"] = rt.last_flag;
    if (rt.last_t_ms) c["t"] = iso_utc(rt.last_t_ms / 1000);
    c["window"] = {
        {"passed", rt.window.passed}, {"missing", rt.window.missing}, {"other", rt.window.other}};
    chans.push_back(c);
  }
  s["channels"] = chans;
  s["window"] = {{"start", iso_utc(window_start_ms_ / 1000)},
                 {"length_s", cfg_.sampling.window_s},
                 {"closed_total", windows_closed_}};
  s["link"] = {{"backend", cfg_.uplink.backend},
               {"state", uplink_ ? uplink::to_string(uplink_->state()) : "down"},
               {"last_error", uplink_ ? uplink_->last_error() : ""},
               {"queued", queue_.size()},
               {"acknowledged", packets_acked_},
               {"dropped", packets_dropped_},
               {"bytes_sent", uplink_ ? uplink_->bytes_sent() : 0}};
  return s;
}

std::string Station::status_line() const {
  std::size_t online = 0, total = 0;
  for (auto& l : lines_)
    if (l)
      for (auto& st : l->status()) {
        total++;
        online += st.state == drivers::InstrumentState::online;
      }
  return std::to_string(online) + "/" + std::to_string(total) + " instruments online, link " +
         (uplink_ ? uplink::to_string(uplink_->state()) : "down") + ", " +
         std::to_string(queue_.size()) + " queued";
}

}  // namespace tarn::daemon
