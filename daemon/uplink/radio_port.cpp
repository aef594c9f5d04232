#include "daemon/uplink/radio_port.h"

#include <boost/asio/write.hpp>

namespace tarn::uplink {

namespace asio = boost::asio;
using codec::radio::Frame;

namespace {

constexpr int kBauds[] = {1200,  2400,   4800,   9600,   19200, 38400,
                          57600, 115200, 230400, 460800, 921600};

// The radio's line as the serial opener takes it.
config::Line line_of(const RadioPortOptions& o) {
  config::Line l;
  l.name = "radio";
  l.port = o.port;
  l.baud = o.baud;
  l.data_bits = o.data_bits;
  l.parity = o.parity;
  l.stop_bits = o.stop_bits;
  l.flow_control = o.flow_control;
  return l;
}

std::string allowed_bauds() {
  std::string s;
  for (int b : kBauds) s += (s.empty() ? "" : ", ") + std::to_string(b);
  return s;
}

}  // namespace

void read_radio_port_options(config::ObjectReader& r, RadioPortOptions& o) {
  r.string("port", o.port, config::Need::required);
  if (r.integer("baud", o.baud, 1, 10000000)) {
    bool known = false;
    for (int b : kBauds) known |= b == o.baud;
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
      port_(io, line_of(opt_)),
      splitter_(opt_.mtu),
      rbuf_(1024),
      alive_(std::make_shared<bool>(true)) {}

RadioPort::~RadioPort() {
  *alive_ = false;
  close();
}

std::string RadioPort::open() {
  close();
  if (auto e = port_.open(); !e.empty()) return e;
  writing_ = false;
  wqueue_.clear();
  read_more();
  return {};
}

void RadioPort::close() {
  if (!port_.is_open()) return;
  port_.close();
  wqueue_.clear();
  writing_ = false;
}

bool RadioPort::send(const Frame& f) {
  if (!port_.is_open()) return false;
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
  if (!port_.is_open() || wqueue_.empty()) {
    writing_ = false;
    return;
  }
  writing_ = true;
  std::weak_ptr<bool> alive = alive_;
  asio::async_write(*port_.stream(), asio::buffer(wqueue_.front()),
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
  if (!port_.is_open()) return;
  std::weak_ptr<bool> alive = alive_;
  port_.stream()->async_read_some(
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
