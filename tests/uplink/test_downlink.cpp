// Downlink commands: envelope parsing, argument validation, HMAC-SHA256,
// time window, nonce replay cache, and the receiver against a fake target.
#include <catch2/catch.hpp>

#include "config/downlink_command.h"
#include "daemon/uplink/downlink.h"

using namespace tarn;
using config::Json;

namespace {

std::string sign(const std::vector<std::uint8_t>& key, Json cmd, const std::string& station) {
  auto parsed = config::parse_command(cmd.dump());
  REQUIRE(parsed.command);
  auto mac = config::hmac_sha256(key, config::canonical_bytes(station, *parsed.command));
  cmd["mac"] = config::to_hex(mac.data(), mac.size());
  return cmd.dump();
}

struct FakeTarget : uplink::DownlinkTarget {
  std::int64_t now = 1'700'000'000;
  int pings = 0, resends = 0, maint = 0, sets = 0;
  std::string saved_nonces;
  std::string set_error;  // what set_setting refuses with
  std::int64_t station_now() const override { return now; }
  Json ping() override {
    pings++;
    return {{"pong", true}};
  }
  std::string resend(const config::ResendArgs&, Json& data) override {
    resends++;
    data["queued"] = 3;
    return {};
  }
  config::MaintenanceArgs last_maint;
  std::string maintenance(const config::MaintenanceArgs& a, const std::string&) override {
    maint++;
    last_maint = a;
    return {};
  }
  std::string set_setting(const std::string&, const Json&) override {
    if (!set_error.empty()) return set_error;
    sets++;
    return {};
  }
  void save_nonces(const std::string& s) override { saved_nonces = s; }
};

}  // namespace

