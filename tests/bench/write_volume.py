#!/usr/bin/python3
"""Write volume of the demo station, measured on the real daemon (SD card wear).

Runs the demo station (demo/station.json with the simulated instruments of
demo/sim/station_sim.py and a plain mosquitto on a free loopback port, so
packets are acknowledged and marked sent as in the field) at --speed N, and
reads the daemon's own /proc/<pid>/io after a warm-up and again after the
measured stretch:

  write_bytes   bytes the daemon caused to be sent to the block layer (page
                granular: SQLite's WAL appends, checkpoints, the sequence
                sidecar, fsyncs of the directory entries)
  wchar         bytes passed to write(2) and friends
and the growth of the state directory (apparent size of its files; the .db
files apart from their -wal/-shm companions, which stop growing at their limit).

At --speed N the daemon does the same work per station day (one poll and one
archive transaction per 60 s poll cycle, one packet per 600 s window, the WAL
checkpoints that follow from the pages written), only N times faster, so
bytes per station day are comparable with a station at speed 1. What does not
scale is work on real-time timers (log summaries every few real seconds);
the daemon's log goes to a pipe here (under systemd it goes to journald, not
to the daemon's files) and its volume is printed separately.

Usage: /usr/bin/python3 tests/bench/write_volume.py [--runs 3] [--seconds 120]
       [--speed 60] [--warmup 10]     (TARN_BIN names the binary)
Prints each run and the median; ends by itself and stops what it started.
"""
import argparse
import os
import shutil
import signal
import statistics
import subprocess
import sys
import threading
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "integration"))
from harness import SOURCE_DIR, TARN, Harness, demo_config  # noqa: E402


def proc_io(pid):
    with open("/proc/%d/io" % pid) as f:
        return {k: int(v) for k, v in (line.split(":") for line in f)}


def dir_bytes(path, main_only=False):
    """Apparent size of the files; main_only: the .db files without their
    -wal and -shm companions (which SQLite reuses, so they stop growing at
    their limit: about 1 MiB each, daemon/store/README.md)."""
    total = 0
    for root, _, files in os.walk(path):
        for n in files:
            if main_only and not n.endswith(".db"):
                continue
            try:
                total += os.stat(os.path.join(root, n)).st_size
            except FileNotFoundError:
                pass
    return total


def file_sizes(path):
    return ", ".join("%s %.0f KiB" % (n, os.stat(os.path.join(path, n)).st_size / 1024)
                     for n in sorted(os.listdir(path)))


def fs_type(path):
    best, kind = "", "?"
    with open("/proc/mounts") as f:
        for line in f:
            dev, mnt, typ = line.split()[:3]
            if (path == mnt or path.startswith(mnt.rstrip("/") + "/")) and len(mnt) >= len(best):
                best, kind = mnt, "%s on %s (%s)" % (typ, mnt, dev)
    return kind


def sql(path, query):
    r = subprocess.run(["sqlite3", "-batch", "-cmd", ".timeout 5000", "file:%s?mode=ro" % path,
                        query], capture_output=True, text=True, timeout=30)
    return r.stdout.strip()


