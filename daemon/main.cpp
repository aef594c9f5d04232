// tarn: lake station daemon and field tools. `tarn <command> [options]`.
#include <algorithm>
#include <cstdio>
#include <cstring>
#include <string>

#include "daemon/cli/command.h"

static void usage(FILE* out) {
  std::fprintf(out, "usage: tarn <command> [options]\n\ncommands:\n");
  auto cmds = tarn::cli::commands();
  std::sort(cmds.begin(), cmds.end(), [](auto& a, auto& b) { return a.name < b.name; });
  for (auto& c : cmds)
    std::fprintf(out, "  %-12.*s %.*s\n", int(c.name.size()), c.name.data(), int(c.summary.size()),
                 c.summary.data());
  std::fprintf(out, "\n`tarn <command> --help` describes a command's options.\n");
}

int main(int argc, char** argv) {
  if (argc < 2) {
    usage(stderr);
    return tarn::cli::ex_usage;
  }
  std::string name = argv[1];
  if (name == "--version" || name == "version") {
    std::printf("tarn %s\n", TARN_VERSION);
    return 0;
  }
  if (name == "--help" || name == "help" || name == "-h") {
    usage(stdout);
    return 0;
  }
  tarn::cli::Args args(argv + 2, argv + argc);
  for (auto& c : tarn::cli::commands())
    if (c.name == name) return c.run(args);
  std::fprintf(stderr, "tarn: unknown command '%s'; run `tarn help` for the list\n", name.c_str());
  return tarn::cli::ex_usage;
}
