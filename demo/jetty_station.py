"""The demo's second station: the invented jetty post hollin-jetty on Lake Hollin.

The jetty shows what a slow biofilm on the optics looks like beside the
buoy's bloom: it runs at --speed 2160 (one station day per 40 s of real time)
on an invented timeline from 2026-06-19T20:00Z to 2026-06-24T00:00Z (`tarn run
--speed-origin T`; the simulator keeps the same clock through station_sim.py
--speed-origin T), with one line-protocol fluorometer (chlorophyll-a about
2 ug/L, a biofilm adding 0.4 ug/L a day), QC with solar_quenching and
fouling_drift, and the spool backend (it never touches the buoy's broker). At
the end the demo reads its archive with `tarn store export --format jsonl`
and prints, per station day, the samples flagged for solar quenching and
fouling drift, the midday against the night median of chlorophyll-a, and the
night minimum against the first night's.
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

SPEED = 2160
PERIOD_S = 600                     # demo/jetty.json sampling.period_s
START = "2026-06-19T20:00:00Z"     # station time when the jetty starts (invented), before
FIRST_DAY = "2026-06-20T00:00:00Z"  # the first night, so that the first day's night is whole
DAYS = 4
MAX_RISE = 0.6                     # demo/jetty.json fouling_drift.max_rise (ug/L)
# Reason bits of the archive and the wire format (codec/FORMAT.md, reason table).
SOLAR_QUENCHING = 1 << 15
FOULING_DRIFT = 1 << 17
MIDDAY_H = (11, 13)                # UTC hours around local noon (11:47 UTC at 3.62 E in late June)
NIGHT_H = (0, 2)                   # UTC hours of the short June night (sun below -6 deg)
NIGHT_SPAN_H = (-2, 2)             # the hours around midnight (UTC) that hold a night's minimum


def iso(t):
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def strip_comments(text):
    return re.sub(r"^\s*//.*$", "", text, flags=re.M)


class JettyStation:
    def __init__(self, tarn, work, procs):
        self.tarn, self.dir, self.procs = tarn, os.path.join(work, "jetty"), procs
        self.start_t = calendar.timegm(time.strptime(START, "%Y-%m-%dT%H:%M:%SZ"))
        self.day0 = calendar.timegm(time.strptime(FIRST_DAY, "%Y-%m-%dT%H:%M:%SZ"))
        self.end_t = self.day0 + DAYS * 86400
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
        the quenching dip every day and the fouling drift from the third day on."""
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
        if not ok:
            print("jetty: the daemon did not stop cleanly (exit code %d)" % rc)
        chla = [x for x in rows if x["ch"] == "chla"]
        valued = [x for x in chla if x["v"] is not None and x["f"] in (1, 2, 3)]

        def median(v):
            v = sorted(v)
            return (v[len(v) // 2] + v[(len(v) - 1) // 2]) / 2 if v else float("nan")
        first_night = None
        flagged_days = []
        for day in range(DAYS):
            d0 = self.day0 + day * 86400
            rs = [x for x in chla if d0 <= x["t"] < d0 + 86400]
            day_valued = [x for x in valued if d0 <= x["t"] < d0 + 86400]
            quench = sum(1 for x in rs if x.get("r", 0) & SOLAR_QUENCHING)
            foul = sum(1 for x in rs if x.get("r", 0) & FOULING_DRIFT)
            missed = sum(1 for x in rs if x["f"] == 9)

            def median_between(h):
                return median([x["v"] for x in day_valued if h[0] * 3600 <= x["t"] - d0 < h[1] * 3600])
            midday, night = median_between(MIDDAY_H), median_between(NIGHT_H)
            # The lowest value of the night that ends this morning (the value
            # fouling_drift compares with the first night's).
            night_min = min((x["v"] for x in valued
                             if NIGHT_SPAN_H[0] * 3600 <= x["t"] - d0 < NIGHT_SPAN_H[1] * 3600),
                            default=float("nan"))
            if first_night is None:
                first_night = night_min
            rise = night_min - first_night
            print("jetty %s: %d samples (%d with a usable value, %d missed: flag 9), "
                  "flagged solar_quenching %d, "
                  "fouling_drift %d; chla median midday %02d-%02d UTC %.2f ug/L, night %02d-%02d UTC "
                  "%.2f ug/L (midday %+.0f %%); night minimum %.2f ug/L, %+.2f against the first "
                  "night (max_rise %.1f)"
                  % (iso(d0)[:10], len(rs), len(day_valued), missed, quench, foul, MIDDAY_H[0], MIDDAY_H[1],
                     midday, NIGHT_H[0], NIGHT_H[1], night, 100 * (midday / night - 1), night_min,
                     rise, MAX_RISE), flush=True)
            # What must show: most polls archived, a quenching dip every day,
            # fouling flags on a day exactly when its night rose more than
            # max_rise above the first night (the biofilm rises slowly: not
            # before the third day).
            day_ok = (len(day_valued) >= 0.9 * 86400 / PERIOD_S and quench > 0 and midday < night
                      and (foul > 0) == (rise > MAX_RISE))
            if not day_ok:
                print("jetty %s: NOT as expected (need >= %d usable samples, quenching flags, a "
                      "midday dip, and fouling flags exactly when the night rose more than %.1f)"
                      % (iso(d0)[:10], int(0.9 * 86400 / PERIOD_S), MAX_RISE), flush=True)
            ok = ok and day_ok
            if foul:
                flagged_days.append(day + 1)
        gaps = [x for x in chla if x["f"] == 9 and self.day0 <= x["t"] < self.end_t]
        print("jetty: %d polls without a value (flag 9)%s" % (len(gaps), "".join(
            "; %s reasons %d" % (iso(x["t"]), x.get("r", 0)) for x in gaps)), flush=True)
        print("jetty: fouling_drift flagged on day(s) %s of %d; the biofilm rose %.2f ug/L a day on "
              "average (night minima)" % (", ".join(map(str, flagged_days)) or "none", DAYS,
                                          rise / max(1, DAYS - 1)), flush=True)
        # Not before the third day, and on every day from the first flagged one on.
        ok = ok and bool(flagged_days) and flagged_days[0] >= 3 and flagged_days == list(
            range(flagged_days[0], DAYS + 1))
        return ok
