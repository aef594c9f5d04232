// libFuzzer target: downlink command parsing, argument validation and the
// MAC check on arbitrary bytes. Must never crash, hang or leak; a command
// that parses must give canonical bytes whose MAC, once signed
// with a fixed key, check_authentication accepts.
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string_view>

#include "config/downlink_command.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace tarn::config;
  std::string_view text(reinterpret_cast<const char*>(data), size);
  ParsedCommand p = parse_command(text);
  if (!p.command) return 0;
  DownlinkCommand c = *p.command;
  (void)validate_arguments(c);
  static const std::vector<std::uint8_t> key(32, 0x5a);
  NonceCache none;
  (void)check_authentication(c, "hollin-buoy-1", key, 1'700'000'000, 300, none);
  // Re-sign: the MAC over the canonical bytes must verify.
  if (!c.t) c.t = 1'700'000'000;
  if (c.nonce.empty()) c.nonce = "fuzz";
  auto mac = hmac_sha256(key, canonical_bytes("hollin-buoy-1", c));
  c.mac = to_hex(mac.data(), mac.size());
  std::string why = check_authentication(c, "hollin-buoy-1", key, *c.t, 300, none);
  if (!why.empty()) std::abort();
  return 0;
}
