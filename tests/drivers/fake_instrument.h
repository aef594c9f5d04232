// Test support: fake instruments on pseudo-terminals, and a way to run one
// driver poll on an io_context. The fake owns the pty master (the instrument
// side); the code under test opens the slave through a stable symlink, as it
// would open /dev/serial/by-id/... on a station. unplug() closes the pair (the
// port sees EIO), replug() makes a new pair behind the same symlink.
// Thread-safety: the fake runs its instrument on its own thread; the
// responder is called on that thread with the fake's mutex held.
#pragma once

// First, in its own block: Boost 1.74's awaitable.hpp uses std::exchange without it.
#include <utility>

#include <atomic>
#include <boost/asio/co_spawn.hpp>
#include <boost/asio/detached.hpp>
#include <boost/asio/io_context.hpp>
#include <chrono>
#include <cstdint>
#include <functional>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "drivers/driver.h"
#include "drivers/serial_port.h"

namespace tarn::test {

using Bytes = std::vector<std::uint8_t>;

Bytes bytes_of(const std::string& s);
std::string text_of(const Bytes& b);

// A scratch directory removed at destruction.
struct TempDir {
  TempDir();
  ~TempDir();
  std::string path;
};

class FakeInstrument {
 public:
  // Gets everything received and not yet consumed; consumes what forms a
  // request (erasing it from `in`) and returns bytes to send (may be empty).
  using Responder = std::function<Bytes(Bytes& in)>;

  FakeInstrument(std::string link, Responder r);
  ~FakeInstrument();

  void unplug();
  void replug();
  // Sends bytes unasked (streaming instruments, late replies).
  void send(const Bytes& b);
  // Runs `fn` every `every` on the instrument thread (streaming); empty: none.
  void set_idle(std::function<void()> fn, std::chrono::milliseconds every);
  const std::string& link() const { return link_; }
  std::size_t received_bytes() const { return received_; }

 private:
  void plug();
  void loop();

  std::string link_;
  Responder responder_;
  std::mutex mu_;
  int master_ = -1, slave_ = -1;
  std::atomic<bool> stop_{false};
  std::atomic<std::size_t> received_{0};
  std::function<void()> idle_;
  std::chrono::milliseconds idle_every_{0};
  std::thread thread_;
};

// A line description for tests: `port` is the fake's link.
config::Line test_line(const std::string& port, int baud = 9600, int timeout_ms = 200,
                       int retries = 0);

// Builds an instrument from JSON ({"name", "driver", "options", "channels"})
// and checks it with the driver's validate(); fails the test on problems.
config::Instrument test_instrument(const std::string& json, const config::Line& line);

std::unique_ptr<drivers::InstrumentDriver> make_driver(const config::Instrument& in,
                                                       const config::Line& line);

// Runs one poll to completion on `io`.
drivers::PollResult run_poll(boost::asio::io_context& io, drivers::SerialPort& port,
                             drivers::InstrumentDriver& d, drivers::ExchangeLog* log = nullptr);
std::string run_identify(boost::asio::io_context& io, drivers::SerialPort& port,
                         drivers::InstrumentDriver& d);

// Problems found by the driver's validate() for this instrument JSON.
config::Problems validate_instrument(const std::string& json, const config::Line& line);

}  // namespace tarn::test
