#include "drivers/os/logging.h"

#include <unistd.h>

#include <spdlog/pattern_formatter.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <cstdlib>

namespace tarn::os {

namespace {

// %* -> "<N>" with the syslog priority of the message (sd-daemon(3)).
class PriorityFlag final : public spdlog::custom_flag_formatter {
 public:
  void format(const spdlog::details::log_msg& msg, const std::tm&,
              spdlog::memory_buf_t& dest) override {
    int prio = 6;
    switch (msg.level) {
      case spdlog::level::trace:
      case spdlog::level::debug:
        prio = 7;
        break;
      case spdlog::level::info:
        prio = 6;
        break;
      case spdlog::level::warn:
        prio = 4;
        break;
      case spdlog::level::err:
        prio = 3;
        break;
      case spdlog::level::critical:
        prio = 2;
        break;
      default:
        prio = 6;
    }
    const char s[4] = {'<', char('0' + prio), '>', 0};
    dest.append(s, s + 3);
  }
  std::unique_ptr<custom_flag_formatter> clone() const override {
    return std::make_unique<PriorityFlag>();
  }
};

}  // namespace

bool under_journal() {
  return std::getenv("JOURNAL_STREAM") != nullptr;
}

void setup_logging(const std::string& level) {
  auto sink = std::make_shared<spdlog::sinks::stderr_color_sink_mt>(
      under_journal() ? spdlog::color_mode::never : spdlog::color_mode::automatic);
  auto def = std::make_shared<spdlog::logger>("tarn", sink);
  spdlog::drop_all();
  spdlog::set_default_logger(def);
  auto fmt = std::make_unique<spdlog::pattern_formatter>();
  if (under_journal())
    fmt->add_flag<PriorityFlag>('*').set_pattern("%*%n: %v");
  else
    fmt->set_pattern("%Y-%m-%d %H:%M:%S.%e %^%-5l%$ %n: %v");
  spdlog::set_formatter(std::move(fmt));
  set_log_level(level);
}

void set_log_level(const std::string& level) {
  spdlog::set_level(spdlog::level::from_str(level == "warn" ? "warning" : level));
}

std::shared_ptr<spdlog::logger> logger(const std::string& name) {
  auto l = spdlog::get(name);
  if (!l) {
    l = spdlog::default_logger()->clone(name);
    spdlog::register_logger(l);
  }
  return l;
}

}  // namespace tarn::os
