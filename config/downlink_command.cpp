#include "config/downlink_command.h"

#include <openssl/crypto.h>
#include <openssl/evp.h>
#include <openssl/hmac.h>

#include <algorithm>
#include <cctype>

#include "config/json_reader.h"

namespace tarn::config {

namespace {

bool id_char_ok(char c) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '-' ||
         c == '_' || c == '.' || c == ':';
}

bool token_ok(const std::string& s, std::size_t max) {
  return !s.empty() && s.size() <= max && std::all_of(s.begin(), s.end(), id_char_ok);
}

std::string first_problem(const Problems& p) {
  if (p.empty()) return {};
  const auto& q = p.list().front();
  return (q.where.empty() ? std::string("/") : q.where) + ": " + q.message;
}

}  // namespace

const std::vector<std::string>& settable_settings() {
  static const std::vector<std::string> list = {"/sampling/period_s", "/sampling/window_s",
                                                "/uplink/policy/interval_min"};
  return list;
}

ParsedCommand parse_command(std::string_view payload) {
  ParsedCommand out;
  if (payload.size() > kMaxCommandBytes) {
    out.reason = "command is " + std::to_string(payload.size()) + " bytes; allowed: at most " +
                 std::to_string(kMaxCommandBytes);
    return out;
  }
  Json j = Json::parse(payload.begin(), payload.end(), nullptr, /*allow_exceptions=*/false);
  if (j.is_discarded()) {
    out.reason = "command is not valid JSON";
    return out;
  }
  if (!j.is_object()) {
    out.reason = "command is not a JSON object";
    return out;
  }
  if (auto it = j.find("id"); it != j.end() && it->is_string() && token_ok(*it, 64))
    out.id = it->get<std::string>();
  Problems p;
  ObjectReader r(j, "", p);
  DownlinkCommand c;
  if (r.string("id", c.id, Need::required) && !token_ok(c.id, 64))
    p.add("/id", "is not allowed; allowed: 1 to 64 of A-Z a-z 0-9 - _ . :");
  r.string("cmd", c.cmd, Need::required);
  if (const Json* a = r.object("args")) c.args = *a;
  std::int64_t t = 0;
  if (r.integer("t", t, 0, std::int64_t(1) << 40)) c.t = t;
  if (r.string("nonce", c.nonce) && !token_ok(c.nonce, 64))
    p.add("/nonce", "is not allowed; allowed: 1 to 64 of A-Z a-z 0-9 - _ . :");
  if (r.string("mac", c.mac)) {
    std::transform(c.mac.begin(), c.mac.end(), c.mac.begin(),
                   [](unsigned char ch) { return char(std::tolower(ch)); });
    if (c.mac.size() != 64 || !from_hex(c.mac))
      p.add("/mac", "is not allowed; allowed: 64 hex digits (HMAC-SHA256)");
  }
  r.finish();
  if (!p.empty()) {
    out.reason = first_problem(p);
    return out;
  }
  out.command = std::move(c);
  return out;
}

std::string validate_arguments(DownlinkCommand& c) {
  Problems p;
  ObjectReader r(c.args, "/args", p);
  if (c.cmd == "ping") {
    // no arguments
  } else if (c.cmd == "resend") {
    bool by_seq = r.has("first_seq") || r.has("last_seq");
    bool by_time = r.has("from_t") || r.has("to_t");
    if (by_seq == by_time) {
      r.finish();
      return "/args: needs first_seq and last_seq, or from_t and to_t (one pair)";
    }
    if (by_seq) {
      std::int64_t a = 0, b = 0;
      bool ok = r.integer("first_seq", a, 1, std::int64_t(1) << 53, Need::required);
      ok = r.integer("last_seq", b, 1, std::int64_t(1) << 53, Need::required) && ok;
      if (ok && b < a) p.add("/args/last_seq", "is before first_seq; allowed: first_seq or later");
      if (ok && b - a >= 10000)
        p.add("/args/last_seq", "spans more than 10000 packets; allowed: at most 10000");
      c.resend.first_seq = std::uint64_t(a);
      c.resend.last_seq = std::uint64_t(b);
    } else {
      c.resend.by_time = true;
      bool ok = r.integer("from_t", c.resend.from_t, 0, std::int64_t(1) << 40, Need::required);
      ok = r.integer("to_t", c.resend.to_t, 0, std::int64_t(1) << 40, Need::required) && ok;
      if (ok && c.resend.to_t < c.resend.from_t)
        p.add("/args/to_t", "is before from_t; allowed: from_t or later");
      if (ok && c.resend.to_t - c.resend.from_t > 31 * 86400)
        p.add("/args/to_t", "spans more than 31 days; allowed: at most 31 days");
    }
  } else if (c.cmd == "maintenance") {
    MaintenanceArgs& m = c.maintenance;
    std::string action;
    if (r.one_of("action", action, {"start", "stop"}, Need::required)) m.start = action == "start";
    if (r.string("note", m.note) && m.note.size() > 200)
      p.add("/args/note", "is longer than 200 bytes; allowed: at most 200");
    // Instrument names are checked against the running config by the station.
    if (r.string("instrument", m.instrument) && (m.instrument.empty() || m.instrument.size() > 64))
      p.add("/args/instrument", "is empty or longer than 64 bytes; allowed: an instrument name");
    std::int64_t minutes = 0;
    if (r.integer("max_minutes", minutes, kMaintenanceMaxMinutesMin, kMaintenanceMaxMinutesMax)) {
      if (action == "stop")
        p.add("/args/max_minutes", "is given with action stop; allowed: only with action start");
      else
        m.max_minutes = minutes;
    }
  } else if (c.cmd == "set") {
    if (r.string("setting", c.setting, Need::required)) {
      const auto& allowed = settable_settings();
      if (std::find(allowed.begin(), allowed.end(), c.setting) == allowed.end()) {
        std::string list;
        for (auto& s : allowed) list += (list.empty() ? "" : ", ") + s;
        p.add("/args/setting", "is \"" + c.setting + "\"; allowed: " + list);
      }
    }
    if (const Json* v = r.any("value", Need::required)) {
      if (!v->is_number_integer())
        p.add("/args/value", "is not an integer; allowed: an integer (range as in the config)");
      else
        c.value = *v;
    }
  } else {
    return "unknown command \"" + c.cmd + "\"; allowed: ping, resend, maintenance, set";
  }
  r.finish();
  return first_problem(p);
}