TEST_CASE("HMAC-SHA256 matches RFC 4231", "[downlink]") {
  // RFC 4231 section 4.3, test case 2: key "Jefe", data "what do ya want for nothing?".
  // Also checked against Python's hmac module (/usr/bin/python3) in this run.
  std::vector<std::uint8_t> key = {'J', 'e', 'f', 'e'};
  auto mac = config::hmac_sha256(key, "what do ya want for nothing?");
  CHECK(config::to_hex(mac.data(), mac.size()) ==
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843");
  // RFC 4231 section 4.2, test case 1: key 0x0b x 20, data "Hi There".
  std::vector<std::uint8_t> k1(20, 0x0b);
  auto m1 = config::hmac_sha256(k1, "Hi There");
  CHECK(config::to_hex(m1.data(), m1.size()) ==
        "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7");
}

TEST_CASE("hex parsing", "[downlink]") {
  CHECK(config::from_hex("00ff10")->size() == 3);
  CHECK((*config::from_hex("A0"))[0] == 0xa0);
  CHECK_FALSE(config::from_hex("abc"));
  CHECK_FALSE(config::from_hex("zz"));
}

TEST_CASE("envelope parsing refuses malformed commands with a reason", "[downlink]") {
  CHECK(config::parse_command("not json").reason == "command is not valid JSON");
  CHECK(config::parse_command("[1,2]").reason == "command is not a JSON object");
  CHECK(config::parse_command(R"({"cmd":"ping"})").reason.find("/id") != std::string::npos);
  CHECK(config::parse_command(R"({"id":"a b","cmd":"ping"})").reason.find("/id") == 0);
  auto extra = config::parse_command(R"({"id":"c1","cmd":"ping","colour":1})");
  CHECK_FALSE(extra.command);
  CHECK(extra.id == "c1");
  CHECK(extra.reason.find("/colour") != std::string::npos);
  CHECK(config::parse_command(R"({"id":"c1","cmd":"ping","mac":"12"})").reason.find("/mac") == 0);
  CHECK(config::parse_command(std::string(5000, ' ')).reason.find("bytes") != std::string::npos);
  auto ok = config::parse_command(R"({"id":"c1","cmd":"ping","t":5,"nonce":"n1"})");
  REQUIRE(ok.command);
  CHECK(ok.command->t == 5);
}

TEST_CASE("arguments are validated per command", "[downlink]") {
  auto args = [](const std::string& text) {
    auto p = config::parse_command(text);
    REQUIRE(p.command);
    return config::validate_arguments(*p.command);
  };
  CHECK(args(R"({"id":"1","cmd":"ping"})").empty());
  CHECK(args(R"({"id":"1","cmd":"ping","args":{"x":1}})").find("/args/x") == 0);
  CHECK(args(R"({"id":"1","cmd":"reboot"})").find("unknown command") == 0);
  CHECK(args(R"({"id":"1","cmd":"resend","args":{"first_seq":5,"last_seq":9}})").empty());
  CHECK(args(R"({"id":"1","cmd":"resend","args":{"first_seq":9,"last_seq":5}})")
            .find("/args/last_seq") == 0);
  CHECK(
      args(R"({"id":"1","cmd":"resend","args":{"first_seq":1,"last_seq":20000}})").find("10000") !=
      std::string::npos);
  CHECK(args(R"({"id":"1","cmd":"resend","args":{"first_seq":1,"from_t":2}})").find("one pair") !=
        std::string::npos);
  CHECK(args(R"({"id":"1","cmd":"resend","args":{"from_t":100,"to_t":200}})").empty());
  CHECK(args(R"({"id":"1","cmd":"maintenance","args":{"action":"start","note":"wipe"}})").empty());
  CHECK(args(R"({"id":"1","cmd":"maintenance","args":{"action":"pause"}})").find("/args/action") ==
        0);
  CHECK(
      args(R"({"id":"1","cmd":"set","args":{"setting":"/sampling/period_s","value":30}})").empty());
  CHECK(args(R"({"id":"1","cmd":"set","args":{"setting":"/station/id","value":3}})")
            .find("/args/setting") == 0);
  CHECK(args(R"({"id":"1","cmd":"set","args":{"setting":"/sampling/period_s","value":"30"}})")
            .find("/args/value") == 0);
}

TEST_CASE("authentication: mac, time window, nonce", "[downlink]") {
  std::vector<std::uint8_t> key(32, 0x42);
  config::NonceCache nonces;
  std::int64_t now = 1'700'000'000;
  Json cmd = {{"id", "c7"}, {"cmd", "ping"}, {"t", now}, {"nonce", "n-1"}};
  auto signed_text = sign(key, cmd, "hollin-buoy-1");
  auto c = *config::parse_command(signed_text).command;
  CHECK(config::check_authentication(c, "hollin-buoy-1", key, now, 300, nonces).empty());
  // The MAC binds the station: the same command for another station fails.
  CHECK(config::check_authentication(c, "other-buoy", key, now, 300, nonces) ==
        "mac does not match");
  // Any changed field breaks it.
  auto tampered = c;
  tampered.cmd = "set";
  CHECK(config::check_authentication(tampered, "hollin-buoy-1", key, now, 300, nonces) ==
        "mac does not match");
  auto unsigned_c = *config::parse_command(cmd.dump()).command;
  CHECK(config::check_authentication(unsigned_c, "hollin-buoy-1", key, now, 300, nonces)
            .find("unsigned") == 0);
  CHECK(config::check_authentication(c, "hollin-buoy-1", key, now + 301, 300, nonces)
            .find("outside the window") != std::string::npos);
  REQUIRE(nonces.add("n-1", now, now, 300));
  CHECK(config::check_authentication(c, "hollin-buoy-1", key, now, 300, nonces).find("replayed") ==
        0);
  // Without a key an unsigned command passes.
  CHECK(config::check_authentication(unsigned_c, "hollin-buoy-1", {}, now, 300, {}).empty());
}

TEST_CASE("canonical bytes are exactly as documented", "[downlink]") {
  // DOWNLINK.md, "Canonical bytes": the example there.
  auto p = config::parse_command(
      R"({"id":"c42","cmd":"set","args":{"value":30,"setting":"/sampling/period_s"},"t":1700000000,"nonce":"a1b2"})");
  REQUIRE(p.command);
  CHECK(config::canonical_bytes("hollin-buoy-1", *p.command) ==
        "tarn-command-v1\nhollin-buoy-1\nc42\nset\n1700000000\na1b2\n"
        "{\"setting\":\"/sampling/period_s\",\"value\":30}");
}

TEST_CASE("nonce cache: prune, bound, persist", "[downlink]") {
  config::NonceCache n;
  REQUIRE(n.add("a", 1000, 1000, 300));
  REQUIRE(n.add("b", 1200, 1200, 300));
  n.prune(1400, 300);  // a (t=1000) left the window
  CHECK_FALSE(n.seen("a"));
  CHECK(n.seen("b"));
  config::NonceCache m;
  REQUIRE(m.restore(n.serialize()));
  CHECK(m.seen("b"));
  CHECK_FALSE(m.restore("garbage"));
  CHECK(m.size() == 0);
  config::NonceCache full;
  for (std::size_t i = 0; i < config::NonceCache::kMaxEntries; ++i)
    REQUIRE(full.add("n" + std::to_string(i), 5000, 5000, 300));
  CHECK_FALSE(full.add("one-more", 5000, 5000, 300));
}

TEST_CASE("receiver: accepted commands run, refused ones change nothing", "[downlink]") {
  std::vector<std::uint8_t> key(32, 7);
  FakeTarget t;
  uplink::DownlinkReceiver rx("hollin-buoy-1", key, 300, "");
  Json ping = {{"id", "p1"}, {"cmd", "ping"}, {"t", t.now}, {"nonce", "x1"}};
  auto r = rx.handle(sign(key, ping, "hollin-buoy-1"), t);
  CHECK(r.accepted);
  CHECK(r.to_json()["result"] == "accepted");
  CHECK(t.pings == 1);
  CHECK(t.saved_nonces.find("x1") != std::string::npos);
  // Replay of the same bytes.
  r = rx.handle(sign(key, ping, "hollin-buoy-1"), t);
  CHECK_FALSE(r.accepted);
  CHECK(r.reason.find("replayed") == 0);
  CHECK(r.id == "p1");
  CHECK(t.pings == 1);
  // Unsigned.
  Json m = {{"id", "m1"}, {"cmd", "maintenance"}, {"args", {{"action", "start"}}}};
  r = rx.handle(m.dump(), t);
  CHECK(r.to_json()["result"] == "refused");
  CHECK(t.maint == 0);
  // Out of range (signed, the target refuses): nothing applied.
  t.set_error = "/sampling/period_s: is 0; allowed: 1 to 86400";
  Json s = {{"id", "s1"},
            {"cmd", "set"},
            {"args", {{"setting", "/sampling/period_s"}, {"value", 0}}},
            {"t", t.now},
            {"nonce", "x2"}};
  r = rx.handle(sign(key, s, "hollin-buoy-1"), t);
  CHECK_FALSE(r.accepted);
  CHECK(r.reason == t.set_error);
  CHECK(t.sets == 0);
  // Unknown command, signed.
  Json u = {{"id", "u1"}, {"cmd", "selfdestruct"}, {"t", t.now}, {"nonce", "x3"}};
  r = rx.handle(sign(key, u, "hollin-buoy-1"), t);
  CHECK(r.reason.find("unknown command") == 0);
  Json rs = {{"id", "r1"},
             {"cmd", "resend"},
             {"args", {{"first_seq", 1}, {"last_seq", 4}}},
             {"t", t.now},
             {"nonce", "x4"}};
  r = rx.handle(sign(key, rs, "hollin-buoy-1"), t);
  CHECK(r.accepted);
  CHECK(r.data["queued"] == 3);
  CHECK(rx.accepted() == 2);
  CHECK(rx.refused() == 4);
}

TEST_CASE("maintenance arguments: instrument and max_minutes", "[downlink]") {
  auto parse = [](const std::string& text, config::MaintenanceArgs& out) {
    auto p = config::parse_command(text);
    REQUIRE(p.command);
    auto why = config::validate_arguments(*p.command);
    out = p.command->maintenance;
    return why;
  };
  config::MaintenanceArgs m;
  // Whole station, no own maximum.
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start"}})", m).empty());
  CHECK(m.start);
  CHECK(m.instrument.empty());
  CHECK_FALSE(m.max_minutes);
  // One instrument with its own maximum.
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start","instrument":"fluoro",)"
              R"("max_minutes":45,"note":"wipe"}})",
              m)
            .empty());
  CHECK(m.instrument == "fluoro");
  CHECK(m.max_minutes == 45);
  CHECK(m.note == "wipe");
  // Range: 1 to 2880 minutes, an integer.
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start","max_minutes":0}})", m)
            .find("/args/max_minutes") == 0);
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start","max_minutes":2881}})", m)
            .find("/args/max_minutes") == 0);
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start","max_minutes":2880}})", m)
            .empty());
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"start","max_minutes":"9"}})", m)
            .find("/args/max_minutes") == 0);
  // max_minutes belongs to a start.
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"stop","max_minutes":5}})", m)
            .find("/args/max_minutes") == 0);
  // Instrument: a non-empty string (the station checks the name).
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"stop","instrument":""}})", m)
            .find("/args/instrument") == 0);
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"stop","instrument":7}})", m)
            .find("/args/instrument") == 0);
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"stop","instrument":"fluoro"}})", m)
            .empty());
  CHECK_FALSE(m.start);
  CHECK(m.instrument == "fluoro");
  // Unknown keys are still refused.
  CHECK(parse(R"({"id":"1","cmd":"maintenance","args":{"action":"stop","minutes":5}})", m)
            .find("/args/minutes") == 0);
}

TEST_CASE("the receiver hands instrument and max_minutes to the station", "[downlink]") {
  FakeTarget t;
  uplink::DownlinkReceiver rx("hollin-buoy-1", {}, 300, "");
  auto r = rx.handle(
      R"({"id":"m3","cmd":"maintenance","args":{"action":"start","instrument":"sonde","max_minutes":30}})",
      t);
  CHECK(r.accepted);
  CHECK(t.maint == 1);
  CHECK(t.last_maint.start);
  CHECK(t.last_maint.instrument == "sonde");
  CHECK(t.last_maint.max_minutes == 30);
  r = rx.handle(R"({"id":"m4","cmd":"maintenance","args":{"action":"start","max_minutes":-3}})", t);
  CHECK_FALSE(r.accepted);
  CHECK(r.reason.find("/args/max_minutes") == 0);
  CHECK(t.maint == 1);
}

TEST_CASE("receiver without a key accepts unsigned commands", "[downlink]") {
  FakeTarget t;
  uplink::DownlinkReceiver rx("hollin-buoy-1", {}, 300, "");
  auto r = rx.handle(R"({"id":"m2","cmd":"maintenance","args":{"action":"stop"}})", t);
  CHECK(r.accepted);
  CHECK(t.maint == 1);
}
