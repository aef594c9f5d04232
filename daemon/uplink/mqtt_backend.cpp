#include "daemon/uplink/mqtt_backend.h"

#include <sys/stat.h>

#include <mqtt/async_client.h>
#include <boost/asio/post.hpp>
#include <boost/asio/steady_timer.hpp>
#include <fstream>
#include <map>
#include <random>

#include "config/json_reader.h"
#include "drivers/os/logging.h"

namespace tarn::uplink {

namespace asio = boost::asio;
using config::Need;
using config::ObjectReader;

namespace {

struct Secrets {
  std::string username, password;
};

// Reads {"username": "...", "password": "..."}; refuses group/world-readable files.
bool read_secrets(const std::string& path, const std::string& ptr, Secrets& out,
                  config::Problems& p) {
  if (!config::check_readable_file(path, ptr, p)) return false;
  struct stat st {};
  ::stat(path.c_str(), &st);
  if (st.st_mode & 077) {
    char mode[8];
    std::snprintf(mode, sizeof mode, "%04o", unsigned(st.st_mode & 07777));
    p.add(ptr, "secrets file \"" + path + "\" has mode " + mode +
                   ", readable by group or others; allowed: 0600 or 0400 (chmod 600 " + path + ")");
    return false;
  }
  std::ifstream in(path);
  config::Json j;
  try {
    j = config::Json::parse(in, nullptr, true, true);
  } catch (const std::exception&) {
    p.add(ptr, "secrets file \"" + path +
                   "\" is not valid JSON; expected {\"username\": ..., \"password\": ...}");
    return false;
  }
  config::Problems inner;
  ObjectReader r(j, "", inner);
  r.string("username", out.username);
  r.string("password", out.password);
  r.any("command_key");  // HMAC key for downlink commands (uplink issue)
  r.finish();
  for (auto& q : inner.list())
    p.add(ptr, "in secrets file \"" + path + "\": " + q.where + ": " + q.message);
  return inner.empty();
}

}  // namespace

MqttOptions read_mqtt_options(const config::StationConfig& cfg, config::Problems& p) {
  MqttOptions o;
  o.client_id = "tarn-" + cfg.station.id;
  ObjectReader r(cfg.uplink.options, "/uplink/options", p);
  r.string("host", o.host);
  r.integer("port", o.port, 1, 65535);
  r.string("client_id", o.client_id);
  if (r.string("topic_prefix", o.topic_prefix) &&
      (o.topic_prefix.empty() || o.topic_prefix.front() == '/' ||
       o.topic_prefix.find_first_of("#+") != std::string::npos))
    p.add("/uplink/options/topic_prefix",
          "is \"" + o.topic_prefix + "\"; allowed: a topic path without leading '/', '#' or '+'");
  r.integer("keepalive_s", o.keepalive_s, 5, 3600);
  r.integer("max_inflight", o.max_inflight, 1, 64);
  std::int64_t mtu = std::int64_t(o.mtu);
  if (r.integer("mtu", mtu, 32, 262144)) o.mtu = std::size_t(mtu);
  if (const config::Json* t = r.object("tls")) {
    o.tls = true;
    ObjectReader tr(*t, "/uplink/options/tls", p);
    if (tr.string("ca_file", o.ca_file, Need::required))
      config::check_readable_file(o.ca_file, "/uplink/options/tls/ca_file", p);
    if (tr.string("cert_file", o.cert_file))
      config::check_readable_file(o.cert_file, "/uplink/options/tls/cert_file", p);
    if (tr.string("key_file", o.key_file))
      config::check_readable_file(o.key_file, "/uplink/options/tls/key_file", p);
    if (o.cert_file.empty() != o.key_file.empty())
      p.add("/uplink/options/tls",
            "has only one of cert_file and key_file; allowed: both or neither");
    tr.boolean("verify_hostname", o.verify_hostname);
    tr.finish();
  }
  if (r.string("secrets_file", o.secrets_file)) {
    Secrets s;
    read_secrets(o.secrets_file, "/uplink/options/secrets_file", s, p);
  }
  r.finish();
  return o;
}

namespace {

// Paho calls exactly one of on_success/on_failure, then never touches the
// listener again, so it deletes itself.
class OneShotListener final : public mqtt::iaction_listener {
 public:
  using Fn = std::function<void(bool ok, std::string error)>;
  explicit OneShotListener(Fn fn) : fn_(std::move(fn)) {}
  void on_success(const mqtt::token&) override {
    fn_(true, {});
    delete this;
  }
  void on_failure(const mqtt::token& tok) override {
    std::string why = describe(tok);
    fn_(false, why);
    delete this;
  }
  static std::string describe(const mqtt::token& tok) {
    int rc = tok.get_return_code();
    std::string s = "code " + std::to_string(rc);
    switch (rc) {
      case 1:
        s = "refused: unacceptable protocol version";
        break;
      case 2:
        s = "refused: client id rejected";
        break;
      case 3:
        s = "refused: server unavailable";
        break;
      case 4:
        s = "refused: bad user name or password";
        break;
      case 5:
        s = "refused: not authorised";
        break;
      case -1:
        s = "connection failed (network or TLS)";
        break;
      default:
        break;
    }
    return s;
  }

