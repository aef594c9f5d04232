#include "daemon/uplink/serial_radio_backend.h"

#include <boost/asio/post.hpp>
#include <deque>
#include <map>
#include <set>

#include "drivers/os/logging.h"

namespace tarn::uplink {

namespace asio = boost::asio;
namespace radio = codec::radio;
using config::ObjectReader;

// The route byte counts kinds from 0 (RADIO.md §5): PacketKind's number - 1.
std::uint8_t route_byte(PacketKind kind, bool retained) {
  return std::uint8_t((std::uint8_t(kind) - 1) | (retained ? 0x80 : 0));
}

bool parse_route_byte(std::uint8_t b, PacketKind& kind, bool& retained) {
  std::uint8_t k = b & 0x7f;
  if (k > std::uint8_t(PacketKind::provisional) - 1) return false;
  kind = PacketKind(k + 1);
  retained = (b & 0x80) != 0;
  return true;
}

SerialRadioOptions read_serial_radio_options(const config::StationConfig& cfg,
                                             config::Problems& p) {
  SerialRadioOptions o;
  ObjectReader r(cfg.uplink.options, "/uplink/options", p);
  read_radio_port_options(r, o.line);
  r.integer("ack_timeout_ms", o.ack_timeout_ms, 20, 120000);
  r.integer("retries", o.retries, 0, 20);
  r.integer("window", o.window, 1, 8);
  r.integer("ping_interval_ms", o.ping_interval_ms, 100, 3600000);
  if (r.integer("link_timeout_ms", o.link_timeout_ms, 100, 36000000) &&
      o.link_timeout_ms <= o.ping_interval_ms)
    p.add("/uplink/options/link_timeout_ms", "is " + std::to_string(o.link_timeout_ms) +
                                                 "; allowed: more than ping_interval_ms (" +
                                                 std::to_string(o.ping_interval_ms) + ")");
  r.integer("reopen_ms", o.reopen_ms, 100, 3600000);
  r.finish();
  if (!o.link_timeout_ms) o.link_timeout_ms = 3 * o.ping_interval_ms + o.ack_timeout_ms;
  return o;
}

namespace {

class SerialRadioBackend final : public UplinkBackend {
 public:
  SerialRadioBackend(BackendContext& ctx, SerialRadioOptions opt)
      : io_(ctx.io),
        env_(ctx.env),
        opt_(std::move(opt)),
        station_(ctx.config.station.id),
        tag_(radio::station_tag(station_)),
        log_(os::logger("uplink")),
        alive_(std::make_shared<bool>(true)) {
    port_ = std::make_unique<RadioPort>(
        io_, opt_.line, [this](const radio::Frame& f) { on_frame(f); },
        [this](const std::string& why) { on_lost(why); });
  }
  ~SerialRadioBackend() override { *alive_ = false; }

  void start() override {
    stopped_ = false;
    open_port();
    schedule_tick();
  }

  void stop() override {
    stopped_ = true;
    tick_.cancel();
    port_->close();
    set_state(LinkState::stopping);
    fail_inflight("stopping");
  }

  LinkState state() const override { return state_; }
  std::string last_error() const override { return last_error_; }
  std::size_t mtu() const override { return radio::max_payload(opt_.line.mtu) - 1; }
  std::size_t free_slots() const override {
    if (state_ != LinkState::up) return 0;
    return inflight_.size() >= std::size_t(opt_.window)
               ? 0
               : std::size_t(opt_.window) - inflight_.size();
  }
  std::uint64_t bytes_sent() const override { return port_->counters().bytes_out; }
  void on_command(CommandHandler h) override { command_handler_ = std::move(h); }

