#include "daemon/uplink/radio_port.h"

#include <fcntl.h>
#include <sys/file.h>
#include <termios.h>
#include <unistd.h>

#include <boost/asio/write.hpp>
#include <cerrno>
#include <cstring>

namespace tarn::uplink {

namespace asio = boost::asio;
using codec::radio::Frame;

namespace {

struct BaudRate {
  int baud;
  speed_t code;
};
constexpr BaudRate kBauds[] = {{1200, B1200},     {2400, B2400},     {4800, B4800},
                               {9600, B9600},     {19200, B19200},   {38400, B38400},
                               {57600, B57600},   {115200, B115200}, {230400, B230400},
                               {460800, B460800}, {921600, B921600}};

std::string allowed_bauds() {
  std::string s;
  for (auto& b : kBauds) s += (s.empty() ? "" : ", ") + std::to_string(b.baud);
  return s;
}

}  // namespace

void read_radio_port_options(config::ObjectReader& r, RadioPortOptions& o) {
  r.string("port", o.port, config::Need::required);
  if (r.integer("baud", o.baud, 1, 10000000)) {
    bool known = false;
    for (auto& b : kBauds) known |= b.baud == o.baud;
    if (!known)
      r.problems().add(r.pointer_of("baud"),
                       "is " + std::to_string(o.baud) + "; allowed: " + allowed_bauds());
  }
  r.integer("data_bits", o.data_bits, 7, 8);
  r.one_of("parity", o.parity, {"none", "even", "odd"});
  r.integer("stop_bits", o.stop_bits, 1, 2);
  r.one_of("flow_control", o.flow_control, {"none", "rts_cts"});
  std::int64_t mtu = std::int64_t(o.mtu);
  // 64: leaves a payload of at least 32 bytes, the codec's smallest MTU.
  if (r.integer("mtu", mtu, 64, std::int64_t(codec::radio::kMaxRadioMtu))) o.mtu = std::size_t(mtu);
}

RadioPort::RadioPort(asio::io_context& io, RadioPortOptions opt, FrameHandler on_frame,
                     LostHandler on_lost)
    : io_(io),
      opt_(std::move(opt)),
      on_frame_(std::move(on_frame)),
      on_lost_(std::move(on_lost)),
      splitter_(opt_.mtu),
      rbuf_(1024),
      alive_(std::make_shared<bool>(true)) {}

RadioPort::~RadioPort() {
  *alive_ = false;
  close();
}

std::string RadioPort::open() {
  close();
  int fd = ::open(opt_.port.c_str(), O_RDWR | O_NOCTTY | O_NONBLOCK | O_CLOEXEC);
  if (fd < 0) return "cannot open " + opt_.port + ": " + std::strerror(errno);
  if (::flock(fd, LOCK_EX | LOCK_NB) != 0) {
    int e = errno;
    ::close(fd);
    return "cannot open " + opt_.port + ": " +
           (e == EWOULDBLOCK ? std::string("in use by another process") : std::strerror(e));
  }
  termios tio{};
  if (::tcgetattr(fd, &tio) != 0) {
    int e = errno;
    ::close(fd);
    return "cannot configure " + opt_.port + ": " + std::strerror(e);
  }
  ::cfmakeraw(&tio);
  speed_t speed = B9600;
  for (auto& b : kBauds)
    if (b.baud == opt_.baud) speed = b.code;
  ::cfsetspeed(&tio, speed);
  tio.c_cflag |= CLOCAL | CREAD;
  tio.c_cflag &= ~tcflag_t(CSIZE | PARENB | PARODD | CSTOPB | CRTSCTS);
  tio.c_cflag |= opt_.data_bits == 7 ? CS7 : CS8;
  if (opt_.parity != "none") tio.c_cflag |= PARENB | (opt_.parity == "odd" ? PARODD : 0);
  if (opt_.stop_bits == 2) tio.c_cflag |= CSTOPB;
  if (opt_.flow_control == "rts_cts") tio.c_cflag |= CRTSCTS;
  tio.c_cc[VMIN] = 1;
  tio.c_cc[VTIME] = 0;
  if (::tcsetattr(fd, TCSANOW, &tio) != 0) {
    int e = errno;
    ::close(fd);
    return "cannot configure " + opt_.port + ": " + std::strerror(e);
  }
  ::tcflush(fd, TCIOFLUSH);
  sd_.emplace(io_, fd);
  writing_ = false;
  wqueue_.clear();
  read_more();
  return {};
}

void RadioPort::close() {
  if (!sd_) return;
  boost::system::error_code ec;
  sd_->cancel(ec);
  sd_->close(ec);
  sd_.reset();
  wqueue_.clear();
  writing_ = false;
}

bool RadioPort::send(const Frame& f) {
  if (!sd_) return false;
  auto wire = codec::radio::encode_frame(f, opt_.mtu);
  if (!wire.ok()) return false;
  // The queue holds a window of data frames plus acks and pings; a radio that
  // stops taking bytes must not grow it without bound.
  if (wqueue_.size() >= 64) {
    counters_.dropped_out++;
    return false;
  }
  wqueue_.push_back(std::move(*wire));
  if (!writing_) write_next();
  return true;
}

void RadioPort::write_next() {
  if (!sd_ || wqueue_.empty()) {
    writing_ = false;
    return;
  }
  writing_ = true;
  std::weak_ptr<bool> alive = alive_;
  asio::async_write(*sd_, asio::buffer(wqueue_.front()),
                    [this, alive](boost::system::error_code ec, std::size_t n) {
                      if (!alive.lock() || ec == asio::error::operation_aborted) return;
                      if (ec) return lost("write to " + opt_.port + ": " + ec.message());
                      if (wqueue_.empty()) return;
                      counters_.frames_out++;
                      counters_.bytes_out += n;
                      wqueue_.pop_front();
                      write_next();
                    });
}

void RadioPort::read_more() {
  if (!sd_) return;
  std::weak_ptr<bool> alive = alive_;
  sd_->async_read_some(
      asio::buffer(rbuf_), [this, alive](boost::system::error_code ec, std::size_t n) {
        if (!alive.lock() || ec == asio::error::operation_aborted) return;
        if (ec) return lost("read from " + opt_.port + ": " + ec.message());
        splitter_.feed({rbuf_.data(), n}, [this](std::span<const std::uint8_t> stuffed) {
          auto f = codec::radio::decode_frame(stuffed);
          if (!f.ok()) {
            counters_.frames_bad++;
            return;
          }
          counters_.frames_in++;
          on_frame_(*f);
        });
        read_more();
      });
}

void RadioPort::lost(const std::string& why) {
  close();
  if (on_lost_) on_lost_(why);
}

}  // namespace tarn::uplink