def one_run(args, n):
    with Harness("writevolume") as h:
        port, _ = h.mosquitto()
        h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
                 "--dir", h.path("dev"), "--speed", str(args.speed)], stdout=subprocess.DEVNULL)
        time.sleep(1.0)
        cfg_path = h.write_config(demo_config(h, port))
        cmd = [TARN, "run", "--config", cfg_path, "--speed", str(args.speed)]
        if os.geteuid() == 0:
            cmd.append("--allow-root")
        env = dict(os.environ)
        env.pop("JOURNAL_STREAM", None)
        d = h.start(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, env=env)
        log_bytes = [0]

        def drain():
            for chunk in iter(lambda: d.stdout.read1(65536), b""):
                log_bytes[0] += len(chunk)
        reader = threading.Thread(target=drain, daemon=True)
        reader.start()
        state = h.path("state")
        if n == 0:
            print("state directory on %s" % fs_type(os.path.realpath(state)))
        time.sleep(args.warmup)
        if d.poll() is not None:
            raise RuntimeError("the daemon ended during the warm-up (exit %s)" % d.returncode)
        io0, size0, log0, t0 = proc_io(d.pid), dir_bytes(state), log_bytes[0], time.monotonic()
        db0 = dir_bytes(state, main_only=True)
        archive = os.path.join(state, "archive.db")
        first_t = int(sql(archive, "SELECT coalesce(max(t), 0) FROM samples") or 0)
        time.sleep(args.seconds)
        io1, size1, log1, t1 = proc_io(d.pid), dir_bytes(state), log_bytes[0], time.monotonic()
        db1 = dir_bytes(state, main_only=True)
        sizes = file_sizes(state)
        last_t = int(sql(archive, "SELECT coalesce(max(t), 0) FROM samples") or 0)
        polls = int(sql(archive, "SELECT count(DISTINCT t) FROM samples WHERE t > %d AND t <= %d"
                        % (first_t, last_t)) or 0)
        windows = int(sql(os.path.join(state, "outbox.db"),
                          "SELECT count(*) FROM packets WHERE kind = 1") or 0)
        unsent = int(sql(os.path.join(state, "outbox.db"),
                         "SELECT count(*) FROM packets WHERE sent_t IS NULL") or 0)
        d.send_signal(signal.SIGTERM)
        rc = d.wait(timeout=10)
        station_s = (t1 - t0) * args.speed
        per_day = 86400.0 / station_s
        r = {
            "write_bytes": (io1["write_bytes"] - io0["write_bytes"]) * per_day,
            "cancelled": (io1["cancelled_write_bytes"] - io0["cancelled_write_bytes"]) * per_day,
            "wchar": (io1["wchar"] - io0["wchar"]) * per_day,
            "syscw": (io1["syscw"] - io0["syscw"]) * per_day,
            "growth": (size1 - size0) * per_day,
            "db_growth": (db1 - db0) * per_day,
            "log": (log1 - log0) * per_day,
        }
        print("run %d: %.0f s real = %.1f station h (%d poll cycles archived, %d windows, %d unsent "
              "at the end, daemon exit %s)" % (n + 1, t1 - t0, station_s / 3600, polls, windows,
                                               unsent, rc))
        print("       per station day: write_bytes %.2f MiB, wchar %.2f MiB, %d write calls, "
              "cancelled %.2f MiB, growth of the .db files %.2f MiB (of the directory with the "
              "WALs %.2f MiB), log %.2f MiB"
              % (r["write_bytes"] / 2**20, r["wchar"] / 2**20, r["syscw"], r["cancelled"] / 2**20,
                 r["db_growth"] / 2**20, r["growth"] / 2**20, r["log"] / 2**20))
        print("       files at the end: %s" % sizes, flush=True)
        return r


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--seconds", type=float, default=120, help="measured stretch, real seconds")
    ap.add_argument("--speed", type=int, default=60)
    ap.add_argument("--warmup", type=float, default=10, help="real seconds before the first reading")
    args = ap.parse_args()
    if not os.access("/proc/self/io", os.R_OK):
        print("/proc/<pid>/io is not readable here: write_bytes cannot be measured")
        return 1
    for tool in ("mosquitto", "sqlite3"):
        if not shutil.which(tool):
            print("%s is missing (Debian package %s)" % (tool, tool))
            return 1
    print("tarn write volume: demo station (9 channels, 60 s period, 600 s windows), --speed %d, "
          "%d run(s) of %.0f s after %.0f s warm-up; binary %s"
          % (args.speed, args.runs, args.seconds, args.warmup, TARN), flush=True)
    runs = [one_run(args, n) for n in range(args.runs)]
    med = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    wb = med["write_bytes"]
    print("median of %d: write_bytes %.0f bytes per station day = %.2f MiB/day = %.2f GiB/year; "
          "wchar %.2f MiB/day; growth of the .db files %.2f MiB/day; log %.2f MiB/day"
          % (len(runs), wb, wb / 2**20, wb * 365 / 2**30, med["wchar"] / 2**20,
             med["db_growth"] / 2**20, med["log"] / 2**20))
    return 0


if __name__ == "__main__":
    sys.exit(main())
