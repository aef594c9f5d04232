#!/usr/bin/python3
"""The walking skeleton end to end: a pty instrument, a real mosquitto on a
free loopback port, the daemon at --speed 60.

Checks: windows arrive on the broker; `tarn status` answers over the control
socket; SIGHUP with a broken config leaves the daemon running on the old one;
with JOURNAL_STREAM set every log line starts with an sd-daemon priority
prefix <N> (sd-daemon(3)); SIGTERM ends it with exit 0 within 2 s.
"""
import json
import os
import re
import signal
import subprocess
import time

from harness import TARN, Harness, demo_config, finish, read_lines

with Harness("lifecycle") as h:
    port, _ = h.mosquitto()
    sim = h.start(["/usr/bin/python3", os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..",
                                                     "demo", "sim", "station_sim.py"),
                   "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg_path = h.write_config(cfg)
    sub = h.subscribe(port, hex_payload=True)
    d = h.daemon(cfg_path, speed=60, env={"JOURNAL_STREAM": "8:12345"})
    lines = read_lines(sub, 45, until=lambda ls: sum(l.startswith("tarn/hollin-buoy-1/data ") for l in ls) >= 3)
    windows = [l for l in lines if l.startswith("tarn/hollin-buoy-1/data ")]
    h.check(len(windows) >= 3, "3 window packets reached the broker (%d)" % len(windows))
    h.check(any(l.startswith("tarn/hollin-buoy-1/status ") and bytes.fromhex(l.split()[1]).startswith(b"online")
                for l in lines), "retained status online")
    h.check(any(l.startswith("tarn/hollin-buoy-1/manifest ") for l in lines), "manifest packet published")
    # The shore decodes what arrived (tarn decode learns the manifest packet).
    feed = "\n".join(l for l in lines if l.split(" ")[0].rsplit("/", 1)[-1] in ("manifest", "data")) + "\n"
    r = subprocess.run([TARN, "decode", "--hex", "--records", "windows"], input=feed,
                       capture_output=True, text=True)
    recs = [json.loads(l) for l in r.stdout.splitlines() if l.startswith("{")]
    chla = [x for x in recs if x.get("ch") == "chla" and not x.get("partial")]
    h.check(r.returncode == 0 and chla, "the packets decode on the shore (%d, %s)" % (r.returncode, r.stderr[:200]))
    if chla:
        w = chla[-1]
        h.check(w["start"] % 600 == 0, "window start aligned to a UTC multiple of 600 s")
        h.check(w["slots"] == 10 and sum(w["counts"].values()) == 10, "10 slots, every one flagged (%s)" % w["counts"])
    r = subprocess.run([TARN, "status", "--json", "--config", cfg_path], capture_output=True, text=True)
    h.check(r.returncode == 0, "tarn status answers (%d %s)" % (r.returncode, r.stderr.strip()))
    if r.returncode == 0:
        st = json.loads(r.stdout)
        h.check(st["instruments"][0]["state"] == "online", "instrument online in status")
        h.check(st["link"]["state"] == "up", "link up in status")

    # SIGHUP with a broken config: refused, still running on the old one.
    broken = dict(cfg)
    broken["sampling"] = {"period_s": 60, "window_s": 650}
    with open(cfg_path, "w") as f:
        json.dump(broken, f)
    d.send_signal(signal.SIGHUP)
    time.sleep(2)
    h.check(d.poll() is None, "daemon still running after SIGHUP with a broken config")
    more = read_lines(sub, 25, until=lambda ls: sum("/data " in l for l in ls) >= 1)
    h.check(any("/data " in l for l in more), "windows keep arriving on the old config")
    r = subprocess.run([TARN, "status", "--json", "--socket", h.path("run", "control.sock")],
                       capture_output=True, text=True)
    h.check(r.returncode == 0 and json.loads(r.stdout)["window"]["length_s"] == 600,
            "status still shows the old 600 s windows")

    # SIGHUP with a valid changed config: applied.
    good = dict(cfg)
    good["log"] = {"level": "debug"}
    with open(cfg_path, "w") as f:
        json.dump(good, f)
    d.send_signal(signal.SIGHUP)
    after_log = read_lines(sub, 4, until=lambda ls: any("/data " in l for l in ls))
    h.check(d.poll() is None, "daemon running after SIGHUP with a valid config")
    # The uplink section did not change: the link stays up, so the broker sees
    # no new status (a reconnect publishes offline, then online, retained).
    statuses = [l for l in after_log if l.startswith("tarn/hollin-buoy-1/status ")]
    log = open(h.path("daemon.log")).read()
    h.check(not statuses and "link unchanged by the new config" in log
            and log.count("uplink: connected to") == 1,
            "a reload that leaves the uplink as it was keeps the link: no status change on the "
            "broker (%s), logged, one connection" % statuses[:2])

    # SIGHUP with a changed uplink (keepalive): the link is rebuilt.
    relink = json.loads(json.dumps(good))
    relink["uplink"]["options"]["keepalive_s"] = 45
    with open(cfg_path, "w") as f:
        json.dump(relink, f)
    d.send_signal(signal.SIGHUP)
    after_relink = read_lines(sub, 15, until=lambda ls: any(
        l.startswith("tarn/hollin-buoy-1/status ") and bytes.fromhex(l.split()[1]).startswith(b"online")
        for l in ls))
    said = [bytes.fromhex(l.split()[1]).split(b" ")[0].decode() for l in after_relink
            if l.startswith("tarn/hollin-buoy-1/status ")]
    h.check(said[-2:] == ["offline", "online"],
            "a reload with a changed uplink reconnects: status offline, then online (%s)" % said)
    more += after_log + after_relink

    t0 = time.time()
    d.send_signal(signal.SIGTERM)
    try:
        rc = d.wait(timeout=5)
    except subprocess.TimeoutExpired:
        rc = None
    took = time.time() - t0
    h.check(rc == 0 and took <= 2.0, "SIGTERM: exit %s within %.2f s (limit 2 s)" % (rc, took))
    # The open window was closed, marked partial and handed on before the exit.
    tail = read_lines(sub, 3)
    feed = "\n".join(l for l in lines + more + tail
                     if l.split(" ")[0].rsplit("/", 1)[-1] in ("manifest", "data")) + "\n"
    r = subprocess.run([TARN, "decode", "--hex", "--records", "windows"], input=feed,
                       capture_output=True, text=True)
    recs = [json.loads(l) for l in r.stdout.splitlines() if l.startswith("{")]
    last_start = max((x["start"] for x in recs if x.get("ch") == "chla"), default=None)
    last = [x for x in recs if x.get("ch") == "chla" and x["start"] == last_start]
    h.check(bool(last) and last[0].get("partial") is True,
            "the window open at SIGTERM reached the broker, marked partial (%s)" % (last[:1],))
    log = open(h.path("daemon.log")).read().splitlines()
    bad = [l for l in log if not re.match(r"^<[0-7]>", l)]
    h.check(log and not bad, "every journal log line starts with <N> (%d lines, bad: %s)" % (len(log), bad[:2]))
    h.check(any("new config refused" in l for l in log), "the refused config is logged")
    h.check(any(l.startswith("<3>") and "/sampling/window_s" in l for l in log),
            "the problem is logged at error priority with its pointer")
    h.check(not any(re.search(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d", l) for l in log),
            "no timestamps in journal mode")
finish(h)