std::string canonical_bytes(std::string_view station, const DownlinkCommand& c) {
  std::string s = "tarn-command-v1\n";
  s += station;
  s += "\n" + c.id + "\n" + c.cmd + "\n" + (c.t ? std::to_string(*c.t) : std::string()) + "\n" +
       c.nonce + "\n";
  // nlohmann::json keeps object keys sorted; dump() without indent is compact.
  s += c.args.dump(-1, ' ', false, Json::error_handler_t::replace);
  return s;
}

std::array<std::uint8_t, 32> hmac_sha256(const std::vector<std::uint8_t>& key,
                                         std::string_view message) {
  std::array<std::uint8_t, 32> out{};
  unsigned int len = 0;
  static const std::uint8_t empty = 0;
  HMAC(EVP_sha256(), key.empty() ? &empty : key.data(), int(key.size()),
       reinterpret_cast<const unsigned char*>(message.data()), message.size(), out.data(), &len);
  return out;
}

std::string to_hex(const std::uint8_t* p, std::size_t n) {
  static const char* d = "0123456789abcdef";
  std::string s;
  s.reserve(n * 2);
  for (std::size_t i = 0; i < n; ++i) {
    s += d[p[i] >> 4];
    s += d[p[i] & 15];
  }
  return s;
}

std::optional<std::vector<std::uint8_t>> from_hex(std::string_view hex) {
  if (hex.size() % 2) return std::nullopt;
  auto nib = [](char c) -> int {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    return -1;
  };
  std::vector<std::uint8_t> out;
  out.reserve(hex.size() / 2);
  for (std::size_t i = 0; i < hex.size(); i += 2) {
    int hi = nib(hex[i]), lo = nib(hex[i + 1]);
    if (hi < 0 || lo < 0) return std::nullopt;
    out.push_back(std::uint8_t(hi * 16 + lo));
  }
  return out;
}

void NonceCache::prune(std::int64_t now, std::int64_t window_s) {
  // A nonce whose time left the window can never be accepted again anyway.
  for (auto it = entries_.begin(); it != entries_.end();)
    it = (it->second < now - window_s || it->second > now + window_s) ? entries_.erase(it)
                                                                      : std::next(it);
}

bool NonceCache::add(const std::string& nonce, std::int64_t t, std::int64_t now,
                     std::int64_t window_s) {
  prune(now, window_s);
  if (entries_.size() >= kMaxEntries) return false;
  entries_[nonce] = t;
  return true;
}

std::string NonceCache::serialize() const {
  Json j = Json::object();
  for (auto& [n, t] : entries_) j[n] = t;
  return j.dump();
}

bool NonceCache::restore(const std::string& text) {
  entries_.clear();
  Json j = Json::parse(text, nullptr, false);
  if (!j.is_object()) return false;
  for (auto& [n, t] : j.items()) {
    if (!t.is_number_integer() || entries_.size() >= kMaxEntries) {
      entries_.clear();
      return false;
    }
    entries_[n] = t.get<std::int64_t>();
  }
  return true;
}

std::string check_authentication(const DownlinkCommand& c, std::string_view station,
                                 const std::vector<std::uint8_t>& key, std::int64_t now,
                                 std::int64_t window_s, const NonceCache& nonces) {
  if (!key.empty()) {
    if (c.mac.empty()) return "unsigned; this station requires a mac (HMAC-SHA256)";
    if (!c.t || c.nonce.empty()) return "signed commands need t and nonce";
    auto want = hmac_sha256(key, canonical_bytes(station, c));
    auto got = from_hex(c.mac);
    if (!got || got->size() != want.size() ||
        CRYPTO_memcmp(got->data(), want.data(), want.size()) != 0)
      return "mac does not match";
  }
  if (c.t && (*c.t < now - window_s || *c.t > now + window_s))
    return "t " + std::to_string(*c.t) + " is outside the window; allowed: station time " +
           std::to_string(now) + " +- " + std::to_string(window_s) + " s";
  if (!c.nonce.empty() && nonces.seen(c.nonce)) return "replayed: nonce already used";
  return {};
}

}  // namespace tarn::config
