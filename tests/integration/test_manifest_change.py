#!/usr/bin/python3
"""The daemon publishes the channel manifest when the config changes it, and
only then.

The demo station (demo/station.json, demo/sim/station_sim.py) runs at
--speed 60 against a real mosquitto; a subscriber records every message on
tarn/hollin-buoy-1/# in arrival order.

  phase 0  start: the manifest is published, retained, on .../manifest;
  phase 1  SIGHUP, chla resolution 0.01 -> 0.001 ug/L: a new manifest;
  phase 2  SIGHUP, only a QC threshold changed (not part of the manifest):
           no manifest message;
  phase 3  SIGHUP, a channel added (the fluorometer's temperature field):
           a new manifest with 10 channels.

Checks: the hash in every packet header (codec/FORMAT.md §2) is the CRC-32C of
the canonical manifest bytes of §5.1, computed here in Python from the
M.json that `tarn manifest --config` writes for each config; every data packet
refers to the newest manifest published before it; the data after each change
decodes with the new manifest and is refused by `tarn decode` with the old one
alone ("not known"); a late subscriber gets exactly the last manifest as a
retained message; the outbox holds exactly three manifest packets.
Run: TARN_BIN=build/daemon/tarn /usr/bin/python3 tests/integration/test_manifest_change.py
"""
import copy
import datetime
import json
import os
import select
import signal
import struct
import subprocess
import sys
import time

from harness import SOURCE_DIR, TARN, Harness, demo_config, finish, seq_of, stop_daemon

# The CRC and varint of the reference decoder written from codec/FORMAT.md
# alone (it shares no code with the daemon); the CRC's own check value is
# asserted by the codec tests against the CRC catalogue.
sys.path.insert(0, os.path.join(SOURCE_DIR, "codec"))
from reference_decoder import crc32c, varint  # noqa: E402


STATION = "hollin-buoy-1"
PREFIX = "tarn/%s/" % STATION


def text(s):
    b = s.encode("utf-8")
    return varint(len(b)) + b


def manifest_hash(m):
    """CRC-32C of the canonical manifest bytes of format version 2, codec/FORMAT.md §5.1."""
    out = text(m["station"]) + varint(m["period_s"]) + varint(m["window_s"])
    out += bytes([(1 if "latitude" in m else 0) | (2 if "elevation_m" in m else 0)])
    if "latitude" in m:
        out += struct.pack("<dd", m["latitude"], m["longitude"])
    if "elevation_m" in m:
        out += struct.pack("<d", m["elevation_m"])
    out += varint(len(m["channels"]))
    for c in m["channels"]:
        out += text(c["name"]) + text(c["quantity"]) + text(c["unit"])
        out += struct.pack("<d", c["resolution"]) + text(c.get("instrument", ""))
        out += bytes([(1 if "depth_m" in c else 0) | (2 if "calibrated_on" in c else 0)])
        if "depth_m" in c:
            out += struct.pack("<d", c["depth_m"])
        out += text(c.get("model", "")) + text(c.get("serial", ""))
        if "calibrated_on" in c:
            y, mo, d = (int(x) for x in c["calibrated_on"].split("-"))
            days = (datetime.date(y, mo, d) - datetime.date(1970, 1, 1)).days
            out += varint((days << 1) ^ (days >> 63))
    return crc32c(out)


def header_hash(payload):
    return struct.unpack("<I", payload[1:5])[0]


