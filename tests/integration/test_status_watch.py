#!/usr/bin/python3
"""`tarn status --watch` in an 80x24 tmux session (its own tmux server, on a
socket in the scratch directory) against a running daemon on the simulated
instruments and a real mosquitto on a free loopback port (issue 8, "Live
view").

The screen is compared with what the daemon itself reports: while the view
runs, the test asks the control socket for the status JSON every 0.2 s (the
same reply `tarn status --json` prints), and every value on the screen must
equal the rendering of one of those replies.

Checks:
  * the frame fits an 80x24 terminal: at most 24 rows, none wider than 80
    columns (tmux capture with wrapped lines joined, so an overlong line
    shows), and the frame's first line is the top row (a frame of more than
    24 lines would have scrolled it away); the plain-text frames printed when
    stdout is not a terminal obey the same limits;
  * the header names the station and the clock sync state of the JSON;
  * every instrument of the demo config has a row whose STATE word equals the
    JSON's state for it, and that state is "online" (the simulator answers);
  * every channel of the demo config has a row with its config unit (UCUM
    code), a QARTOD flag digit (1, 2, 3, 4 or 9; IOOS QARTOD flag scheme) in
    the FLAG column, and value, flag and window counts equal to one JSON reply;
  * the ALERT LEVEL text equals the JSON's alert levels; the config adds a
    rule "pc-quick" with a threshold far below the simulated phycocyanin, so
    the screen must show a raised level, not the default "none";
  * the LINK line's backend and state word equal the JSON's, and it is "up";
    the bytes sent today lie within the JSON's values during the capture, and
    the budget is shown as the JSON has it ("no budget" when it is 0);
  * plain text (no escape sequences), redrawn, when stdout is not a terminal;
  * health packets arrive on the health topic at the configured interval and
    carry free disk space.
The clock-step checks are in test_clock_step.py.
"""
import json
import os
import re
import signal
import subprocess
import threading
import time
import unicodedata

from harness import SOURCE_DIR, TARN, Harness, control, demo_config, finish, read_lines, stop_daemon

STATION = "hollin-buoy-1"
FLAGS = {"1", "2", "3", "4", "9"}  # IOOS QARTOD flag values (QARTOD manuals, flag table)


def width(text):
    """Terminal columns of a line (East Asian wide and full-width characters take two)."""
    n = 0
    for c in text:
        if unicodedata.combining(c):
            continue
        n += 2 if unicodedata.east_asian_width(c) in ("W", "F") else 1
    return n


def alert_text(st):
    return ", ".join("%s %s" % (a["rule"], a["level"]) for a in st.get("alerts", [])) or "no rules"


def channel_cells(c):
    v = c.get("value")
    w = c.get("window", {})
    counts = "/".join(str(w.get(k)) for k in ("pass", "not_evaluated", "suspect", "fail", "missing"))
    return ("%.3f" % v if isinstance(v, (int, float)) else "-", str(c.get("flag")), counts)


class Snapshots(threading.Thread):
    def __init__(self, sock):
        super().__init__(daemon=True)
        self.sock, self.list, self.stop = sock, [], threading.Event()

    def run(self):
        while not self.stop.is_set():
            try:
                self.list.append(control(self.sock, {"command": "status"}))
            except (OSError, ValueError):
                pass
            time.sleep(0.2)


def columns(header, names):
    """Start column of each header label, and where the next one starts."""
    starts = [header.index(n) for n in names]
    return list(zip(starts, starts[1:] + [None]))


