#!/usr/bin/python3
"""serial-radio backend and `tarn relay` over a lossy, corrupting radio.

    tarn run (serial-radio) -- pty pair 1 -- our filter -- pty pair 2 -- tarn relay -- mosquitto

The filter (a thread of this test) cuts both directions into frames at the
0x00 delimiters, drops 5 % of the frames and flips 1 % of the bytes, and
checks every frame it sees against CRC-32C from Debian's python3-crcmod (a
reference implementation, independent of ours) before it damages it. The
relay is killed with SIGKILL once mid-run and started again (its record of
published sequences must survive). Before the station is stopped the test
waits (bounded) until its outbox has drained: nothing unsent.

At the end, after deduplication by sequence, exactly once: every packet the
station's outbox marks sent is on the broker with the same bytes as in the
outbox (compared per sequence), a sequence never carries two different
payloads, nothing is on the broker that the outbox does not hold, and zero
are missing: every packet in the outbox when it was seen drained is sent and
on the broker; only what the stop itself closed (the partial window) may
wait for the next start. Prints sent, received and duplicate counts.
"""
import json
import os
import random
import re
import signal
import sqlite3
import subprocess
import sys
import threading
import time
import tty

import crcmod.predefined

from harness import TARN, Harness, LineCollector, demo_config, finish, outbox_rows

HERE = os.path.dirname(os.path.abspath(__file__))
# CRC-32C as catalogued (CRC-32/ISCSI, check 0xe3069283): python3-crcmod's "crc-32c".
crc32c = crcmod.predefined.mkCrcFun("crc-32c")
assert crc32c(b"123456789") == 0xE3069283

DROP_FRAMES = 0.05
FLIP_BYTES = 0.01
STATION = "hollin-buoy-1"


def cobs_decode(data):
    out, i = bytearray(), 0
    while i < len(data):
        code = data[i]
        i += 1
        if code == 0 or i + code - 1 > len(data):
            return None
        out += data[i:i + code - 1]
        i += code - 1
        if code != 0xFF and i < len(data):
            out.append(0)
    return bytes(out)


def frame_ok(stuffed):
    body = cobs_decode(stuffed)
    if body is None or len(body) < 8:
        return False
    return crc32c(body[:-4]) == int.from_bytes(body[-4:], "little")


