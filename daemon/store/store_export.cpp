#include "daemon/store/store_export.h"

#include <charconv>

#include "drivers/os/utc_text.h"

namespace tarn::store {
namespace {

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\r\n") == std::string::npos) return s;
  std::string q = "\"";
  for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
  return q + "\"";
}

std::string json_string(const std::string& s) {
  std::string q = "\"";
  for (unsigned char c : s) {
    if (c == '"' || c == '\\') {
      q += '\\';
      q += char(c);
    } else if (c < 0x20) {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\u%04x", c);
      q += buf;
    } else {
      q += char(c);
    }
  }
  return q + "\"";
}

}  // namespace

std::string number_text(double v) {
  char buf[64];
  auto [p, ec] = std::to_chars(buf, buf + sizeof buf, v);
  if (ec != std::errc()) return "nan";
  return std::string(buf, p);
}

std::string to_hex(const std::vector<std::uint8_t>& bytes) {
  static const char* digits = "0123456789abcdef";
  std::string s;
  s.reserve(bytes.size() * 2);
  for (auto b : bytes) {
    s += digits[b >> 4];
    s += digits[b & 15];
  }
  return s;
}

config::Json stats_to_json(const StoreStats& s) {
  auto when = [](const std::optional<std::int64_t>& t) -> config::Json {
    if (!t) return nullptr;
    return config::Json{{"t", *t}, {"utc", os::format_utc(*t)}};
  };
  config::Json j;
  j["condition"] = s.condition;
  j["degraded"] = s.condition.rfind("degraded", 0) == 0;
  j["outbox"] = {{"path", s.outbox_path},
                 {"unsent", s.outbox.unsent},
                 {"unsent_bytes", s.outbox.unsent_bytes},
                 {"unsent_alerts", s.outbox.unsent_alerts},
                 {"oldest_unsent", when(s.outbox.oldest_unsent_created_t)},
                 {"sent_kept", s.outbox.sent_kept},
                 {"highest_sequence", s.outbox.highest_sequence},
                 {"used_bytes", s.outbox_used_bytes},
                 {"file_bytes", s.outbox_file_bytes}};
  j["archive"] = {{"path", s.archive_path},
                  {"samples", s.archive.samples},
                  {"oldest", when(s.archive.oldest_t)},
                  {"newest", when(s.archive.newest_t)},
                  {"used_bytes", s.archive_used_bytes},
                  {"file_bytes", s.archive_file_bytes}};
  j["budget_bytes"] = s.budget_bytes;
  j["policy"] = s.policy;
  j["in_memory"] = {
      {"packets", s.held_packets}, {"acknowledgements", s.held_acks}, {"samples", s.held_samples}};
  j["counters"] = s.counters;
  j["notes"] = s.notes;
  return j;
}

void write_sample_header(std::ostream& out, SampleFormat f) {
  if (f == SampleFormat::csv) out << "time_utc,t,channel,value,flag,reasons\n";
}

void write_sample(std::ostream& out, SampleFormat f, const ArchivedSample& s) {
  if (f == SampleFormat::csv) {
    out << os::format_utc(s.t) << ',' << s.t << ',' << csv_field(s.channel) << ','
        << (s.value ? number_text(*s.value) : std::string()) << ',' << int(s.flag) << ','
        << s.reasons << '\n';
  } else {
    out << "{\"t\":" << s.t << ",\"ch\":" << json_string(s.channel)
        << ",\"v\":" << (s.value ? number_text(*s.value) : std::string("null"))
        << ",\"f\":" << int(s.flag) << ",\"r\":" << s.reasons << "}\n";
  }
}

void write_packet(std::ostream& out, const Packet& p, bool bare) {
  if (!bare) {
    out << "# seq=" << p.sequence << " kind=" << kind_name(p.kind)
        << " priority=" << priority_name(p.priority) << " created=" << os::format_utc(p.created_t)
        << " size=" << p.bytes.size() << " attempts=" << p.attempts;
    if (p.sent_t) out << " sent=" << os::format_utc(*p.sent_t);
    if (!p.last_error.empty()) out << " last_error=" << json_string(p.last_error);
    out << '\n';
  }
  out << to_hex(p.bytes) << '\n';
}

}  // namespace tarn::store
