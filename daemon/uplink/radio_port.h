// RadioPort: a full-duplex serial line to a transparent radio modem, carrying
// radio frames (codec/radio_frame.h). Used by both ends: the station's
// serial-radio backend and the shore's `tarn relay`.
// Opens the device through drivers::SerialPort (the station's one serial
// opener: raw, the configured baud/parity/stop bits, exclusive locks so two
// openers exclude each other), reads with Asio, cuts the stream into frames and hands each valid
// one on. Damaged frames are counted, never delivered. Thread-safety: io_context thread only.
#pragma once

#include <boost/asio/io_context.hpp>
#include <deque>
#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "codec/radio_frame.h"
#include "config/json_reader.h"
#include "drivers/serial_port.h"

namespace tarn::uplink {

struct RadioPortOptions {
  std::string port;  // device path (a /dev/serial/by-id link, a pty)
  int baud = 9600;
  int data_bits = 8;
  std::string parity = "none";  // none | even | odd
  int stop_bits = 1;
  std::string flow_control = "none";  // none | rts_cts
  std::size_t mtu = 255;              // radio MTU: wire bytes of one frame, delimiters included
};

// Reads the line keys (port, baud, data_bits, parity, stop_bits, flow_control,
// mtu) from `r`; the caller calls r.finish().
void read_radio_port_options(config::ObjectReader& r, RadioPortOptions& o);

struct RadioCounters {
  std::uint64_t frames_in = 0, frames_bad = 0, frames_out = 0, bytes_out = 0, dropped_out = 0;
};

class RadioPort {
 public:
  using FrameHandler = std::function<void(const codec::radio::Frame&)>;
  using LostHandler = std::function<void(const std::string& why)>;
  RadioPort(boost::asio::io_context& io, RadioPortOptions opt, FrameHandler on_frame,
            LostHandler on_lost);
  ~RadioPort();
  RadioPort(const RadioPort&) = delete;
  RadioPort& operator=(const RadioPort&) = delete;

  // Returns an error in words, empty on success.
  std::string open();
  void close();
  bool is_open() const { return port_.is_open(); }
  // Encodes and queues a frame; false if it does not fit the MTU, the port is
  // closed or the output queue is full (the sender's retry covers it).
  bool send(const codec::radio::Frame& f);
  const RadioCounters& counters() const { return counters_; }
  const RadioPortOptions& options() const { return opt_; }

 private:
  void read_more();
  void write_next();
  void lost(const std::string& why);

  boost::asio::io_context& io_;
  RadioPortOptions opt_;
  FrameHandler on_frame_;
  LostHandler on_lost_;
  drivers::SerialPort port_;
  codec::radio::FrameSplitter splitter_;
  std::vector<std::uint8_t> rbuf_;
  std::deque<std::vector<std::uint8_t>> wqueue_;
  bool writing_ = false;
  RadioCounters counters_;
  std::shared_ptr<bool> alive_;
};

}  // namespace tarn::uplink
