#!/usr/bin/python3
"""Maintenance periods, config reload and restart against the running daemon
(issues 4, 6 and 8): the demo simulator, a real mosquitto on a free loopback
port, the daemon at --speed 60 with --speed-origin, so that the restart in
part 3 continues the same station timeline.

The config is the demo's plus one alert rule, "pc-quick", whose only level
("raised", threshold 0.1 ug/L, test value, invented) lies far below the
simulated phycocyanin (about 0.6 ug/L): the first window raises it. Its
renotify_s is 0 (never repeat), so over the whole test exactly one alert
event for it may reach the broker; any second one is a duplicate.

Packets on the broker are decoded with codec/reference_decoder.py, the
decoder written from codec/FORMAT.md alone (no code shared with the daemon).
Flags are IOOS QARTOD values (QARTOD manuals, flag table): 4 = fail,
9 = missing; the maintenance reason is bit 16 of the reason set
(config/settings/reasons.h, codec/FORMAT.md reason bits).

1. `tarn maintenance start --note ...` over the control socket: `tarn status
   --json` shows maintenance active and the channels' last samples flagged 4
   with the maintenance reason; `tarn maintenance stop` ends it; the archive
   (archive.db opened read-only) holds the period with its start, end and
   note; `tarn store export` shows every sample inside the period flagged 4
   (or 9 where there was no value) with the maintenance reason, and none
   outside it.
2. While maintenance is active and pc-quick is raised: SIGHUP with a changed,
   valid config (log level info -> debug). The reload must take effect (debug
   lines appear), maintenance must still be active, the level unchanged, no
   second alert event may be published (also after maintenance ends and
   windows with evidence close again, which is when a rule that lost its
   state would raise once more), and the window open at the reload must not
   be cut in two (no window start and channel in two packets).
3. Maintenance started, SIGTERM, restart: maintenance is still active, and
   `tarn maintenance stop` then gives the archived period its end time; the
   level survives the restart without a new event; over the whole run no
   window (start, channel) reaches the broker in two packets, and the daemon
   logs the level change once.
"""
import calendar
import collections
import json
import os
import re
import signal
import sqlite3
import subprocess
import sys
import time

from harness import SOURCE_DIR, TARN, Harness, control, demo_config, finish, read_lines, stop_daemon

sys.path.insert(0, os.path.join(SOURCE_DIR, "codec"))
import reference_decoder as ref  # noqa: E402

SPEED = 60
STATION = "hollin-buoy-1"
MAINT_BIT = 1 << 16  # reason "maintenance"
NOTE1 = "optics wiped (integration test)"
NOTE2 = "probe swapped across a restart (integration test)"


def station_now(st):
    return calendar.timegm(time.strptime(st["now"], "%Y-%m-%dT%H:%M:%SZ"))


