#!/usr/bin/python3
"""`tarn replay`: the configured pipeline over a recorded series, offline.

The series are invented and generated here, at the invented point 55.10 N,
3.60 E (open North Sea: no lake is there; the project's invented lake point),
in early July:
 (a) a bloom over two and a half station days whose phycocyanin night minimum
     rises every night (the diel dip at midday scales with the level, as a
     bloom's quenching does), with chlorophyll-a and water temperature. With
     the demo's alert rule (watch / warning / bloom on the pc median) the top
     level is raised, and no pc sample after night 2 is flagged fouling_drift.
 (b) a biofilm: the same diel signal on a low level plus a slow additive drift
     of 0.9 ug/L per day; fouling_drift must flag it.
 (c) bad input lines: exit 65 (EX_DATAERR, sysexits(3)) with FILE:LINE; a bad
     config exits 78 (EX_CONFIG) like `tarn check`.
 (d) --summary: per-channel flag counts equal to those of the JSONL records,
     and the alert timeline.
 (e) CSV, JSONL and stdin give the same records; no port or socket is opened
     (strace).
Night is the sun below -6 degrees (the fouling test's night_below_deg);
where night 2 ends is computed with Debian's python3-ephem, not with tarn.

Alert levels support and never replace laboratory analysis and the decisions
of the local health or water authority.
"""
import json
import math
import os
import random
import re
import shutil
import subprocess
from datetime import datetime, timezone

import ephem

from harness import TARN, Harness, finish

LAT, LON = 55.10, 3.60  # invented point, open North Sea (see above)
START = int(datetime(2026, 7, 1, 12, tzinfo=timezone.utc).timestamp())
PERIOD = 60

QC_PC = [
    {"kind": "timing", "late_s": 20, "max_fill": 60},
    {"kind": "gross_range", "sensor_min": 0, "sensor_max": 200, "operator_min": 0, "operator_max": 100},
    {"kind": "spike", "suspect_threshold": 2, "fail_threshold": 6},
    {"kind": "rate_of_change", "n_dev": 4, "period_s": 3600, "min_count": 20},
    {"kind": "flat_line", "suspect_count": 6, "fail_count": 12, "tolerance": 0.001},
    {"kind": "solar_quenching", "suspect_above_deg": 20},
    {"kind": "fouling_drift", "max_rise": 2.0, "night_below_deg": -6, "min_night_samples": 30},
]
QC_CHLA = [
    {"kind": "timing", "late_s": 20, "max_fill": 60},
    {"kind": "gross_range", "sensor_min": 0, "sensor_max": 400, "operator_min": 0, "operator_max": 200},
    {"kind": "spike", "suspect_threshold": 2, "fail_threshold": 6},
]
QC_TEMP = [
    {"kind": "timing", "late_s": 20, "max_fill": 60},
    {"kind": "gross_range", "sensor_min": -5, "sensor_max": 40, "operator_min": 0, "operator_max": 30},
    {"kind": "spike", "suspect_threshold": 1, "fail_threshold": 3},
]
# The demo's rule (demo/station.json): thresholds are common practice in lake
# monitoring, no source.
RULE = {
    "name": "cyanobacteria", "channel": "pc", "statistic": "median",
    "levels": [
        {"name": "watch", "threshold": 3.4,
         "conditions": [{"channel": "chla", "statistic": "median", "compare": "below"}]},
        {"name": "warning", "threshold": 6.7},
        {"name": "bloom", "threshold": 13.4}],
    "hysteresis": 1.0, "raise_windows": 2, "clear_windows": 2, "renotify_s": 3600, "min_count": 3}


def config(h, name, window):
    """A station with one fluorometer (chla, pc) and one temperature probe.
    The port is never opened by replay (checked with strace in (e))."""
    c = {
        "station": {"id": "replay-test", "name": "invented point, open North Sea",
                    "latitude": LAT, "longitude": LON, "elevation_m": 0},
        "sampling": {"period_s": PERIOD, "window_s": 600},
        "paths": {"state_dir": h.path("state"), "runtime_dir": h.path("run")},
        "lines": [{"name": "optics", "port": h.path("dev", "never-opened"), "baud": 9600}],
        "instruments": [
            {"name": "fluorometer", "line": "optics", "driver": "line",
             "options": {"poll": "MEAS\r\n", "delimiter": ","},
             "channels": [
                 {"name": "chla", "quantity": "chlorophyll_a", "unit": "ug/L", "resolution": 0.01,
                  "source": {"field": 1}, "qc": QC_CHLA, "window": {"median": True}},
                 {"name": "pc", "quantity": "phycocyanin", "unit": "ug/L", "resolution": 0.01,
                  "source": {"field": 2}, "qc": QC_PC, "window": dict(window, median=True)},
                 {"name": "temp", "quantity": "water_temperature", "unit": "Cel", "resolution": 0.01,
                  "source": {"field": 3}, "qc": QC_TEMP}]}],
        "alerts": {"rules": [RULE]},
        "uplink": {"backend": "mqtt", "options": {"host": "127.0.0.1", "port": 1883}},
    }
    p = h.path(name)
    with open(p, "w") as f:
        json.dump(c, f, indent=1)
    return p


