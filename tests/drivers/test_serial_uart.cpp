// SerialPort on a real UART, through libserialport (the pty tests cannot do
// this: libserialport looks a port up in sysfs, and ptys have no entry there).
// The machine's first 16550-class UART, /dev/ttyS0, is opened through a
// symlink (as a station opens /dev/serial/by-id/...) and configured; nothing
// is wired to it, so a request times out, and must not end as "device gone"
// (this test found libserialport's VMIN 0 turning every wait into an EOF).
// Where the machine has no such UART the test says so and checks nothing (a
// warning in the output, not a pass of the checks).
#include <catch2/catch.hpp>

#include <fcntl.h>
#include <termios.h>
#include <unistd.h>

#include <filesystem>

#include "fake_instrument.h"

using namespace tarn;
using namespace tarn::test;

namespace {

bool have_uart(const std::string& dev) {
  // A UART the kernel found (sysfs has a device link), and that we may open.
  return std::filesystem::exists(dev) &&
         std::filesystem::exists("/sys/class/tty/" +
                                 std::filesystem::path(dev).filename().string() + "/device") &&
         ::access(dev.c_str(), R_OK | W_OK) == 0;
}

}  // namespace

TEST_CASE("serial port: a real UART through libserialport, by a symlinked path", "[port][uart]") {
  const std::string dev = "/dev/ttyS0";
  if (!have_uart(dev)) {
    WARN("no usable " << dev << " on this machine: the libserialport path was not exercised");
    return;
  }
  TempDir dir;
  const std::string link = dir.path + "/usb-Hollin_RS485_probe-if00-port0";
  std::filesystem::create_symlink(dev, link);
  boost::asio::io_context io;
  auto line = test_line(link, 1200, 150, 0);
  line.data_bits = 7;
  line.parity = "even";
  line.stop_bits = 1;
  drivers::SerialPort port(io, line);
  const std::string e = port.open();
  REQUIRE(e == "");
  CHECK(port.device() == dev);  // the symlink resolved, as for /dev/serial/by-id links

  // What libserialport set on the device: 1200 baud, 7 data bits, even parity, 1 stop bit.
  int fd = ::open(dev.c_str(), O_RDONLY | O_NONBLOCK | O_NOCTTY);
  if (fd >= 0) {  // root passes TIOCEXCL; others are refused (below)
    termios t{};
    REQUIRE(::tcgetattr(fd, &t) == 0);
    ::close(fd);
    CHECK(::cfgetospeed(&t) == B1200);
    CHECK((t.c_cflag & CSIZE) == CS7);
    CHECK((t.c_cflag & PARENB) != 0);
    CHECK((t.c_cflag & PARODD) == 0);
    CHECK((t.c_cflag & CSTOPB) == 0);
    CHECK((t.c_cflag & CRTSCTS) == 0);
  } else {
    CHECK(errno == EBUSY);  // TIOCEXCL held by the port
  }

  // A second opener through the class is refused as busy.
  drivers::SerialPort second(io, line);
  CHECK(second.open().find("in use by another process") != std::string::npos);
  CHECK(second.last_open_busy());

  // Nothing answers on the UART: the request goes out and times out on time.
  drivers::Transaction t;
  const std::vector<std::uint8_t> req = {'0', 'I', '!'};
  auto t0 = std::chrono::steady_clock::now();
  boost::asio::co_spawn(
      io,
      [&]() -> boost::asio::awaitable<void> {
        t = co_await port.transact(
            req, [](std::span<const std::uint8_t>) { return drivers::FrameState::incomplete; },
            std::chrono::milliseconds(150));
      },
      boost::asio::detached);
  io.run();
  auto took = std::chrono::steady_clock::now() - t0;
  INFO("transaction error: " << t.error);
  CHECK(t.outcome == drivers::Transaction::Outcome::timeout);
  CHECK(took >= std::chrono::milliseconds(140));
  CHECK(took < std::chrono::milliseconds(1500));
  port.close();
  CHECK(second.open() == "");  // free again
}
