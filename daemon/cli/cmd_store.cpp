// tarn store stats|export|packets: field tools that read the station store's
// files directly. No running daemon needed, and safe beside one: the files are
// opened read-only with a busy timeout; nothing is ever written.
#include <cstdio>
#include <iostream>
#include <string>

#include "config/station_config.h"
#include "daemon/cli/command.h"
#include "daemon/store/station_store.h"
#include "daemon/store/store_export.h"
#include "drivers/os/utc_text.h"

namespace {

namespace cli = tarn::cli;
namespace st = tarn::store;

const char* usage_text =
    "usage: tarn store stats   (--db PATH | --config FILE)\n"
    "       tarn store export  (--db PATH | --config FILE) --from T --to T\n"
    "                          [--format csv|jsonl] [--channel NAME]\n"
    "       tarn store packets (--db PATH | --config FILE) [--unsent | --all | --seq A[-B]]\n"
    "                          [--bare]\n"
    "\n"
    "Reads the station store without the daemon (read-only, safe beside a running one).\n"
    "  --db PATH       the store directory (paths.state_dir), or its outbox.db or archive.db\n"
    "  --config FILE   a station config: the store is in its paths.state_dir\n"
    "stats    counts, sizes, oldest unsent packet, drops by the full-store policy\n"
    "export   archived samples with from <= t < to; T is ISO 8601 UTC\n"
    "         (2026-06-01T00:00:00Z, 2026-06-01) or unix seconds.\n"
    "         csv:   time_utc,t,channel,value,flag,reasons (value empty when missing,\n"
    "                flag = QARTOD 1/2/3/4/9, reasons = reason bit set in decimal)\n"
    "         jsonl: {\"t\":...,\"ch\":\"...\",\"v\":... or null,\"f\":...,\"r\":...} per line\n"
    "packets  outbox packets in send order (alerts first, then by sequence) for --unsent\n"
    "         (the default), by sequence for --all and --seq. Each packet is a comment line\n"
    "           # seq=N kind=K priority=P created=T size=N attempts=N [sent=T]\n"
    "         then one line of lower-case hex; --bare prints the hex lines only.\n";

int usage(const cli::Options& o, bool help) {
  std::fprintf(help ? stdout : stderr, "%s%s%s", o.error().c_str(), o.error().empty() ? "" : "\n",
               usage_text);
  return help ? cli::ex_ok : cli::ex_usage;
}

int exit_for(const st::Status& s) {
  switch (s.code()) {
    case st::StoreErrc::not_found:
      return cli::ex_noinput;
    case st::StoreErrc::busy:
      return cli::ex_tempfail;
    case st::StoreErrc::damaged:
      return cli::ex_dataerr;
    case st::StoreErrc::read_only:
      return cli::ex_noperm;
    default:
      return cli::ex_ioerr;
  }
}

int fail(const std::string& what, const st::Status& s) {
  std::fprintf(stderr, "tarn store: %s: %s\n", what.c_str(), s.describe().c_str());
  return exit_for(s);
}

// The store location from --db or --config; empty with an error printed otherwise.
bool locate(const cli::Options& o, st::StorePaths& out, int& code) {
  if (o.has("db") == o.has("config")) {
    std::fprintf(stderr, "tarn store: give exactly one of --db PATH or --config FILE\n");
    code = cli::ex_usage;
    return false;
  }
  std::string where = o.get("db");
  if (o.has("config")) {
    auto loaded = tarn::config::load_file(o.get("config"));
    if (!loaded.config || !loaded.problems.empty()) {
      std::fputs(loaded.problems.render(o.get("config")).c_str(), stderr);
      code = cli::ex_config;
      return false;
    }
    where = loaded.config->paths.state_dir;
  }
  out = st::locate_store(where);
  return true;
}

int run_stats(const cli::Options& o) {
  st::StorePaths p;
  int code = 0;
  if (!locate(o, p, code)) return code;
  auto s = st::read_store_stats(p);
  if (!s.ok()) return fail(p.dir, s.error());
  std::fputs(st::format_stats(s.value()).c_str(), stdout);
  return cli::ex_ok;
}

int run_export(const cli::Options& o) {
  st::StorePaths p;
  int code = 0;
  if (!locate(o, p, code)) return code;
  auto from = tarn::os::parse_utc(o.get("from"));
  auto to = tarn::os::parse_utc(o.get("to"));
  if (!from || !to || *from >= *to) {
    std::fprintf(stderr,
                 "tarn store export: --from %s --to %s: need two times with from < to; allowed: "
                 "2026-06-01T00:00:00Z, 2026-06-01 or unix seconds\n",
                 o.get("from", "(missing)").c_str(), o.get("to", "(missing)").c_str());
    return cli::ex_usage;
  }
  std::string format = o.get("format", "csv");
  if (format != "csv" && format != "jsonl") {
    std::fprintf(stderr, "tarn store export: --format %s: unknown; allowed: csv, jsonl\n",
                 format.c_str());
    return cli::ex_usage;
  }
  auto f = format == "csv" ? st::SampleFormat::csv : st::SampleFormat::jsonl;
  auto db = st::SqliteDb::open(p.archive, st::SqliteDb::Mode::read_only);
  if (!db.ok()) return fail(p.archive, db.error());
  st::write_sample_header(std::cout, f);
  std::size_t n = 0;
  st::Status s =
      st::read_samples(db.value(), *from, *to, o.get("channel"), [&](const st::ArchivedSample& x) {
        st::write_sample(std::cout, f, x);
        ++n;
        return bool(std::cout);
      });
  std::cout.flush();
  if (!s.ok()) return fail(p.archive, s);
  std::fprintf(stderr, "tarn store export: %zu samples from %s to %s\n", n,
               tarn::os::format_utc(*from).c_str(), tarn::os::format_utc(*to).c_str());
  return cli::ex_ok;
}

int run_packets(const cli::Options& o) {
  st::StorePaths p;
  int code = 0;
  if (!locate(o, p, code)) return code;
  int modes = int(o.has("unsent")) + int(o.has("all")) + int(o.has("seq"));
  if (modes > 1) {
    std::fprintf(stderr, "tarn store packets: give one of --unsent, --all, --seq A[-B]\n");
    return cli::ex_usage;
  }
  std::string where = "sent_t IS NULL", order = "priority, seq";
  std::int64_t a = 0, b = 0;
  if (o.has("all")) {
    where = "1";
    order = "seq";
  } else if (o.has("seq")) {
    std::string r = o.get("seq");
    auto dash = r.find('-');
    auto first = tarn::os::parse_utc(r.substr(0, dash));  // plain integers parse as numbers here
    auto last = dash == std::string::npos ? first : tarn::os::parse_utc(r.substr(dash + 1));
    if (!first || !last || *first < 0 || *last < *first) {
      std::fprintf(stderr, "tarn store packets: --seq %s: allowed: N or A-B with A <= B\n",
                   r.c_str());
      return cli::ex_usage;
    }
    where = "seq BETWEEN ?1 AND ?2";
    order = "seq";
    a = *first;
    b = *last;
  }
  auto db = st::SqliteDb::open(p.outbox, st::SqliteDb::Mode::read_only);
  if (!db.ok()) return fail(p.outbox, db.error());
  auto rows = st::read_packets(db.value(), where, a, b, order);
  if (!rows.ok()) return fail(p.outbox, rows.error());
  for (const auto& pk : rows.value()) st::write_packet(std::cout, pk, o.has("bare"));
  std::cout.flush();
  std::fprintf(stderr, "tarn store packets: %zu packets\n", rows->size());
  return cli::ex_ok;
}

int run_store(const cli::Args& args) {
  cli::Options o(args, {"db", "config", "from", "to", "format", "channel", "seq"},
                 {"help", "unsent", "all", "bare"});
  if (!o.ok()) return usage(o, false);
  if (o.has("help")) return usage(o, true);
  if (o.positional().size() != 1) {
    std::fprintf(stderr, "tarn store: name one of stats, export, packets\n%s", usage_text);
    return cli::ex_usage;
  }
  const std::string& what = o.positional()[0];
  bool export_opts = o.has("from") || o.has("to") || o.has("format") || o.has("channel");
  bool packet_opts = o.has("unsent") || o.has("all") || o.has("seq") || o.has("bare");
  if (what == "stats" && !export_opts && !packet_opts) return run_stats(o);
  if (what == "export" && !packet_opts) return run_export(o);
  if (what == "packets" && !export_opts) return run_packets(o);
  if (what == "stats" || what == "export" || what == "packets") {
    std::fprintf(stderr, "tarn store %s: option not allowed here\n%s", what.c_str(), usage_text);
    return cli::ex_usage;
  }
  std::fprintf(stderr, "tarn store: unknown '%s'; allowed: stats, export, packets\n", what.c_str());
  return cli::ex_usage;
}

}  // namespace

TARN_COMMAND(store, "read the station store: stats, export samples, unsent packets", run_store);
