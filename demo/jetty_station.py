"""The demo's second station: the invented jetty post hollin-jetty on Lake Hollin.

The buoy runs on the real clock (in December at 54 N the sun never climbs to
the quenching threshold) and for a few station hours only. The jetty shows
what needs summer days: it runs beside the buoy at --speed 1440 (one station
day per real minute) on an invented timeline that starts on 2026-06-20T00:00Z
(`tarn run --speed-origin T`; the simulator keeps the same clock through
station_sim.py --speed-origin T), with one line-protocol fluorometer
(chlorophyll-a), QC with solar_quenching and fouling_drift, and the spool
backend (it never touches the buoy's broker). At the end the demo reads its
archive with `tarn store export --format jsonl` and prints, per station day,
the samples flagged for solar quenching and fouling drift and the midday
against the night mean of chlorophyll-a.
"""
import calendar
import json
import os
import re
import signal
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))

SPEED = 1440
PERIOD_S = 300                     # demo/jetty.json sampling.period_s
START = "2026-06-20T00:00:00Z"     # station time when the jetty starts (invented)
DAYS = 2
MAX_RISE = 1.0                     # demo/jetty.json fouling_drift.max_rise (ug/L)
# Reason bits of the archive and the wire format (codec/FORMAT.md, reason table).
SOLAR_QUENCHING = 1 << 15
FOULING_DRIFT = 1 << 17
MIDDAY_H = (11, 13)                # UTC hours around local noon (11:47 UTC at 3.62 E in late June)
NIGHT_H = (0, 2)                   # UTC hours of the short June night (sun below -6 deg)


def iso(t):
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def strip_comments(text):
    return re.sub(r"^\s*//.*$", "", text, flags=re.M)