  void send(OutgoingPacket p, AckHandler done) override {
    std::uint64_t seq = p.sequence;
    Inflight f;
    f.frame.type = radio::FrameType::data;
    f.frame.station_tag = tag_;
    f.frame.sequence = seq;
    f.frame.payload.reserve(p.payload.size() + 1);
    f.frame.payload.push_back(route_byte(p.kind, p.retained));
    f.frame.payload.insert(f.frame.payload.end(), p.payload.begin(), p.payload.end());
    f.done = std::move(done);
    if (p.payload.size() > mtu() || inflight_.count(seq)) {
      std::string why = inflight_.count(seq)
                            ? "sequence already in flight"
                            : "packet of " + std::to_string(p.payload.size()) +
                                  " bytes exceeds the radio payload of " + std::to_string(mtu());
      post_done(std::move(f.done), seq, false, why);
      return;
    }
    f.tries = 1;
    f.deadline = env_.real_ms() + opt_.ack_timeout_ms;
    port_->send(f.frame);
    last_sent_ = env_.real_ms();
    inflight_.emplace(seq, std::move(f));
  }

 private:
  struct Inflight {
    radio::Frame frame;
    AckHandler done;
    int tries = 0;
    std::int64_t deadline = 0;  // real ms
  };

  void post_done(AckHandler done, std::uint64_t seq, bool ok, std::string why) {
    std::weak_ptr<bool> alive = alive_;
    asio::post(io_, [alive, done = std::move(done), seq, ok, why] {
      if (alive.lock()) done(seq, ok, why);
    });
  }

  void set_state(LinkState s) {
    if (s == state_) return;
    log_->info("radio link {} -> {}{}", to_string(state_), to_string(s),
               s == LinkState::down && !last_error_.empty() ? " (" + last_error_ + ")" : "");
    state_ = s;
  }

  void open_port() {
    if (stopped_) return;
    std::string err = port_->open();
    if (!err.empty()) {
      if (err != last_error_) log_->warn("{}", err);
      last_error_ = err;
      set_state(LinkState::down);
      next_open_ = env_.real_ms() + opt_.reopen_ms;
      return;
    }
    log_->info("radio modem on {} at {} baud, MTU {} (payload {})", opt_.line.port, opt_.line.baud,
               opt_.line.mtu, mtu());
    set_state(LinkState::connecting);
    last_ping_ = 0;
    send_ping();
  }

  void on_lost(const std::string& why) {
    log_->warn("radio modem lost: {}", why);
    last_error_ = why;
    set_state(LinkState::down);
    fail_inflight("modem lost");
    next_open_ = env_.real_ms() + opt_.reopen_ms;
  }

  void send_ping() {
    radio::Frame f;
    f.type = radio::FrameType::ping;
    f.station_tag = tag_;
    f.sequence = ++ping_seq_;
    f.payload.assign(station_.begin(), station_.end());
    port_->send(f);
    last_ping_ = env_.real_ms();
    last_sent_ = last_ping_;
  }

  void on_frame(const radio::Frame& f) {
    if (f.station_tag != tag_) return;  // another station's traffic on a shared channel
    std::int64_t now = env_.real_ms();
    switch (f.type) {
      case radio::FrameType::pong: {
        if (f.sequence > ping_seq_ || f.sequence + 16 < ping_seq_) return;  // stale or foreign
        last_heard_ = now;
        bool ready = f.payload[0] == 1;
        if (ready) {
          last_error_.clear();
          set_state(LinkState::up);
        } else {
          if (last_error_ != "the relay has no broker connection")
            log_->warn("the relay answers but has no broker connection");
          last_error_ = "the relay has no broker connection";
          set_state(LinkState::connecting);
          fail_inflight(last_error_);
        }
        return;
      }
      case radio::FrameType::ack: {
        last_heard_ = now;
        auto it = inflight_.find(f.sequence);
        if (it == inflight_.end()) return;  // a late ack for a retransmission already answered
        auto done = std::move(it->second.done);
        inflight_.erase(it);
        done(f.sequence, true, {});
        return;
      }
      case radio::FrameType::command: {
        last_heard_ = now;
        radio::Frame ack{radio::FrameType::ack, tag_, f.sequence, {}};
        port_->send(ack);
        if (seen_commands_.count(f.sequence)) return;  // our ack was lost: answer again only
        seen_commands_.insert(f.sequence);
        seen_order_.push_back(f.sequence);
        if (seen_order_.size() > 256) {
          seen_commands_.erase(seen_order_.front());
          seen_order_.pop_front();
        }
        if (command_handler_) command_handler_(f.payload);
        return;
      }
      case radio::FrameType::data:
      case radio::FrameType::ping:
        return;  // shore-bound frames (our own echo, another station)
    }
  }

