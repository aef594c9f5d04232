"""Shared pieces for the integration tests: real peers on loopback only.

Every process a test starts is registered with a Harness and stopped when
the test ends, also on failure. Nothing listens outside 127.0.0.1.
"""
import json
import os
import re
import select
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time

SOURCE_DIR = os.environ.get("TARN_SOURCE_DIR", os.path.join(os.path.dirname(__file__), "..", ".."))
TARN = os.environ.get("TARN_BIN", os.path.join(SOURCE_DIR, "build", "daemon", "tarn"))
sys.path.insert(0, os.path.join(SOURCE_DIR, "demo", "sim"))


def seq_of(payload):
    """Sequence number of a codec packet: varint at offset 5 (codec/FORMAT.md §2)."""
    v, shift = 0, 0
    for b in payload[5:15]:
        v |= (b & 0x7F) << shift
        shift += 7
        if not b & 0x80:
            return v
    return None


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def strip_comments(text):
    return re.sub(r"^\s*//.*$", "", text, flags=re.M)


class Harness:
    def __init__(self, name):
        self.dir = tempfile.mkdtemp(prefix="tarn-%s-" % name)
        self.procs = []
        self.failures = 0
        for d in ("dev", "state", "run"):
            os.makedirs(os.path.join(self.dir, d), exist_ok=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        for p in reversed(self.procs):
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
        for p in reversed(self.procs):
            try:
                p.wait(timeout=5)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
        if not exc[0] and not self.failures:
            shutil.rmtree(self.dir, ignore_errors=True)
        else:
            print("kept scratch directory %s" % self.dir)

    def path(self, *parts):
        return os.path.join(self.dir, *parts)

    def check(self, cond, what):
        print(("ok    " if cond else "FAIL  ") + what, flush=True)
        if not cond:
            self.failures += 1
        return cond

    def start(self, args, **kw):
        p = subprocess.Popen(args, **kw)
        self.procs.append(p)
        return p

    def mosquitto(self, extra=""):
        port = free_port()
        conf = self.path("mosquitto-%d.conf" % port)
        with open(conf, "w") as f:
            f.write("listener %d 127.0.0.1\npersistence false\n" % port)
            f.write(extra if extra else "allow_anonymous true\n")
        p = self.start(["mosquitto", "-c", conf], stdout=subprocess.DEVNULL,
                       stderr=open(self.path("mosquitto-%d.log" % port), "w"))
        deadline = time.time() + 5
        while time.time() < deadline:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
                return port, p
            except OSError:
                time.sleep(0.05)
        raise RuntimeError("mosquitto did not start on port %d" % port)

    def subscribe(self, port, topic="tarn/#", hex_payload=False):
        args = ["mosquitto_sub", "-h", "127.0.0.1", "-p", str(port), "-v", "-t", topic]
        if hex_payload:
            args += ["-F", "%t %x"]
        p = self.start(args, stdout=subprocess.PIPE)
        time.sleep(0.3)
        return p

    def write_config(self, cfg, name="station.json"):
        path = self.path(name)
        with open(path, "w") as f:
            json.dump(cfg, f, indent=2)
        return path

    def daemon(self, config_path, speed=60, env=None, extra=()):
        args = [TARN, "run", "--config", config_path, "--speed", str(speed)] + list(extra)
        if os.geteuid() == 0:
            args.append("--allow-root")
        e = dict(os.environ)
        e.pop("JOURNAL_STREAM", None)
        if env:
            e.update(env)
        log = open(self.path("daemon.log"), "a")
        return self.start(args, stdout=log, stderr=subprocess.STDOUT, env=e)


def read_lines(proc, seconds, until=None):
    """Reads what a subscriber printed for up to `seconds` (or until until(lines))."""
    lines, buf = [], ""
    deadline = time.time() + seconds
    fd = proc.stdout.fileno()
    while time.time() < deadline:
        r, _, _ = select.select([fd], [], [], 0.1)
        chunk = os.read(fd, 65536).decode("utf-8", "replace") if r else ""
        if chunk:
            buf += chunk
            *done, buf = buf.split("\n")
            lines += done
            if until and until(lines):
                break
        else:
            time.sleep(0.05)
    return lines


def demo_config(h, mqtt_port):
    text = open(os.path.join(SOURCE_DIR, "demo", "station.json")).read()
    text = text.replace("@DIR@", h.dir).replace("@MQTT_PORT@", str(mqtt_port))
    return json.loads(strip_comments(text))


def finish(h):
    if h.failures:
        print("%d check(s) failed" % h.failures)
        sys.exit(1)
    print("all checks passed")
