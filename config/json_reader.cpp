#include "config/json_reader.h"

#include <algorithm>
#include <cmath>
#include <sstream>

namespace tarn::config {

std::string Problems::render(const std::string& file) const {
  std::string out;
  for (const auto& p : list_)
    out += file + ": " + (p.where.empty() ? "/" : p.where) + ": " + p.message + "\n";
  return out;
}

std::string pointer_escape(const std::string& key) {
  std::string out;
  for (char c : key) {
    if (c == '~')
      out += "~0";
    else if (c == '/')
      out += "~1";
    else
      out += c;
  }
  return out;
}

static const char* type_of(const Json& j) {
  switch (j.type()) {
    case Json::value_t::null:
      return "null";
    case Json::value_t::boolean:
      return "a boolean";
    case Json::value_t::number_integer:
    case Json::value_t::number_unsigned:
      return "an integer";
    case Json::value_t::number_float:
      return "a number";
    case Json::value_t::string:
      return "a string";
    case Json::value_t::array:
      return "an array";
    case Json::value_t::object:
      return "an object";
    default:
      return "a value";
  }
}

static std::string fmt_num(double v) {
  std::ostringstream s;
  s << v;
  return s.str();
}

ObjectReader::ObjectReader(const Json& j, std::string pointer, Problems& problems)
    : pointer_(std::move(pointer)), problems_(problems) {
  if (j.is_object())
    obj_ = &j;
  else
    problems_.add(pointer_, std::string("is ") + type_of(j) + "; expected an object");
}

std::string ObjectReader::pointer_of(const std::string& key) const {
  return pointer_ + "/" + pointer_escape(key);
}

bool ObjectReader::has(const std::string& key) const {
  return obj_ && obj_->contains(key);
}

const Json* ObjectReader::get(const std::string& key, Need need, const char* type_name) {
  asked_.insert(key);
  if (!obj_) return nullptr;
  auto it = obj_->find(key);
  if (it == obj_->end()) {
    if (need == Need::required)
      problems_.add(pointer_of(key), std::string("is missing; required, ") + type_name);
    return nullptr;
  }
  return &*it;
}

bool ObjectReader::string(const std::string& key, std::string& out, Need need) {
  const Json* v = get(key, need, "a string");
  if (!v) return false;
  if (!v->is_string()) {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected a string");
    return false;
  }
  out = v->get<std::string>();
  if (need == Need::required && out.empty()) {
    problems_.add(pointer_of(key), "is empty; expected a non-empty string");
    return false;
  }
  return true;
}

bool ObjectReader::one_of(const std::string& key, std::string& out,
                          std::initializer_list<const char*> allowed, Need need) {
  std::string v;
  if (!string(key, v, need)) return false;
  for (const char* a : allowed)
    if (v == a) {
      out = v;
      return true;
    }
  std::string list;
  for (const char* a : allowed) list += std::string(list.empty() ? "" : ", ") + a;
  problems_.add(pointer_of(key), "is \"" + v + "\"; allowed: " + list);
  return false;
}

bool ObjectReader::integer(const std::string& key, std::int64_t& out, std::int64_t min,
                           std::int64_t max, Need need) {
  const Json* v = get(key, need, "an integer");
  if (!v) return false;
  std::int64_t x = 0;
  if (v->is_number_integer()) {
    if (v->is_number_unsigned() && v->get<std::uint64_t>() > std::uint64_t(INT64_MAX)) {
      problems_.add(pointer_of(key), "is out of range; allowed " + std::to_string(min) + " to " +
                                         std::to_string(max));
      return false;
    }
    x = v->get<std::int64_t>();
  } else if (v->is_number_float() && std::floor(v->get<double>()) == v->get<double>() &&
             std::abs(v->get<double>()) < 9e15) {
    x = static_cast<std::int64_t>(v->get<double>());
  } else {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected an integer");
    return false;
  }
  if (x < min || x > max) {
    problems_.add(pointer_of(key), "is " + std::to_string(x) + "; allowed " + std::to_string(min) +
                                       " to " + std::to_string(max));
    return false;
  }
  out = x;
  return true;
}

bool ObjectReader::integer(const std::string& key, int& out, int min, int max, Need need) {
  std::int64_t x = 0;
  if (!integer(key, x, min, max, need)) return false;
  out = static_cast<int>(x);
  return true;
}

bool ObjectReader::number(const std::string& key, double& out, double min, double max, Need need) {
  const Json* v = get(key, need, "a number");
  if (!v) return false;
  if (!v->is_number()) {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected a number");
    return false;
  }
  double x = v->get<double>();
  if (!(x >= min && x <= max)) {
    problems_.add(pointer_of(key),
                  "is " + fmt_num(x) + "; allowed " + fmt_num(min) + " to " + fmt_num(max));
    return false;
  }
  out = x;
  return true;
}

bool ObjectReader::boolean(const std::string& key, bool& out, Need need) {
  const Json* v = get(key, need, "true or false");
  if (!v) return false;
  if (!v->is_boolean()) {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected true or false");
    return false;
  }
  out = v->get<bool>();
  return true;
}

const Json* ObjectReader::object(const std::string& key, Need need) {
  const Json* v = get(key, need, "an object");
  if (v && !v->is_object()) {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected an object");
    return nullptr;
  }
  return v;
}

const Json* ObjectReader::array(const std::string& key, Need need) {
  const Json* v = get(key, need, "an array");
  if (v && !v->is_array()) {
    problems_.add(pointer_of(key), std::string("is ") + type_of(*v) + "; expected an array");
    return nullptr;
  }
  return v;
}

const Json* ObjectReader::any(const std::string& key, Need need) {
  return get(key, need, "a value");
}

void ObjectReader::finish() {
  if (!obj_) return;
  std::vector<std::string> allowed(asked_.begin(), asked_.end());
  for (auto it = obj_->begin(); it != obj_->end(); ++it) {
    if (asked_.count(it.key())) continue;
    std::string msg = "unknown key \"" + it.key() + "\"";
    std::string near = closest_match(it.key(), allowed);
    if (!near.empty()) msg += " (did you mean \"" + near + "\"?)";
    std::string list;
    for (auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
    msg += "; allowed here: " + (list.empty() ? std::string("none") : list);
    problems_.add(pointer_of(it.key()), msg);
  }
}

static std::size_t edit_distance(const std::string& a, const std::string& b) {
  std::vector<std::size_t> prev(b.size() + 1), cur(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) prev[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    cur[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j)
      cur[j] =
          std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] == b[j - 1] ? 0 : 1)});
    std::swap(prev, cur);
  }
  return prev[b.size()];
}

std::string closest_match(const std::string& word, const std::vector<std::string>& candidates) {
  std::string best;
  std::size_t best_d = SIZE_MAX;
  for (const auto& c : candidates) {
    std::size_t d = edit_distance(word, c);
    // Prefix matches ("baudrate" vs "baud") count as close too.
    if (c.size() >= 3 && word.rfind(c, 0) == 0) d = std::min<std::size_t>(d, 2);
    if (d < best_d) {
      best_d = d;
      best = c;
    }
  }
  std::size_t limit = std::max<std::size_t>(2, word.size() / 3);
  return best_d <= limit ? best : std::string();
}

}  // namespace tarn::config
