#!/usr/bin/python3
"""Clock steps during a run (issue 8, "Clock"): the station clock is stepped
back one hour, and in a second run forward one hour, while the daemon runs at
--speed 120 on the simulated instruments and publishes to a real mosquitto on
a free loopback port.

The step is the daemon's own test clock: the control request
`test-clock-step` (accepted only with --speed) shifts the wall time of the
daemon's clock and leaves its monotonic time alone, as a real step by NTP or
an operator would (daemon/cli/cmd_run.cpp).

Each packet that reaches the broker is decoded here with
codec/reference_decoder.py, the decoder written from codec/FORMAT.md alone
(it shares no code with the daemon's codec), so every window is tied to the
sequence number of the packet that carried it.

Checks, per direction:
  * after the step new windows DO arrive: at least two complete windows that
    start after the window open at the step, holding real samples. Catches a
    daemon that stalls after a step (a timer armed for an hour away, a
    pipeline that waits forever for time to pass its last sample);
  * no window (station, window start, channel) travels in two packets with
    different sequence numbers, and no sequence number carries two different
    packets. Catches a daemon that reopens an already closed window after a
    backward step and sends it again (with the new samples, i.e. different
    content), or closes a window twice on a forward step;
  * no overlapping windows: every window starts on a UTC multiple of 600 s,
    holds at most 10 slots of 60 s, and per channel the window starts rise
    strictly in sequence order (a window for a period already covered would
    overlap it);
  * the archive (archive.db, read-only) holds at most one sample per channel
    and time, and per channel its samples were written in rising time order:
    catches samples taken during the "repeated" hour being archived beside the
    ones already there;
  * the step is logged by the daemon's clock watch (the line "clock stepped
    backward|forward by N s", N about 3600), not only by the test request,
    and `tarn status --json` counts exactly one step;
  * SIGTERM afterwards still ends the daemon with exit 0.
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

from harness import SOURCE_DIR, TARN, Harness, control, demo_config, read_lines

sys.path.insert(0, os.path.join(SOURCE_DIR, "codec"))
import reference_decoder as ref  # noqa: E402

SPEED = 120
WINDOW_S, PERIOD_S = 600, 60
STATION = "hollin-buoy-1"


def iso_to_unix(text):
    return calendar.timegm(time.strptime(text, "%Y-%m-%dT%H:%M:%SZ"))


class Shore:
    """Decodes what reached the broker, packet by packet."""

    def __init__(self, manifest_path):
        self.manifests = {}
        h, m = ref.load_manifest(manifest_path)
        self.manifests[h] = m
        self.packets = {}        # seq -> payload bytes
        self.conflicts = []      # seqs seen with two different payloads
        self.order = []          # (seq, line index) of data packets in arrival order
        self.bad = []

    def feed(self, lines, first_index=0):
        for i, line in enumerate(lines, first_index):
            parts = line.split(" ")
            if len(parts) != 2:
                continue
            topic, payload = parts[0], bytes.fromhex(parts[1])
            kind = topic.rsplit("/", 1)[-1]
            if kind not in ("data", "manifest"):
                continue
            try:
                p = ref.decode(payload, self.manifests)
            except ref.Bad as e:
                self.bad.append("%s: %s" % (topic, e))
                continue
            if kind == "manifest":
                if "manifest" in p:
                    self.manifests[int(p["manifest_hash"], 16)] = p["manifest"]
                continue
            seq = p["sequence"]
            if seq in self.packets:
                if self.packets[seq][0] != payload:
                    self.conflicts.append(seq)
                continue
            self.packets[seq] = (payload, p, i)

    def windows(self):
        """(seq, line index, window start, channel name, slots, partial, content) for every window."""
        out = []
        for seq in sorted(self.packets):
            payload, p, index = self.packets[seq]
            m = self.manifests[int(p["manifest_hash"], 16)]
            for w in p["windows"]:
                for k, ch in enumerate(w["channels"]):
                    name = m["channels"][w["first_channel"] + k]["name"]
                    content = json.dumps({"partial": w["partial"], "slots": w["slots"], "flags": ch["flags"],
                                          "values": [None if v is None else round(v, 6) for v in ch["values"]],
                                          "reasons": ch.get("reasons")}, sort_keys=True)
                    out.append((seq, index, w["start"], name, w["slots"], w["partial"], ch, content))
        return out


def run(direction):
    step_s = -3600 if direction == "backward" else 3600
    with Harness("clock-%s" % direction) as h:
        port, _ = h.mosquitto()
        h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
                 "--dir", h.path("dev"), "--speed", str(SPEED)], stdout=subprocess.DEVNULL)
        time.sleep(1.0)
        cfg = demo_config(h, port)
        cfg_path = h.write_config(cfg)
        m = subprocess.run([TARN, "manifest", "--config", cfg_path], capture_output=True, text=True)
        with open(h.path("m.json"), "w") as f:
            f.write(m.stdout)
        shore = Shore(h.path("m.json"))
        sub = h.subscribe(port, topic="tarn/%s/#" % STATION, hex_payload=True)
        d = h.daemon(cfg_path, speed=SPEED)
        sock = h.path("run", "control.sock")

        # Before the step: the first (partial) window and one complete one.
        lines = read_lines(sub, 40, until=lambda ls: sum("/data " in l for l in ls) >= 2)
        shore.feed(lines)
        before = control(sock, {"command": "status"})
        h.check(before.get("clock", {}).get("steps") == 0, "%s: no clock step counted before the step (%s)"
                % (direction, before.get("clock")))
        t_before = iso_to_unix(before["now"])
        open_start = t_before - t_before % WINDOW_S          # the window open at the step
        after_step = t_before + step_s
        first_new = max(open_start, after_step - after_step % WINDOW_S) + WINDOW_S
        rep = control(sock, {"command": "test-clock-step", "seconds": step_s})
        h.check(rep.get("ok") is True, "%s: test clock stepped by %+d s (%s)" % (direction, step_s, rep))
        step_index = len(lines)

        # After the step: wait for two complete windows starting at or after
        # first_new. Backward at --speed 120: about 30 s until station time
        # passes the last sample again, then 5 s per window.
        def complete_new():
            return [w for w in shore.windows() if w[3] == "chla" and w[2] >= first_new and not w[5]
                    and any(f in (1, 2, 3) for f in w[6]["flags"])]

        deadline = time.time() + 80
        while time.time() < deadline and len(complete_new()) < 2:
            more = read_lines(sub, 2)
            shore.feed(more, len(lines))
            lines += more
        new = complete_new()
        h.check(len(new) >= 2, "%s: new complete windows with samples arrive after the step (%d, starting at or "
                "after %d; waited %.0f s)" % (direction, len(new), first_new, 80 - max(0, deadline - time.time())))

        after = control(sock, {"command": "status"})
        clock = after.get("clock", {})
        h.check(clock.get("steps") == 1 and clock.get("last_step"),
                "%s: status counts exactly one clock step (%s)" % (direction, clock))
        d.send_signal(signal.SIGTERM)
        try:
            rc = d.wait(timeout=10)
        except subprocess.TimeoutExpired:
            rc = None
        h.check(rc == 0, "%s: SIGTERM after the step: exit %s" % (direction, rc))
        more = read_lines(sub, 1.5)
        shore.feed(more, len(lines))
        lines += more

        # The shore's view.
        h.check(not shore.bad, "%s: every packet decodes with the reference decoder (%s)" % (direction, shore.bad[:3]))
        h.check(not shore.conflicts, "%s: no sequence number carries two different packets (%s)"
                % (direction, shore.conflicts[:5]))
        wins = shore.windows()
        by_key = collections.defaultdict(list)
        for seq, index, start, name, slots, partial, ch, content in wins:
            by_key[(STATION, start, name)].append((seq, content))
        twice = {k: v for k, v in by_key.items() if len(v) > 1}
        differ = [k for k, v in twice.items() if len({c for _, c in v}) > 1]
        h.check(wins and not twice, "%s: no window (station, start, channel) sent in two packets (%d windows, "
                "%d sent twice, %d of them with different content: %s)"
                % (direction, len(by_key), len(twice), len(differ), sorted(twice)[:3]))
        aligned = all(start % WINDOW_S == 0 and 1 <= slots <= WINDOW_S // PERIOD_S
                      for _, _, start, _, slots, _, _, _ in wins)
        h.check(aligned, "%s: every window starts on a UTC multiple of 600 s and spans at most 10 slots" % direction)
        rising = True
        last = {}
        for seq, index, start, name, *_ in sorted(wins, key=lambda w: (w[0], w[2], w[3])):
            if name in last and start <= last[name]:
                rising = False
                print("      %s: window %d of %s (seq %d) does not follow %d" % (direction, start, name, seq,
                                                                                last[name]))
            last[name] = start
        h.check(rising, "%s: per channel, window starts rise strictly with the sequence number (no overlap)"
                % direction)
        after_step_windows = sorted({start for seq, index, start, *_ in wins if index >= step_index})
        print("      %s: step at station time %d (window %d); windows published after the step: %s"
              % (direction, t_before, open_start, after_step_windows))

        # The archive: one sample per channel and time, written in time order.
        db = sqlite3.connect("file:%s?mode=ro" % h.path("state", "archive.db"), uri=True)
        rows = db.execute("SELECT channel, t FROM samples ORDER BY rowid").fetchall()
        db.close()
        seen, back = set(), 0
        dup = 0
        last_t = {}
        for ch, t in rows:
            dup += (ch, t) in seen
            seen.add((ch, t))
            back += ch in last_t and t <= last_t[ch]
            last_t[ch] = t
        h.check(rows and dup == 0 and back == 0, "%s: archive: %d samples, %d duplicated (channel, t), %d written "
                "out of time order" % (direction, len(rows), dup, back))

        log = open(h.path("daemon.log")).read()
        found = re.findall(r"clock stepped %s by (\d+) s" % direction, log)
        h.check(len(found) == 1 and abs(int(found[0]) - 3600) <= 5,
                "%s: the daemon's clock watch logged the step once (%s)" % (direction, found))
        return h.failures


failed = run("backward") + run("forward")
if failed:
    print("%d check(s) failed" % failed)
    sys.exit(1)
print("all checks passed")