 private:
  Fn fn_;
};

class MqttBackend final : public UplinkBackend {
 public:
  MqttBackend(BackendContext& ctx, MqttOptions opt, Secrets secrets)
      : io_(ctx.io),
        opt_(std::move(opt)),
        secrets_(std::move(secrets)),
        station_(ctx.config.station.id),
        boot_time_(ctx.boot_time),
        timer_(ctx.io),
        log_(os::logger("uplink")),
        alive_(std::make_shared<bool>(true)) {
    base_ = opt_.topic_prefix + "/" + station_ + "/";
    std::string uri =
        std::string(opt_.tls ? "ssl://" : "tcp://") + opt_.host + ":" + std::to_string(opt_.port);
    client_ = std::make_unique<mqtt::async_client>(uri, opt_.client_id);
    std::weak_ptr<bool> alive = alive_;
    client_->set_connection_lost_handler([this, alive, io = &io_](const std::string& cause) {
      asio::post(*io, [this, alive, cause] {
        if (alive.lock()) lost(cause.empty() ? "connection lost" : cause);
      });
    });
    client_->set_message_callback([this, alive, io = &io_](mqtt::const_message_ptr msg) {
      std::string payload = msg->to_string();
      asio::post(*io, [this, alive, payload] {
        if (!alive.lock() || !command_handler_) return;
        command_handler_(std::vector<std::uint8_t>(payload.begin(), payload.end()));
      });
    });
  }

  ~MqttBackend() override {
    *alive_ = false;
    try {
      // After stop() (which already tried, within the stop's time budget) no
      // second wait here.
      if (!stopped_ && client_->is_connected())
        client_->disconnect(std::chrono::milliseconds(100))
            ->wait_for(std::chrono::milliseconds(200));
    } catch (...) {
    }
  }

  void start() override {
    stopped_ = false;
    if (opt_.tls && !opt_.verify_hostname && !warned_no_hostname_check_) {
      warned_no_hostname_check_ = true;
      log_->warn(
          "TLS host-name verification is off (uplink.options.tls.verify_hostname false): any "
          "server with a certificate from {} is accepted",
          opt_.ca_file);
    }
    connect();
  }

  void stop() override {
    stopped_ = true;
    timer_.cancel();
    if (state_ == LinkState::up) {
      try {
        // Orderly: the retained status says offline, then disconnect (no last will).
        // Bounded to 0.7 s in all: a daemon stop must end within 2 s.
        client_->publish(base_ + "status", "offline", 1, true)
            ->wait_for(std::chrono::milliseconds(300));
        client_->disconnect(std::chrono::milliseconds(200))
            ->wait_for(std::chrono::milliseconds(400));
      } catch (const std::exception& e) {
        log_->debug("disconnect: {}", e.what());
      }
    }
    set_state(LinkState::stopping);
    fail_inflight("stopping");
  }

