#include "config/station_config.h"

#include <sys/stat.h>
#include <unistd.h>

#include <fstream>
#include <regex>
#include <set>
#include <sstream>

#include "config/json_reader.h"

namespace tarn::config {

const Line* StationConfig::find_line(const std::string& name) const {
  for (auto& l : lines)
    if (l.name == name) return &l;
  return nullptr;
}

const Instrument* StationConfig::find_instrument(const std::string& name) const {
  for (auto& i : instruments)
    if (i.name == name) return &i;
  return nullptr;
}

const std::vector<std::string>& known_units() {
  // UCUM case-sensitive codes (The Unified Code for Units of Measure, Regenstrief
  // Institute); {RFU} and {counts} are UCUM annotations for dimensionless values.
  static const std::vector<std::string> u = {"ug/L",  "mg/L",  "Cel", "K",   "V",     "mV",
                                             "Ohm",   "kOhm",  "%",   "1",   "{RFU}", "{counts}",
                                             "uS/cm", "mS/cm", "m",   "hPa", "W/m2",  "[ppb]"};
  return u;
}

const std::vector<std::string>& known_quantities() {
  static const std::vector<std::string> q = {"chlorophyll_a",     "phycocyanin",
                                             "phycoerythrin",     "water_temperature",
                                             "air_temperature",   "fluorescence_raw",
                                             "resistance",        "supply_voltage",
                                             "turbidity",         "dissolved_oxygen",
                                             "conductivity",      "depth",
                                             "board_temperature", "other"};
  return q;
}

bool check_readable_file(const std::string& path, const std::string& pointer, Problems& problems) {
  struct stat st {};
  if (::stat(path.c_str(), &st) != 0) {
    problems.add(pointer, "file \"" + path + "\" does not exist; expected a readable file");
    return false;
  }
  if (!S_ISREG(st.st_mode)) {
    problems.add(pointer, "\"" + path + "\" is not a regular file; expected a readable file");
    return false;
  }
  if (::access(path.c_str(), R_OK) != 0) {
    problems.add(pointer, "file \"" + path + "\" is not readable by this user; check its mode");
    return false;
  }
  return true;
}

static void in_list(ObjectReader& r, const std::string& key, std::string& out,
                    const std::vector<std::string>& allowed, Need need) {
  std::string v;
  if (!r.string(key, v, need)) return;
  for (auto& a : allowed)
    if (a == v) {
      out = v;
      return;
    }
  std::string list;
  for (auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
  std::string near = closest_match(v, allowed);
  r.problems().add(r.pointer_of(key),
                   "is \"" + v + "\"" + (near.empty() ? "" : " (did you mean \"" + near + "\"?)") +
                       "; allowed: " + list);
}

// A real date of the Gregorian calendar, YYYY-MM-DD, years 1900..2299 (the range the
// packet format carries, codec/FORMAT.md §5.1).
static bool valid_date(const std::string& t) {
  static const std::regex re("[0-9]{4}-[0-9]{2}-[0-9]{2}");
  if (!std::regex_match(t, re)) return false;
  const int y = std::stoi(t.substr(0, 4)), m = std::stoi(t.substr(5, 2)),
            d = std::stoi(t.substr(8, 2));
  // Gregorian leap years: divisible by 4, except centuries not divisible by 400.
  const bool leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
  static constexpr int kDays[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return y >= 1900 && y <= 2299 && m >= 1 && m <= 12 && d >= 1 &&
         d <= kDays[m - 1] + (m == 2 && leap ? 1 : 0);
}

static bool valid_name(const std::string& s) {
  static const std::regex re("[a-z0-9][a-z0-9_-]{0,31}");
  return std::regex_match(s, re);
}

static void name_field(ObjectReader& r, const std::string& key, std::string& out) {
  if (r.string(key, out, Need::required) && !valid_name(out)) {
    r.problems().add(r.pointer_of(key), "is \"" + out +
                                            "\"; allowed: 1-32 characters of a-z, 0-9, '_' and "
                                            "'-', starting with a letter or digit");
    out.clear();
  }
}

static void parse_station(const Json* j, StationConfig& c, Problems& p) {
  if (!j) return;
  ObjectReader r(*j, "/station", p);
  name_field(r, "id", c.station.id);
  r.string("name", c.station.name);
  r.number("latitude", c.station.latitude, -90, 90, Need::required);
  r.number("longitude", c.station.longitude, -180, 180, Need::required);
  double elevation = 0;
  if (r.number("elevation_m", elevation, -500, 9000)) c.station.elevation_m = elevation;
  r.finish();
}

static void parse_sampling(const Json* j, StationConfig& c, Problems& p) {
  if (!j) return;
  ObjectReader r(*j, "/sampling", p);
  r.integer("period_s", c.sampling.period_s, 1, 86400);
  r.integer("window_s", c.sampling.window_s, 10, 86400);
  r.finish();
  if (c.sampling.window_s % c.sampling.period_s != 0)
    p.add("/sampling/window_s",
          "is " + std::to_string(c.sampling.window_s) + ", not a multiple of period_s " +
              std::to_string(c.sampling.period_s) + "; allowed: a whole number of periods");
  else if (c.sampling.window_s / c.sampling.period_s > 1440)
    p.add("/sampling/window_s", "holds more than 1440 samples per channel; allowed at most 1440");
  if (86400 % c.sampling.window_s != 0)
    p.add("/sampling/window_s", "is " + std::to_string(c.sampling.window_s) +
                                    ", which does not divide a day; allowed: a divisor of 86400 so "
                                    "windows align to UTC days");
}

static void parse_line(const Json& j, const std::string& ptr, Line& l, Problems& p) {
  ObjectReader r(j, ptr, p);
  l.pointer = ptr;
  name_field(r, "name", l.name);
  bool has_port = r.string("port", l.port);
  if (const Json* u = r.object("usb")) {
    ObjectReader ur(*u, ptr + "/usb", p);
    UsbIdentity id;
    static const std::regex hex4("[0-9a-fA-F]{4}");
    if (ur.string("vendor_id", id.vendor_id, Need::required) &&
        !std::regex_match(id.vendor_id, hex4))
      p.add(ptr + "/usb/vendor_id", "is \"" + id.vendor_id + "\"; allowed: 4 hex digits");
    if (ur.string("product_id", id.product_id, Need::required) &&
        !std::regex_match(id.product_id, hex4))
      p.add(ptr + "/usb/product_id", "is \"" + id.product_id + "\"; allowed: 4 hex digits");
    ur.string("serial", id.serial);
    ur.finish();
    l.usb = id;
  }
  if (has_port == l.usb.has_value())
    p.add(ptr, std::string(has_port ? "has both \"port\" and \"usb\""
                                    : "has neither \"port\" nor \"usb\"") +
                   "; allowed: exactly one of them");
  if (has_port && (l.port.empty() || l.port.front() != '/'))
    p.add(ptr + "/port",
          "is \"" + l.port +
              "\"; allowed: an absolute device path such as /dev/ttyUSB0 or /dev/serial/by-id/...");
  std::int64_t baud = l.baud;
  if (r.integer("baud", baud, 300, 4000000)) {
    static const std::set<std::int64_t> rates = {300,    600,     1200,    2400,   4800,   9600,
                                                 19200,  38400,   57600,   115200, 230400, 460800,
                                                 921600, 1000000, 2000000, 4000000};
    if (!rates.count(baud))
      p.add(ptr + "/baud", "is " + std::to_string(baud) +
                               "; allowed: a standard rate (300, 1200, 2400, 4800, 9600, 19200, "
                               "38400, 57600, 115200, ...)");
    l.baud = int(baud);
  }
  r.integer("data_bits", l.data_bits, 5, 8);
  r.one_of("parity", l.parity, {"none", "even", "odd"});
  r.integer("stop_bits", l.stop_bits, 1, 2);
  r.one_of("flow_control", l.flow_control, {"none", "rts_cts", "xon_xoff"});
  r.boolean("rs485_kernel_mode", l.rs485_kernel_mode);
  r.integer("gap_ms", l.gap_ms, 0, 10000);
  r.integer("timeout_ms", l.timeout_ms, 10, 120000);
  r.integer("retries", l.retries, 0, 5);
  r.finish();
}

static void parse_channel(const Json& j, const std::string& ptr, Channel& ch, Problems& p) {
  ObjectReader r(j, ptr, p);
  ch.pointer = ptr;
  name_field(r, "name", ch.name);
  in_list(r, "quantity", ch.quantity, known_quantities(), Need::required);
  in_list(r, "unit", ch.unit, known_units(), Need::required);
  r.number("resolution", ch.resolution, 1e-6, 1e6, Need::required);
  if (const Json* s = r.any("source", Need::required)) ch.source = *s;
  if (const Json* c = r.object("calibration")) ch.calibration = *c;
  if (const Json* q = r.array("qc")) ch.qc = *q;
  if (const Json* w = r.object("window")) ch.window = *w;
  // One signed vertical position, positive down (codec/FORMAT.md §5.1).
  double depth = 0, height = 0;
  const bool has_depth = r.number("depth_m", depth, 0, 11000);
  const bool has_height = r.number("height_m", height, 0, 11000);
  if (has_depth && has_height)
    p.add(ptr + "/height_m",
          "is given together with depth_m; allowed: depth_m (below the water surface) or "
          "height_m (above it), not both");
  else if (has_depth)
    ch.depth_m = depth;
  else if (has_height)
    ch.depth_m = -height;
  r.finish();
}

static void parse_instrument(const Json& j, const std::string& ptr, Instrument& in, Problems& p) {
  ObjectReader r(j, ptr, p);
  in.pointer = ptr;
  name_field(r, "name", in.name);
  r.string("line", in.line, Need::required);
  r.string("driver", in.driver, Need::required);
  r.integer("warmup_s", in.warmup_s, 0, 3600);
  r.integer("period_s", in.period_s, 1, 86400);
  if (const Json* o = r.object("options"))
    in.options = *o;
  else
    in.options = Json::object();
  for (auto [key, out] : {std::pair{"model", &in.model}, std::pair{"serial", &in.serial}})
    if (r.string(key, *out) && (out->empty() || out->size() > 255)) {
      p.add(ptr + "/" + key, "is " + std::to_string(out->size()) +
                                 " bytes long; allowed: 1 to 255 bytes (leave it out when not "
                                 "known)");
      out->clear();
    }
  if (r.string("calibrated_on", in.calibrated_on) && !valid_date(in.calibrated_on)) {
    p.add(ptr + "/calibrated_on", "is \"" + in.calibrated_on +
                                      "\"; allowed: a calendar date YYYY-MM-DD between "
                                      "1900-01-01 and 2299-12-31");
    in.calibrated_on.clear();
  }
  if (const Json* chs = r.array("channels", Need::required)) {
    if (chs->empty()) p.add(ptr + "/channels", "is empty; allowed: at least one channel");
    for (std::size_t i = 0; i < chs->size(); ++i) {
      Channel ch;
      parse_channel((*chs)[i], ptr + "/channels/" + std::to_string(i), ch, p);
      in.channels.push_back(std::move(ch));
    }
  }
  r.finish();
}

static void parse_uplink(const Json* j, StationConfig& c, Problems& p) {
  if (!j) return;
  ObjectReader r(*j, "/uplink", p);
  r.string("backend", c.uplink.backend, Need::required);
  if (const Json* o = r.object("options"))
    c.uplink.options = *o;
  else
    c.uplink.options = Json::object();
  if (const Json* o = r.object("policy")) c.uplink.policy = *o;
  r.finish();
}

static void check_references(StationConfig& c, Problems& p) {
  std::set<std::string> line_names, inst_names, chan_names;
  for (auto& l : c.lines) {
    if (!l.name.empty() && !line_names.insert(l.name).second)
      p.add(l.pointer + "/name",
            "\"" + l.name + "\" is used by another line; names must be unique");
  }
  for (std::size_t a = 0; a < c.lines.size(); ++a)
    for (std::size_t b = a + 1; b < c.lines.size(); ++b)
      if (!c.lines[a].port.empty() && c.lines[a].port == c.lines[b].port)
        p.add(c.lines[b].pointer + "/port", "\"" + c.lines[b].port + "\" is also the port of " +
                                                c.lines[a].pointer +
                                                "; instruments sharing a port belong on one line");
  std::vector<std::string> lines(line_names.begin(), line_names.end());
  for (auto& in : c.instruments) {
    if (!in.name.empty() && !inst_names.insert(in.name).second)
      p.add(in.pointer + "/name",
            "\"" + in.name + "\" is used by another instrument; names must be unique");
    if (!in.line.empty() && !line_names.count(in.line)) {
      std::string near = closest_match(in.line, lines);
      std::string list;
      for (auto& l : lines) list += (list.empty() ? "" : ", ") + l;
      p.add(in.pointer + "/line", "names line \"" + in.line + "\", which is not defined" +
                                      (near.empty() ? "" : " (did you mean \"" + near + "\"?)") +
                                      "; defined lines: " + (list.empty() ? "none" : list));
    }
    for (auto& ch : in.channels)
      if (!ch.name.empty() && !chan_names.insert(ch.name).second)
        p.add(ch.pointer + "/name", "\"" + ch.name +
                                        "\" is used by another channel; channel names must be "
                                        "unique across the station");
    if (in.period_s && in.period_s % c.sampling.period_s != 0 &&
        c.sampling.period_s % in.period_s != 0)
      p.add(in.pointer + "/period_s", "is " + std::to_string(in.period_s) +
                                          "; allowed: a divisor or multiple of /sampling/period_s");
    if (in.period_s && c.sampling.window_s % in.period_s != 0)
      p.add(in.pointer + "/period_s", "does not divide /sampling/window_s; allowed: a divisor of " +
                                          std::to_string(c.sampling.window_s));
  }
}

static std::string line_col(const std::string& text, std::size_t byte) {
  std::size_t line = 1, col = 1;
  for (std::size_t i = 0; i < text.size() && i + 1 < byte; ++i) {
    if (text[i] == '\n') {
      ++line;
      col = 1;
    } else {
      ++col;
    }
  }
  return "line " + std::to_string(line) + ":column " + std::to_string(col);
}

LoadResult load_text(const std::string& text, const std::string& file) {
  LoadResult res;
  Problems& p = res.problems;
  Json root;
  try {
    root = Json::parse(text, nullptr, true, /*ignore_comments=*/true);
  } catch (const Json::parse_error& e) {
    std::string what = e.what();
    // nlohmann's message: "[json.exception.parse_error.101] parse error at line 3, column 5: ..."
    auto pos = what.find(": syntax error");
    std::string detail = pos == std::string::npos ? what : what.substr(pos + 2);
    p.add(line_col(text, e.byte), "JSON " + detail + "; expected valid JSON (comments allowed)");
    return res;
  }
  StationConfig c;
  c.file = file;
  ObjectReader r(root, "", p);
  parse_station(r.object("station", Need::required), c, p);
  parse_sampling(r.object("sampling"), c, p);
  if (const Json* lg = r.object("log")) {
    ObjectReader lr(*lg, "/log", p);
    lr.one_of("level", c.log_level, {"trace", "debug", "info", "warn", "error", "critical", "off"});
    lr.finish();
  }
  if (const Json* ps = r.object("paths")) {
    ObjectReader pr(*ps, "/paths", p);
    if (pr.string("state_dir", c.paths.state_dir) && !c.paths.state_dir.starts_with('/'))
      p.add("/paths/state_dir", "is relative or empty; allowed: an absolute path");
    if (pr.string("runtime_dir", c.paths.runtime_dir) && !c.paths.runtime_dir.starts_with('/'))
      p.add("/paths/runtime_dir", "is relative or empty; allowed: an absolute path");
    pr.finish();
  }
  if (const Json* ls = r.array("lines", Need::required)) {
    for (std::size_t i = 0; i < ls->size(); ++i) {
      Line l;
      parse_line((*ls)[i], "/lines/" + std::to_string(i), l, p);
      c.lines.push_back(std::move(l));
    }
  }
  if (const Json* is = r.array("instruments", Need::required)) {
    if (is->empty()) p.add("/instruments", "is empty; allowed: at least one instrument");
    for (std::size_t i = 0; i < is->size(); ++i) {
      Instrument in;
      parse_instrument((*is)[i], "/instruments/" + std::to_string(i), in, p);
      c.instruments.push_back(std::move(in));
    }
  }
  parse_uplink(r.object("uplink", Need::required), c, p);
  if (const Json* a = r.object("alerts")) c.alerts = *a;
  if (const Json* s = r.object("store")) c.store = *s;
  if (const Json* h = r.object("health")) c.health = *h;
  if (const Json* m = r.object("maintenance")) c.maintenance = *m;
  r.finish();
  check_references(c, p);
  res.config = std::move(c);
  return res;
}

LoadResult load_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    LoadResult res;
    res.problems.add("", "cannot read the file; expected a readable JSON file");
    return res;
  }
  std::ostringstream ss;
  ss << in.rdbuf();
  return load_text(ss.str(), path);
}

}  // namespace tarn::config