with Harness("watch") as h:
    port, _ = h.mosquitto()
    h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg["health"] = {"interval_s": 60}  # one health packet a minute of station time
    # A second rule that is raised by the first window: the demo's phycocyanin
    # is about 0.6 ug/L, far above 0.1 (test value, invented).
    cfg["alerts"]["rules"].append({"name": "pc-quick", "channel": "pc", "statistic": "mean",
                                   "levels": [{"name": "raised", "threshold": 0.1}],
                                   "raise_windows": 1, "clear_windows": 1, "min_count": 1})
    cfg_path = h.write_config(cfg)
    units = {c["name"]: c["unit"] for i in cfg["instruments"] for c in i["channels"]}
    instruments = [i["name"] for i in cfg["instruments"]]
    health = h.subscribe(port, topic="tarn/%s/health" % STATION, hex_payload=True)
    d = h.daemon(cfg_path, speed=60)
    sock = h.path("run", "control.sock")

    # Wait until the station is in the state the screen must show.
    st, deadline = None, time.time() + 45
    while time.time() < deadline:
        try:
            st = control(sock, {"command": "status"})
        except (OSError, ValueError):
            st = None
        if st and dict((a["rule"], a["level"]) for a in st["alerts"]).get("pc-quick") == "raised" \
                and st["link"]["state"] == "up" and all(i["state"] == "online" for i in st["instruments"]):
            break
        time.sleep(0.5)
    h.check(st and dict((a["rule"], a["level"]) for a in st["alerts"]).get("pc-quick") == "raised",
            "status JSON: the pc-quick level is raised before the screen is read (%s)" % (st or {}).get("alerts"))

    snaps = Snapshots(sock)
    snaps.start()
    tmux = ["tmux", "-S", h.path("tmux.sock")]
    env = dict(os.environ, LANG="C.UTF-8")
    try:
        subprocess.run(tmux + ["new-session", "-d", "-s", "watch", "-x", "80", "-y", "24",
                               "%s status --watch --interval 1 --socket %s" % (TARN, sock)], check=True, env=env)
        time.sleep(4)
        screen = subprocess.run(tmux + ["capture-pane", "-p", "-J", "-t", "watch"], capture_output=True,
                                text=True, env=env).stdout
        time.sleep(0.3)
    finally:
        snaps.stop.set()
        subprocess.run(tmux + ["kill-server"], capture_output=True)
    snaps.join(timeout=10)
    seen = snaps.list
    with open(h.path("screen.txt"), "w") as f:
        f.write(screen)
    print(screen)
    h.check(len(seen) >= 5, "status JSON read %d times while the view ran" % len(seen))

    rows = screen.rstrip("\n").split("\n")
    while rows and not rows[-1].strip():
        rows.pop()
    wide = [r for r in rows if width(r) > 80]
    h.check(len(rows) <= 24 and not wide,
            "fits 80x24 (%d rows, %d wider than 80: %s)" % (len(rows), len(wide), wide[:1]))
    h.check(rows and rows[0].startswith(STATION + " "), "the frame's first line is the top row (%r)" % rows[:1])
    header = rows[0] if rows else ""
    m = re.search(r"clock (.+)$", header)
    h.check(m and any(m.group(1).strip() == s["health"]["clock"] for s in seen),
            "header clock state equals the JSON's (%r)" % (m.group(1) if m else None))

    # Instruments: name and state word.
    ih = next((i for i, r in enumerate(rows) if r.startswith("INSTRUMENT ")), None)
    h.check(ih is not None, "instrument table header present")
    if ih is not None:
        (s0, s1), = columns(rows[ih], ["STATE", "POLLS"])[:1]
        for name in instruments:
            row = next((r for r in rows[ih + 1:] if r.split(" ")[0] == name), None)
            state = row[s0:s1].strip() if row else None
            json_states = {i["state"] for s in seen for i in s["instruments"] if i["name"] == name}
            h.check(row is not None and state in json_states and json_states == {"online"},
                    "instrument %s: state word %r equals the JSON's %s" % (name, state, sorted(json_states)))

    # Channels: unit, flag digit in the FLAG column, value/flag/counts from one reply.
    ch_h = next((i for i, r in enumerate(rows) if r.startswith("CHANNEL ")), None)
    h.check(ch_h is not None, "channel table header present")
    if ch_h is not None:
        cols = columns(rows[ch_h], ["VALUE", "UNIT", "FLAG", "WINDOW", "LAST"])
        for name, unit in units.items():
            row = next((r for r in rows[ch_h + 1:] if r.split(" ")[0] == name), None)
            if not h.check(row is not None, "channel %s has a row" % name):
                continue
            value, u, flag, window = (row[a:b].strip() for a, b in cols[:4])
            window = window.split(" ")[0]
            h.check(u == unit, "channel %s: unit %r is the config's %r" % (name, u, unit))
            h.check(flag in FLAGS, "channel %s: FLAG column holds a QARTOD flag digit (%r)" % (name, flag))
            candidates = {channel_cells(c) for s in seen for c in s["channels"] if c["name"] == name}
            h.check((value, flag, window) in candidates and re.match(r"^-?\d+\.\d{3}$", value),
                    "channel %s: value %s, flag %s, window %s equal one JSON reply" % (name, value, flag, window))

    # Alert level and link state.
    row = next((r for r in rows if r.startswith("ALERT LEVEL")), "")
    text = row[len("ALERT LEVEL"):].replace("MAINTENANCE ACTIVE", "").strip()
    h.check(text in {alert_text(s) for s in seen} and "pc-quick raised" in text,
            "alert level text %r equals the JSON's (%s)" % (text, alert_text(seen[-1]) if seen else None))
    row = next((r for r in rows if r.startswith("LINK ")), "")
    m = re.match(r"^LINK\s+(\S+) (\S+),", row)
    h.check(m and any((m.group(1), m.group(2)) == (s["link"]["backend"], s["link"]["state"]) for s in seen)
            and m.group(2) == "up", "link %r equals the JSON's backend and state, up" % ((m.groups() if m else row),))

    # Bytes sent today against the budget (0 in the JSON means no budget:
    # daemon/uplink/link_policy.h); usage only grows within a day.
    row = next((r for r in rows if " B today" in r), "")
    m = re.search(r"(\d+) B today(.*)$", row)
    usage = [s["link"]["policy"]["usage_today_bytes"] for s in seen]
    budgets = {s["link"]["policy"]["daily_budget_bytes"] for s in seen}
    if m and budgets == {0}:
        budget_ok = "no budget" in m.group(2)
    elif m and len(budgets) == 1:
        budget_ok = str(budgets.pop()) in m.group(2)
    else:
        budget_ok = False
    h.check(m and usage and min(usage) <= int(m.group(1)) <= max(usage) and budget_ok,
            "bytes today %s within the JSON's %s..%s, budget shown as the JSON's (%r)"
            % (m.group(1) if m else None, min(usage or [None]), max(usage or [None]), row.strip()))

    # Plain text when not a terminal: the same frame again and again.
    p = subprocess.Popen([TARN, "status", "--watch", "--interval", "1", "--socket", sock],
                         stdout=subprocess.PIPE, text=True)
    out = read_lines(p, 10, until=lambda ls: sum(l.startswith(STATION + " ") for l in ls) >= 3)
    p.terminate()
    p.wait(timeout=5)
    frames, cur = [], []
    for line in out:
        if line.startswith(STATION + " ") and cur:
            frames.append(cur)
            cur = []
        cur.append(line)
    if cur:
        frames.append(cur)
    frames = frames[:-1]  # the last one may be cut short by the read
    plain = "\n".join(out)
    h.check(len(frames) >= 2 and "\x1b[" not in plain,
            "plain text, redrawn, when not a terminal (%d complete frames, escape sequences: %s)"
            % (len(frames), "\x1b[" in plain))
    bad = [f for f in frames if len([l for l in f if l.strip()]) > 24 or any(width(l) > 80 for l in f)]
    h.check(frames and not bad, "every plain frame has at most 24 lines of at most 80 columns (%d too big)" % len(bad))

    # Health packets: published at the configured interval, decodable ashore.
    m = subprocess.run([TARN, "manifest", "--config", cfg_path], capture_output=True, text=True)
    with open(h.path("m.json"), "w") as f:
        f.write(m.stdout)
    # At least 10 are due by now on a slow machine too; wait up to 20 s for them.
    hl = read_lines(health, 20, until=lambda ls: len([l for l in ls if l.strip()]) >= 10)
    r = subprocess.run([TARN, "decode", "--manifest", h.path("m.json"), "--hex"], input="\n".join(hl) + "\n",
                       capture_output=True, text=True)
    recs = [json.loads(l)["health"] for l in r.stdout.splitlines() if l.startswith('{"health"')]
    h.check(len(recs) >= 10, "health packets arrive at the configured interval (%d)" % len(recs))
    h.check(recs and recs[-1].get("disk_free_mib") is not None, "health packet carries free disk (%s)" % recs[-1:])

    # A reload applies a new health interval (60 -> 600 station s): over the next
    # 13 real seconds (780 station s) one or two health packets, not about 13.
    # What arrives in the first half second may still be on the old timer.
    cfg["health"] = {"interval_s": 600}
    h.write_config(cfg)
    read_lines(health, 0.5)  # what arrived before the reload
    d.send_signal(signal.SIGHUP)
    read_lines(health, 0.5)
    after = [l for l in read_lines(health, 13) if l.strip()]
    h.check(d.poll() is None and 1 <= len(after) <= 2,
            "a reload applies the new health interval (%d packets in 780 station s at 600 s)" % len(after))
    stop_daemon(h, d)
finish(h)
