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
import sqlite3
import tempfile
import threading
import time

SOURCE_DIR = os.environ.get("TARN_SOURCE_DIR", os.path.join(os.path.dirname(__file__), "..", ".."))
TARN = os.environ.get("TARN_BIN", os.path.join(SOURCE_DIR, "build", "daemon", "tarn"))
sys.path.insert(0, os.path.join(SOURCE_DIR, "demo", "sim"))
sys.path.insert(0, os.path.join(SOURCE_DIR, "codec"))
from reference_decoder import sequence_of  # noqa: E402


def seq_of(payload):
    """Sequence number of a codec packet (codec/FORMAT.md §2), read by the
    reference decoder written from FORMAT.md alone."""
    return sequence_of(payload)


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
        self.failed = []
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
            self.failed.append(what)
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

    def persistent_mosquitto(self, extra=""):
        """A mosquitto that keeps sessions and queued QoS 1 messages across a
        restart (persistence on, no queue limit). Returns (port, process, conf);
        restart_mosquitto(conf, port) starts it again on the same port."""
        port = free_port()
        store = self.path("mosquitto-%d.d" % port)
        os.makedirs(store)
        # mosquitto started as root drops to its own user: let it write its store.
        os.chmod(self.dir, 0o755)
        os.chmod(store, 0o777)
        conf = self.path("mosquitto-%d.conf" % port)
        with open(conf, "w") as f:
            f.write("listener %d 127.0.0.1\npersistence true\npersistence_location %s/\n"
                    "max_queued_messages 0\n" % (port, store))
            f.write(extra if extra else "allow_anonymous true\n")
        return (port, self.restart_mosquitto(conf, port), conf)

    def restart_mosquitto(self, conf, port):
        """Starts mosquitto on `conf` and waits (5 s at most) until `port` accepts."""
        p = self.start(["mosquitto", "-c", conf], stdout=subprocess.DEVNULL,
                       stderr=open(self.path("mosquitto-%d.log" % port), "a"))
        deadline = time.time() + 5
        while time.time() < deadline:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
                return p
            except OSError:
                time.sleep(0.05)
        raise RuntimeError("mosquitto did not start on port %d" % port)

    def persistent_subscriber(self, port, client_id, topic, conn_args=()):
        """mosquitto_sub with a persistent session (-c -i ID, QoS 1) printing
        'topic hexpayload' lines; it reconnects by itself after a broker restart.
        conn_args: extra connection options (TLS, login)."""
        host = "localhost" if conn_args else "127.0.0.1"
        args = (["mosquitto_sub", "-h", host, "-p", str(port)] + list(conn_args) +
                ["-c", "-i", client_id, "-q", "1", "-t", topic, "-F", "%t %x"])
        return self.start(args, stdout=subprocess.PIPE)

    def wait_subscribed(self, sub, port, topic_base, conn_args=(), limit_s=10):
        """Publishes a probe on topic_base + '/test-probe' until the subscriber prints
        it, so that nothing published afterwards can be missed. Returns the
        other lines read meanwhile."""
        host = "localhost" if conn_args else "127.0.0.1"
        probe = topic_base + "/test-probe"
        got = []
        deadline = time.time() + limit_s
        while time.time() < deadline:
            subprocess.run(["mosquitto_pub", "-h", host, "-p", str(port)] + list(conn_args) +
                           ["-q", "1", "-t", probe, "-m", "probe"], capture_output=True, timeout=10)
            lines = read_lines(sub, 1.0, until=lambda ls: any(l.startswith(probe + " ") for l in ls))
            got += [l for l in lines if not l.startswith(probe + " ")]
            if len(lines) != len([l for l in lines if not l.startswith(probe + " ")]):
                return got
        raise RuntimeError("subscriber did not see its probe on %s" % probe)

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


