#!/usr/bin/python3
"""Power cuts: the daemon runs on simulated instruments at --speed and is
killed with SIGKILL at 50 random moments (while sampling, closing windows,
inserting, marking sent), each time restarted on the same station timeline
(--speed-origin). A real mosquitto takes what the link delivers.

At the end: PRAGMA integrity_check is ok on both databases; every window that
closed before a kill is in the outbox (sent or unsent); no sequence number was
used for two different packets (neither in the outbox nor on the broker); the
archive holds every poll slot of every channel except at most one per kill
(the sample being read) and the slots the daemon was down for. Counts are
printed.
"""
import hashlib
import os
import random
import signal
import sqlite3
import subprocess
import time

from harness import Harness, demo_config, finish, read_lines, seq_of, wait_ready

KILLS = int(os.environ.get("TARN_POWER_CUTS", "50"))
SPEED = 60  # a 600 s window closes every 10 s; a restart (< 1 s real) spans at most one poll slot
random.seed(20261201)


with Harness("powercut") as h:
    port, _ = h.mosquitto()
    here = os.path.dirname(os.path.abspath(__file__))
    h.start(["/usr/bin/python3", os.path.join(here, "..", "..", "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", str(SPEED)], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg["log"] = {"level": "warn"}
    cfg_path = h.write_config(cfg)
    sub = h.subscribe(port, topic="tarn/hollin-buoy-1/+", hex_payload=True)
    origin = int(time.time())
    extra = ["--speed-origin", str(origin)]
    downtime_station_s = 0.0
    down_slots = 0
    kill_times = []
    d = h.daemon(cfg_path, speed=SPEED, extra=extra)
    time.sleep(4)
    for i in range(KILLS):
        time.sleep(random.uniform(0.3, 2.5))
        d.send_signal(signal.SIGKILL)
        d.wait()
        t_kill = time.time()
        kill_times.append(origin + (t_kill - origin) * SPEED)
        h.procs.remove(d)
        d = h.daemon(cfg_path, speed=SPEED, extra=extra)
        wait_ready(h.path("run", "control.sock"))
        gap = (time.time() - t_kill) * SPEED
        downtime_station_s += gap
        down_slots += int(gap // 60) + 1
    time.sleep(4)
    d.send_signal(signal.SIGTERM)
    rc = d.wait(timeout=10)
    end_station = origin + (time.time() - origin) * SPEED
    h.check(rc == 0, "final orderly stop exits 0 (%s)" % rc)
    received = read_lines(sub, 2)

    out = sqlite3.connect(h.path("state", "outbox.db"))
    arc = sqlite3.connect(h.path("state", "archive.db"))
    h.check(out.execute("PRAGMA integrity_check").fetchone()[0] == "ok", "outbox integrity_check ok")
    h.check(arc.execute("PRAGMA integrity_check").fetchone()[0] == "ok", "archive integrity_check ok")

    rows = out.execute("SELECT seq, kind, created_t, bytes, sent_t FROM packets").fetchall()
    seq_content = {}
    dup_content = 0
    for seq, kind, created, blob, sent in rows:
        if seq_of(blob) != seq:
            dup_content += 1
        seq_content[seq] = hashlib.sha256(blob).hexdigest()
    on_broker, broker_dups, broker_conflicts = {}, 0, 0
    for line in received:
        parts = line.split(" ")
        if len(parts) != 2 or not parts[0].endswith(("/data", "/alert", "/manifest")):
            continue
        blob = bytes.fromhex(parts[1])
        s, hsh = seq_of(blob), hashlib.sha256(blob).hexdigest()
        if s in on_broker:
            broker_dups += 1
            broker_conflicts += on_broker[s] != hsh
        on_broker[s] = hsh
        if s in seq_content and seq_content[s] != hsh:
            broker_conflicts += 1
    h.check(dup_content == 0, "every stored packet carries its own sequence number")
    h.check(broker_conflicts == 0, "no sequence number used for two different packets (%d conflicts)" % broker_conflicts)

    # Every window that closed before the last kill is in the outbox.
    ends = sorted(c for s, k, c, b, st in rows if k == 1)
    first_end = ends[0] if ends else 0
    expected = set(range(first_end, int(max(kill_times)) - 600 - 60, 600))
    missing_windows = sorted(expected - set(ends))
    h.check(ends and not missing_windows,
            "every window closed before a kill is in the outbox (%d windows, missing %s)" % (len(ends), missing_windows[:5]))

    # Archive: every poll slot per channel, except one per kill and the downtime.
    chans = dict(arc.execute("SELECT id, name FROM channels").fetchall())
    t_first = arc.execute("SELECT MIN(t) FROM samples").fetchone()[0]
    t_last = arc.execute("SELECT MAX(t) FROM samples").fetchone()[0]
    slots = (t_last - t_first) // 60 + 1
    worst = 0
    for cid, name in chans.items():
        n = arc.execute("SELECT COUNT(DISTINCT t) FROM samples WHERE channel=?", (cid,)).fetchone()[0]
        worst = max(worst, slots - n)
    allowed = KILLS + down_slots
    sent = sum(1 for r in rows if r[4] is not None)
    print("power cuts: %d kills; %d packets in the outbox (%d acknowledged); %d distinct sequences on the broker, "
          "%d duplicates delivered; %d poll slots per channel, at most %d missing (allowed %d: one per kill "
          "plus the %d slots of %.0f s downtime)" % (KILLS, len(rows), sent, len(on_broker), broker_dups, slots, worst,
                                       allowed, down_slots, downtime_station_s))
    h.check(worst <= allowed, "archive misses at most one sample per kill plus downtime (%d <= %d)" % (worst, allowed))
    # The restart replays the open window from the archive; a replayed sample the
    # pipeline settles again must not be archived a second time.
    twice = arc.execute("SELECT COUNT(*) FROM (SELECT t, channel FROM samples GROUP BY t, channel "
                        "HAVING COUNT(*) > 1)").fetchone()[0]
    h.check(twice == 0, "the archive has each (poll time, channel) once across the kills (%d twice)" % twice)
    h.check(len(on_broker) > 0, "packets reached the broker across the kills")
    acked = {r[0] for r in rows if r[4] is not None}
    lost = sorted(acked - set(on_broker))
    h.check(not lost, "every acknowledged packet reached the broker at least once (missing %s)" % lost[:5])
finish(h)
