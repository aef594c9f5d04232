#!/usr/bin/python3
"""The demo: the invented station hollin-buoy-1 on Lake Hollin, end to end.

Starts a real mosquitto with a TLS listener on a free loopback port (CA,
server certificate and passwords made for this run, see local_broker.py), the
simulated instruments on pseudo-terminals and the daemon at --speed 120 (a
10-minute window closes every 5 s); a shore subscriber prints what reaches the
broker and `tarn decode` turns it back into windows and alerts. In the middle
the broker goes down for a while and comes back: the station keeps its
windows in the outbox and sends the backlog when the link is up again. Then
the shore sends one signed downlink command (ping) and prints the answer.
Beside it runs a second station, the jetty post hollin-jetty, on summer days
at --speed 1440 (jetty_station.py), for solar quenching and fouling drift.
Stops by itself after enough windows (or LIMIT_S) and leaves no process
behind; exits 0 only if every check holds.
"""
import calendar
import hashlib
import hmac
import json
import os
import re
import select
import shutil
import signal
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
from local_broker import LocalBroker  # noqa: E402
from jetty_station import JettyStation  # noqa: E402
sys.path.insert(0, os.path.join(HERE, "..", "codec"))
from reference_decoder import sequence_of  # noqa: E402

SPEED = 120
WINDOW_S = 600
WANT_WINDOWS = 26      # windows at the shore before the demo stops
LIMIT_S = 145          # and at the latest this many seconds after the start
OUTAGE_AFTER = 8       # windows at the shore before the broker goes down
# The broker stays down 20 s, 4 windows of station time (40 minutes). The
# station retries after 1, 2, 4, 8, 16 s (+-25 %, real time; mqtt_backend.cpp),
# so its 5th try, 23 to 39 s after the loss, finds the broker back: the link
# is down for about 6 windows.
BROKER_DOWN_S = 20
STATION = "hollin-buoy-1"
PREFIX = "tarn/%s/" % STATION
# The bloom must take the alert rule of demo/station.json through every level
# and back, one step at a time: (previous level, level) of each change.
LADDER = [(0, 1), (1, 2), (2, 3), (3, 2), (2, 1), (1, 0)]


def seq_of(payload):
    """Sequence number of a codec packet (codec/FORMAT.md §2), by the
    reference decoder written from FORMAT.md alone."""
    return sequence_of(payload)


def show_shore(line):
    """One compact line per decoded window of the pigment channels; alerts in
    full. Returns the record."""
    try:
        rec = json.loads(line)
    except ValueError:
        return None
    if "alert" in rec:
        print("shore: ALERT " + json.dumps(rec["alert"]), flush=True)
        return rec
    if rec.get("ch") not in ("chla", "pc"):
        return rec
    c = rec.get("counts", {})
    mean = rec.get("mean")
    print("shore: window %s %-4s mean %-7s flags pass %s / not evaluated %s / suspect %s / fail %s / missing %s%s"
          % (time.strftime("%H:%M", time.gmtime(rec["start"])), rec["ch"],
             "-" if mean is None else "%.2f" % mean, c.get("1"), c.get("2"), c.get("3"), c.get("4"),
             c.get("9"), "  (partial)" if rec.get("partial") else ""), flush=True)
    return rec


def strip_comments(text):
    return re.sub(r"^\s*//.*$", "", text, flags=re.M)


