// Subcommand table of the `tarn` executable. Each subcommand lives in
// daemon/cli/cmd_<name>.cpp and registers itself with one line:
//
//   TARN_COMMAND(check, "validate a station config", run_check);
//
// where `int run_check(const tarn::cli::Args&)` returns a sysexits code.
// The files are compiled into the executable itself (not a static library), so
// static registration is never dropped by the linker.
#pragma once

#include <span>
#include <string>
#include <string_view>
#include <vector>

namespace tarn::cli {

// The arguments after the subcommand name.
using Args = std::vector<std::string>;

struct Command {
  std::string_view name;
  std::string_view summary;
  int (*run)(const Args&);
};

// All registered subcommands, sorted by name.
std::vector<Command>& commands();

struct Registrar {
  explicit Registrar(Command c) { commands().push_back(c); }
};

// sysexits(3) codes used across the CLI.
inline constexpr int ex_ok = 0;
inline constexpr int ex_usage = 64;
inline constexpr int ex_dataerr = 65;
inline constexpr int ex_noinput = 66;
inline constexpr int ex_unavailable = 69;
inline constexpr int ex_software = 70;
inline constexpr int ex_oserr = 71;
inline constexpr int ex_cantcreat = 73;
inline constexpr int ex_ioerr = 74;
inline constexpr int ex_tempfail = 75;
inline constexpr int ex_noperm = 77;
inline constexpr int ex_config = 78;

// Small option parser shared by the subcommands: "--name value", "--name=value"
// and boolean "--flag". Unknown options are a usage error reported by name.
class Options {
 public:
  // `with_value` lists options that take a value, `flags` those that do not.
  Options(const Args& args, std::vector<std::string> with_value, std::vector<std::string> flags);
  bool ok() const { return error_.empty(); }
  const std::string& error() const { return error_; }
  bool has(std::string_view name) const;
  std::string get(std::string_view name, std::string fallback = {}) const;
  std::vector<std::string> get_all(std::string_view name) const;
  const std::vector<std::string>& positional() const { return positional_; }

 private:
  std::vector<std::pair<std::string, std::string>> values_;
  std::vector<std::string> positional_;
  std::string error_;
};

}  // namespace tarn::cli

#define TARN_CONCAT_INNER(a, b) a##b
#define TARN_CONCAT(a, b) TARN_CONCAT_INNER(a, b)
#define TARN_COMMAND(name, summary, fn)                                \
  static ::tarn::cli::Registrar TARN_CONCAT(tarn_cmd_reg_, __LINE__) { \
    ::tarn::cli::Command {                                             \
#name, summary, fn                                               \
    }                                                                  \
  }
