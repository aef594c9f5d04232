#!/usr/bin/python3
"""`tarn status --watch` in an 80x24 tmux session against a running daemon on
the simulated instruments; then the station clock is stepped back one hour
(test clock, --speed only) and no window may reach the broker twice with
different content, and the step must be logged.
"""
import collections
import json
import os
import subprocess
import time

from harness import TARN, Harness, demo_config, finish, read_lines

with Harness("watch") as h:
    port, _ = h.mosquitto()
    here = os.path.dirname(os.path.abspath(__file__))
    h.start(["/usr/bin/python3", os.path.join(here, "..", "..", "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg["health"] = {"interval_s": 60}  # one health packet a minute of station time
    cfg_path = h.write_config(cfg)
    health = h.subscribe(port, topic="tarn/hollin-buoy-1/health", hex_payload=True)
    sub = h.subscribe(port, topic="tarn/hollin-buoy-1/data", hex_payload=True)
    d = h.daemon(cfg_path, speed=60)
    lines = read_lines(sub, 40, until=lambda ls: len(ls) >= 2)
    sock = h.path("run", "control.sock")
    session = "tarn-watch-%d" % os.getpid()
    subprocess.run(["tmux", "new-session", "-d", "-s", session, "-x", "80", "-y", "24",
                    "%s status --watch --interval 1 --socket %s" % (TARN, sock)], check=True)
    time.sleep(4)
    screen = subprocess.run(["tmux", "capture-pane", "-p", "-t", session], capture_output=True,
                            text=True).stdout
    subprocess.run(["tmux", "kill-session", "-t", session])
    with open(h.path("screen.txt"), "w") as f:
        f.write(screen)
    print(screen)
    rows = screen.rstrip("\n").split("\n")
    h.check(len(rows) <= 24 and all(len(r) <= 80 for r in rows), "fits 80x24 (%d rows)" % len(rows))
    for word in ("fluorometer", "chain", "probe", "chla", "pc", "temp_0m5", "FLAG", "WINDOW 1/2/3/4/9",
                 "ALERT LEVEL", "cyanobacteria", "LINK", "mqtt up", "OUTBOX", "clock"):
        h.check(word in screen, "screen shows %s" % word)
    # Plain text when not a terminal.
    p = subprocess.Popen([TARN, "status", "--watch", "--interval", "1", "--socket", sock],
                         stdout=subprocess.PIPE, text=True)
    time.sleep(2.5)
    p.terminate()
    text = p.communicate(timeout=5)[0]
    h.check("\x1b[" not in text and text.count("ALERT LEVEL") >= 2, "plain text, redrawn, when not a terminal")

    # Clock stepped back one hour.
    r = subprocess.run([TARN, "status", "--json", "--socket", sock], capture_output=True, text=True)
    req = json.dumps({"command": "test-clock-step", "seconds": -3600})
    out = subprocess.run(["/usr/bin/python3", "-c",
                          "import socket,sys;s=socket.socket(socket.AF_UNIX);s.connect(sys.argv[1]);"
                          "s.sendall(sys.argv[2].encode()+b'\\n');print(s.recv(4096).decode())", sock, req],
                         capture_output=True, text=True)
    h.check('"ok":true' in out.stdout.replace(" ", ""), "test clock stepped back 3600 s (%s)" % out.stdout.strip())
    lines += read_lines(sub, 30, until=lambda ls: len(ls) >= 3)
    d.terminate()
    d.wait(timeout=10)
    lines += read_lines(sub, 1)
    # Decode and compare windows by start.
    feed = "\n".join(lines) + "\n"
    subprocess.run([TARN, "manifest", "--config", cfg_path, "--hex"], capture_output=True, text=True)
    m = subprocess.run([TARN, "manifest", "--config", cfg_path], capture_output=True, text=True)
    with open(h.path("m.json"), "w") as f:
        f.write(m.stdout)
    r = subprocess.run([TARN, "decode", "--manifest", h.path("m.json"), "--hex", "--records", "windows"],
                       input=feed, capture_output=True, text=True)
    seen = collections.defaultdict(set)
    for l in r.stdout.splitlines():
        rec = json.loads(l)
        if "ch" in rec:
            seen[(rec["start"], rec["ch"])].add(json.dumps(rec, sort_keys=True))
    conflicts = [k for k, v in seen.items() if len(v) > 1]
    h.check(seen and not conflicts, "no window sent twice with different content (%d windows, %d conflicts)"
            % (len(seen), len(conflicts)))
    log = open(h.path("daemon.log")).read()
    h.check("clock stepped backward" in log, "the clock step is logged")
    # Health packets: published at the configured interval, decodable ashore.
    hl = read_lines(health, 1)
    r = subprocess.run([TARN, "decode", "--manifest", h.path("m.json"), "--hex"], input="\n".join(hl) + "\n",
                       capture_output=True, text=True)
    recs = [json.loads(l)["health"] for l in r.stdout.splitlines() if l.startswith('{"health"')]
    h.check(len(recs) >= 10, "health packets arrive at the configured interval (%d)" % len(recs))
    h.check(recs and recs[-1].get("disk_free_mib") is not None, "health packet carries free disk (%s)" % recs[-1:])
finish(h)