  LinkState state() const override { return state_; }
  std::string last_error() const override { return last_error_; }
  std::size_t mtu() const override { return opt_.mtu; }
  std::size_t free_slots() const override {
    return inflight_.size() >= std::size_t(opt_.max_inflight)
               ? 0
               : std::size_t(opt_.max_inflight) - inflight_.size();
  }
  std::uint64_t bytes_sent() const override { return bytes_sent_; }
  void on_command(CommandHandler h) override { command_handler_ = std::move(h); }

  void send(OutgoingPacket p, AckHandler done) override {
    std::string topic = base_ + topic_suffix(p.kind);
    // Estimate of the bytes on the wire: MQTT PUBLISH fixed header (2-5),
    // topic length and name, packet id, payload; PUBACK 4 bytes; TCP/IP headers not included.
    bytes_sent_ +=
        2 + (p.payload.size() > 127 ? 2 : 0) + 2 + topic.size() + 2 + p.payload.size() + 4;
    std::uint64_t seq = p.sequence;
    std::uint64_t id = ++next_id_;
    inflight_[id] = {seq, std::move(done)};
    std::weak_ptr<bool> alive = alive_;
    auto* l = new OneShotListener([this, alive, id, seq, io = &io_](bool ok, std::string err) {
      asio::post(*io, [this, alive, id, seq, ok, err] {
        if (!alive.lock()) return;
        auto it = inflight_.find(id);
        if (it == inflight_.end()) return;  // already failed by a connection loss
        auto fn = std::move(it->second.second);
        inflight_.erase(it);
        fn(seq, ok, err);
      });
    });
    try {
      auto msg = mqtt::make_message(topic, p.payload.data(), p.payload.size(), 1, p.retained);
      client_->publish(msg, nullptr, *l);
    } catch (const std::exception& e) {
      delete l;
      auto fn = std::move(inflight_[id].second);
      inflight_.erase(id);
      asio::post(io_, [fn, seq, err = std::string(e.what())] { fn(seq, false, err); });
    }
  }

 private:
  void set_state(LinkState s) {
    if (s == state_) return;
    log_->info("link {} -> {}", to_string(state_), to_string(s));
    state_ = s;
  }

  void connect() {
    if (stopped_) return;
    set_state(LinkState::connecting);
    auto will = mqtt::message(base_ + "status", "offline", 1, true);
    mqtt::connect_options_builder b;
    b.keep_alive_interval(std::chrono::seconds(opt_.keepalive_s))
        .clean_session(true)
        .max_inflight(opt_.max_inflight)
        .connect_timeout(std::chrono::seconds(10))
        .will(will)
        .mqtt_version(MQTTVERSION_3_1_1);
    if (!secrets_.username.empty()) b.user_name(secrets_.username);
    if (!secrets_.password.empty()) b.password(secrets_.password);
    if (opt_.tls) {
      mqtt::ssl_options ssl;
      ssl.set_trust_store(opt_.ca_file);
      if (!opt_.cert_file.empty()) ssl.set_key_store(opt_.cert_file);
      if (!opt_.key_file.empty()) ssl.set_private_key(opt_.key_file);
      ssl.set_enable_server_cert_auth(true);
      ssl.set_verify(opt_.verify_hostname);
      // No ssl error handler: paho.mqtt.cpp 1.2 keeps a pointer to the
      // ssl_options object it was set on, which the builder copies away
      // (seen as a crash in the TLS thread); hint() words the return code.

      b.ssl(std::move(ssl));
    }
    std::weak_ptr<bool> alive = alive_;
    auto* l = new OneShotListener([this, alive, io = &io_](bool ok, std::string err) {
      asio::post(*io, [this, alive, ok, err] {
        if (!alive.lock() || stopped_) return;
        if (ok)
          connected();
        else
          failed(err + hint(err));
      });
    });
    try {
      client_->connect(b.finalize(), nullptr, *l);
    } catch (const std::exception& e) {
      delete l;
      failed(e.what());
    }
  }