class LossyLine(threading.Thread):
    """Forwards frames between two pty ends, damaging some (both directions)."""

    def __init__(self, a_path, b_path, seed):
        super().__init__(daemon=True)
        self.a = os.open(a_path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        self.b = os.open(b_path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        for fd in (self.a, self.b):
            tty.setraw(fd)
        self.rng = random.Random(seed)
        self.stop = threading.Event()
        self.bufs = {self.a: bytearray(), self.b: bytearray()}
        self.stats = {"frames": 0, "valid": 0, "invalid_before_damage": 0, "dropped": 0, "flipped": 0}

    def forward(self, src, dst):
        try:
            chunk = os.read(src, 4096)
        except BlockingIOError:
            return
        except OSError:
            time.sleep(0.05)  # the far end closed (a restart): wait for it
            return
        buf = self.bufs[src]
        buf += chunk
        while True:
            i = buf.find(0)
            if i < 0:
                break
            stuffed, rest = bytes(buf[:i]), buf[i + 1:]
            buf[:] = rest
            if not stuffed:
                continue
            self.stats["frames"] += 1
            if frame_ok(stuffed):
                self.stats["valid"] += 1
            else:
                self.stats["invalid_before_damage"] += 1
            if self.rng.random() < DROP_FRAMES:
                self.stats["dropped"] += 1
                continue
            out = bytearray(stuffed)
            for k in range(len(out)):
                if self.rng.random() < FLIP_BYTES:
                    out[k] ^= 1 << self.rng.randrange(8)
                    self.stats["flipped"] += 1
            try:
                os.write(dst, b"\x00" + bytes(out) + b"\x00")
            except OSError:
                pass

    def run(self):
        import select
        while not self.stop.is_set():
            r, _, _ = select.select([self.a, self.b], [], [], 0.1)
            for fd in r:
                self.forward(fd, self.b if fd == self.a else self.a)
        os.close(self.a)
        os.close(self.b)


def packet_sequence(payload):
    """Sequence of a codec packet (codec/FORMAT.md §2: varint at offset 5) if its CRC holds."""
    if len(payload) < 10 or crc32c(payload[:-4]) != int.from_bytes(payload[-4:], "little"):
        return None
    seq, shift, i = 0, 0, 5
    while True:
        b = payload[i]
        seq |= (b & 0x7F) << shift
        shift += 7
        i += 1
        if not b & 0x80:
            return seq


def main():
    t_start = time.time()
    with Harness("radio") as h:
        port, _ = h.mosquitto()
        sim = h.start(["/usr/bin/python3", os.path.join(HERE, "..", "..", "demo", "sim", "station_sim.py"),
                       "--dir", h.path("dev"), "--speed", "120"], stdout=subprocess.DEVNULL)
        st_modem, flt_a, flt_b, shore_modem = (h.path("dev", n) for n in ("radio-station", "filter-a",
                                                                          "filter-b", "radio-shore"))
        for a, b in ((st_modem, flt_a), (flt_b, shore_modem)):
            h.start(["socat", "pty,raw,echo=0,link=" + a, "pty,raw,echo=0,link=" + b],
                    stderr=subprocess.DEVNULL)
        deadline = time.time() + 5
        while not all(os.path.exists(p) for p in (st_modem, flt_a, flt_b, shore_modem)):
            if time.time() > deadline:
                raise RuntimeError("socat did not create its ptys")
            time.sleep(0.05)
        line = LossyLine(flt_a, flt_b, seed=20240601)
        line.start()

        os.makedirs(h.path("relay-state"))
        relay_cfg = {
            "modem": {"port": shore_modem, "baud": 9600, "mtu": 255},
            "stations": [STATION],
            "broker": {"host": "127.0.0.1", "port": port, "topic_prefix": "tarn", "keepalive_s": 30},
            "state_dir": h.path("relay-state"),
            "log": {"level": "info"},
        }
        relay_path = h.write_config(relay_cfg, "relay.json")
        r = subprocess.run([TARN, "relay", "--config", relay_path, "--check"], capture_output=True, text=True)
        h.check(r.returncode == 0, "relay config passes --check (%d %s)" % (r.returncode, r.stderr.strip()))
        bad = dict(relay_cfg, stations=[STATION, STATION], modem={"port": shore_modem, "mtu": 20})
        r = subprocess.run([TARN, "relay", "--config", h.write_config(bad, "bad.json"), "--check"],
                           capture_output=True, text=True)
        h.check(r.returncode == 78 and "/modem/mtu" in r.stderr and "/stations/1" in r.stderr,
                "broken relay config refused with pointers, exit 78 (%d: %s)" % (r.returncode, r.stderr.strip()))

        relay_log = open(h.path("relay.log"), "a")

        def start_relay():
            return h.start([TARN, "relay", "--config", relay_path], stdout=relay_log, stderr=subprocess.STDOUT)

        sub = h.subscribe(port, hex_payload=True)
        shore = LineCollector(sub)  # reads the broker's stream in the background, whole lines only
        relay = start_relay()
        time.sleep(1.0)

        cfg = demo_config(h, port)
        cfg["uplink"] = {"backend": "serial-radio",
                         "options": {"port": st_modem, "baud": 9600, "mtu": 255, "ack_timeout_ms": 400,
                                     "retries": 4, "window": 4, "ping_interval_ms": 1000}}
        cfg_path = h.write_config(cfg)
        r = subprocess.run([TARN, "check", "--config", cfg_path], capture_output=True, text=True)
        h.check(r.returncode == 0, "station config with serial-radio passes tarn check (%s)" % r.stderr.strip())
        d = h.daemon(cfg_path, speed=120)

        time.sleep(35)
        relay.send_signal(signal.SIGKILL)  # mid-run: acks and publishes in flight are lost
        relay.wait()
        time.sleep(2.0)
        relay = start_relay()
        time.sleep(35)

        # Let the backlog drain: wait (60 s at most) until the outbox has nothing unsent.
        outbox = h.path("state", "outbox.db")
        drained = None  # the outbox as seen drained
        deadline = time.time() + 60
        while time.time() < deadline:
            time.sleep(0.5)
            rows = outbox_rows(outbox, timeout_s=1)
            if rows and all(r["sent_t"] is not None for r in rows):
                drained = rows
                break
        h.check(drained is not None, "the station's outbox drained over the radio within 60 s")
        d.send_signal(signal.SIGTERM)
        try:
            d.wait(timeout=10)
        except subprocess.TimeoutExpired:
            d.kill()
        # The relay publishes before it acknowledges: wait for every acknowledged packet.
        acked_now = {r["seq"] for r in (outbox_rows(outbox) or []) if r["sent_t"] is not None}
        deadline = time.time() + 10
        while time.time() < deadline:
            time.sleep(0.5)
            lines = shore.snapshot()
            seen_now = {packet_sequence(bytes.fromhex(l.split(" ")[1])) for l in lines if len(l.split(" ")) == 2
                        and l.startswith("tarn/%s/" % STATION)}
            if acked_now <= seen_now:
                break
        time.sleep(1)
        lines = shore.snapshot()
        relay.send_signal(signal.SIGTERM)
        relay.wait(timeout=10)
        line.stop.set()
        line.join(timeout=2)
        relay_log.close()

        db = sqlite3.connect("file:%s?mode=ro" % outbox, uri=True)
        rows = db.execute("SELECT seq, sent_t IS NOT NULL, attempts, bytes, kind, last_error FROM packets").fetchall()
        db.close()
        for r in rows:
            if not r[1]:
                print("unsent at the end: sequence %d, kind %d, %d bytes, %d attempts, last error: %s"
                      % (r[0], r[4], len(r[3]), r[2], r[5]))
        all_seqs = {r[0] for r in rows}
        acked = {r[0] for r in rows if r[1]}
        retried = sum(1 for r in rows if r[2] > 1)
        stored = {r[0]: bytes(r[3]) for r in rows}

        received = []
        contents = {}  # sequence -> the distinct payloads the broker carried for it
        bad_packets = 0
        for l in lines:
            parts = l.split(" ")
            if len(parts) != 2 or not parts[0].startswith("tarn/%s/" % STATION):
                continue
            if parts[0].rsplit("/", 1)[-1] not in ("data", "alert", "manifest", "health"):
                continue
            payload = bytes.fromhex(parts[1])
            seq = packet_sequence(payload)
            if seq is None:
                bad_packets += 1
            else:
                received.append(seq)
                contents.setdefault(seq, set()).add(payload)
        unique = set(received)
        dups = len(received) - len(unique)
        st = line.stats
        print("radio: %d frames through the filter, %d dropped, %d bytes flipped, %d damaged before the filter"
              % (st["frames"], st["dropped"], st["flipped"], st["invalid_before_damage"]))
        print("outbox: %d packets, %d acknowledged (sent), %d needed more than one attempt"
              % (len(all_seqs), len(acked), retried))
        print("broker: %d received, %d unique, %d duplicates, %d damaged" % (len(received), len(unique), dups,
                                                                             bad_packets))
        log = open(h.path("relay.log")).read()
        for m in re.findall(r"relay stopped: .*", log):
            print("relay: " + m)

        h.check(st["frames"] > 100 and st["dropped"] > 0 and st["flipped"] > 0,
                "the filter dropped frames and flipped bytes")
        h.check(st["invalid_before_damage"] == 0,
                "every frame on the line passes CRC-32C as computed by python3-crcmod")
        # 72 s at x120 is 144 station minutes: about 14 windows, the manifest (in parts) and alerts.
        h.check(len(acked) >= 12, "at least 12 packets acknowledged over the radio (%d)" % len(acked))
        drained_seqs = {r["seq"] for r in drained or []}
        left = sorted(all_seqs - acked)
        print("exactly once: %d sent, %d received, %d duplicates dropped by sequence; %d in the outbox when it "
              "drained, %d left unsent at the stop (%s)" % (len(acked), len(received), dups, len(drained_seqs),
                                                           len(left), left))
        if drained is not None:  # (a drain that never came is reported above)
            h.check(drained_seqs <= acked,
                    "every packet of the drained outbox is still marked sent (%s)" % sorted(drained_seqs - acked)[:10])
        h.check(drained is not None and all(s > max(drained_seqs) for s in left) and len(left) <= 2,
                "zero unsent at the end but what the stop closed itself (unsent: %s)" % left)
        h.check(acked <= unique, "every acknowledged sequence reached the broker (missing: %s)"
                % sorted(acked - unique)[:10])
        differ = sorted(s for s in acked & unique if contents[s] != {stored[s]})
        h.check(not differ, "every acknowledged packet on the broker equals the outbox byte for byte, once "
                "deduplicated by sequence (differ: %s)" % differ[:10])
        conflicting = sorted(s for s, c in contents.items() if len(c) > 1)
        h.check(not conflicting, "no sequence carried two different payloads (%s)" % conflicting[:10])
        h.check(unique <= all_seqs, "nothing on the broker that the outbox did not hold (%s)"
                % sorted(unique - all_seqs)[:10])
        h.check(bad_packets == 0, "no damaged packet reached the broker")
        h.check(retried > 0, "some packets needed retransmission (the loss was real)")
        h.check(d.returncode == 0, "daemon stopped cleanly (%s)" % d.returncode)
        h.check(sim.poll() is None, "simulator still running (sanity)")
        seen_file = h.path("relay-state", "relay-seen.log")
        seen = {int(l.split()[1]) for l in open(seen_file) if len(l.split()) == 2}
        h.check(acked <= seen, "the relay's seen record holds every acknowledged sequence")
        print("elapsed %.0f s" % (time.time() - t_start))
        finish(h)


if __name__ == "__main__":
    main()