class LineCollector(threading.Thread):
    """Reads a subscriber's stdout in the background (so its pipe never fills)
    and keeps every line with the time it arrived."""

    def __init__(self, proc):
        super().__init__(daemon=True)
        self.proc, self.lines, self.lock = proc, [], threading.Lock()
        self.start()

    def run(self):
        for raw in self.proc.stdout:
            line = raw.decode("utf-8", "replace").rstrip("\n")
            with self.lock:
                self.lines.append(line)

    def snapshot(self):
        with self.lock:
            return list(self.lines)


# Outbox kinds (daemon/store/outbox_store.h) and their topics (README, MQTT topics).
KIND_TOPIC = {1: "data", 2: "alert", 3: "manifest", 4: "health"}


def station_time(origin, speed, real=None):
    """Station time of a daemon run with --speed speed --speed-origin origin."""
    return origin + ((time.time() if real is None else real) - origin) * speed


def wait_ready(sock_path, limit_s=5.0):
    """Until a (re)started daemon's control socket accepts a connection; True if it did."""
    deadline = time.time() + limit_s
    while time.time() < deadline:
        try:
            with socket.socket(socket.AF_UNIX) as s:
                s.connect(sock_path)
                return True
        except OSError:
            time.sleep(0.02)
    return False


def outbox_rows(path, timeout_s=2.0):
    """Read-only snapshot of the outbox: dicts with seq, priority, kind,
    created_t, bytes, sent_t; None if the file cannot be read right now."""
    try:
        db = sqlite3.connect("file:%s?mode=ro" % path, uri=True, timeout=timeout_s)
        try:
            rows = db.execute("SELECT seq, priority, kind, created_t, bytes, sent_t FROM packets "
                              "ORDER BY seq").fetchall()
        finally:
            db.close()
    except sqlite3.Error:
        return None
    return [dict(seq=r[0], priority=r[1], kind=r[2], created_t=r[3], bytes=bytes(r[4]), sent_t=r[5])
            for r in rows]


def outbox_counts(path, timeout_s=2.0):
    """(packets, acknowledged) of the outbox read-only; None if it cannot be read now."""
    try:
        db = sqlite3.connect("file:%s?mode=ro" % path, uri=True, timeout=timeout_s)
        try:
            return db.execute("SELECT COUNT(*), COUNT(sent_t) FROM packets").fetchone()
        finally:
            db.close()
    except sqlite3.Error:
        return None


def codec_packets(lines, base):
    """(topic suffix, sequence, payload) for each 'topic hex' line of a codec
    packet topic under base (e.g. 'tarn/hollin-buoy-1'), in arrival order."""
    out = []
    for line in lines:
        parts = line.split(" ")
        if len(parts) != 2 or not parts[0].startswith(base + "/"):
            continue
        suffix = parts[0][len(base) + 1:]
        if suffix not in KIND_TOPIC.values():
            continue
        payload = bytes.fromhex(parts[1])
        out.append((suffix, seq_of(payload), payload))
    return out


def finish(h):
    if h.failures:
        # Repeated at the end: ctest and CI logs keep the tail of a long output.
        for what in h.failed:
            print("FAIL  " + what)
        print("%d check(s) failed" % h.failures)
        sys.exit(1)
    print("all checks passed")


def control(sock, req, timeout=5.0):
    """One JSON request, one JSON reply per connection (daemon/control)."""
    s = socket.socket(socket.AF_UNIX)
    s.settimeout(timeout)
    try:
        s.connect(sock)
        s.sendall(json.dumps(req).encode() + b"\n")
        data = b""
        while True:
            chunk = s.recv(65536)
            if not chunk:
                break
            data += chunk
    finally:
        s.close()
    return json.loads(data.decode())


def stop_daemon(h, d, what="daemon stops on SIGTERM with exit 0", timeout=10):
    """SIGTERM, and a check that the daemon stopped with exit 0 within `timeout` s."""
    d.terminate()
    try:
        rc = d.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        rc = None
    h.check(rc == 0, "%s (%s)" % (what, rc))
    return rc
