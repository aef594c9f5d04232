#include "daemon/uplink/spool_backend.h"

#include <dirent.h>
#include <sys/stat.h>
#include <unistd.h>

#include <boost/asio/post.hpp>
#include <cerrno>
#include <cstdio>
#include <cstring>

#include "config/json_reader.h"
#include "drivers/os/logging.h"

namespace tarn::uplink {

namespace asio = boost::asio;
using config::Need;
using config::ObjectReader;

SpoolOptions read_spool_options(const config::StationConfig& cfg, config::Problems& p) {
  SpoolOptions o;
  ObjectReader r(cfg.uplink.options, "/uplink/options", p);
  if (r.string("dir", o.dir, Need::required)) {
    struct stat st {};
    if (::stat(o.dir.c_str(), &st) != 0)
      p.add("/uplink/options/dir", "\"" + o.dir + "\": " + std::strerror(errno) +
                                       "; allowed: an existing directory the daemon can write");
    else if (!S_ISDIR(st.st_mode))
      p.add("/uplink/options/dir",
            "\"" + o.dir + "\" is not a directory; allowed: an existing writable directory");
    else if (::access(o.dir.c_str(), W_OK | X_OK) != 0)
      p.add("/uplink/options/dir", "\"" + o.dir + "\" is not writable (" + std::strerror(errno) +
                                       "); allowed: a directory the daemon can write");
  }
  r.integer("max_files", o.max_files, 1, 10000000);
  std::int64_t mtu = std::int64_t(o.mtu);
  if (r.integer("mtu", mtu, 32, 65535)) o.mtu = std::size_t(mtu);
  r.finish();
  return o;
}

std::string spool_file_name(const std::string& station, std::uint64_t sequence, PacketKind kind) {
  char seq[24];
  std::snprintf(seq, sizeof seq, "%012llu", static_cast<unsigned long long>(sequence));
  return station + "-" + seq + "-" + topic_suffix(kind) + ".pkt";
}

namespace {

std::string errno_text(const char* what, const std::string& path) {
  return std::string(what) + " " + path + ": " + std::strerror(errno);
}

class SpoolBackend final : public UplinkBackend {
 public:
  SpoolBackend(BackendContext& ctx, SpoolOptions opt)
      : io_(ctx.io),
        env_(ctx.env),
        opt_(std::move(opt)),
        station_(ctx.config.station.id),
        log_(os::logger("uplink")),
        alive_(std::make_shared<bool>(true)) {}
  ~SpoolBackend() override { *alive_ = false; }

  void start() override {
    stopped_ = false;
    check_dir();
  }
  void stop() override {
    stopped_ = true;
    timer_.cancel();
    set_state(LinkState::stopping);
  }
  LinkState state() const override { return state_; }
  std::string last_error() const override { return last_error_; }
  std::size_t mtu() const override { return opt_.mtu; }
  std::size_t free_slots() const override { return state_ == LinkState::up ? 16 : 0; }
  std::uint64_t bytes_sent() const override { return bytes_sent_; }
  void on_command(CommandHandler) override {}  // a spool has no downlink

  void send(OutgoingPacket p, AckHandler done) override {
    std::uint64_t seq = p.sequence;
    std::string err = write_packet(p);
    std::weak_ptr<bool> alive = alive_;
    asio::post(io_, [alive, done = std::move(done), seq, err] {
      if (alive.lock()) done(seq, err.empty(), err);
    });
  }

