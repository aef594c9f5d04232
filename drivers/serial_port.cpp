#include "drivers/serial_port.h"

#include <fcntl.h>
#include <libserialport.h>
#include <linux/serial.h>
#include <sys/file.h>
#include <sys/ioctl.h>
#include <termios.h>
#include <unistd.h>

#include <boost/asio/redirect_error.hpp>
#include <boost/asio/use_awaitable.hpp>
#include <boost/asio/write.hpp>
#include <climits>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <memory>

namespace tarn::drivers {

namespace asio = boost::asio;

std::vector<PortInfo> list_ports() {
  std::vector<PortInfo> out;
  sp_port** ports = nullptr;
  if (sp_list_ports(&ports) != SP_OK) return out;
  std::error_code ec;
  std::vector<std::pair<std::string, std::string>> links;  // target -> link
  for (auto& e : std::filesystem::directory_iterator("/dev/serial/by-id", ec)) {
    auto target = std::filesystem::canonical(e.path(), ec);
    if (!ec) links.emplace_back(target.string(), e.path().string());
  }
  for (int i = 0; ports[i]; ++i) {
    PortInfo p;
    p.path = sp_get_port_name(ports[i]);
    if (const char* d = sp_get_port_description(ports[i])) p.description = d;
    switch (sp_get_port_transport(ports[i])) {
      case SP_TRANSPORT_USB: {
        p.transport = "usb";
        sp_get_port_usb_vid_pid(ports[i], &p.usb_vendor, &p.usb_product);
        if (const char* s = sp_get_port_usb_serial(ports[i])) p.usb_serial = s;
        if (const char* s = sp_get_port_usb_manufacturer(ports[i])) p.usb_manufacturer = s;
        if (const char* s = sp_get_port_usb_product(ports[i])) p.usb_product_name = s;
        break;
      }
      case SP_TRANSPORT_BLUETOOTH:
        p.transport = "bluetooth";
        break;
      default:
        p.transport = "native";
    }
    for (auto& [target, link] : links)
      if (target == p.path) p.by_id = link;
    out.push_back(std::move(p));
  }
  sp_free_port_list(ports);
  return out;
}

std::string find_usb_port(const config::UsbIdentity& id) {
  int vid = int(std::strtol(id.vendor_id.c_str(), nullptr, 16));
  int pid = int(std::strtol(id.product_id.c_str(), nullptr, 16));
  for (auto& p : list_ports())
    if (p.transport == "usb" && p.usb_vendor == vid && p.usb_product == pid &&
        (id.serial.empty() || p.usb_serial == id.serial))
      return p.path;
  return {};
}

SerialPort::SerialPort(asio::io_context& io, config::Line line) : io_(io), line_(std::move(line)) {}

SerialPort::~SerialPort() {
  close();
}

static std::string sp_error(const char* what) {
  char* msg = sp_last_error_message();
  std::string s = std::string(what) + ": " + (msg ? msg : "unknown error");
  if (msg) sp_free_error_message(msg);
  return s;
}

std::string SerialPort::open_with_libserialport(const std::string& path, int& fd) {
  if (sp_get_port_by_name(device_.c_str(), &port_) != SP_OK) {
    std::string e = sp_error(("cannot open " + path).c_str());
    port_ = nullptr;
    return e;
  }
  if (sp_open(port_, SP_MODE_READ_WRITE) != SP_OK) {
    busy_ = sp_last_error_code() == EBUSY;
    std::string e = busy_ ? "cannot open " + path + ": in use by another process (TIOCEXCL)"
                          : sp_error(("cannot open " + path).c_str());
    sp_free_port(port_);
    port_ = nullptr;
    return e;
  }
  sp_port_config* cfg = nullptr;
  sp_new_config(&cfg);
  sp_set_config_baudrate(cfg, line_.baud);
  sp_set_config_bits(cfg, line_.data_bits);
  sp_set_config_parity(cfg, line_.parity == "even"  ? SP_PARITY_EVEN
                            : line_.parity == "odd" ? SP_PARITY_ODD
                                                    : SP_PARITY_NONE);
  sp_set_config_stopbits(cfg, line_.stop_bits);
  sp_set_config_flowcontrol(cfg, line_.flow_control == "rts_cts"    ? SP_FLOWCONTROL_RTSCTS
                                 : line_.flow_control == "xon_xoff" ? SP_FLOWCONTROL_XONXOFF
                                                                    : SP_FLOWCONTROL_NONE);
  // Modem-control lines: leave them alone (most RS-485 adapters ignore them).
  sp_set_config_rts(cfg, SP_RTS_INVALID);
  sp_set_config_dtr(cfg, SP_DTR_INVALID);
  sp_set_config_cts(cfg, SP_CTS_INVALID);
  sp_set_config_dsr(cfg, SP_DSR_INVALID);
  sp_return rc = sp_set_config(port_, cfg);
  sp_free_config(cfg);
  if (rc != SP_OK) {
    std::string e = sp_error(("cannot configure " + path).c_str());
    close();
    return e;
  }
  sp_get_port_handle(port_, &fd);
  // libserialport leaves VMIN = VTIME = 0 (it polls itself). The tty layer
  // then reports the descriptor readable with no byte there, and the read
  // returns 0, which Asio takes for end of file: every wait on a real UART
  // would end as "device gone". VMIN 1 makes readable mean a byte arrived.
  termios t{};
  if (::tcgetattr(fd, &t) == 0) {
    t.c_cc[VMIN] = 1;
    t.c_cc[VTIME] = 0;
    if (::tcsetattr(fd, TCSANOW, &t) != 0) {
      std::string e = "cannot configure " + path + ": " + std::strerror(errno);
      close();
      return e;
    }
  }
  return {};
}

static speed_t termios_speed(int baud) {
  switch (baud) {
    case 300:
      return B300;
    case 600:
      return B600;
    case 1200:
      return B1200;
    case 2400:
      return B2400;
    case 4800:
      return B4800;
    case 9600:
      return B9600;
    case 19200:
      return B19200;
    case 38400:
      return B38400;
    case 57600:
      return B57600;
    case 115200:
      return B115200;
    case 230400:
      return B230400;
    default:
      return B9600;
  }
}

std::string SerialPort::open_pty(const std::string& device, int& fd) {
  raw_fd_ = ::open(device.c_str(), O_RDWR | O_NOCTTY | O_NONBLOCK | O_CLOEXEC);
  if (raw_fd_ < 0) {
    busy_ = errno == EBUSY;
    return busy_ ? "in use by another process (TIOCEXCL)" : std::strerror(errno);
  }
  termios tio{};
  if (::tcgetattr(raw_fd_, &tio) == 0) {
    ::cfmakeraw(&tio);
    ::cfsetspeed(&tio, termios_speed(line_.baud));
    tio.c_cflag &= ~CSIZE;
    tio.c_cflag |= line_.data_bits == 7   ? CS7
                   : line_.data_bits == 6 ? CS6
                   : line_.data_bits == 5 ? CS5
                                          : CS8;
    if (line_.parity != "none") tio.c_cflag |= PARENB;
    if (line_.parity == "odd") tio.c_cflag |= PARODD;
    if (line_.stop_bits == 2) tio.c_cflag |= CSTOPB;
    tio.c_cflag |= CLOCAL | CREAD;
    ::tcsetattr(raw_fd_, TCSANOW, &tio);
  }
  fd = raw_fd_;
  return {};
}

std::string SerialPort::open() {
  close();
  busy_ = false;
  std::string path = line_.port;
  if (line_.usb) {
    path = find_usb_port(*line_.usb);
    if (path.empty())
      return "no USB serial device " + line_.usb->vendor_id + ":" + line_.usb->product_id +
             (line_.usb->serial.empty() ? "" : " serial " + line_.usb->serial) + " is present";
  }
  std::error_code ec;
  auto real = std::filesystem::canonical(path, ec);
  if (ec) return "cannot open " + path + ": " + ec.message();
  device_ = real.string();

  int fd = -1;
  if (device_.rfind("/dev/pts/", 0) == 0) {
    // Pseudo-terminals (simulated instruments in the demo and the tests) are
    // unknown to libserialport, which looks devices up in sysfs; they are
    // opened and set raw through termios directly.
    if (auto e = open_pty(device_, fd); !e.empty()) return "cannot open " + path + ": " + e;
  } else {
    if (auto e = open_with_libserialport(path, fd); !e.empty()) return e;
  }
  // TIOCEXCL does not stop root (CAP_SYS_ADMIN), and a second opener of the
  // same pty is let in by some kernels: flock is what makes "busy" reliable.
  if (::flock(fd, LOCK_EX | LOCK_NB) != 0) {
    const bool held = errno == EWOULDBLOCK;
    std::string e = "cannot open " + path + ": " +
                    (held ? std::string("in use by another process (lock held)")
                          : std::string(std::strerror(errno)));
    busy_ = held;
    close();
    return e;
  }
  if (::ioctl(fd, TIOCEXCL) != 0) { /* not fatal: some drivers lack it */
  }
  if (line_.rs485_kernel_mode) {
    serial_rs485 rs{};
    rs.flags = SER_RS485_ENABLED | SER_RS485_RTS_ON_SEND;
    if (::ioctl(fd, TIOCSRS485, &rs) != 0) {
      std::string e = "cannot enable RS-485 mode on " + path + ": " + std::strerror(errno) +
                      "; set rs485_kernel_mode false for adapters with automatic direction";
      close();
      return e;
    }
  }
  // Asio owns a duplicate so that closing stays libserialport's job.
  fd_ = ::dup(fd);
  if (fd_ < 0) {
    close();
    return "cannot open " + path + ": " + std::strerror(errno);
  }
  ::fcntl(fd_, F_SETFL, ::fcntl(fd_, F_GETFL) | O_NONBLOCK);
  sd_.emplace(io_, fd_);
  drain_input();
  return {};
}

void SerialPort::close() {
  if (sd_) {
    boost::system::error_code ec;
    sd_->close(ec);  // closes fd_
    sd_.reset();
  } else if (fd_ >= 0) {
    ::close(fd_);
  }
  fd_ = -1;
  if (raw_fd_ >= 0) {
    ::close(raw_fd_);
    raw_fd_ = -1;
  }
  if (port_) {
    sp_close(port_);
    sp_free_port(port_);
    port_ = nullptr;
  }
}

void SerialPort::drain_input() {
  if (fd_ < 0) return;
  std::uint8_t buf[256];
  for (int i = 0; i < 64; ++i) {
    ssize_t n = ::read(fd_, buf, sizeof buf);
    if (n <= 0) break;
  }
  ::tcflush(fd_, TCIFLUSH);
}

Transaction SerialPort::read_pending(std::size_t max_bytes) {
  Transaction t;
  if (fd_ < 0) {
    t.outcome = Transaction::Outcome::port_lost;
    t.error = "port is closed";
    return t;
  }
  t.outcome = Transaction::Outcome::reply;
  std::uint8_t buf[256];
  while (t.bytes.size() < max_bytes) {
    ssize_t n = ::read(fd_, buf, std::min(sizeof buf, max_bytes - t.bytes.size()));
    if (n > 0) {
      t.bytes.insert(t.bytes.end(), buf, buf + n);
      continue;
    }
    if (n < 0 && (errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR)) break;
    t.outcome = Transaction::Outcome::port_lost;
    t.error = n == 0 ? "end of file (device gone)" : std::strerror(errno);
    break;
  }
  return t;
}

asio::awaitable<void> SerialPort::pause(std::chrono::microseconds d) {
  asio::steady_timer timer(io_, d);
  boost::system::error_code ec;
  co_await timer.async_wait(asio::redirect_error(asio::use_awaitable, ec));
}

asio::awaitable<bool> SerialPort::send_break(std::chrono::microseconds d) {
  if (fd_ < 0) co_return false;
  const bool on = ::ioctl(fd_, TIOCSBRK) == 0;
  co_await pause(d);
  if (on && fd_ >= 0) ::ioctl(fd_, TIOCCBRK);
  co_return fd_ >= 0;
}

double SerialPort::char_time_s() const {
  int bits = 1 + line_.data_bits + (line_.parity == "none" ? 0 : 1) + line_.stop_bits;
  return double(bits) / double(line_.baud);
}

asio::awaitable<Transaction> SerialPort::transact(std::span<const std::uint8_t> request,
                                                  FrameCheck check,
                                                  std::chrono::milliseconds timeout,
                                                  std::size_t max_bytes, bool discard_stale) {
  Transaction t;
  if (!sd_) {
    t.outcome = Transaction::Outcome::port_lost;
    t.error = "port is closed";
    co_return t;
  }
  if (discard_stale) drain_input();
  boost::system::error_code ec;
  if (!request.empty()) {
    co_await asio::async_write(*sd_, asio::buffer(request.data(), request.size()),
                               asio::redirect_error(asio::use_awaitable, ec));
    if (ec) {
      t.outcome = Transaction::Outcome::port_lost;
      t.error = "write failed: " + ec.message();
      co_return t;
    }
  }
  auto fired = std::make_shared<bool>(false);
  asio::steady_timer timer(io_, timeout);
  timer.async_wait([this, fired](boost::system::error_code e) {
    if (!e) {
      *fired = true;
      if (sd_) sd_->cancel();
    }
  });
  std::uint8_t buf[256];
  for (;;) {
    std::size_t n = co_await sd_->async_read_some(asio::buffer(buf),
                                                  asio::redirect_error(asio::use_awaitable, ec));
    if (ec) {
      timer.cancel();
      if (*fired || ec == asio::error::operation_aborted) {
        t.outcome = Transaction::Outcome::timeout;
      } else {
        t.outcome = Transaction::Outcome::port_lost;
        t.error = ec == asio::error::eof ? "end of file (device gone)" : ec.message();
      }
      co_return t;
    }
    t.bytes.insert(t.bytes.end(), buf, buf + n);
    if (t.bytes.size() > max_bytes) {
      // Keep memory bounded on a babbling line: the frame is invalid.
      timer.cancel();
      t.outcome = Transaction::Outcome::invalid;
      t.error = "reply longer than " + std::to_string(max_bytes) + " bytes";
      co_return t;
    }
    FrameState s = check(t.bytes);
    if (s != FrameState::incomplete) {
      timer.cancel();
      t.outcome =
          s == FrameState::complete ? Transaction::Outcome::reply : Transaction::Outcome::invalid;
      co_return t;
    }
  }
}

}  // namespace tarn::drivers