class Recorder:
    """Every message on the station's topics, in arrival order."""

    def __init__(self, h, port):
        self.sub = h.subscribe(port, topic=PREFIX + "#", hex_payload=True)
        self.msgs = []  # (kind, payload bytes)
        self.buf = b""

    def pump(self, seconds, until=None):
        """Reads for up to `seconds`, or until until() holds."""
        deadline = time.time() + seconds
        fd = self.sub.stdout.fileno()
        while time.time() < deadline:
            if until and until():
                return True
            if not select.select([fd], [], [], 0.2)[0]:
                continue
            chunk = os.read(fd, 65536)
            if not chunk:
                break
            self.buf += chunk
            *lines, self.buf = self.buf.split(b"\n")
            for line in lines:
                topic, _, payload = line.decode().partition(" ")
                if topic.startswith(PREFIX):
                    kind = topic[len(PREFIX):]
                    body = bytes.fromhex(payload) if kind in ("data", "manifest", "alert") else payload
                    self.msgs.append((kind, body))
        return until() if until else True

    def first_arrivals(self, kind, begin=0, end=None):
        """Messages of `kind` in msgs[begin:end] whose sequence number had not
        arrived before (delivery is at least once; the shore drops repeats)."""
        seen = {seq_of(b) for k, b in self.msgs[:begin] if k in ("data", "manifest", "alert")}
        out = []
        for k, b in self.msgs[begin:end]:
            if k in ("data", "manifest", "alert"):
                if k == kind and seq_of(b) not in seen:
                    out.append(b)
                seen.add(seq_of(b))
        return out


def write_manifest(h, cfg_path, name):
    r = subprocess.run([TARN, "manifest", "--config", cfg_path], capture_output=True, text=True)
    path = h.path(name)
    with open(path, "w") as f:
        f.write(r.stdout)
    return path, json.loads(r.stdout) if r.returncode == 0 else None


def decode(hex_lines, *manifests):
    args = [TARN, "decode", "--hex"]
    for m in manifests:
        args += ["--manifest", m]
    return subprocess.run(args, input="".join(x.hex() + "\n" for x in hex_lines),
                          capture_output=True, text=True, timeout=60)


