#!/usr/bin/python3
"""Maintenance per instrument (issue 11, item 3) against the running daemon:
the demo simulator, a real mosquitto on a free loopback port, the daemon at
--speed 60 (one station minute per real second).

The demo station has three instruments: fluorometer (chla, pc, pe), chain
(temp_0m5 .. temp_10m) and probe (temp_probe, probe_supply).

Flags are IOOS QARTOD values (QARTOD manuals, flag table): 4 = fail,
9 = missing; the maintenance reason is bit 16 of the reason set
(config/settings/reasons.h, codec/FORMAT.md reason bits). The default
maximum duration (2 h) is common practice, no source; the test uses its own
maxima.

1. `tarn check`: `maintenance.max_duration_s` out of range and an unknown
   key in the block are reported with their JSON pointer and what is allowed.
2. `tarn maintenance start --instrument fluoro` (unknown): exit 65
   (EX_DATAERR, sysexits.h), one line naming it and the configured ones.
3. chain with the config's maximum and fluorometer with --max-minutes 30 at
   once; `tarn status` (text) shows both ("fluorometer until hh:mmZ").
4. The fluorometer's period ends by itself after 30 station minutes (the
   daemon's clock, --speed 60): logged at warn, `tarn status --json` and the
   text say so ("last: fluorometer ended by itself at ..."), the archive's
   row has ended_by "time_limit" and its end at or just after start + 1800 s.
5. Restart with chain still in maintenance, then a reload (SIGHUP) that
   changes the pipeline (one alert rule added): chain's period survives both
   with the same planned end; `tarn maintenance stop --instrument chain`
   ends it ("stop" in the archive).
6. `tarn store export --format jsonl`: inside each period the samples of that
   instrument's channels are flagged 4 with the maintenance reason (or 9
   without a value); the probe's samples never carry the reason, nor do the
   fluorometer's after its period ended.
"""
import calendar
import collections
import json
import os
import re
import signal
import sqlite3
import subprocess
import time

from harness import SOURCE_DIR, TARN, Harness, control, demo_config, finish, read_lines, stop_daemon

SPEED = 60
MAINT_BIT = 1 << 16  # reason "maintenance"
FLUORO = ("chla", "pc", "pe")
CHAIN = ("temp_0m5", "temp_2m", "temp_5m", "temp_10m")
PROBE = ("temp_probe", "probe_supply")


def iso_t(s):
    return calendar.timegm(time.strptime(s, "%Y-%m-%dT%H:%M:%SZ"))


