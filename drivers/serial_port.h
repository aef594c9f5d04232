// SerialPort: one serial or RS-485 line, and the one opener of a serial device
// (instrument lines here, the radio modem in daemon/uplink/radio_port.h).
// libserialport opens and configures the device (by path, or by USB identity so a station survives
// ttyUSB renumbering); Boost.Asio waits on its descriptor. Requests go out one at a time (see
// BusScheduler); before each request, stale input is discarded so a late reply is never taken for
// the next request's answer. Thread-safety: use from the io_context thread only.
#pragma once

// First, in its own block: Boost 1.74's awaitable.hpp uses std::exchange without it.
#include <utility>

#include <boost/asio/awaitable.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/posix/stream_descriptor.hpp>
#include <boost/asio/steady_timer.hpp>
#include <chrono>
#include <cstdint>
#include <functional>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "config/station_config.h"

struct sp_port;

namespace tarn::drivers {

// Tells the port whether the bytes gathered so far hold a complete reply.
enum class FrameState { incomplete, complete, invalid };
using FrameCheck = std::function<FrameState(std::span<const std::uint8_t>)>;

struct Transaction {
  enum class Outcome { reply, timeout, invalid, port_lost } outcome = Outcome::timeout;
  std::vector<std::uint8_t> bytes;  // what arrived (complete reply, or partial on timeout)
  std::string error;                // port errors in words
};

// A port found on the system (for `tarn ports`).
struct PortInfo {
  std::string path;
  std::string by_id;  // /dev/serial/by-id link, if any
  std::string description;
  std::string transport;  // usb | native | bluetooth
  int usb_vendor = -1, usb_product = -1;
  std::string usb_serial, usb_manufacturer, usb_product_name;
};
std::vector<PortInfo> list_ports();

// Finds the device path for a USB identity; empty if not present.
std::string find_usb_port(const config::UsbIdentity& id);

class SerialPort {
 public:
  SerialPort(boost::asio::io_context& io, config::Line line);
  ~SerialPort();
  SerialPort(const SerialPort&) = delete;
  SerialPort& operator=(const SerialPort&) = delete;

  // Opens and configures the device. Returns an error in words, empty on success.
  // Two exclusive locks are taken so a second opener is refused: TIOCEXCL
  // (the tty layer; root bypasses it) and flock(LOCK_EX|LOCK_NB) on the device
  // (applies to root and to ptys alike). `tarn probe` and the daemon both open
  // through this class, so they exclude each other.
  std::string open();
  void close();
  bool is_open() const { return fd_ >= 0; }
  const config::Line& line() const { return line_; }
  std::string device() const { return device_; }

  // Sends `request` (may be empty: just listen), then gathers bytes until
  // `check` says complete or invalid, or `timeout` passes. Cap: `max_bytes`.
  // Pending input is discarded first unless `discard_stale` is false
  // (streaming instruments: the caller has read it with read_pending()).
  boost::asio::awaitable<Transaction> transact(std::span<const std::uint8_t> request,
                                               FrameCheck check, std::chrono::milliseconds timeout,
                                               std::size_t max_bytes = 1024,
                                               bool discard_stale = true);
  // Discards pending input without blocking.
  void drain_input();
  // Reads what is pending without blocking, at most `max_bytes`. Outcome reply
  // (bytes may be empty) or port_lost (EIO/EOF: device gone).
  Transaction read_pending(std::size_t max_bytes);
  // Waits `d` on the io_context (real time) without touching the line.
  boost::asio::awaitable<void> pause(std::chrono::microseconds d);
  // Holds the line in the break condition for `d` (SDI-12 wake-up). Devices
  // without break support (ptys) ignore it. Returns false if the port is closed.
  boost::asio::awaitable<bool> send_break(std::chrono::microseconds d);
  // The open line's descriptor for callers that read and write on their own
  // (the radio modem's frame stream, daemon/uplink/radio_port.h); nullptr when
  // closed. Valid until close().
  boost::asio::posix::stream_descriptor* stream() { return sd_ ? &*sd_ : nullptr; }
  // True when the last open() failed because another process holds the port.
  bool last_open_busy() const { return busy_; }
  // Seconds a character takes on this line (start + data + parity + stop bits).
  double char_time_s() const;

 private:
  std::string open_with_libserialport(const std::string& path, int& fd);
  std::string open_pty(const std::string& device, int& fd);

  boost::asio::io_context& io_;
  config::Line line_;
  std::string device_;
  sp_port* port_ = nullptr;
  int fd_ = -1;      // Asio's duplicate
  int raw_fd_ = -1;  // pty opened without libserialport
  std::optional<boost::asio::posix::stream_descriptor> sd_;
  bool busy_ = false;
};

}  // namespace tarn::drivers