with Harness("maintenance") as h:
    origin = time.time()
    port, _ = h.mosquitto()
    h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", str(SPEED), "--t0", "%.3f" % origin], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg["alerts"]["rules"].append({"name": "pc-quick", "channel": "pc", "statistic": "mean",
                                   "levels": [{"name": "raised", "threshold": 0.1}],
                                   "raise_windows": 1, "clear_windows": 1, "min_count": 1, "renotify_s": 0})
    cfg_path = h.write_config(cfg)
    m = subprocess.run([TARN, "manifest", "--config", cfg_path], capture_output=True, text=True)
    with open(h.path("m.json"), "w") as f:
        f.write(m.stdout)
    mh, mm = ref.load_manifest(h.path("m.json"))
    manifests = {mh: mm}
    sub = h.subscribe(port, topic="tarn/%s/#" % STATION, hex_payload=True)
    received = []
    extra = ("--speed-origin", "%.3f" % origin)
    d = h.daemon(cfg_path, speed=SPEED, extra=extra)
    sock = h.path("run", "control.sock")

    def pump(seconds=0.5):
        received.extend(read_lines(sub, seconds))

    def status(retry=10.0):
        deadline = time.time() + retry
        while True:
            try:
                return control(sock, {"command": "status"})
            except (OSError, ValueError):
                if time.time() > deadline:
                    return None
                time.sleep(0.2)

    def level(st, rule="pc-quick"):
        return dict((a["rule"], a["level"]) for a in (st or {}).get("alerts", [])).get(rule)

    def decoded(kind):
        """(sequence, decoded packet) of every distinct packet of a topic kind so far."""
        out = {}
        for line in received:
            parts = line.split(" ")
            if len(parts) != 2 or parts[0].rsplit("/", 1)[-1] != kind:
                continue
            try:
                p = ref.decode(bytes.fromhex(parts[1]), manifests)
            except ref.Bad as e:
                print("      undecodable %s packet: %s" % (kind, e))
                continue
            out.setdefault(p["sequence"], p)
        return sorted(out.items())

    def alert_events():
        return [(seq, a) for seq, p in decoded("alert") for a in p["alerts"]]

    def tarn(*args):
        r = subprocess.run([TARN] + list(args), capture_output=True, text=True, timeout=20)
        return r.returncode, r.stdout.strip(), r.stderr.strip()

    def wait_for(cond, seconds):
        deadline = time.time() + seconds
        while time.time() < deadline:
            pump(0.5)
            v = cond()
            if v:
                return v
        return cond()

    # --- Part 1 and 2: maintenance, reload while it is active -----------------
    st = wait_for(lambda: (lambda s: s if level(s) == "raised" else None)(status()), 45)
    h.check(level(st) == "raised", "pc-quick is raised by the first windows (%s)" % (st or {}).get("alerts"))
    wait_for(lambda: alert_events(), 10)
    h.check(len(alert_events()) == 1, "one alert event on the broker so far (%s)" % alert_events())

    t0 = station_now(status())
    rc, out, err = tarn("maintenance", "start", "--note", NOTE1, "--socket", sock)
    t1 = station_now(status())
    h.check(rc == 0 and out.startswith("maintenance started"), "tarn maintenance start: exit %d, %r %r" % (rc, out, err))
    rc2, _, err2 = tarn("maintenance", "start", "--note", "again", "--socket", sock)
    h.check(rc2 == 65 and "already active" in err2, "a second start is refused: exit %d (EX_DATAERR 65), %r"
            % (rc2, err2))

    def all_flagged():
        s = status()
        ok = s and s["maintenance"] and all(c["flag"] == 4 and c["reasons"] & MAINT_BIT for c in s["channels"])
        return s if ok else None
    st = wait_for(all_flagged, 10)
    h.check(st is not None, "status: maintenance active, every channel's last sample flagged 4 with the "
            "maintenance reason (%s)" % [(c["name"], c["flag"], c["reasons"]) for c in (status() or {})
                                         .get("channels", [])][:3])

    # SIGHUP with a changed, valid config while maintenance is active and the level raised.
    log_len = len(open(h.path("daemon.log")).read())
    events_before = len(alert_events())
    cfg2 = json.loads(json.dumps(cfg))
    cfg2["log"] = {"level": "debug"}
    h.write_config(cfg2)
    d.send_signal(signal.SIGHUP)

    def new_log():
        return open(h.path("daemon.log")).read()[log_len:]
    h.check(wait_for(lambda: "applying new config" in new_log(), 10), "the reload is applied (logged)")
    st = status()
    h.check(d.poll() is None and st and st["maintenance"] is True,
            "after the reload maintenance is still active (%s)" % (st or {}).get("maintenance"))
    h.check(level(st) == "raised", "after the reload pc-quick is still raised (%s)" % (st or {}).get("alerts"))
    # A window closes under the new config: its debug line shows the new log
    # level in force, and maintenance now spans a window boundary.
    h.check(wait_for(lambda: re.search(r" debug +station: window \S+ closed", new_log()), 20),
            "the new log level is in force (a window's debug line after the reload)")
    st = status()
    h.check(st and st["maintenance"] is True and level(st) == "raised",
            "a window later: maintenance still active, level still raised (%s, %s)"
            % ((st or {}).get("maintenance"), level(st)))

    t2 = station_now(status())
    rc, out, err = tarn("maintenance", "stop", "--socket", sock)
    t3 = station_now(status())
    h.check(rc == 0 and out.startswith("maintenance ended"), "tarn maintenance stop: exit %d, %r %r" % (rc, out, err))
    st = wait_for(lambda: (lambda s: s if s and not s["maintenance"] and all(
        c["flag"] != 4 for c in s["channels"]) else None)(status()), 10)
    h.check(st is not None, "status: maintenance over, samples no longer flagged 4")

    # Windows with evidence again: a rule that lost its state would raise once more now.
    def windows_after(t):
        return [w for seq, p in decoded("data") for w in p["windows"]
                if w["start"] >= t and not w["partial"]]
    first_clean = t3 - t3 % 600 + 600
    wait_for(lambda: len(windows_after(first_clean)) >= 2, 40)
    h.check(len(windows_after(first_clean)) >= 2, "two complete windows after maintenance reached the broker")
    pump(1.0)
    ev = alert_events()
    h.check(len(ev) == events_before == 1,
            "no second alert event after the reload and maintenance (%d events: %s)"
            % (len(ev), [(s, a["rule_id"], a["level_name"]) for s, a in ev]))
    h.check(level(status()) == "raised", "pc-quick still raised")

    # The window open at the reload is not cut in two.
    def windows_twice():
        seqs = collections.defaultdict(set)
        for seq, p in decoded("data"):
            for w in p["windows"]:
                for k in range(len(w["channels"])):
                    seqs[(w["start"], w["first_channel"] + k)].add(seq)
        return len(seqs), sorted((k, sorted(v)) for k, v in seqs.items() if len(v) > 1)
    n, twice = windows_twice()
    h.check(n and not twice, "across the reload no window (start, channel) is in two packets (%d; %s)"
            % (n, twice[:3]))

    # The archive: the period, and the flags of its samples.
    db = sqlite3.connect("file:%s?mode=ro" % h.path("state", "archive.db"), uri=True)
    periods = db.execute("SELECT start_t, end_t, note FROM maintenance ORDER BY id").fetchall()
    db.close()
    h.check(len(periods) == 1 and periods[0][2] == NOTE1, "archive: one maintenance period with its note (%s)"
            % periods)
    if periods:
        s_t, e_t, _ = periods[0]
        h.check(t0 <= s_t <= t1 and e_t is not None and t2 <= e_t <= t3,
                "archive: period start %s in [%d, %d], end %s in [%d, %d] (station time around the commands)"
                % (s_t, t0, t1, e_t, t2, t3))
        rc, out, err = tarn("store", "export", "--config", cfg_path, "--from", str(s_t - 1200),
                            "--to", str(t3 + 600), "--format", "jsonl")
        rows = [json.loads(l) for l in out.splitlines() if l.startswith("{")]
        # Without an archived end (a failure above), the stop command's time
        # bounds the period, and samples between t2 and t3 are left out.
        end = e_t if e_t is not None else t2
        inside = [r for r in rows if s_t <= r["t"] < end]
        outside = [r for r in rows if r["t"] < s_t or r["t"] >= (e_t if e_t is not None else t3)]
        bad_in = [r for r in inside if not ((r["f"] == 4 and r["r"] & MAINT_BIT) or (r["f"] == 9 and r["v"] is None))]
        bad_out = [r for r in outside if r["r"] & MAINT_BIT]
        per_ch = collections.Counter(r["ch"] for r in inside if r["f"] == 4)
        h.check(rc == 0 and inside and not bad_in and min(per_ch.values() or [0]) >= 3
                and len(per_ch) == len(mm["channels"]),
                "store export: %d samples inside the period, all flagged 4 with the maintenance reason (or 9), "
                "at least 3 per channel (%s); exceptions: %s" % (len(inside), dict(per_ch), bad_in[:2]))
        h.check(outside and not bad_out, "store export: none of the %d samples outside the period carries the "
                "maintenance reason (%s)" % (len(outside), bad_out[:2]))

    # --- Part 3: maintenance across a restart -------------------------------
    t4 = station_now(status())
    rc, out, err = tarn("maintenance", "start", "--note", NOTE2, "--socket", sock)
    t5 = station_now(status())
    h.check(rc == 0, "maintenance started before the restart: exit %d %r" % (rc, err))
    wait_for(lambda: None, 2)
    rc = stop_daemon(h, d, "SIGTERM during maintenance", timeout=10)
    d = h.daemon(cfg_path, speed=SPEED, extra=extra)
    st = wait_for(lambda: status(0.2), 15)
    h.check(st is not None and st["maintenance"] is True,
            "after the restart maintenance is still active (%s)" % (st or {}).get("maintenance"))
    h.check(level(st) == "raised", "after the restart pc-quick is still raised (%s)" % (st or {}).get("alerts"))
    wait_for(lambda: None, 3)
    t6 = station_now(status())
    rc, out, err = tarn("maintenance", "stop", "--socket", sock)
    t7 = station_now(status())
    h.check(rc == 0 and out.startswith("maintenance ended"), "tarn maintenance stop after the restart: exit %d, %r %r"
            % (rc, out, err))
    db = sqlite3.connect("file:%s?mode=ro" % h.path("state", "archive.db"), uri=True)
    periods = db.execute("SELECT start_t, end_t, note FROM maintenance ORDER BY id").fetchall()
    db.close()
    second = [p for p in periods if p[2] == NOTE2]
    h.check(len(second) == 1 and t4 <= second[0][0] <= t5 and second[0][1] is not None
            and t6 <= second[0][1] <= t7,
            "archive: the period started before the restart ends when stopped after it (%s; start in [%d, %d], "
            "end in [%d, %d])" % (second, t4, t5, t6, t7))
    h.check(all(p[1] is not None for p in periods), "archive: no period left open (%s)" % periods)

    # A window with evidence after the restart: still the one event.
    first_clean = t7 - t7 % 600 + 600
    wait_for(lambda: len(windows_after(first_clean)) >= 1, 30)
    pump(1.0)
    ev = alert_events()
    h.check(len(windows_after(first_clean)) >= 1 and len(ev) == 1,
            "after the restart and a window with evidence: still one alert event (%d: %s)"
            % (len(ev), [(s, a["rule_id"], a["level_name"]) for s, a in ev]))
    rc = stop_daemon(h, d, "final SIGTERM", timeout=10)
    pump(1.5)
    n, twice = windows_twice()
    h.check(n and not twice, "over the whole run, restart included, no window (start, channel) is in two "
            "packets (%d; %s)" % (n, twice[:3]))
    log = open(h.path("daemon.log")).read()
    raised = log.count("pc-quick: raised none -> raised")
    h.check(raised == 1, "the daemon logged the level change once (%d)" % raised)
finish(h)
