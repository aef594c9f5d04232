// Downlink commands from the shore: parsing, argument validation and the
// HMAC-SHA256 check, all pure (bytes and times in, values out). The daemon
// side (daemon/uplink/downlink.h) runs them. Format: daemon/uplink/DOWNLINK.md.
//
// A command is one JSON object, at most kMaxCommandBytes:
//   {"id": "...", "cmd": "ping"|"resend"|"maintenance"|"set", "args": {...},
//    "t": unix_s, "nonce": "...", "mac": "hex"}
// Thread-safety: free functions are reentrant; NonceCache is single-threaded.
#pragma once

#include <array>
#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include <nlohmann/json.hpp>

namespace tarn::config {

inline constexpr std::size_t kMaxCommandBytes = 4096;
inline constexpr std::int64_t kDefaultCommandWindowS = 300;  // +- around station time

// The settings a "set" command may change, as JSON pointers into the config.
const std::vector<std::string>& settable_settings();

struct ResendArgs {
  bool by_time = false;
  std::uint64_t first_seq = 0, last_seq = 0;  // by sequence, inclusive
  std::int64_t from_t = 0, to_t = 0;          // by creation time, inclusive
};

// Limits shared by the downlink command and `tarn maintenance`: a period's
// own maximum duration, in minutes (1 minute to 2 days; common practice, no
// source: a cleaning visit takes minutes to hours).
inline constexpr std::int64_t kMaintenanceMaxMinutesMin = 1;
inline constexpr std::int64_t kMaintenanceMaxMinutesMax = 2880;

struct MaintenanceArgs {
  bool start = false;
  std::string instrument;                   // empty: the whole station
  std::string note;                         // at most 200 bytes
  std::optional<std::int64_t> max_minutes;  // start only; empty: the config's maximum
};

struct DownlinkCommand {
  std::string id;
  std::string cmd;  // ping | resend | maintenance | set
  nlohmann::json args = nlohmann::json::object();
  std::optional<std::int64_t> t;
  std::string nonce;
  std::string mac;  // lower-case hex as received (empty: unsigned)
  // Filled by validate_arguments():
  ResendArgs resend;
  MaintenanceArgs maintenance;
  std::string setting;  // one of settable_settings()
  nlohmann::json value;
};

struct ParsedCommand {
  std::optional<DownlinkCommand> command;  // set when the envelope is well formed
  std::string id;                          // best effort, for the reply, even when refused
  std::string reason;                      // why refused (empty when command is set)
};

// Step 1: the envelope (JSON, field types, sizes). Unknown top-level keys refused.
ParsedCommand parse_command(std::string_view payload);
// Step 2 (after authentication): the command name and its arguments.
// Returns the reason it is refused, empty when valid; fills the typed fields.
std::string validate_arguments(DownlinkCommand& c);

// The bytes the MAC covers (DOWNLINK.md, "Canonical bytes").
std::string canonical_bytes(std::string_view station, const DownlinkCommand& c);
std::array<std::uint8_t, 32> hmac_sha256(const std::vector<std::uint8_t>& key,
                                         std::string_view message);
std::string to_hex(const std::uint8_t* p, std::size_t n);
// Parses hex (even length, [0-9a-fA-F]); nullopt otherwise.
std::optional<std::vector<std::uint8_t>> from_hex(std::string_view hex);

// Nonces of accepted signed commands, kept while their time is in the window.
class NonceCache {
 public:
  static constexpr std::size_t kMaxEntries = 2000;
  bool seen(const std::string& nonce) const { return entries_.count(nonce) != 0; }
  // False when the cache is full of nonces still inside the window.
  bool add(const std::string& nonce, std::int64_t t, std::int64_t now, std::int64_t window_s);
  void prune(std::int64_t now, std::int64_t window_s);
  std::size_t size() const { return entries_.size(); }
  std::string serialize() const;          // JSON object nonce -> t
  bool restore(const std::string& text);  // false (and empty) on garbage

 private:
  std::map<std::string, std::int64_t> entries_;
};

// Step 1b: authentication. With a key: mac, t and nonce required, the MAC
// must match, |t - now| <= window_s, the nonce unseen. Without a key a
// command is accepted unsigned; a nonce it carries is still checked.
// Returns the reason it is refused, empty when authentic.
std::string check_authentication(const DownlinkCommand& c, std::string_view station,
                                 const std::vector<std::uint8_t>& key, std::int64_t now,
                                 std::int64_t window_s, const NonceCache& nonces);

}  // namespace tarn::config