with Harness("maint-instrument") as h:
    origin = time.time()
    port, _ = h.mosquitto()
    h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", str(SPEED), "--t0", "%.3f" % origin], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)

    def tarn(*args):
        r = subprocess.run([TARN] + list(args), capture_output=True, text=True, timeout=30)
        return r.returncode, r.stdout.strip(), r.stderr.strip()

    # --- 1. tarn check -------------------------------------------------------
    bad = json.loads(json.dumps(cfg))
    bad["maintenance"] = {"max_duration_s": 30, "colour": "red"}
    rc, out, err = tarn("check", "--config", h.write_config(bad, "bad.json"))
    text = out + "\n" + err
    h.check(rc == 78 and "/maintenance/max_duration_s" in text and "172800" in text and "60" in text,
            "tarn check: max_duration_s 30 refused with its pointer and the allowed range, exit 78 (%d: %s)"
            % (rc, text.strip()[:300]))
    h.check("/maintenance/colour" in text, "tarn check: an unknown key in /maintenance is reported")
    good = json.loads(json.dumps(cfg))
    good["maintenance"] = {"max_duration_s": 3600}
    rc, out, err = tarn("check", "--config", h.write_config(good, "good.json"))
    h.check(rc == 0, "tarn check: max_duration_s 3600 accepted (%d %s)" % (rc, err[:200]))

    cfg["maintenance"] = {"max_duration_s": 7200}
    cfg_path = h.write_config(cfg)
    extra = ("--speed-origin", "%.3f" % origin)
    d = h.daemon(cfg_path, speed=SPEED, extra=extra)
    sock = h.path("run", "control.sock")

    def status(retry=10.0):
        deadline = time.time() + retry
        while True:
            try:
                return control(sock, {"command": "status"})
            except (OSError, ValueError):
                if time.time() > deadline:
                    return None
                time.sleep(0.2)

    def wait_for(cond, seconds):
        deadline = time.time() + seconds
        while time.time() < deadline:
            v = cond()
            if v:
                return v
            time.sleep(0.3)
        return cond()

    def log():
        return open(h.path("daemon.log")).read()

    st = wait_for(lambda: (lambda s: s if s and all(c.get("t") for c in s["channels"]) else None)(status()), 30)
    h.check(st is not None, "daemon up, every channel has a sample")

    # --- 2. unknown instrument -------------------------------------------------
    rc, out, err = tarn("maintenance", "start", "--instrument", "fluoro", "--socket", sock)
    h.check(rc == 65 and len(err.splitlines()) == 1 and "unknown instrument \"fluoro\"" in err
            and "fluorometer, chain, probe" in err,
            "unknown instrument: exit 65 (EX_DATAERR), one line naming it and the configured ones (%d: %r)"
            % (rc, err))
    rc, out, err = tarn("maintenance", "start", "--instrument", "chain", "--max-minutes", "0", "--socket", sock)
    h.check(rc == 64 and "--max-minutes" in err and "2880" in err,
            "--max-minutes 0: exit 64 (EX_USAGE) with the allowed range (%d: %r)" % (rc, err))

    # --- 3. two instruments at once -----------------------------------------
    # chain first (the config's 2 h), then the fluorometer with its own 30 min
    # (30 real seconds: room for the checks below on a loaded machine).
    t0 = iso_t(status()["now"])
    rc, out, err = tarn("maintenance", "start", "--instrument", "chain", "--socket", sock)
    h.check(rc == 0, "start --instrument chain: exit %d %r" % (rc, err))
    rc, out, err = tarn("maintenance", "start", "--instrument", "fluorometer", "--max-minutes", "30",
                        "--note", "optics wiped (integration test)", "--socket", sock)
    h.check(rc == 0 and re.match(r"maintenance of fluorometer started, ends by itself at \d\d:\d\dZ$", out),
            "start --instrument fluorometer --max-minutes 30 while chain is in its own: exit %d, %r %r"
            % (rc, out, err))
    rc2, _, err2 = tarn("maintenance", "start", "--instrument", "chain", "--socket", sock)
    h.check(rc2 == 65 and "already active" in err2, "a second start of chain is refused: %d %r" % (rc2, err2))
    st = status()
    periods = {p["instrument"]: p for p in st["maintenance_periods"]}
    h.check(set(periods) == {"fluorometer", "chain"} and st["maintenance"] is True,
            "status --json: two periods open (%s)" % st["maintenance_periods"])
    fl_until = iso_t(periods["fluorometer"]["until"]) if "fluorometer" in periods else 0
    fl_since = iso_t(periods["fluorometer"]["since"]) if "fluorometer" in periods else 0
    ch_until = iso_t(periods["chain"]["until"]) if "chain" in periods else 0
    ch_since = iso_t(periods["chain"]["since"]) if "chain" in periods else 0
    h.check(fl_until - fl_since == 1800 and ch_until - ch_since == 7200,
            "planned ends: fluorometer after its own 30 min, chain after the config's 7200 s (%d, %d)"
            % (fl_until - fl_since, ch_until - ch_since))
    rc, text, _ = tarn("status", "--socket", sock)
    h.check(re.search(r"maintenance: chain until \d\d:\d\dZ, fluorometer until \d\d:\d\dZ", text) is not None,
            "tarn status (text) lists both periods with their planned end:\n%s"
            % "\n".join(l for l in text.splitlines() if "maintenance" in l))

    def flagged():
        s = status()
        if not s:
            return None
        by = {c["name"]: c for c in s["channels"]}
        ok = all(by[n]["maintenance"] and by[n]["flag"] == 4 and by[n]["reasons"] & MAINT_BIT for n in FLUORO + CHAIN)
        ok = ok and all(not by[n]["maintenance"] and not by[n]["reasons"] & MAINT_BIT for n in PROBE)
        return s if ok else None
    h.check(wait_for(flagged, 15) is not None,
            "status: fluorometer's and chain's last samples flagged 4 (maintenance), the probe's not")

    # --- 4. the fluorometer's period ends by itself -----------------------------
    def auto_ended():
        s = status()
        last = (s or {}).get("maintenance_last") or {}
        return s if last.get("instrument") == "fluorometer" and last.get("ended_by") == "time_limit" else None
    st = wait_for(auto_ended, 120)  # 30 station minutes are 30 real seconds
    h.check(st is not None, "status --json: the fluorometer's period ended by itself (%s)"
            % (status() or {}).get("maintenance_last"))
    h.check(st is not None and [p["instrument"] for p in st["maintenance_periods"]] == ["chain"],
            "chain's period is still open (%s)" % (st or {}).get("maintenance_periods"))
    h.check(re.search(r" warn(ing)? +station: maintenance of instrument fluorometer ended by itself after 3[01] min",
                      log()) is not None, "logged at warn: maintenance of fluorometer ended by itself after 30 min")
    rc, text, _ = tarn("status", "--socket", sock)
    h.check("maintenance last: fluorometer ended by itself at " in text and "chain until" in text,
            "tarn status (text) says the fluorometer's ended by itself, chain's still open:\n%s"
            % "\n".join(l for l in text.splitlines() if "maintenance" in l))

    # --- 5. restart and reload with chain in maintenance -----------------------
    stop_daemon(h, d, "SIGTERM with chain in maintenance")
    d = h.daemon(cfg_path, speed=SPEED, extra=extra)
    st = wait_for(lambda: status(0.2), 20)
    periods = {p["instrument"]: p for p in (st or {}).get("maintenance_periods", [])}
    h.check(set(periods) == {"chain"} and iso_t(periods["chain"]["until"]) == ch_until,
            "after the restart chain's period is open with its planned end (%s)" % list(periods.values()))
    log_len = len(log())
    cfg2 = json.loads(json.dumps(cfg))
    cfg2["alerts"]["rules"].append({"name": "pc-test", "channel": "pc", "statistic": "mean",
                                    "levels": [{"name": "high", "threshold": 1000.0}],
                                    "raise_windows": 1, "clear_windows": 1, "min_count": 1, "renotify_s": 0})
    h.write_config(cfg2)
    d.send_signal(signal.SIGHUP)
    h.check(wait_for(lambda: "applying new config" in log()[log_len:], 15) is not None, "reload applied")
    st = wait_for(lambda: (lambda s: s if s and [p["instrument"] for p in s["maintenance_periods"]] == ["chain"]
                           and all(c["maintenance"] == (c["name"] in CHAIN) for c in s["channels"]) else None)(
        status()), 15)
    h.check(st is not None, "after the reload (pipeline rebuilt) only chain's channels are in maintenance (%s)"
            % [(c["name"], c["maintenance"]) for c in (status() or {}).get("channels", [])])
    time.sleep(2)
    rc, out, err = tarn("maintenance", "stop", "--instrument", "chain", "--socket", sock)
    h.check(rc == 0 and out == "maintenance ended: chain", "stop --instrument chain: exit %d %r %r" % (rc, out, err))
    t_end = iso_t(status()["now"])
    rc, out, err = tarn("maintenance", "stop", "--socket", sock)
    h.check(rc == 65 and "no maintenance period is active" in err, "nothing left to stop: exit %d %r" % (rc, err))

    # --- 6. the archive --------------------------------------------------------
    # One window after the end, so every sample of the periods was archived.
    wait_for(lambda: iso_t(status()["now"]) > t_end + 120, 30)
    db = sqlite3.connect("file:%s?mode=ro" % h.path("state", "archive.db"), uri=True)
    rows = db.execute("SELECT instrument, start_t, end_t, until_t, ended_by, note FROM maintenance "
                      "ORDER BY id").fetchall()
    db.close()
    by = {r[0]: r for r in rows}
    h.check(len(rows) == 2 and set(by) == {"fluorometer", "chain"}, "archive: two periods (%s)" % rows)
    fl = by.get("fluorometer")
    ch = by.get("chain")
    h.check(fl is not None and fl[4] == "time_limit" and fl[3] == fl[1] + 1800 and fl[3] <= fl[2] <= fl[3] + 120
            and fl[5] == "optics wiped (integration test)",
            "archive: fluorometer ended by itself (time_limit) at start + 1800 s (timer lag at most 120 station s) "
            "(%s)" % (fl,))
    h.check(ch is not None and ch[4] == "stop" and ch[3] == ch[1] + 7200 and ch[2] is not None,
            "archive: chain ended by a stop, planned end start + 7200 s (%s)" % (ch,))
    if fl and ch and fl[2] and ch[2]:
        rc, out, err = tarn("store", "export", "--config", cfg_path, "--from", str(t0 - 600),
                            "--to", str(t_end + 120), "--format", "jsonl")
        samples = [json.loads(l) for l in out.splitlines() if l.startswith("{")]
        spans = {n: (fl[1], fl[2]) for n in FLUORO}
        spans.update({n: (ch[1], ch[2]) for n in CHAIN})

        def in_period(r):
            return r["ch"] in spans and spans[r["ch"]][0] <= r["t"] < spans[r["ch"]][1]
        inside = [r for r in samples if in_period(r)]
        bad_in = [r for r in inside if not ((r["f"] == 4 and r["r"] & MAINT_BIT) or (r["f"] == 9 and r["v"] is None))]
        per_ch = collections.Counter(r["ch"] for r in inside if r["f"] == 4)
        h.check(rc == 0 and not bad_in and set(per_ch) == set(FLUORO + CHAIN) and min(per_ch.values()) >= 5,
                "export: inside its period every sample of the instrument is flagged 4 with the maintenance "
                "reason (or 9), at least 5 per channel (%s); exceptions %s" % (dict(per_ch), bad_in[:2]))
        outside = [r for r in samples if not in_period(r)]
        bad_out = [r for r in outside if r["r"] & MAINT_BIT]
        probe = [r for r in samples if r["ch"] in PROBE]
        fl_after = [r for r in samples if r["ch"] in FLUORO and r["t"] >= fl[2]]
        h.check(probe and fl_after and outside and not bad_out,
                "export: no sample outside its instrument's period carries the maintenance reason (%d outside, "
                "%d of the probe, %d of the fluorometer after its end); exceptions %s"
                % (len(outside), len(probe), len(fl_after), bad_out[:2]))
    stop_daemon(h, d, "final SIGTERM")
finish(h)
