// The spool backend (daemon/uplink/spool_backend.h): files named in sequence
// order with the packet bytes, acknowledged only after they are durable, no
// temp files left, a full spool keeps packets unacknowledged, validation
// refuses bad directories without creating anything.
#include <sys/stat.h>
#include <unistd.h>

#include <boost/asio/io_context.hpp>
#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <iterator>

#include "daemon/uplink/backend.h"
#include "daemon/uplink/spool_backend.h"
#include "drivers/os/asio_env.h"

namespace fs = std::filesystem;
using namespace tarn;
using namespace tarn::uplink;

namespace {

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/tarn-spool-XXXXXX";
    path = ::mkdtemp(tmpl);
  }
  ~TempDir() {
    std::error_code ec;
    fs::permissions(path, fs::perms::owner_all, ec);
    fs::remove_all(path, ec);
  }
};

config::StationConfig spool_config(const std::string& dir,
                                   config::Json extra = config::Json::object()) {
  config::StationConfig c;
  c.station.id = "hollin-buoy-1";
  c.uplink.backend = "spool";
  c.uplink.options = extra;
  c.uplink.options["dir"] = dir;
  return c;
}

std::vector<std::string> listing(const fs::path& dir) {
  std::vector<std::string> names;
  for (auto& e : fs::directory_iterator(dir)) names.push_back(e.path().filename().string());
  std::sort(names.begin(), names.end());
  return names;
}

std::vector<std::uint8_t> read_file(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

struct Result {
  int calls = 0;
  bool ok = false;
  std::string error;
};

}  // namespace

TEST_CASE("spool: the registry knows the backend", "[spool]") {
  REQUIRE(find_backend("spool") != nullptr);
  CHECK(spool_file_name("hollin-buoy-1", 42, PacketKind::alert) ==
        "hollin-buoy-1-000000000042-alert.pkt");
}

TEST_CASE("spool: packets become files in sequence order, acknowledged once each", "[spool]") {
  TempDir t;
  auto cfg = spool_config(t.path.string());
  config::Problems p;
  find_backend("spool")->validate(cfg, p);
  REQUIRE(p.empty());
  boost::asio::io_context io;
  os::AsioEnv clock(io);
  BackendContext ctx{io, clock, cfg, "2024-06-01T00:00:00Z"};
  auto b = find_backend("spool")->create(ctx);
  b->start();
  REQUIRE(b->state() == LinkState::up);
  REQUIRE(b->free_slots() > 0);
  std::map<std::uint64_t, Result> acks;
  // Out of order on purpose: the names still sort by sequence.
  for (std::uint64_t seq : {3, 1, 2, 10}) {
    OutgoingPacket pk;
    pk.sequence = seq;
    pk.kind = seq == 2 ? PacketKind::alert : PacketKind::window;
    pk.payload = std::vector<std::uint8_t>(50 + seq, std::uint8_t(seq));
    b->send(std::move(pk), [&](std::uint64_t s, bool ok, const std::string& e) {
      acks[s].calls++;
      acks[s].ok = ok;
      acks[s].error = e;
    });
  }
  CHECK(acks.empty());  // never inside send()
  io.run();
  REQUIRE(acks.size() == 4);
  for (auto& [s, r] : acks) {
    CHECK(r.calls == 1);
    CHECK(r.ok);
  }
  auto names = listing(t.path);
  REQUIRE(names == std::vector<std::string>{"hollin-buoy-1-000000000001-data.pkt",
                                            "hollin-buoy-1-000000000002-alert.pkt",
                                            "hollin-buoy-1-000000000003-data.pkt",
                                            "hollin-buoy-1-000000000010-data.pkt"});
  CHECK(read_file(t.path / names[3]) == std::vector<std::uint8_t>(60, 10));
  CHECK(b->bytes_sent() == 51 + 52 + 53 + 60);
}

TEST_CASE("spool: a full spool leaves packets unacknowledged until files are taken", "[spool]") {
  TempDir t;
  auto cfg = spool_config(t.path.string(), {{"max_files", 2}});
  boost::asio::io_context io;
  os::AsioEnv clock(io);
  BackendContext ctx{io, clock, cfg, ""};
  auto b = find_backend("spool")->create(ctx);
  b->start();
  std::map<std::uint64_t, Result> acks;
  auto send = [&](std::uint64_t seq) {
    OutgoingPacket pk;
    pk.sequence = seq;
    pk.payload = {1, 2, 3};
    b->send(std::move(pk), [&](std::uint64_t s, bool ok, const std::string& e) {
      acks[s].calls++;
      acks[s].ok = ok;
      acks[s].error = e;
    });
    io.restart();
    io.run();
  };
  send(1);
  send(2);
  send(3);
  CHECK(acks[1].ok);
  CHECK(acks[2].ok);
  CHECK_FALSE(acks[3].ok);
  CHECK(acks[3].error.find("spool full") != std::string::npos);
  CHECK(listing(t.path).size() == 2);
  // The uploader takes one file: the next try succeeds.
  fs::remove(t.path / spool_file_name("hollin-buoy-1", 1, PacketKind::window));
  send(3);
  CHECK(acks[3].ok);
  CHECK(acks[3].calls == 2);
  // A resend of a sequence already spooled overwrites it and does not count twice.
  send(3);
  CHECK(acks[3].ok);
  CHECK(listing(t.path).size() == 2);
}

TEST_CASE("spool: temp files a crash left behind are removed at start", "[spool]") {
  TempDir t;
  std::ofstream(t.path / ".hollin-buoy-1-000000000007-data.pkt.tmp") << "half";
  std::ofstream(t.path / "other-station-000000000001-data.pkt") << "theirs";
  auto cfg = spool_config(t.path.string());
  boost::asio::io_context io;
  os::AsioEnv clock(io);
  BackendContext ctx{io, clock, cfg, ""};
  auto b = find_backend("spool")->create(ctx);
  b->start();
  CHECK(listing(t.path) == std::vector<std::string>{"other-station-000000000001-data.pkt"});
}

TEST_CASE("spool: validation refuses bad options and creates nothing", "[spool]") {
  TempDir t;
  auto problems_for = [](const config::StationConfig& c) {
    config::Problems p;
    find_backend("spool")->validate(c, p);
    return p;
  };
  SECTION("missing directory") {
    auto p = problems_for(spool_config((t.path / "nope").string()));
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == "/uplink/options/dir");
    CHECK_FALSE(fs::exists(t.path / "nope"));
  }
  SECTION("a file, not a directory") {
    std::ofstream(t.path / "f") << "x";
    auto p = problems_for(spool_config((t.path / "f").string()));
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].message.find("not a directory") != std::string::npos);
  }
  SECTION("unknown key and out-of-range max_files") {
    auto p = problems_for(spool_config(t.path.string(), {{"max_file", 3}, {"max_files", 0}}));
    REQUIRE(p.size() == 2);
    CHECK(listing(t.path).empty());
  }
  SECTION("no dir") {
    config::StationConfig c;
    c.station.id = "hollin-buoy-1";
    c.uplink.backend = "spool";
    c.uplink.options = config::Json::object();
    auto p = problems_for(c);
    REQUIRE(p.size() == 1);
  }
  SECTION("read-only directory (not for root, which writes anyway)") {
    if (::geteuid() == 0) return;  // root bypasses mode bits; the EROFS case needs a mount
    fs::permissions(t.path, fs::perms::owner_read | fs::perms::owner_exec);
    auto p = problems_for(spool_config(t.path.string()));
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].message.find("not writable") != std::string::npos);
  }
}