  void fail_inflight(const std::string& why) {
    auto pending = std::move(inflight_);
    inflight_.clear();
    for (auto& [seq, f] : pending) post_done(std::move(f.done), seq, false, why);
  }

  void schedule_tick() {
    tick_ = env_.start_real_timer(50, [this] {
      if (stopped_) return;
      tick();
      schedule_tick();
    });
  }

  void tick() {
    std::int64_t now = env_.real_ms();
    if (!port_->is_open()) {
      if (now >= next_open_) open_port();
      return;
    }
    if (state_ == LinkState::up && now - last_heard_ > opt_.link_timeout_ms) {
      last_error_ = "no answer from the relay for " + std::to_string(opt_.link_timeout_ms) + " ms";
      log_->warn("{}", last_error_);
      set_state(LinkState::connecting);
      fail_inflight(last_error_);
    }
    // Retransmit or give up.
    std::vector<std::uint64_t> expired;
    for (auto& [seq, f] : inflight_) {
      if (now < f.deadline) continue;
      if (f.tries > opt_.retries) {
        expired.push_back(seq);
        continue;
      }
      f.tries++;
      f.deadline = now + opt_.ack_timeout_ms;
      retransmissions_++;
      port_->send(f.frame);
      last_sent_ = now;
    }
    for (auto seq : expired) {
      auto done = std::move(inflight_[seq].done);
      int tries = inflight_[seq].tries;
      inflight_.erase(seq);
      done(seq, false, "no radio acknowledgement after " + std::to_string(tries) + " tries");
    }
    // Ping: while not up, every ack timeout; while up, when idle.
    std::int64_t every = state_ == LinkState::up
                             ? opt_.ping_interval_ms
                             : std::min(opt_.ack_timeout_ms, opt_.ping_interval_ms);
    auto since = state_ == LinkState::up ? std::max(last_sent_, last_ping_) : last_ping_;
    if (now - since >= every) send_ping();
  }

  asio::io_context& io_;
  os::Env& env_;
  SerialRadioOptions opt_;
  std::string station_;
  std::uint16_t tag_;
  os::Timer tick_;  // every 50 ms real time
  std::shared_ptr<spdlog::logger> log_;
  std::shared_ptr<bool> alive_;
  std::unique_ptr<RadioPort> port_;
  LinkState state_ = LinkState::down;
  std::string last_error_;
  bool stopped_ = true;
  std::map<std::uint64_t, Inflight> inflight_;
  std::uint64_t ping_seq_ = 0, retransmissions_ = 0;
  std::int64_t last_heard_ = 0, last_ping_ = 0, last_sent_ = 0, next_open_ = 0;  // real ms
  std::set<std::uint64_t> seen_commands_;
  std::deque<std::uint64_t> seen_order_;
  CommandHandler command_handler_;
};

void validate(const config::StationConfig& cfg, config::Problems& p) {
  read_serial_radio_options(cfg, p);
}

std::unique_ptr<UplinkBackend> create(BackendContext& ctx) {
  config::Problems p;
  auto o = read_serial_radio_options(ctx.config, p);
  return std::make_unique<SerialRadioBackend>(ctx, std::move(o));
}

}  // namespace

BackendFactory serial_radio_backend_factory() {
  return {"serial-radio", "transparent serial radio modem to a shore relay (tarn relay)", validate,
          create};
}

}  // namespace tarn::uplink
