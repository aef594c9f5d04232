#include "daemon/cli/command.h"

#include <algorithm>

namespace tarn::cli {

std::vector<Command>& commands() {
  static std::vector<Command> table;
  return table;
}

Options::Options(const Args& args, std::vector<std::string> with_value,
                 std::vector<std::string> flags) {
  auto known = [](const std::vector<std::string>& v, const std::string& n) {
    return std::find(v.begin(), v.end(), n) != v.end();
  };
  for (std::size_t i = 0; i < args.size(); ++i) {
    const std::string& a = args[i];
    if (a.rfind("--", 0) != 0 || a == "--") {
      positional_.push_back(a);
      continue;
    }
    std::string name = a.substr(2);
    std::string value;
    bool inline_value = false;
    if (auto eq = name.find('='); eq != std::string::npos) {
      value = name.substr(eq + 1);
      name = name.substr(0, eq);
      inline_value = true;
    }
    if (known(with_value, name)) {
      if (!inline_value) {
        if (i + 1 >= args.size()) {
          error_ = "option --" + name + " needs a value";
          return;
        }
        value = args[++i];
      }
      values_.emplace_back(name, value);
    } else if (known(flags, name) && !inline_value) {
      values_.emplace_back(name, "");
    } else {
      std::string allowed;
      for (const auto& n : with_value) allowed += " --" + n;
      for (const auto& n : flags) allowed += " --" + n;
      error_ = "unknown option --" + name + "; allowed:" + (allowed.empty() ? " none" : allowed);
      return;
    }
  }
}

bool Options::has(std::string_view name) const {
  return std::any_of(values_.begin(), values_.end(), [&](auto& p) { return p.first == name; });
}

std::string Options::get(std::string_view name, std::string fallback) const {
  for (auto it = values_.rbegin(); it != values_.rend(); ++it)
    if (it->first == name) return it->second;
  return fallback;
}

std::vector<std::string> Options::get_all(std::string_view name) const {
  std::vector<std::string> out;
  for (auto& p : values_)
    if (p.first == name) out.push_back(p.second);
  return out;
}

}  // namespace tarn::cli