class JettyStation:
    def __init__(self, tarn, work, procs):
        self.tarn, self.dir, self.procs = tarn, os.path.join(work, "jetty"), procs
        self.start_t = calendar.timegm(time.strptime(START, "%Y-%m-%dT%H:%M:%SZ"))
        self.end_t = self.start_t + DAYS * 86400
        self.daemon = None
        self.origin = None

    def station_time(self, real=None):
        real = time.time() if real is None else real
        return self.origin + (real - self.origin) * SPEED

    def real_time(self, station):
        return self.origin + (station - self.origin) / SPEED

    def start(self):
        """Writes the config, checks it, starts simulator and daemon on one clock."""
        for d in ("dev", "state", "run", "spool"):
            os.makedirs(os.path.join(self.dir, d))
        cfg = json.loads(strip_comments(open(os.path.join(HERE, "jetty.json")).read()
                                        .replace("@DIR@", self.dir)))
        self.cfg_path = os.path.join(self.dir, "jetty.json")
        with open(self.cfg_path, "w") as f:
            json.dump(cfg, f, indent=2)
        check = subprocess.run([self.tarn, "check", "--config", self.cfg_path], capture_output=True,
                               text=True)
        if check.returncode != 0:
            sys.stdout.write(check.stdout + check.stderr)
            raise RuntimeError("demo/jetty.json does not pass tarn check")
        # station time = T + (now - T) * SPEED equals START about one second
        # from now, when simulator and daemon are up.
        t_start = time.time() + 1.0
        self.origin = (t_start * SPEED - self.start_t) / (SPEED - 1)
        sim = subprocess.Popen([sys.executable, os.path.join(HERE, "sim", "station_sim.py"),
                                "--dir", os.path.join(self.dir, "dev"), "--station", "jetty",
                                "--speed", str(SPEED), "--speed-origin", "%.3f" % self.origin],
                               stdout=subprocess.PIPE, text=True)
        self.procs.append(sim)
        sim.stdout.readline()  # "simulated instrument on ...": the pty is there
        args = [self.tarn, "run", "--config", self.cfg_path, "--speed", str(SPEED),
                "--speed-origin", "%.3f" % self.origin]
        if os.geteuid() == 0:
            args.append("--allow-root")
        self.log_path = os.path.join(self.dir, "daemon.log")
        self.daemon = subprocess.Popen(args, stdout=subprocess.DEVNULL,
                                       stderr=open(self.log_path, "w"))
        self.procs.append(self.daemon)
        print("== hollin-jetty, a second station on the lake: %s; tarn run --speed %d --speed-origin "
              "%.3f (station time %s now, one station day per %.0f s), log level warn, packets to a "
              "spool directory" % (check.stdout.splitlines()[0], SPEED, self.origin,
                                    iso(self.station_time()), 86400 / SPEED), flush=True)

    def finish(self):
        """Stops the jetty after DAYS station days, prints its days; True if they show
        the quenching dip and the fouling drift."""
        # One poll more than the last day: the spike test settles a sample when
        # the next one comes.
        wait = self.real_time(self.end_t + 2 * PERIOD_S) - time.time()
        if wait > 0:
            print("== hollin-jetty: waiting %.1f s for station time %s" % (wait, iso(self.end_t)),
                  flush=True)
            time.sleep(wait)
        self.daemon.send_signal(signal.SIGTERM)
        rc = self.daemon.wait(timeout=10)
        print("== hollin-jetty stopped at station time %s, exit code %d; its log (warn and above):"
              % (iso(self.station_time()), rc), flush=True)
        lines = open(self.log_path).read().splitlines()
        for line in lines[:5]:
            print("jetty log: " + line)
        if len(lines) > 5:
            print("jetty log: ... %d lines more" % (len(lines) - 5))
        cmd = [self.tarn, "store", "export", "--config", self.cfg_path, "--format", "jsonl",
               "--from", iso(self.start_t), "--to", iso(self.end_t)]
        print("== hollin-jetty archive: " + " ".join(cmd[1:]), flush=True)
        r = subprocess.run(cmd, capture_output=True, text=True)
        if r.returncode != 0:
            print("tarn store export failed (exit %d): %s" % (r.returncode, r.stderr.strip()))
            return False
        rows = [json.loads(line) for line in r.stdout.splitlines() if line.strip()]
        print(r.stderr.strip())
        ok = rc == 0
        nights = []
        for day in range(DAYS):
            d0 = self.start_t + day * 86400
            rs = [x for x in rows if d0 <= x["t"] < d0 + 86400 and x["ch"] == "chla"]
            valued = [x for x in rs if x["v"] is not None and x["f"] in (1, 2, 3)]
            quench = sum(1 for x in rs if x["r"] & SOLAR_QUENCHING)
            foul = sum(1 for x in rs if x["r"] & FOULING_DRIFT)

            def mean_between(h):
                v = [x["v"] for x in valued if h[0] * 3600 <= x["t"] - d0 < h[1] * 3600]
                return sum(v) / len(v) if v else float("nan")
            midday, night = mean_between(MIDDAY_H), mean_between(NIGHT_H)
            nights.append(night)
            print("jetty %s: %d samples (%d with a usable value), flagged solar_quenching %d, "
                  "fouling_drift %d" % (iso(d0)[:10], len(rs), len(valued), quench, foul))
            print("jetty %s: chla mean midday %02d-%02d UTC %.2f ug/L, night %02d-%02d UTC %.2f ug/L: "
                  "midday %+.0f %% against the night" % (iso(d0)[:10], MIDDAY_H[0], MIDDAY_H[1], midday,
                                                         NIGHT_H[0], NIGHT_H[1], night,
                                                         100 * (midday / night - 1)), flush=True)
            # What must show: most polls archived, a quenching dip every day,
            # fouling flags from the second night on, none on the first day.
            ok = ok and len(valued) >= 0.9 * 86400 / PERIOD_S and quench > 0 and midday < night
            ok = ok and (foul == 0 if day == 0 else foul > 0)
        rise = nights[-1] - nights[0]
        print("jetty: night mean rose %.2f ug/L from the first to the last day (fouling_drift max_rise "
              "%.1f ug/L)" % (rise, MAX_RISE), flush=True)
        return ok and rise > MAX_RISE