 private:
  std::string write_packet(const OutgoingPacket& p) {
    std::string name = spool_file_name(station_, p.sequence, p.kind);
    struct stat st {};
    // A resend of a packet already spooled replaces its file: no new file.
    bool existed = ::stat((opt_.dir + "/" + name).c_str(), &st) == 0;
    if (!existed && files_ >= opt_.max_files) {
      scan();  // the uploader may have taken some
      if (files_ >= opt_.max_files) {
        if (!full_logged_)
          log_->warn("spool {} is full ({} files, max_files {}): packets stay in the outbox",
                     opt_.dir, files_, opt_.max_files);
        full_logged_ = true;
        return "spool full (" + std::to_string(files_) + " files, max_files " +
               std::to_string(opt_.max_files) + ")";
      }
    }
    if (full_logged_) log_->info("spool {} has room again ({} files)", opt_.dir, files_);
    full_logged_ = false;
    // Durably: "<dir>/.<name>.tmp", fsync, rename, fsync of the directory.
    std::string err = env_.write_file_atomic(opt_.dir + "/" + name,
                                             std::string(p.payload.begin(), p.payload.end()));
    if (!err.empty()) {
      log_->warn("spool: {}", err);
      last_error_ = err;
      set_state(LinkState::down);
      schedule_check();
      return err;
    }
    if (!existed) files_++;
    bytes_sent_ += p.payload.size();
    return {};
  }

  // Counts this station's packet files and removes its temp files left by a
  // crash between create and rename (their packets are still in the outbox).
  bool scan() {
    DIR* d = ::opendir(opt_.dir.c_str());
    if (!d) {
      last_error_ = errno_text("cannot read directory", opt_.dir);
      return false;
    }
    std::string prefix = station_ + "-", tmp_prefix = "." + station_ + "-";
    std::int64_t n = 0;
    while (dirent* e = ::readdir(d)) {
      std::string name = e->d_name;
      auto ends_with = [&](const char* s) {
        std::size_t k = std::strlen(s);
        return name.size() >= k && name.compare(name.size() - k, k, s) == 0;
      };
      if (name.rfind(prefix, 0) == 0 && ends_with(".pkt"))
        n++;
      else if (name.rfind(tmp_prefix, 0) == 0 && ends_with(".tmp") && !scanned_once_)
        ::unlink((opt_.dir + "/" + name).c_str());
    }
    ::closedir(d);
    files_ = n;
    scanned_once_ = true;
    return true;
  }

  void check_dir() {
    if (stopped_) return;
    if (::access(opt_.dir.c_str(), W_OK | X_OK) != 0) {
      std::string e = errno_text("cannot write", opt_.dir);
      if (e != last_error_) log_->warn("spool: {}", e);
      last_error_ = e;
      set_state(LinkState::down);
      schedule_check();
      return;
    }
    if (!scan()) {
      set_state(LinkState::down);
      schedule_check();
      return;
    }
    last_error_.clear();
    set_state(LinkState::up);
  }

  void schedule_check() {
    if (stopped_) return;
    std::weak_ptr<bool> alive = alive_;
    timer_ = env_.start_real_timer(5000, [this, alive] {
      if (alive.lock()) check_dir();
    });
  }

  void set_state(LinkState s) {
    if (s == state_) return;
    log_->info("spool {}: link {} -> {}{}", opt_.dir, to_string(state_), to_string(s),
               s == LinkState::up ? " (" + std::to_string(files_) + " files waiting)" : "");
    state_ = s;
  }

  asio::io_context& io_;
  os::Env& env_;
  SpoolOptions opt_;
  std::string station_;
  os::Timer timer_;  // real time: looks at the directory again
  std::shared_ptr<spdlog::logger> log_;
  std::shared_ptr<bool> alive_;
  LinkState state_ = LinkState::down;
  std::string last_error_;
  bool stopped_ = true, full_logged_ = false, scanned_once_ = false;
  std::int64_t files_ = 0;
  std::uint64_t bytes_sent_ = 0;
};

void validate(const config::StationConfig& cfg, config::Problems& p) {
  read_spool_options(cfg, p);
}

std::unique_ptr<UplinkBackend> create(BackendContext& ctx) {
  config::Problems p;
  SpoolOptions o = read_spool_options(ctx.config, p);
  return std::make_unique<SpoolBackend>(ctx, std::move(o));
}

}  // namespace

BackendFactory spool_backend_factory() {
  return {"spool", "one file per packet in a directory (atomic rename, fsync)", validate, create};
}

}  // namespace tarn::uplink
