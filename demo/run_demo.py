#!/usr/bin/python3
"""The demo: the invented station hollin-buoy-1 on Lake Hollin, end to end.

Starts a real mosquitto on a free loopback port, the simulated instruments on
pseudo-terminals, the daemon at --speed 60 (a 10-minute window closes every
10 s), and a subscriber that prints what reaches the broker. Stops by itself
after enough windows (or 150 s) and leaves no process behind.
"""
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
SPEED = 120
WANT_WINDOWS = 28
LIMIT_S = 160


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def show_shore(line):
    """One compact line per decoded window of the pigment channels; alerts in full."""
    try:
        rec = json.loads(line)
    except ValueError:
        return
    if "alert" in rec:
        print("shore: ALERT " + json.dumps(rec["alert"]), flush=True)
        return
    if rec.get("ch") not in ("chla", "pc"):
        return
    c = rec.get("counts", {})
    mean = rec.get("mean")
    print("shore: window %s %-4s mean %-7s flags pass %s / not evaluated %s / suspect %s / fail %s / missing %s%s"
          % (time.strftime("%H:%M", time.gmtime(rec["start"])), rec["ch"],
             "-" if mean is None else "%.2f" % mean, c.get("1"), c.get("2"), c.get("3"), c.get("4"),
             c.get("9"), "  (partial)" if rec.get("partial") else ""), flush=True)


def main():
    tarn = sys.argv[1] if len(sys.argv) > 1 else os.path.join(HERE, "..", "build", "daemon", "tarn")
    work = tempfile.mkdtemp(prefix="tarn-demo-")
    procs = []

    def cleanup():
        for p in reversed(procs):
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
        for p in reversed(procs):
            try:
                p.wait(timeout=5)
            except subprocess.TimeoutExpired:
                p.kill()
        shutil.rmtree(work, ignore_errors=True)

    signal.signal(signal.SIGTERM, lambda *a: sys.exit(1))
    try:
        port = free_port()
        for d in ("dev", "state", "run"):
            os.makedirs(os.path.join(work, d))
        with open(os.path.join(work, "mosquitto.conf"), "w") as f:
            f.write("listener %d 127.0.0.1\nallow_anonymous true\npersistence false\n" % port)
        procs.append(subprocess.Popen(["mosquitto", "-c", os.path.join(work, "mosquitto.conf")],
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        cfg = open(os.path.join(HERE, "station.json")).read()
        cfg = cfg.replace("@DIR@", work).replace("@MQTT_PORT@", str(port))
        cfg_path = os.path.join(work, "station.json")
        with open(cfg_path, "w") as f:
            f.write(cfg)
        procs.append(subprocess.Popen([sys.executable, os.path.join(HERE, "sim", "station_sim.py"),
                                       "--dir", os.path.join(work, "dev"), "--speed", str(SPEED), "--story-hours", "4.5"]))
        time.sleep(1.0)
        print("== tarn check", flush=True)
        subprocess.run([tarn, "check", "--config", cfg_path], check=True)
        # The shore side: a subscriber printing each payload in hex, and
        # `tarn decode` turning the packets back into windows (it learns the
        # channel manifest from the manifest packet the station sends first).
        sub = subprocess.Popen(["mosquitto_sub", "-h", "127.0.0.1", "-p", str(port), "-t",
                                "tarn/#", "-F", "%t %x"], stdout=subprocess.PIPE, text=True)
        procs.append(sub)
        decoder = subprocess.Popen([tarn, "decode", "--hex", "--records", "windows"],
                                   stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        procs.append(decoder)
        os.set_blocking(decoder.stdout.fileno(), False)
        print("== tarn run --speed %d (one 10-minute window every %d s)" % (SPEED, 600 // SPEED),
              flush=True)
        run_args = [tarn, "run", "--config", cfg_path, "--speed", str(SPEED)]
        if os.geteuid() == 0:
            run_args.append("--allow-root")
        daemon = subprocess.Popen(run_args)
        procs.insert(2, daemon)
        windows = 0
        status_shown = False
        deadline = time.time() + LIMIT_S
        os.set_blocking(sub.stdout.fileno(), False)
        while time.time() < deadline and windows < WANT_WINDOWS:
            line = sub.stdout.readline()
            if not line:
                time.sleep(0.1)
                continue
            topic, _, payload = line.rstrip().partition(" ")
            if topic.endswith("/status"):
                print("broker: %s %s" % (topic, bytes.fromhex(payload).decode(errors="replace")), flush=True)
                continue
            print("broker: %-28s %4d bytes" % (topic, len(payload) // 2), flush=True)
            if topic.split("/")[-1] in ("data", "alert", "manifest"):
                decoder.stdin.write(payload + "\n")
                decoder.stdin.flush()
            if topic == "tarn/hollin-buoy-1/data":
                windows += 1
            time.sleep(0.3)
            for out in iter(decoder.stdout.readline, ""):
                show_shore(out)
            if windows == 14 and not status_shown:
                status_shown = True
                print("== tarn status", flush=True)
                subprocess.run([tarn, "status", "--config", cfg_path])
        print("== tarn status (end)", flush=True)
        subprocess.run([tarn, "status", "--config", cfg_path])
        print("== stopping the daemon (SIGTERM)", flush=True)
        daemon.send_signal(signal.SIGTERM)
        rc = daemon.wait(timeout=10)
        print("== %d windows reached the broker; daemon exit code %d" % (windows, rc), flush=True)
        return 0 if windows >= 5 and rc == 0 else 1
    finally:
        cleanup()


if __name__ == "__main__":
    sys.exit(main())
