#include "fake_instrument.h"

#include <fcntl.h>
#include <poll.h>
#include <pty.h>
#include <termios.h>
#include <unistd.h>
#include <catch2/catch.hpp>

#include <cstdlib>
#include <filesystem>

namespace tarn::test {

Bytes bytes_of(const std::string& s) {
  return Bytes(s.begin(), s.end());
}
std::string text_of(const Bytes& b) {
  return std::string(b.begin(), b.end());
}

TempDir::TempDir() {
  char tmpl[] = "/tmp/tarn-drv-XXXXXX";
  path = ::mkdtemp(tmpl);
}
TempDir::~TempDir() {
  std::error_code ec;
  std::filesystem::remove_all(path, ec);
}

FakeInstrument::FakeInstrument(std::string link, Responder r)
    : link_(std::move(link)), responder_(std::move(r)) {
  plug();
  thread_ = std::thread([this] { loop(); });
}

FakeInstrument::~FakeInstrument() {
  stop_ = true;
  thread_.join();
  unplug();
}

void FakeInstrument::plug() {
  int m = -1, s = -1;
  REQUIRE(::openpty(&m, &s, nullptr, nullptr, nullptr) == 0);
  termios tio{};
  ::tcgetattr(s, &tio);
  ::cfmakeraw(&tio);
  ::tcsetattr(s, TCSANOW, &tio);
  ::tcgetattr(m, &tio);
  ::cfmakeraw(&tio);
  ::tcsetattr(m, TCSANOW, &tio);
  ::fcntl(m, F_SETFL, ::fcntl(m, F_GETFL) | O_NONBLOCK);
  std::string name = ::ttyname(s);
  std::string tmp = link_ + ".tmp";
  std::filesystem::remove(tmp);
  std::filesystem::create_symlink(name, tmp);
  std::filesystem::rename(tmp, link_);
  std::lock_guard<std::mutex> g(mu_);
  master_ = m;
  slave_ = s;
}

void FakeInstrument::unplug() {
  std::lock_guard<std::mutex> g(mu_);
  if (master_ >= 0) ::close(master_);
  if (slave_ >= 0) ::close(slave_);
  master_ = slave_ = -1;
  std::error_code ec;
  std::filesystem::remove(link_, ec);
}

void FakeInstrument::replug() {
  plug();
}

void FakeInstrument::send(const Bytes& b) {
  std::lock_guard<std::mutex> g(mu_);
  if (master_ >= 0 && !b.empty()) {
    ssize_t n = ::write(master_, b.data(), b.size());
    (void)n;
  }
}

void FakeInstrument::set_idle(std::function<void()> fn, std::chrono::milliseconds every) {
  std::lock_guard<std::mutex> g(mu_);
  idle_ = std::move(fn);
  idle_every_ = every;
}

void FakeInstrument::loop() {
  Bytes in;
  auto next_idle = std::chrono::steady_clock::now();
  while (!stop_) {
    int fd;
    std::function<void()> idle;
    std::chrono::milliseconds every;
    {
      std::lock_guard<std::mutex> g(mu_);
      fd = master_;
      idle = idle_;
      every = idle_every_;
    }
    if (idle && std::chrono::steady_clock::now() >= next_idle) {
      idle();
      next_idle = std::chrono::steady_clock::now() + every;
    }
    if (fd < 0) {
      in.clear();
      std::this_thread::sleep_for(std::chrono::milliseconds(5));
      continue;
    }
    pollfd p{fd, POLLIN, 0};
    if (::poll(&p, 1, 5) <= 0) continue;
    std::uint8_t buf[512];
    Bytes reply;
    {
      std::lock_guard<std::mutex> g(mu_);
      if (master_ != fd) continue;
      ssize_t n = ::read(fd, buf, sizeof buf);
      if (n <= 0) {
        continue;
      }
      received_ += std::size_t(n);
      in.insert(in.end(), buf, buf + n);
    }
    reply = responder_(in);
    send(reply);
  }
}

config::Line test_line(const std::string& port, int baud, int timeout_ms, int retries) {
  config::Line l;
  l.name = "test";
  l.port = port;
  l.baud = baud;
  l.timeout_ms = timeout_ms;
  l.retries = retries;
  l.gap_ms = 0;
  l.pointer = "/lines/0";
  return l;
}

static config::Instrument parse_instrument(const std::string& json) {
  auto j = config::Json::parse(json);
  config::Instrument in;
  in.name = j.value("name", "inst");
  in.driver = j.at("driver").get<std::string>();
  in.line = "test";
  in.warmup_s = j.value("warmup_s", 0);
  in.options = j.value("options", config::Json::object());
  in.pointer = "/instruments/0";
  std::size_t k = 0;
  for (auto& c : j.at("channels")) {
    config::Channel ch;
    ch.name = c.value("name", "c" + std::to_string(k));
    ch.unit = c.value("unit", "1");
    ch.source = c.at("source");
    ch.calibration = c.value("calibration", config::Json());
    ch.pointer = in.pointer + "/channels/" + std::to_string(k++);
    in.channels.push_back(ch);
  }
  return in;
}

namespace {
// The instrument as the whole check leaves it: with the settings its driver
// read (Instrument::settings), which create() runs.
config::Instrument checked_instrument(const std::string& json, const config::Line& line,
                                      config::Problems& p) {
  config::Instrument in = parse_instrument(json);
  REQUIRE(drivers::find_driver(in.driver));
  // The instrument is on the line under test, whatever that line is named:
  // the driver's check (which needs the line) runs on every test instrument.
  in.line = line.name;
  config::StationConfig cfg;
  cfg.lines.push_back(line);
  cfg.instruments.push_back(in);
  drivers::check_instruments(cfg, p);  // the driver's checks and the calibrations
  return cfg.instruments[0];
}
}  // namespace

config::Problems validate_instrument(const std::string& json, const config::Line& line) {
  config::Problems p;
  checked_instrument(json, line, p);
  return p;
}

config::Instrument test_instrument(const std::string& json, const config::Line& line) {
  config::Problems p;
  config::Instrument in = checked_instrument(json, line, p);
  INFO(p.render("test"));
  REQUIRE(p.empty());
  return in;
}

std::unique_ptr<drivers::InstrumentDriver> make_driver(const config::Instrument& in,
                                                       const config::Line& line) {
  return drivers::find_driver(in.driver)->create(in, line);
}

drivers::PollResult run_poll(boost::asio::io_context& io, drivers::SerialPort& port,
                             drivers::InstrumentDriver& d, drivers::ExchangeLog* log) {
  drivers::PollResult out;
  bool done = false;
  boost::asio::co_spawn(
      io,
      [&]() -> boost::asio::awaitable<void> {
        out = co_await d.poll(port, log);
        done = true;
      },
      boost::asio::detached);
  io.restart();
  io.run();
  REQUIRE(done);
  return out;
}

std::string run_identify(boost::asio::io_context& io, drivers::SerialPort& port,
                         drivers::InstrumentDriver& d) {
  std::string out;
  boost::asio::co_spawn(
      io, [&]() -> boost::asio::awaitable<void> { out = co_await d.identify(port, nullptr); },
      boost::asio::detached);
  io.restart();
  io.run();
  return out;
}

}  // namespace tarn::test