def daylight(t):
    """0 at night .. 1 at local solar noon (about 11:46 UTC at 3.60 E)."""
    hour = ((t - START) / 3600.0 + 12.0 - LON / 15.0) % 24.0
    return max(0.0, math.cos(2 * math.pi * (hour - 12.0) / 24.0))


def iso(t):
    return datetime.fromtimestamp(t, timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def series(hours, pc_of, seed):
    rnd = random.Random(seed)
    rows = []
    for i in range(int(hours * 3600 / PERIOD)):
        t = START + i * PERIOD
        pc = pc_of(t) + rnd.gauss(0, 0.05)
        rows.append((t, "chla", round(0.4 * pc + 1.0 + rnd.gauss(0, 0.03), 3)))
        rows.append((t, "pc", round(max(pc, 0.0), 3)))
        rows.append((t, "temp", round(18.0 + 1.5 * daylight(t) + rnd.gauss(0, 0.02), 3)))
    return rows


def bloom_pc(t):
    h = (t - START) / 3600.0
    level = 3.0 * math.exp(math.log(24.0 / 3.0) * h / 60.0)  # 3 -> 24 ug/L over 60 h
    return level * (1.0 - 0.3 * daylight(t))  # midday dip scales with the bloom


def biofilm_pc(t):
    days = (t - START) / 86400.0
    return 2.0 * (1.0 - 0.3 * daylight(t)) + 0.9 * days  # additive, slow


def write_csv(path, rows, header="time,channel,value"):
    with open(path, "w") as f:
        f.write(header + "\n")
        for t, ch, v in rows:
            f.write("%s,%s,%s\n" % (iso(t), ch, "" if v is None else repr(v)))


def write_jsonl(path, rows):
    with open(path, "w") as f:
        for t, ch, v in rows:
            f.write(json.dumps({"t": t, "ch": ch, "v": v}) + "\n")


def replay(cfg, inp, *extra, stdin=None):
    r = subprocess.run([TARN, "replay", "--config", cfg, *extra, inp], capture_output=True,
                       text=True, input=stdin, timeout=300)
    recs = []
    if r.returncode == 0 and "--summary" not in extra:
        recs = [json.loads(l) for l in r.stdout.splitlines()]
    return r, recs


def night_end_after(t):
    """When the sun next rises through -6 degrees after t (python3-ephem)."""
    o = ephem.Observer()
    o.lat, o.lon = str(LAT), str(LON)
    o.horizon = "-6"
    o.pressure = 0  # no refraction: the pipeline's solar position is geometric
    o.date = ephem.Date(datetime.fromtimestamp(t, timezone.utc).replace(tzinfo=None))
    d = o.next_rising(ephem.Sun(), use_center=True).datetime().replace(tzinfo=timezone.utc)
    return int(d.timestamp())


def ts(s):
    return int(datetime.strptime(s, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=timezone.utc).timestamp())


with Harness("replay") as h:
    # --- (a) a two-day bloom ---------------------------------------------------
    bloom = series(60, bloom_pc, 1)
    write_csv(h.path("bloom.csv"), bloom)
    # Night 2 is the night of 2 to 3 July: it ends at the -6 degree sunrise.
    night2_end = night_end_after(START + 36 * 3600)
    h.check(ts("2026-07-03T00:30:00Z") < night2_end < ts("2026-07-03T04:00:00Z"),
            "ephem: night 2 ends at %s" % iso(night2_end))
    results = {}
    for label, window in (("default windows", {}), ("include_suspect", {"include_suspect": True})):
        cfg = config(h, "bloom-%s.json" % label.replace(" ", "-"), window)
        r, recs = replay(cfg, h.path("bloom.csv"))
        h.check(r.returncode == 0, "(a %s) replay exits 0 (%d) %s" % (label, r.returncode, r.stderr[-300:]))
        results[label] = recs
        samples = [x for x in recs if x["record"] == "sample"]
        windows = [x for x in recs if x["record"] == "window"]
        alerts = [x for x in recs if x["record"] == "alert"]
        h.check(len([s for s in samples if s["flag"] != 9]) == len(bloom),
                "(a %s) every input sample comes out flagged (%d of %d)" %
                (label, len([s for s in samples if s["flag"] != 9]), len(bloom)))
        h.check(len(windows) == 3 * 60 * 6, "(a %s) 60 h of 10-min windows for 3 channels (%d)" %
                (label, len(windows)))
        top = max([a["level"] for a in alerts] or [0])
        names = [a["level_name"] for a in alerts if a["change"] == "raised"]
        # (a) top level: with include_suspect on this branch; with the default
        # windows it waits for the accepted-doubts rule (issue 11 item 1).
        h.check(top == 3 and "bloom" in names,
                "(a %s) the top alert level (bloom) is raised: %s" % (label, names))
        for a in alerts:
            ok = (a["rule"] == "cyanobacteria" and a["channel"] == "pc" and
                  re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:00Z$", a["window_start"]) and
                  isinstance(a["previous_level"], int))
            if not ok:
                h.check(False, "(a %s) alert record has rule, channel, window_start: %s" % (label, a))
                break
        after = [s for s in samples if s["ch"] == "pc" and ts(s["t"]) >= night2_end and s["v"] is not None]
        fouled = [s for s in after if "fouling_drift" in s["reasons"]]
        h.check(len(after) > 600, "(a %s) %d pc samples after night 2" % (label, len(after)))
        # Waits for the bloom/biofilm discrimination (issue 11 item 1).
        h.check(not fouled, "(a %s) no pc sample after night 2 is flagged fouling_drift (%d are, first %s)"
                % (label, len(fouled), fouled[0]["t"] if fouled else "-"))
        # Solar quenching flags pc at midday (sun above 20 degrees), not at night.
        sq = [s for s in samples if s["ch"] == "pc" and "solar_quenching" in s["reasons"]]
        noon = [s for s in sq if s["t"].endswith("T12:00:00Z")]
        night = [s for s in sq if s["t"][11:13] in ("23", "00", "01")]
        h.check(len(noon) >= 2 and not night,
                "(a %s) solar_quenching at noon (%d), never around midnight (%d)" % (label, len(noon), len(night)))
        # A window's statistics are those of its samples (flag 1, and 3 with include_suspect).
        used = {1, 3} if window.get("include_suspect") else {1}
        bad = 0
        checked = 0
        by_t = {}
        for s in samples:
            if s["ch"] == "pc":
                by_t[ts(s["t"])] = s
        for w in windows:
            if w["channel"] != "pc":
                continue
            st = ts(w["start"])
            vals = [by_t[t]["v"] for t in range(st, st + 600, PERIOD)
                    if t in by_t and by_t[t]["flag"] in used and by_t[t]["v"] is not None]
            if not vals:
                bad += "mean" in w
                continue
            checked += 1
            if abs(w["mean"] - sum(vals) / len(vals)) > 1e-9 or w["count"] != len(vals):
                bad += 1
        h.check(checked > 100 and bad == 0,
                "(a %s) pc window means equal the mean of their used samples (%d windows, %d differ)"
                % (label, checked, bad))

    # --- (b) a biofilm ----------------------------------------------------------
    film = series(6 * 24, biofilm_pc, 2)
    write_csv(h.path("biofilm.csv"), film)
    cfg = config(h, "biofilm.json", {})
    r, recs = replay(cfg, h.path("biofilm.csv"))
    h.check(r.returncode == 0, "(b) replay exits 0 (%d) %s" % (r.returncode, r.stderr[-300:]))
    pcs = [x for x in recs if x["record"] == "sample" and x["ch"] == "pc" and x["v"] is not None]
    fouled = [s for s in pcs if "fouling_drift" in s["reasons"]]
    last_day = [s for s in pcs if ts(s["t"]) >= START + 5 * 86400 + 8 * 3600]
    h.check(len(fouled) > 1000, "(b) the slow drift is flagged fouling_drift (%d of %d pc samples)" %
            (len(fouled), len(pcs)))
    h.check(last_day and all("fouling_drift" in s["reasons"] and s["flag"] >= 3 for s in last_day),
            "(b) every pc sample of the last day is flagged fouling_drift, flag >= 3 (%d)" % len(last_day))
    # The pipeline's night (its own solar position) against ephem's: a night
    # closes at the first sample after the sun rises through -6 degrees, so
    # the first fouling flag comes within two polls after an ephem sunrise.
    if fouled:
        tf = ts(fouled[0]["t"])
        rise = night_end_after(tf - 6 * 3600)
        h.check(0 <= tf - rise <= 2 * PERIOD,
                "(b) the first fouling flag %s follows ephem's -6 degree sunrise %s within 2 polls"
                % (fouled[0]["t"], iso(rise)))
    first_night_end = night_end_after(START)
    h.check(not [s for s in pcs if "fouling_drift" in s["reasons"] and ts(s["t"]) < first_night_end],
            "(b) no fouling flag before the first night has ended (%s)" % iso(first_night_end))

    # --- (c) bad input ------------------------------------------------------------
    cfg = config(h, "plain.json", {})
    good = "time,channel,value\n2026-07-01T12:00:00Z,pc,1.5\n2026-07-01T12:01:00Z,pc,1.6\n"
    bad_inputs = [
        ("order.csv", good + "2026-07-01T12:00:30Z,pc,1.7\n", 4, "increasing time order"),
        ("chan.csv", good + "2026-07-01T12:02:00Z,phycocyanin,1.7\n", 4, "not in"),
        ("value.csv", good + "2026-07-01T12:02:00Z,pc,1,7\n", 4, "3 fields"),
        ("zone.csv", good + "2026-07-01T12:02:00+02:00,pc,1.7\n", 4, "ISO 8601 UTC"),
        ("header.csv", "t,ch,v\n", 1, "header"),
        ("bad.jsonl", '{"t":1782907200,"ch":"pc","v":1}\n{"t":1782907260,"ch":"pc","v":"x"}\n', 2,
         "is not a number"),
    ]
    for name, text, line, says in bad_inputs:
        p = h.path(name)
        with open(p, "w") as f:
            f.write(text)
        r, _ = replay(cfg, p)
        err = [l for l in r.stderr.splitlines() if l.strip()]
        h.check(r.returncode == 65 and r.stdout == "", "(c) %s exits 65 with no output (%d)" % (name, r.returncode))
        h.check(len(err) == 1 and err[0].startswith("%s:%d: " % (p, line)) and says in err[0]
                and "; allowed" in err[0], "(c) %s: one line FILE:%d: ... %s ...: %s" % (name, line, says, err))
    r, _ = replay(cfg, "-", stdin="time,channel,value\n2026-07-01T12:00:00Z,pc,x\n")
    h.check(r.returncode == 65 and r.stderr.startswith("stdin:2: "), "(c) stdin errors name stdin:2 (%s)" % r.stderr.strip())
    broken = h.path("broken.json")
    with open(broken, "w") as f:
        f.write(open(cfg).read().replace('"period_s": 60', '"period_s": -1'))
    r, _ = replay(broken, h.path("order.csv"))
    h.check(r.returncode == 78 and "/sampling/period_s" in r.stderr,
            "(c) a bad config exits 78 naming /sampling/period_s (%d) %s" % (r.returncode, r.stderr.strip()[:200]))
    r, _ = replay(cfg, h.path("missing.csv"))
    h.check(r.returncode == 66, "(c) an unreadable input exits 66 (EX_NOINPUT) (%d)" % r.returncode)

    # --- (d) --summary ------------------------------------------------------------
    cfg = config(h, "summary.json", {"include_suspect": True})
    r, _ = replay(cfg, h.path("bloom.csv"), "--summary")
    h.check(r.returncode == 0, "(d) --summary exits 0 (%d)" % r.returncode)
    out = r.stdout
    h.check(not out.lstrip().startswith("{") and len(out.splitlines()) < 30,
            "(d) the summary is a few human lines (%d)" % len(out.splitlines()))
    recs = results["include_suspect"]
    for ch in ("chla", "pc", "temp"):
        counts = [len([x for x in recs if x["record"] == "sample" and x["ch"] == ch and x["flag"] == f])
                  for f in (1, 2, 3, 4, 9)]
        row = [l for l in out.splitlines() if l.split()[:1] == [ch]]
        got = [int(x) for x in row[0].split()[2:7]] if row else None
        h.check(got == counts, "(d) %s: summary counts %s equal the JSONL records' %s" % (ch, got, counts))
    events = [x for x in recs if x["record"] == "alert" and x["change"] != "reminder"]
    reminders = [x for x in recs if x["record"] == "alert" and x["change"] == "reminder"]
    tl = [l for l in out.splitlines() if re.match(r"\s+\d{4}-\d\d-\d\dT", l)]
    h.check(len(tl) == len(events) and len(tl) > 0 and
            [l.split()[0] for l in tl] == [e["window_start"] for e in events],
            "(d) one timeline line per level change, at its window (%d lines, %d changes)" % (len(tl), len(events)))
    h.check(("and %d reminders" % len(reminders)) in out,
            "(d) the reminders are counted, not listed (%d)" % len(reminders))
    h.check(any("-> bloom" in l for l in tl) and re.search(r"highest level bloom", out),
            "(d) the timeline shows the rise to bloom: %s" % [l.strip() for l in tl[:4]])

    # --- (e) CSV, JSONL and stdin agree; no port, no socket -----------------------
    short = series(6, bloom_pc, 3)
    short[10] = (short[10][0], short[10][1], None)  # one sample without a value
    write_csv(h.path("short.csv"), short)
    write_jsonl(h.path("short.jsonl"), short)
    with open(h.path("short.data"), "w") as f:  # no extension: sniffed
        f.write(open(h.path("short.jsonl")).read())
    cfg = config(h, "short.json", {"include_suspect": True})
    a = replay(cfg, h.path("short.csv"))
    b = replay(cfg, h.path("short.jsonl"))
    c = replay(cfg, "-", stdin=open(h.path("short.csv")).read())
    d = replay(cfg, h.path("short.data"))
    h.check(a[0].returncode == 0 and len(a[1]) > len(short), "(e) CSV replay gives %d records" % len(a[1]))
    h.check(a[1] == b[1] == c[1] == d[1], "(e) CSV, JSONL, CSV on stdin and sniffed JSONL give the same records")
    h.check("CSV, by extension .csv" in a[0].stderr and "JSONL, by extension .jsonl" in b[0].stderr
            and "CSV, by content" in c[0].stderr and "JSONL, by content" in d[0].stderr,
            "(e) the format and how it was chosen are said: %s | %s" % (c[0].stderr.strip(), d[0].stderr.strip()))
    nulls = [x for x in a[1] if x["record"] == "sample" and x["t"] == iso(short[10][0]) and x["ch"] == short[10][1]]
    h.check(len(nulls) == 1 and nulls[0]["v"] is None and nulls[0]["flag"] == 9,
            "(e) an empty value comes out as v null, flag 9: %s" % nulls)
    # --maintenance: the samples inside the period are flagged fail with reason maintenance.
    m0, m1 = START + 2 * 3600, START + 2 * 3600 + 1800
    r, recs = replay(cfg, h.path("short.csv"), "--maintenance", "%s/%s" % (iso(m0), iso(m1)))
    inside = [x for x in recs if x["record"] == "sample" and m0 <= ts(x["t"]) < m1]
    outside = [x for x in recs if x["record"] == "sample" and not m0 <= ts(x["t"]) <= m1]
    h.check(r.returncode == 0 and len(inside) == 3 * 30 and
            all(x["flag"] == 4 and "maintenance" in x["reasons"] for x in inside),
            "(e) --maintenance: the %d samples inside are flag 4, maintenance" % len(inside))
    h.check(outside and not [x for x in outside if "maintenance" in x["reasons"]],
            "(e) --maintenance: none of the %d samples outside is" % len(outside))
    r, _ = replay(cfg, h.path("short.csv"), "--maintenance", "%s/%s" % (iso(m1), iso(m0)))
    h.check(r.returncode == 64 and "allowed" in r.stderr, "(e) a reversed period is a usage error (%d)" % r.returncode)
    if h.check(shutil.which("strace") is not None, "(e) strace is there"):
        trace = h.path("strace.log")
        env = dict(os.environ, ASAN_OPTIONS=os.environ.get("ASAN_OPTIONS", "") + ":detect_leaks=0")
        r = subprocess.run(["strace", "-f", "-qq", "-e", "trace=openat,open,socket,connect", "-o", trace,
                            TARN, "replay", "--config", cfg, h.path("short.csv")],
                           capture_output=True, text=True, timeout=300, env=env)
        t = open(trace).read()
        bad = [l for l in t.splitlines() if "never-opened" in l or "/dev/tty" in l or
               re.search(r"\bsocket\(|\bconnect\(", l)]
        h.check(r.returncode == 0 and not bad, "(e) no port opened, no socket (%s)" % bad[:1])
finish(h)