class Shore:
    """The shore side: mosquitto_sub over TLS with a persistent session (the
    broker keeps the subscription and queues for it while it is away), and
    `tarn decode`. Deduplicates on the packet sequence number, as the shore
    must: delivery is at least once."""

    def __init__(self, tarn, broker, procs):
        self.broker, self.procs = broker, procs
        self.sub, self.buf = None, b""
        self.seen = {}          # seq -> (kind, arrival time)
        self.windows = 0
        self.replies = []
        self.alerts = {}        # seq -> alert record
        self.data_sizes = {}    # seq -> payload bytes of a data packet
        self.partial = set()    # seqs of data packets holding a partial window
        self.decoder = subprocess.Popen([tarn, "decode", "--hex", "--records", "windows"],
                                        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        self.decoded = b""
        procs.append(self.decoder)

    def connect(self):
        self.sub = subprocess.Popen(self.broker.client_args("mosquitto_sub") +
                                    ["-c", "-i", "lake-hollin-shore", "-q", "1", "-t", "tarn/#",
                                     "-F", "%t %x"], stdout=subprocess.PIPE)
        self.procs.append(self.sub)
        self.buf = b""

    def disconnect(self):
        self.sub.terminate()
        self.sub.wait(timeout=5)

    def pump(self, seconds, until=None):
        """Handles what arrives for up to `seconds`, or until until() is true."""
        deadline = time.time() + seconds
        fd = self.sub.stdout.fileno()
        while time.time() < deadline and not (until and until()):
            r, _, _ = select.select([fd], [], [], 0.1)
            if not r:
                continue
            chunk = os.read(fd, 65536)
            if not chunk:
                time.sleep(0.1)
                continue
            self.buf += chunk
            *lines, self.buf = self.buf.split(b"\n")
            for line in lines:
                self.handle(line.decode(errors="replace").strip())

    def handle(self, line):
        topic, _, payload = line.partition(" ")
        if not topic.startswith(PREFIX):
            return
        kind = topic[len(PREFIX):]
        body = bytes.fromhex(payload)
        if kind in ("status", "cmd", "reply"):
            text = body.decode(errors="replace")
            if kind == "reply":
                self.replies.append(json.loads(text))
                print("shore: reply on %s: %s" % (topic, text), flush=True)
            elif kind == "status":
                print("broker: %s %s" % (topic, text), flush=True)
            return
        seq = seq_of(body)
        if seq in self.seen:
            print("broker: %-28s %4d bytes  seq %d again (the shore has it: dropped)"
                  % (topic, len(body), seq), flush=True)
            return
        self.seen[seq] = (kind, time.time())
        print("broker: %-28s %4d bytes  seq %d" % (topic, len(body), seq), flush=True)
        if kind in ("data", "alert", "manifest"):
            self.decoder.stdin.write(payload + "\n")
            self.decoder.stdin.flush()
            self.show_decoded(seq)
        if kind == "data":
            self.windows += 1
            self.data_sizes[seq] = len(body)

    def show_decoded(self, seq):
        """What the decoder printed for the packet just fed (it answers within milliseconds)."""
        fd = self.decoder.stdout.fileno()
        wait = 0.3
        while select.select([fd], [], [], wait)[0]:
            chunk = os.read(fd, 65536)
            if not chunk:
                break
            self.decoded += chunk
            *lines, self.decoded = self.decoded.split(b"\n")
            for line in lines:
                rec = show_shore(line.decode(errors="replace"))
                if rec and "alert" in rec:
                    self.alerts[seq] = rec["alert"]
                elif rec and rec.get("partial"):
                    self.partial.add(seq)
            wait = 0.05


def sign(cmd, key):
    """HMAC-SHA256 over the canonical bytes of daemon/uplink/DOWNLINK.md
    ("Canonical bytes"), computed with Python's hmac and hashlib."""
    args = json.dumps(cmd.get("args", {}), sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    canonical = "tarn-command-v1\n%s\n%s\n%s\n%s\n%s\n%s" % (
        STATION, cmd["id"], cmd["cmd"], cmd.get("t", ""), cmd.get("nonce", ""), args)
    return dict(cmd, mac=hmac.new(key, canonical.encode(), hashlib.sha256).hexdigest())


def show_alert_ladder(shore):
    """The level changes that reached the shore, in window order (reminders
    repeat a standing level and are left out); True if they are LADDER."""
    names = {0: "none"}
    changes = []
    for a in sorted(shore.alerts.values(), key=lambda a: a["window_start"]):
        names[a["level"]] = a["level_name"] or "none"
        if a["level"] != a["previous_level"]:
            changes.append(a)
    for a in changes:
        print("alerts: %-7s -> %-7s window %s, pc median %.2f ug/L"
              % (names.get(a["previous_level"], a["previous_level"]), names.get(a["level"], a["level"]),
                 time.strftime("%H:%M", time.gmtime(a["window_start"])), a["statistic"]), flush=True)
    got = [(a["previous_level"], a["level"]) for a in changes]
    ok = got == LADDER
    print("alerts: %d level changes, %d reminders; %s" % (
        len(changes), len(shore.alerts) - len(changes),
        "watch, warning and bloom raised one after another and cleared again, each once" if ok else
        "NOT the expected none > watch > warning > bloom > warning > watch > none"), flush=True)
    return ok


def show_packet_sizes(shore):
    """Payload sizes of the data packets that reached the shore (codec packets,
    before MQTT and TLS framing)."""
    full = [n for s, n in shore.data_sizes.items() if s not in shore.partial]
    if not full:
        print("packets: no data packet with a whole window reached the shore", flush=True)
        return False
    sizes = list(shore.data_sizes.values())
    print("packets: %d data packets at the shore, payload %d to %d bytes; the %d with a whole window "
          "(9 channels x 10 samples) %d to %d bytes, mean %.0f" % (
              len(sizes), min(sizes), max(sizes), len(full), min(full), max(full),
              sum(full) / len(full)), flush=True)
    return True


def main():
    started = time.time()
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
                p.wait()
        shutil.rmtree(work, ignore_errors=True)

    signal.signal(signal.SIGTERM, lambda *a: sys.exit(1))
    try:
        for d in ("dev", "state", "run"):
            os.makedirs(os.path.join(work, d))
        jetty = JettyStation(tarn, work, procs)
        jetty.start()
        broker = LocalBroker(work)
        broker.prepare()
        procs.append(broker.start())

        def fill(text):
            text = text.replace("@DIR@", work).replace("@MQTT_PORT@", str(broker.port))
            return json.loads(strip_comments(text))

        cfg = fill(open(os.path.join(HERE, "station.json")).read())
        cfg["uplink"] = fill(open(os.path.join(HERE, "uplink.json")).read())
        cfg_path = os.path.join(work, "station.json")
        with open(cfg_path, "w") as f:
            json.dump(cfg, f, indent=2)
        procs.append(subprocess.Popen([sys.executable, os.path.join(HERE, "sim", "station_sim.py"),
                                       "--dir", os.path.join(work, "dev"), "--speed", str(SPEED),
                                       "--story-hours", "4.5"]))
        print("== shore: mosquitto with a TLS listener on 127.0.0.1:%d, logins required (users "
              "station and shore, random passwords)" % broker.port, flush=True)
        cert = subprocess.run(["openssl", "x509", "-in", os.path.join(broker.pki, "server.pem"), "-noout",
                               "-subject", "-issuer", "-ext", "subjectAltName"],
                              capture_output=True, text=True).stdout
        cert = re.sub(r":\s*\n\s*", ": ", cert.strip())  # the SAN heading and its value on one line
        print("server certificate made for this run: " + "; ".join(cert.splitlines()), flush=True)
        print("station uplink: " + json.dumps(cfg["uplink"]), flush=True)
        time.sleep(1.0)
        print("== tarn check", flush=True)
        subprocess.run([tarn, "check", "--config", cfg_path], check=True)
        # The shore side: a subscriber printing each payload in hex, and
        # `tarn decode` turning the packets back into windows (it learns the
        # channel manifest from the manifest packet the station sends first).
        shore = Shore(tarn, broker, procs)
        shore.connect()
        print("== tarn run --speed %d (one 10-minute window every %d s)" % (SPEED, WINDOW_S // SPEED),
              flush=True)
        run_args = [tarn, "run", "--config", cfg_path, "--speed", str(SPEED)]
        if os.geteuid() == 0:
            run_args.append("--allow-root")
        daemon = subprocess.Popen(run_args)
        procs.insert(1, daemon)  # stopped before the simulator and the broker
        deadline = started + LIMIT_S

        def status_json():
            for _ in range(3):
                r = subprocess.run([tarn, "status", "--json", "--config", cfg_path], capture_output=True,
                                   text=True)
                if r.returncode == 0:
                    return json.loads(r.stdout)
                time.sleep(0.2)
            return None

        def station_now():
            """Station time now, from `tarn status` (the daemon runs SPEED times faster)."""
            asked = time.time()
            st = status_json()
            answered = time.time()
            if not st:
                return 0
            t = calendar.timegm(time.strptime(st["now"], "%Y-%m-%dT%H:%M:%SZ"))
            return int(t + (time.time() - (asked + answered) / 2) * SPEED)

        shore.pump(deadline - time.time(), until=lambda: shore.windows >= OUTAGE_AFTER)

        # ---- the broker outage ----
        st = status_json() or {}
        print("== broker outage: mosquitto stopped (SIGTERM) at station time %s; down for %d windows "
              "(%d station minutes)" % (st.get("now", "?"), BROKER_DOWN_S * SPEED // WINDOW_S,
                                       BROKER_DOWN_S * SPEED // 60), flush=True)
        before = set(shore.seen)
        down_at = time.time()
        broker.stop()
        shore.pump(0.3)
        shore.disconnect()
        print("broker: down; the shore subscriber is disconnected too", flush=True)
        shown = False
        back_at = down_at + BROKER_DOWN_S
        while time.time() < back_at - 1.5:
            time.sleep(min(WINDOW_S / SPEED, max(0.0, back_at - 1.5 - time.time())))
            st = status_json()
            if st:
                print("outage: station time %s, link %s, outbox %s unsent (oldest %s), last error: %s"
                      % (st["now"], st["link"]["state"], st["store"].get("unsent"),
                         st["store"].get("oldest_unsent", "-"),
                         st["link"]["last_error"].split(";")[0] or "-"), flush=True)
            if not shown and time.time() > down_at + BROKER_DOWN_S / 2:
                shown = True
                print("== tarn status (broker down)", flush=True)
                subprocess.run([tarn, "status", "--config", cfg_path])
        held = subprocess.run([tarn, "store", "packets", "--config", cfg_path, "--unsent"],
                              capture_output=True, text=True).stdout
        held = [(int(m.group(1)), m.group(2)) for m in re.finditer(r"^# seq=(\d+) kind=(\w+)", held, re.M)]
        kinds = sorted({k for _, k in held})
        print("outbox holds %d packets, in send order: %s (%s)"
              % (len(held), " ".join(str(s) for s, _ in held),
                 ", ".join("%d %s" % (sum(k == x for _, k in held), x) for x in kinds)), flush=True)
        time.sleep(max(0.0, back_at - time.time()))
        procs.append(broker.start())
        up_at = time.time()
        print("== broker back on 127.0.0.1:%d after %.0f s; the shore subscriber reconnects (persistent "
              "session); the station reconnects at its next retry (backoff from 1 s, doubling)"
              % (broker.port, up_at - down_at), flush=True)
        shore.connect()
        held_seqs = {s for s, _ in held}
        shore.pump(max(0.0, deadline - time.time() - 25), until=lambda: held_seqs <= set(shore.seen))
        arrived = [s for s in held_seqs if s in shore.seen and s not in before]
        held_windows = [s for s, k in held if k == "window"]
        got_windows = [s for s in held_windows if s in shore.seen]
        seqs = sorted(shore.seen)
        contiguous = seqs == list(range(1, len(seqs) + 1))
        first = min((shore.seen[s][1] for s in arrived), default=up_at)
        print("backlog: %d of %d windows held during the outage arrived (%d of %d packets, %.1f s after "
              "the broker came back); sequence numbers at the shore %s 1..%d"
              % (len(got_windows), len(held_windows), len(arrived), len(held), first - up_at,
                 "contiguous" if contiguous else "NOT contiguous:", seqs[-1] if seqs else 0), flush=True)
        backlog_ok = len(held_windows) > 0 and len(got_windows) == len(held_windows) and contiguous

        # ---- one downlink command ----
        cmd = sign({"id": "demo-ping-1", "cmd": "ping", "t": station_now(),
                    "nonce": os.urandom(8).hex()}, broker.command_key)
        print("== downlink: signed ping on %scmd: %s" % (PREFIX, json.dumps(cmd)), flush=True)
        subprocess.run(broker.client_args("mosquitto_pub") + ["-q", "1", "-t", PREFIX + "cmd", "-m",
                                                              json.dumps(cmd)], check=True)
        shore.pump(10, until=lambda: any(r.get("id") == cmd["id"] for r in shore.replies))
        reply = [r for r in shore.replies if r.get("id") == cmd["id"]]
        reply_ok = bool(reply) and reply[0].get("result") == "accepted"

        # ---- a config reload (SIGHUP): health every 30 station minutes instead
        # of hourly. Neither the pipeline nor the link is built from it, so the
        # daemon's log says both carry on (no reconnect, no alert repeated).
        cfg["health"]["interval_s"] = 1800
        with open(cfg_path, "w") as f:
            json.dump(cfg, f, indent=2)
        print("== reload: health.interval_s 3600 -> 1800 in %s, then SIGHUP" % cfg_path, flush=True)
        daemon.send_signal(signal.SIGHUP)
        shore.pump(2.0)

        shore.pump(max(0.0, deadline - time.time()), until=lambda: shore.windows >= WANT_WINDOWS)
        print("== tarn status (end)", flush=True)
        subprocess.run([tarn, "status", "--config", cfg_path])
        print("== stopping the daemon (SIGTERM)", flush=True)
        daemon.send_signal(signal.SIGTERM)
        rc = daemon.wait(timeout=10)
        ladder_ok = show_alert_ladder(shore)
        sizes_ok = show_packet_sizes(shore)
        jetty_ok = jetty.finish()
        print("== %d windows reached the shore; backlog after the outage %s; downlink reply %s; "
              "alert levels %s; jetty quenching and fouling %s; daemon exit code %d; %.0f s"
              % (shore.windows, "complete" if backlog_ok else "INCOMPLETE",
                 reply[0]["result"] if reply else "MISSING",
                 "raised and cleared one by one" if ladder_ok else "NOT AS EXPECTED",
                 "shown" if jetty_ok else "NOT SHOWN", rc, time.time() - started), flush=True)
        return 0 if (shore.windows >= 5 and rc == 0 and backlog_ok and reply_ok and ladder_ok
                     and sizes_ok and jetty_ok) else 1
    finally:
        cleanup()


if __name__ == "__main__":
    sys.exit(main())
