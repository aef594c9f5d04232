// Text rendering of the daemon's status reply, shared by `tarn status`.
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "daemon/cli/command.h"

namespace tarn::cli {

std::string render_status(const nlohmann::json& status);
// The live view of `tarn status --watch`: fits 80x24; `colour` adds ANSI colour.
std::string render_screen(const nlohmann::json& status, bool colour);
// The control socket: --socket, else <runtime_dir>/control.sock of --config,
// else /run/tarn/control.sock. Prints a one-line error and returns "" on a bad config.
std::string socket_path(const Options& o);

}  // namespace tarn::cli