with Harness("manifestchange") as h:
    port, _ = h.mosquitto()
    h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfgs = [demo_config(h, port)]
    c1 = copy.deepcopy(cfgs[0])
    fluo = next(i for i in c1["instruments"] if i["name"] == "fluorometer")
    fluo["channels"][0]["resolution"] = 0.001  # chla
    cfgs.append(c1)
    c2 = copy.deepcopy(c1)
    fluo = next(i for i in c2["instruments"] if i["name"] == "fluorometer")
    spike = next(q for q in fluo["channels"][0]["qc"] if q["kind"] == "spike")
    spike["suspect_threshold"] = 2.5  # QC is not part of the manifest
    cfgs.append(c2)
    c3 = copy.deepcopy(c2)
    fluo = next(i for i in c3["instruments"] if i["name"] == "fluorometer")
    fluo["channels"].append({"name": "fl_temp", "quantity": "water_temperature", "unit": "Cel",
                             "resolution": 0.01, "source": {"field": 4}})
    cfgs.append(c3)

    manifests = []  # (M.json path, manifest, hash)
    for i, c in enumerate(cfgs):
        p = h.write_config(c, "station%d.json" % i)
        r = subprocess.run([TARN, "check", "--config", p], capture_output=True, text=True)
        h.check(r.returncode == 0, "config %d passes tarn check (%s)" % (i, r.stderr.strip()[:200]))
        mp, m = write_manifest(h, p, "manifest%d.json" % i)
        manifests.append((mp, m, manifest_hash(m) if m else None))
    hashes = [m[2] for m in manifests]
    h.check(hashes[0] != hashes[1] and hashes[1] == hashes[2] and hashes[3] not in hashes[:3],
            "manifest hashes computed here: %s (phase 2 equal to phase 1)" % ["%08x" % x for x in hashes])

    rec = Recorder(h, port)
    live = h.write_config(cfgs[0], "live.json")
    d = h.daemon(live, speed=60)

    phase_start = []  # index into rec.msgs where each phase begins

    def wait_phase(want_manifest, data_after=2, limit=40):
        """Pumps until the phase's manifest (if any) and `data_after` data packets after it."""
        begin = phase_start[-1]

        def done():
            msgs = rec.msgs[begin:]
            first = next((i for i, (k, _) in enumerate(msgs) if k == "manifest"), None)
            if want_manifest and first is None:
                return False
            after = msgs[first + 1:] if first is not None else msgs
            return sum(1 for k, _ in after if k == "data") >= data_after
        return rec.pump(limit, until=done)

    phase_start.append(0)
    ok0 = wait_phase(True)
    h.check(ok0, "phase 0: manifest and 2 data packets after the start")
    for n, c in enumerate(cfgs[1:], start=1):
        with open(live, "w") as f:
            json.dump(c, f, indent=2)
        phase_start.append(len(rec.msgs))
        d.send_signal(signal.SIGHUP)
        if n == 2:
            # No manifest expected: wait for 3 data packets, enough for one to
            # have been queued after the reload.
            ok = wait_phase(False, data_after=3)
        else:
            ok = wait_phase(True)
        h.check(ok and d.poll() is None, "phase %d: daemon runs; %s and data packets after it"
                % (n, "no manifest expected" if n == 2 else "a manifest"))
    phase_start.append(len(rec.msgs))
    rec.pump(0.5)

    # ---- manifest messages per phase -----------------------------------------------
    per_phase = [len(rec.first_arrivals("manifest", phase_start[i], phase_start[i + 1]))
                 for i in range(4)]
    h.check(per_phase == [1, 1, 0, 1], "manifest messages per phase: %s (want 1, 1, 0, 1)" % per_phase)
    man_msgs = rec.first_arrivals("manifest")
    h.check([header_hash(b) for b in man_msgs] == [hashes[0], hashes[1], hashes[3]],
            "the manifests published carry the hashes computed here from tarn manifest's M.json")
    learned = decode(man_msgs)
    h.check(learned.returncode == 0 and learned.stderr.count("learned") == 3 and
            "(%08x, 10 channels)" % hashes[3] in learned.stderr,
            "tarn decode learns all three from the packets; the last has 10 channels (%s)"
            % learned.stderr.strip().replace("\n", " | ")[:300])

    # ---- every data packet refers to the newest manifest before it -------------------
    current, wrong, by_hash, seen = None, [], {}, set()
    for k, b in rec.msgs:
        if k not in ("manifest", "data") or seq_of(b) in seen:
            continue  # a repeat of a packet that already arrived
        seen.add(seq_of(b))
        if k == "manifest":
            current = header_hash(b)
        else:
            by_hash.setdefault(header_hash(b), []).append(b)
            if header_hash(b) != current:
                wrong.append(seq_of(b))
    h.check(not wrong, "every data packet refers to the newest manifest published before it "
            "(wrong: seq %s)" % wrong[:5])
    h.check(set(by_hash) == {hashes[0], hashes[1], hashes[3]},
            "data packets under each of the three manifests (%s)" % {"%08x" % k: len(v)
                                                                      for k, v in by_hash.items()})
    for new, old, what in ((1, 0, "resolution change"), (3, 1, "channel added")):
        pk = by_hash.get(hashes[new], [])
        dn = decode(pk, manifests[new][0])
        samples = [json.loads(l) for l in dn.stdout.split("\n") if l]
        h.check(pk and dn.returncode == 0 and samples,
                "%s: the data after it decodes with the new manifest (%d packets, %d samples)"
                % (what, len(pk), len(samples)))
        do = decode(pk, manifests[old][0])
        h.check(pk and do.returncode == 65 and do.stdout == "" and
                do.stderr.count("not known") == len(pk),
                "%s: tarn decode with only the old manifest refuses each packet as not known"
                % what)
        if new == 1:
            chla = [s["v"] for s in samples if s["ch"] == "chla" and s["v"] is not None]
            h.check(chla and any(round(v * 1000) % 10 for v in chla),
                    "chla after the change carries 0.001 ug/L steps (%s)" % chla[:4])
        else:
            ft = [s for s in samples if s["ch"] == "fl_temp"]
            h.check(ft and any(s["v"] is not None for s in ft),
                    "the added channel fl_temp arrives with values (%d samples)" % len(ft))

    # A reload rebuilds the open window from the archive: no window is sent twice
    # or cut in two (station.cpp, apply_config).
    # The shore's view: the stream in arrival order, manifests learned from it,
    # repeated sequence numbers dropped (delivery is at least once).
    stream, seen_seq, repeats = [], set(), 0
    for k, b in rec.msgs:
        if k in ("data", "manifest"):
            repeats += seq_of(b) in seen_seq
            if seq_of(b) not in seen_seq:
                stream.append(b)
            seen_seq.add(seq_of(b))
    print("      %d packets arrived twice under the same sequence number (at least once)" % repeats)
    by_kind_data = {b for k, b in rec.msgs if k == "data"}
    dw = subprocess.run([TARN, "decode", "--hex", "--records", "windows"],
                        input="".join(x.hex() + "\n" for x in stream), capture_output=True,
                        text=True, timeout=60)
    wins = [json.loads(l) for l in dw.stdout.split("\n") if l]
    n_data = sum(1 for b in stream if b in by_kind_data)
    h.check(dw.returncode == 0 and len(wins) >= 9 * n_data,
            "the whole stream decodes with the manifests it carries (%d window records from %d "
            "data packets; %s)" % (len(wins), n_data, dw.stderr.strip().split("\n")[-1][:120]))
    wins = [w for w in wins if "start" in w]
    keys = [(w["start"], w["ch"]) for w in wins]
    twice = sorted({k[0] for k in keys if keys.count(k) > 1})
    h.check(not twice, "across the reloads no window is sent twice (%d window records, %d distinct; "
            "sent twice: %s)" % (len(keys), len(set(keys)), twice))
    partial = sorted({w["start"] for w in wins if w["partial"]})
    h.check(partial == [min(w["start"] for w in wins)] if wins else False,
            "only the first window (begun before the start) is partial (partial: %s)" % partial)

    # Nothing lost at a reload: every poll time in the archive has a row for every
    # channel (a missed poll is a sample flagged 9, never a hole: DEVELOPERS.md,
    # principle 4). Read after the daemon stopped (the stop settles the samples
    # held for the spike test); the newest poll time is left out: SIGTERM may
    # come between the polls of two lines.
    stop_daemon(h, d)
    rows = subprocess.run(["sqlite3", "-batch", "-cmd", ".timeout 5000",
                           "file:%s?mode=ro" % h.path("state", "archive.db"),
                           "SELECT s.t, c.name FROM samples s JOIN channels c ON c.id = s.channel"],
                          capture_output=True, text=True).stdout.split()
    per_t, dup = {}, set()
    for r in rows:
        t, ch = r.split("|")
        if ch in per_t.get(int(t), ()):
            dup.add((int(t), ch))
        per_t.setdefault(int(t), set()).add(ch)
    times = sorted(per_t)[:-1]
    base = {c["name"] for i in cfgs[0]["instruments"] for c in i["channels"]}
    holes = {t: sorted(base - per_t[t]) for t in times if base - per_t[t]}
    gaps = [b for a, b in zip(times, times[1:]) if b - a != 60]
    h.check(times and not holes and not gaps,
            "the archive has every channel at every poll time across the reloads (%d poll times; "
            "holes %s; missing poll times before %s)"
            % (len(times), ["%d: %s" % (t, ",".join(v)) for t, v in holes.items()][:3], gaps[:3]))
    # A sample held for the spike test's look-ahead is settled at the reload and
    # replayed after it: it is archived once, not twice.
    h.check(not dup, "the archive has each (poll time, channel) once across the reloads "
            "(twice: %s)" % sorted(dup)[:4])

    # ---- retained, and the outbox ---------------------------------------------------
    late = subprocess.run(["mosquitto_sub", "-h", "127.0.0.1", "-p", str(port), "-t",
                           PREFIX + "manifest", "-C", "1", "-W", "5", "-F", "%r %x"],
                          capture_output=True, text=True, timeout=10)
    flag, _, payload = late.stdout.strip().partition(" ")
    h.check(flag == "1" and payload and header_hash(bytes.fromhex(payload)) == hashes[3],
            "a late subscriber gets the last manifest, retained (flag %r)" % flag)
    pk = subprocess.run([TARN, "store", "packets", "--db", h.path("state"), "--all"],
                        capture_output=True, text=True)
    kinds = [l for l in pk.stdout.split("\n") if l.startswith("# ") and "kind=manifest" in l]
    h.check(len(kinds) == 3, "the outbox holds 3 manifest packets (%d)" % len(kinds))
    # The uplink section is the same in all four configs: the link stays up
    # across the three reloads (one connection in the daemon's log).
    connects = open(h.path("daemon.log")).read().count("uplink: connected to")
    h.check(connects == 1, "the link stays up across the reloads (%d connection(s))" % connects)
finish(h)