  // What a person on SSH can do about a failed connect, from paho's words.
  std::string hint(const std::string& err) const {
    auto has = [&](const char* w) { return err.find(w) != std::string::npos; };
    if (has("not authorized") || has("user name or password") || has("[4]") || has("[5]"))
      return "; the broker refused the username or password (secrets_file " +
             (opt_.secrets_file.empty() ? std::string("not set") : opt_.secrets_file) + ")";
    if (opt_.tls && (has("TCP/TLS connect failure") || has("[-1]") || has("SSL") || has("TLS")))
      return "; TLS handshake or TCP connect failed: check that the broker's certificate is "
             "signed by tls.ca_file " +
             opt_.ca_file + (opt_.verify_hostname ? " and names host " + opt_.host : "") +
             ", and that the broker listens on this port";
    return "";
  }

  void connected() {
    backoff_s_ = 1;
    last_error_.clear();
    set_state(LinkState::up);
    log_->info("connected to {}:{}{} as {}", opt_.host, opt_.port, opt_.tls ? " (TLS)" : "",
               opt_.client_id);
    try {
      client_->publish(base_ + "status",
                       "online version=" + std::string(TARN_VERSION) + " boot=" + boot_time_, 1,
                       true);
      client_->subscribe(base_ + "cmd", 1);
    } catch (const std::exception& e) {
      log_->warn("status/subscribe failed: {}", e.what());
    }
  }

  void failed(const std::string& why) {
    if (why != last_error_) log_->warn("cannot connect to {}:{}: {}", opt_.host, opt_.port, why);
    last_error_ = why;
    set_state(LinkState::down);
    schedule_reconnect();
  }

  void lost(const std::string& why) {
    log_->warn("link lost: {}", why);
    last_error_ = why;
    set_state(LinkState::down);
    fail_inflight("link lost");
    schedule_reconnect();
  }

  void fail_inflight(const std::string& why) {
    auto pending = std::move(inflight_);
    inflight_.clear();
    for (auto& [id, entry] : pending) entry.second(entry.first, false, why);
  }

  void schedule_reconnect() {
    if (stopped_) return;
    // Exponential backoff with jitter: 1 s doubling to 300 s, +-25 %.
    std::uniform_real_distribution<double> jitter(0.75, 1.25);
    double d = double(backoff_s_) * jitter(rng_);
    backoff_s_ = std::min(backoff_s_ * 2, 300);
    timer_.expires_after(std::chrono::milliseconds(std::int64_t(d * 1000)));
    std::weak_ptr<bool> alive = alive_;
    timer_.async_wait([this, alive](boost::system::error_code ec) {
      if (!ec && alive.lock()) connect();
    });
  }

  asio::io_context& io_;
  MqttOptions opt_;
  Secrets secrets_;
  std::string station_, boot_time_, base_;
  asio::steady_timer timer_;
  std::shared_ptr<spdlog::logger> log_;
  std::shared_ptr<bool> alive_;
  std::unique_ptr<mqtt::async_client> client_;
  LinkState state_ = LinkState::down;
  std::string last_error_;
  bool warned_no_hostname_check_ = false;
  bool stopped_ = true;
  int backoff_s_ = 1;
  std::mt19937 rng_{std::random_device{}()};
  std::map<std::uint64_t, std::pair<std::uint64_t, AckHandler>> inflight_;
  std::uint64_t next_id_ = 0;
  std::uint64_t bytes_sent_ = 0;
  CommandHandler command_handler_;
};

void validate(const config::StationConfig& cfg, config::Problems& p) {
  read_mqtt_options(cfg, p);
}

std::unique_ptr<UplinkBackend> create(BackendContext& ctx) {
  config::Problems p;
  MqttOptions o = read_mqtt_options(ctx.config, p);
  Secrets s;
  if (!o.secrets_file.empty()) read_secrets(o.secrets_file, "", s, p);
  return std::make_unique<MqttBackend>(ctx, std::move(o), std::move(s));
}

}  // namespace

BackendFactory mqtt_backend_factory() {
  return {"mqtt", "MQTT 3.1.1 broker over TCP or TLS, QoS 1", validate, create};
}

}  // namespace tarn::uplink
