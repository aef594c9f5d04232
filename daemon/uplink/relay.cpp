#include "daemon/uplink/relay.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <boost/asio/post.hpp>
#include <cerrno>
#include <cstring>
#include <fstream>
#include <regex>
#include <sstream>

#include "config/json_reader.h"
#include "daemon/uplink/mqtt_backend.h"
#include "daemon/uplink/serial_radio_backend.h"
#include "drivers/os/logging.h"

namespace tarn::uplink {

namespace asio = boost::asio;
namespace radio = codec::radio;
using config::Need;
using config::ObjectReader;

// ---------------------------------------------------------------- config

namespace {

void check_writable_dir(const std::string& dir, const std::string& ptr, config::Problems& p) {
  struct stat st {};
  if (::stat(dir.c_str(), &st) != 0)
    p.add(ptr, "\"" + dir + "\": " + std::strerror(errno) +
                   "; allowed: an existing directory the relay can write");
  else if (!S_ISDIR(st.st_mode))
    p.add(ptr, "\"" + dir + "\" is not a directory; allowed: an existing writable directory");
  else if (::access(dir.c_str(), W_OK | X_OK) != 0)
    p.add(ptr, "\"" + dir + "\" is not writable; allowed: a directory the relay can write");
}

// The broker block is the mqtt backend's own option block: it validates it.
config::StationConfig broker_station(const nlohmann::json& broker, const std::string& station) {
  config::StationConfig c;
  c.station.id = station;
  c.uplink.backend = "mqtt";
  c.uplink.options = broker;
  if (c.uplink.options.is_object()) {
    // One client per station: ids must differ from each other and from the station's own.
    std::string base = broker.value("client_id", std::string("tarn-relay"));
    c.uplink.options["client_id"] = base + "-" + station;
  }
  return c;
}

}  // namespace

std::optional<RelayConfig> load_relay_config(const std::string& path, config::Problems& p) {
  std::ifstream in(path);
  if (!in) {
    p.add("", "cannot read the file: " + std::string(std::strerror(errno)));
    return std::nullopt;
  }
  config::Json j;
  try {
    j = config::Json::parse(in, nullptr, true, true);
  } catch (const config::Json::parse_error& e) {
    p.add("", std::string("not valid JSON: ") + e.what());
    return std::nullopt;
  }
  RelayConfig c;
  ObjectReader r(j, "", p);
  if (const config::Json* m = r.object("modem", Need::required)) {
    ObjectReader mr(*m, "/modem", p);
    read_radio_port_options(mr, c.modem);
    mr.integer("reopen_ms", c.reopen_ms, 100, 3600000);
    mr.integer("command_timeout_ms", c.command_timeout_ms, 20, 120000);
    mr.finish();
  }
  if (const config::Json* s = r.array("stations", Need::required)) {
    static const std::regex id_re("[a-z0-9-]{1,32}");
    std::map<std::uint16_t, std::string> tags;
    if (s->empty()) p.add("/stations", "is empty; allowed: one or more station ids");
    for (std::size_t i = 0; i < s->size(); ++i) {
      std::string ptr = "/stations/" + std::to_string(i);
      const auto& v = (*s)[i];
      if (!v.is_string() || !std::regex_match(v.get<std::string>(), id_re)) {
        p.add(ptr, "is " + v.dump() + "; allowed: a station id of 1-32 characters a-z 0-9 -");
        continue;
      }
      std::string id = v.get<std::string>();
      auto tag = radio::station_tag(id);
      if (tags.count(tag)) {
        p.add(ptr, "\"" + id + "\" has the same radio tag as \"" + tags[tag] +
                       "\" (a repeat, or a 1-in-65536 clash); allowed: distinct stations");
        continue;
      }
      tags[tag] = id;
      c.stations.push_back(id);
    }
  }
  if (const config::Json* b = r.object("broker", Need::required)) {
    c.broker = *b;
    config::Problems inner;
    read_mqtt_options(broker_station(*b, c.stations.empty() ? "x" : c.stations[0]), inner);
    for (auto& q : inner.list()) {
      std::string where = q.where;
      if (where.rfind("/uplink/options", 0) == 0) where = "/broker" + where.substr(15);
      p.add(where, q.message);
    }
  }
  if (r.string("state_dir", c.state_dir, Need::required))
    check_writable_dir(c.state_dir, "/state_dir", p);
  std::int64_t seen = std::int64_t(c.seen_per_station);
  if (r.integer("seen_per_station", seen, 16, 1000000)) c.seen_per_station = std::size_t(seen);
  if (const config::Json* l = r.object("log")) {
    ObjectReader lr(*l, "/log", p);
    lr.one_of("level", c.log_level, {"trace", "debug", "info", "warn", "error"});
    lr.finish();
  }
  r.finish();
  if (!p.empty()) return std::nullopt;
  return c;
}

// ---------------------------------------------------------------- seen sequences

SeenSequences::SeenSequences(os::Env& env, std::string path, std::size_t per_station)
    : env_(env), path_(std::move(path)), per_station_(per_station) {}

SeenSequences::~SeenSequences() {
  if (fd_ >= 0) ::close(fd_);
}

void SeenSequences::remember(const std::string& station, std::uint64_t seq) {
  auto& s = seen_[station];
  if (!s.set.insert(seq).second) return;
  s.order.push_back(seq);
  while (s.order.size() > per_station_) {
    s.set.erase(s.order.front());
    s.order.pop_front();
  }
}

std::string SeenSequences::load() {
  if (auto text = env_.read_file(path_)) {
    std::istringstream in(*text);
    std::string line;
    while (std::getline(in, line)) {
      std::istringstream ls(line);
      std::string station;
      std::uint64_t seq = 0;
      std::string rest;
      // "station sequence": anything else (a line torn by a power cut) is skipped.
      if (ls >> station >> seq && !(ls >> rest)) remember(station, seq);
      lines_++;
    }
  }
  return compact();
}

std::string SeenSequences::compact() {
  if (fd_ >= 0) ::close(fd_);
  fd_ = -1;
  std::string text;
  std::size_t n = 0;
  for (auto& [station, s] : seen_)
    for (auto seq : s.order) {
      text += station + " " + std::to_string(seq) + "\n";
      n++;
    }
  if (auto e = env_.write_file_atomic(path_, text); !e.empty()) return e;
  lines_ = n;
  fd_ = ::open(path_.c_str(), O_WRONLY | O_APPEND | O_CLOEXEC);
  if (fd_ < 0) return "cannot open " + path_ + ": " + std::strerror(errno);
  return {};
}

bool SeenSequences::contains(const std::string& station, std::uint64_t seq) const {
  auto it = seen_.find(station);
  return it != seen_.end() && it->second.set.count(seq);
}

std::size_t SeenSequences::size(const std::string& station) const {
  auto it = seen_.find(station);
  return it == seen_.end() ? 0 : it->second.set.size();
}

std::string SeenSequences::add(const std::string& station, std::uint64_t seq) {
  remember(station, seq);
  if (fd_ < 0) return "the seen-sequence file " + path_ + " is not open";
  std::string line = station + " " + std::to_string(seq) + "\n";
  if (::write(fd_, line.data(), line.size()) != ssize_t(line.size()) || ::fdatasync(fd_) != 0)
    return "cannot append to " + path_ + ": " + std::strerror(errno);
  if (++lines_ > 2 * per_station_ * std::max<std::size_t>(1, seen_.size())) return compact();
  return {};
}

// ---------------------------------------------------------------- relay

struct Relay::StationLink {
  std::string id;
  std::uint16_t tag = 0;
  std::unique_ptr<config::StationConfig> cfg;  // stable: the backend context refers to it
  std::unique_ptr<BackendContext> ctx;
  std::unique_ptr<UplinkBackend> mqtt;
  std::set<std::uint64_t> publishing;  // handed to the broker, no PUBACK yet
  struct Command {
    std::uint64_t seq;
    std::vector<std::uint8_t> payload;
    int tries = 0;
    std::int64_t next_ms = 0;
  };
  std::deque<Command> commands;
  bool heard = false;
  bool warned_not_ready = false;
};

Relay::Relay(asio::io_context& io, os::Env& env, RelayConfig cfg)
    : io_(io),
      env_(env),
      cfg_(std::move(cfg)),
      seen_(env_, cfg_.state_dir + "/relay-seen.log", cfg_.seen_per_station),
      alive_(std::make_shared<bool>(true)) {
  modem_ = std::make_unique<RadioPort>(
      io_, cfg_.modem, [this](const radio::Frame& f) { on_frame(f); },
      [this](const std::string& why) {
        os::logger("relay")->warn("modem lost: {}", why);
        next_open_ms_ = env_.real_ms() + cfg_.reopen_ms;
      });
}

Relay::~Relay() {
  *alive_ = false;
  stop();
}

std::string Relay::start() {
  auto log = os::logger("relay");
  if (auto err = seen_.load(); !err.empty()) return err;
  stopped_ = false;
  std::string boot = std::to_string(env_.wall_ms() / 1000);
  std::uint64_t first_command = std::uint64_t(env_.wall_ms());  // unique across restarts
  for (auto& id : cfg_.stations) {
    auto s = std::make_unique<StationLink>();
    s->id = id;
    s->tag = radio::station_tag(id);
    s->cfg = std::make_unique<config::StationConfig>(broker_station(cfg_.broker, id));
    s->ctx = std::make_unique<BackendContext>(BackendContext{io_, env_, *s->cfg, boot});
    s->mqtt = find_backend("mqtt")->create(*s->ctx);
    StationLink* raw = s.get();
    std::weak_ptr<bool> alive = alive_;
    auto next_seq = std::make_shared<std::uint64_t>(first_command);
    s->mqtt->on_command([this, alive, raw, next_seq](const std::vector<std::uint8_t>& payload) {
      if (!alive.lock()) return;
      raw->commands.push_back({(*next_seq)++, payload, 0, 0});
      send_commands();
    });
    s->mqtt->start();
    log->info("station {}: {} sequences already published on record, radio tag {:04x}", id,
              seen_.size(id), s->tag);
    by_tag_[s->tag] = raw;
    links_.push_back(std::move(s));
  }
  open_modem();
  schedule_tick();
  return {};
}

void Relay::stop() {
  if (stopped_) return;
  stopped_ = true;
  tick_.cancel();
  modem_->close();
  for (auto& s : links_) s->mqtt->stop();
  auto& c = counters_;
  os::logger("relay")->info(
      "relay stopped: {} published, {} duplicates, {} refused while the broker was down, "
      "{} frames from unknown stations, {} commands forwarded; radio: {} frames in, {} damaged",
      c.published, c.duplicates, c.refused_not_ready, c.unknown_station, c.commands_forwarded,
      modem_->counters().frames_in, modem_->counters().frames_bad);
}

void Relay::open_modem() {
  auto err = modem_->open();
  auto log = os::logger("relay");
  if (!err.empty()) {
    log->warn("{}", err);
    next_open_ms_ = env_.real_ms() + cfg_.reopen_ms;
    return;
  }
  log->info("modem on {} at {} baud, MTU {}", cfg_.modem.port, cfg_.modem.baud, cfg_.modem.mtu);
}

void Relay::schedule_tick() {
  tick_ = env_.start_real_timer(100, [this] {
    if (stopped_) return;
    if (!modem_->is_open() && env_.real_ms() >= next_open_ms_) open_modem();
    send_commands();
    schedule_tick();
  });
}

void Relay::ack(const StationLink& s, std::uint64_t seq) {
  modem_->send({radio::FrameType::ack, s.tag, seq, {}});
}

void Relay::on_frame(const radio::Frame& f) {
  auto it = by_tag_.find(f.station_tag);
  if (it == by_tag_.end()) {
    if (f.type == radio::FrameType::data || f.type == radio::FrameType::ping) {
      if (counters_.unknown_station++ == 0)
        os::logger("relay")->warn(
            "frames from a station not in this relay's \"stations\" (radio tag {:04x}); ignored",
            f.station_tag);
    }
    return;
  }
  StationLink& s = *it->second;
  switch (f.type) {
    case radio::FrameType::data:
      return on_data(s, f);
    case radio::FrameType::ping:
      return on_ping(s, f);
    case radio::FrameType::ack:
      return on_command_ack(s, f);
    case radio::FrameType::pong:
    case radio::FrameType::command:
      return;  // station-bound: our own echo on a shared channel
  }
}

void Relay::on_ping(StationLink& s, const radio::Frame& f) {
  std::string id(f.payload.begin(), f.payload.end());
  if (id != s.id) return;  // the tag matched by chance; the id must match too
  if (!s.heard) os::logger("relay")->info("station {} heard on the radio", s.id);
  s.heard = true;
  bool ready = s.mqtt->state() == LinkState::up;
  modem_->send({radio::FrameType::pong, s.tag, f.sequence, {std::uint8_t(ready ? 1 : 0)}});
}

void Relay::on_data(StationLink& s, const radio::Frame& f) {
  auto log = os::logger("relay");
  PacketKind kind;
  bool retained = false;
  if (f.payload.size() < 2 || !parse_route_byte(f.payload[0], kind, retained)) {
    log->warn("station {}: data frame {} with an unknown route byte; not acknowledged", s.id,
              f.sequence);
    return;
  }
  if (seen_.contains(s.id, f.sequence)) {
    counters_.duplicates++;  // our ack was lost: acknowledge again, publish nothing
    ack(s, f.sequence);
    return;
  }
  if (s.publishing.count(f.sequence)) {
    counters_.duplicates++;  // the ack follows the PUBACK
    return;
  }
  if (s.mqtt->state() != LinkState::up || s.mqtt->free_slots() == 0) {
    counters_.refused_not_ready++;
    if (!s.warned_not_ready)
      log->warn("station {}: broker not ready ({}); frames not acknowledged", s.id,
                s.mqtt->last_error());
    s.warned_not_ready = true;
    return;
  }
  s.warned_not_ready = false;
  OutgoingPacket p;
  p.sequence = f.sequence;
  p.kind = kind;
  p.retained = retained;
  p.payload.assign(f.payload.begin() + 1, f.payload.end());
  s.publishing.insert(f.sequence);
  std::weak_ptr<bool> alive = alive_;
  StationLink* raw = &s;
  s.mqtt->send(std::move(p), [this, alive, raw](std::uint64_t seq, bool ok, const std::string& e) {
    if (!alive.lock()) return;
    raw->publishing.erase(seq);
    if (!ok) {
      os::logger("relay")->debug("station {}: packet {} not published: {}", raw->id, seq, e);
      return;  // no radio ack: the station sends it again
    }
    counters_.published++;
    if (auto err = seen_.add(raw->id, seq); !err.empty())
      os::logger("relay")->error("{} (a relay restart may publish {} again)", err, seq);
    ack(*raw, seq);
  });
}

void Relay::on_command_ack(StationLink& s, const radio::Frame& f) {
  for (auto it = s.commands.begin(); it != s.commands.end(); ++it)
    if (it->seq == f.sequence) {
      s.commands.erase(it);
      counters_.commands_forwarded++;
      return;
    }
}

void Relay::send_commands() {
  if (!modem_->is_open()) return;
  std::int64_t now = env_.real_ms();
  for (auto& s : links_) {
    while (!s->commands.empty() && s->commands.front().tries >= 3) {
      os::logger("relay")->warn("station {}: command {} not acknowledged after 3 tries; dropped",
                                s->id, s->commands.front().seq);
      s->commands.pop_front();
    }
    if (s->commands.empty()) continue;
    auto& c = s->commands.front();  // one at a time, in order
    if (now < c.next_ms) continue;
    c.tries++;
    c.next_ms = now + cfg_.command_timeout_ms;
    if (!modem_->send({radio::FrameType::command, s->tag, c.seq, c.payload}))
      os::logger("relay")->warn("station {}: command of {} bytes does not fit the radio MTU", s->id,
                                c.payload.size());
  }
}

}  // namespace tarn::uplink
