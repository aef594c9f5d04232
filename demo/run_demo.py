#!/usr/bin/python3
"""The demo: the invented station hollin-buoy-1 on Lake Hollin, end to end.

Starts a real mosquitto with a TLS listener on a free loopback port (CA,
server certificate and passwords made for this run, see local_broker.py), the
simulated instruments on pseudo-terminals and the daemon at --speed 1000 on
an invented summer timeline from 2026-08-04T21:00Z (`tarn run --speed-origin
T`, the simulator on the same clock): a one-hour window closes every 3.6 s,
and the 64-hour bloom story of sim/lake.py (night minimum of phycocyanin
rising over two days, the alert levels up one by one and down again on the
third day) passes in about 3.8 minutes. The buoy's config is demo/station.json with
demo/buoy_summer.json applied. A shore subscriber prints what reaches the
broker and `tarn decode` turns it back into windows and alerts: one line per
station hour, every alert in full, a summary per station day. Early on the
broker goes down for a while and comes back: the station keeps its windows
in the outbox and sends the backlog when the link is up again. Then the shore
sends one signed downlink command (ping) and prints the answer, the config is
reloaded, and on the second morning the fluorometer's optics are cleaned
during maintenance of that instrument. Beside it runs a second station, the
jetty post hollin-jetty, for four summer days at --speed 2160
(jetty_station.py): solar quenching and a slow biofilm that fouling_drift
flags. Stops by itself at the story's end (or LIMIT_S) and leaves no process
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
import threading
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
from local_broker import LocalBroker  # noqa: E402
from jetty_station import JettyStation  # noqa: E402
sys.path.insert(0, os.path.join(HERE, "..", "codec"))
from reference_decoder import sequence_of  # noqa: E402

SPEED = 1000
START = "2026-08-04T21:00:00Z"  # station time when the buoy starts (invented), the story's start
STORY_H = 64                    # the bloom story of sim/lake.py, station hours
FOULING_PER_DAY = 0.4           # the simulated biofilm on the buoy's optics, ug/L chlorophyll-a a day
LIMIT_S = 290                   # the latest end, real seconds after the start
OUTAGE_AT_H = 10                # station hour (of the story) after which the broker goes down
# The broker stays down 20 s of real time: 20000 station seconds, 5.6 one-hour
# windows. The station retries after 1, 2, 4, 8, 16 s (+-25 %, real time;
# mqtt_backend.cpp), so its 5th try, 23 to 39 s after the loss, finds the
# broker back: the link is down for 6.4 to 10.8 station hours.
BROKER_DOWN_S = 20
# The optics of the fluorometer are cleaned on the second morning, at first
# light (the sun below the quenching threshold, phycocyanin nearly steady),
# during maintenance of that instrument only; maintenance ends 3 polls after
# the simulator was told (each `tarn maintenance` call itself takes a moment
# of real time, a few station minutes).
CLEAN_AT = "2026-08-06T04:00:00Z"
CLEAN_POLLS = 3
STATION = "hollin-buoy-1"
PREFIX = "tarn/%s/" % STATION
# The bloom must take the alert rule of demo/station.json through every level
# and back, one step at a time: (previous level, level) of each change.
LADDER = [(0, 1), (1, 2), (2, 3), (3, 2), (2, 1), (1, 0)]
# Reason bits of the wire format (codec/FORMAT.md, reason table).
REASON_NAMES = ((5, "poll_missed"), (13, "flat_line"), (15, "solar_quenching"), (16, "maintenance"),
                (17, "fouling_drift"))
# The daemon's summary per instrument (daemon/core/bus_lines.cpp, log_summaries).
SUMMARY_LINE = re.compile(r"\binfo\s+line \S+: \S+: [a-z]+, \d+ polls, \d+ errors")
NIGHT_SPAN_H = (-3, 3)          # hours around midnight UTC that hold the short August night's minimum


def parse_time(text):
    return calendar.timegm(time.strptime(text, "%Y-%m-%dT%H:%M:%SZ"))


def iso(t):
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def seq_of(payload):
    """Sequence number of a codec packet (codec/FORMAT.md §2), by the
    reference decoder written from FORMAT.md alone."""
    return sequence_of(payload)


def reason_names(bits):
    return " ".join(name for bit, name in REASON_NAMES if bits & (1 << bit))


def summary(samples):
    """Median, lowest and highest of the samples with a value that passed or
    are only doubtful (flags 1, 2, 3), flag counts and the doubts (OR of the
    reason bits) of one channel's samples in a window."""
    v = sorted(x["v"] for x in samples if x.get("v") is not None and x["f"] in (1, 2, 3))
    counts = {f: sum(1 for x in samples if x["f"] == f) for f in (1, 2, 3, 4, 9)}
    reasons = 0
    for x in samples:
        reasons |= x.get("r", 0)
    return {"median": median(v), "min": v[0] if v else None, "max": v[-1] if v else None,
            "counts": counts, "reasons": reasons}


def hour_line(start, recs, seq, size):
    """One line per station hour: pc and chla medians of the samples with a
    value (ug/L, flags 1 to 3), pc's range, flag counts and doubts, the packet."""
    pc, chla = summary(recs.get("pc", [])), summary(recs.get("chla", []))

    def num(v):
        return "    - " if v is None else "%6.2f" % v
    c = pc["counts"]
    return ("shore %s  pc %s [%s-%s]  chla %s  pc flags %d/%d/%d/%d/%d  %-28s seq %d, %d B"
            % (time.strftime("%m-%d %H:%M", time.gmtime(start)), num(pc["median"]),
               num(pc["min"]).strip(), num(pc["max"]).strip(), num(chla["median"]),
               c[1], c[2], c[3], c[4], c[9], reason_names(pc["reasons"]) or "-", seq, size))


def strip_comments(text):
    return re.sub(r"^\s*//.*$", "", text, flags=re.M)


class Shore:
    """The shore side: mosquitto_sub over TLS with a persistent session (the
    broker keeps the subscription and queues for it while it is away), and
    `tarn decode`. Deduplicates on the packet sequence number, as the shore
    must: delivery is at least once."""

    def __init__(self, tarn, broker, procs, period, window):
        self.broker, self.procs = broker, procs
        self.period, self.window = period, window
        self.sub, self.buf = None, b""
        self.seen = {}          # seq -> (kind, arrival time)
        self.windows = 0
        self.replies = []
        self.alerts = {}        # seq -> alert record
        self.data_sizes = {}    # seq -> payload bytes of a data packet
        self.partial = set()    # seqs of data packets holding a partial window or a gap
        self.hours = {}         # window start -> {channel: [samples]}, every channel
        self.cleaning = []      # decoded records about a cleaning of the optics
        self.decoder = subprocess.Popen([tarn, "decode", "--hex"],
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
        if kind != "data":  # data packets: one line per station hour, below
            print("broker: %-28s %4d bytes  seq %d" % (topic, len(body), seq), flush=True)
        if kind == "data":
            self.windows += 1
            self.data_sizes[seq] = len(body)
        # Every codec packet goes to the decoder (data, alert, manifest, health
        # and any kind a newer station sends).
        self.decoder.stdin.write(payload + "\n")
        self.decoder.stdin.flush()
        self.show_decoded(seq, len(body))

    def show_decoded(self, seq, size):
        """What the decoder printed for the packet just fed (it answers within
        milliseconds): one line per station hour of data, alerts and cleaning
        records in full."""
        fd = self.decoder.stdout.fileno()
        wait = 0.3
        hours = {}
        while select.select([fd], [], [], wait)[0]:
            chunk = os.read(fd, 65536)
            if not chunk:
                break
            self.decoded += chunk
            *lines, self.decoded = self.decoded.split(b"\n")
            for line in lines:
                try:
                    rec = json.loads(line.decode(errors="replace"))
                except ValueError:
                    continue
                if "alert" in rec:
                    self.alerts[seq] = rec["alert"]
                    print("shore: ALERT " + json.dumps(rec["alert"]), flush=True)
                elif "cleaning" in rec:
                    self.cleaning.append(rec)
                    print("shore: CLEANING " + json.dumps(rec), flush=True)
                elif "t" in rec and "ch" in rec:
                    start = rec["t"] - rec["t"] % self.window
                    hours.setdefault(start, {}).setdefault(rec["ch"], []).append(rec)
            wait = 0.05
        for start in sorted(hours):
            self.hours[start] = hours[start]
            pcs = hours[start].get("pc", [])
            if len(pcs) < self.window // self.period or any(x["f"] == 9 for x in pcs):
                self.partial.add(seq)  # cut short, or a poll without a value
            print(hour_line(start, hours[start], seq, size), flush=True)


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
                 time.strftime("%m-%d %H:%M", time.gmtime(a["window_start"])), a["statistic"]),
              flush=True)
    got = [(a["previous_level"], a["level"]) for a in changes]
    ok = got == LADDER
    print("alerts: %d level changes, %d reminders; %s" % (
        len(changes), len(shore.alerts) - len(changes),
        "watch, warning and bloom raised one after another and cleared again, each once" if ok else
        "NOT the expected none > watch > warning > bloom > warning > watch > none"), flush=True)
    return ok


def show_packet_sizes(shore, cfg):
    """Payload sizes of the data packets that reached the shore (codec packets,
    before MQTT and TLS framing)."""
    full = [n for s, n in shore.data_sizes.items() if s not in shore.partial]
    if not full:
        print("packets: no data packet with a whole window reached the shore", flush=True)
        return False
    sizes = list(shore.data_sizes.values())
    channels = sum(len(i["channels"]) for i in cfg["instruments"])
    slots = cfg["sampling"]["window_s"] // cfg["sampling"]["period_s"]
    print("packets: %d data packets at the shore, payload %d to %d bytes; the %d with a whole window "
          "(%d channels x %d samples, every poll with a value) %d to %d bytes, mean %.0f" % (
              len(sizes), min(sizes), max(sizes), len(full), channels, slots, min(full), max(full),
              sum(full) / len(full)), flush=True)
    return True


def show_days(shore, start_t):
    """A summary per station day from the samples at the shore: phycocyanin's
    night minimum (the lowest sample of the night that ends that morning), its
    highest hourly median, the hours with doubts, the alert level changes.
    True if the night minimum rose day after day (by more
    than 1 ug/L each night) until the bloom's top."""
    names = {0: "none"}
    for a in shore.alerts.values():
        names[a["level"]] = a["level_name"] or "none"
    changes = sorted((a for a in shore.alerts.values() if a["level"] != a["previous_level"]),
                     key=lambda a: a["window_start"])
    first = start_t - start_t % 86400
    last = max(shore.hours, default=first)
    nights = []
    fouled_hours = 0
    day = first
    while day <= last:
        hours = {t: r for t, r in shore.hours.items() if day <= t < day + 86400}
        pc = [summary(r.get("pc", [])) for r in hours.values()]
        night = [summary(r.get("pc", []))["min"] for t, r in shore.hours.items()
                 if day + NIGHT_SPAN_H[0] * 3600 <= t < day + NIGHT_SPAN_H[1] * 3600]
        night = [v for v in night if v is not None]
        night_min = min(night) if night else None
        if night_min is not None and day > first:
            nights.append(night_min)
        means = [r["median"] for r in pc if r["median"] is not None]
        doubts = {}
        for r in pc:
            for bit, name in REASON_NAMES:
                if r["reasons"] & (1 << bit):
                    doubts[name] = doubts.get(name, 0) + 1
        missing = sum(r["counts"][9] for r in pc)
        fouled_hours += doubts.get("fouling_drift", 0)
        moves = ["%s %s->%s" % (time.strftime("%H:%M", time.gmtime(a["window_start"])),
                                names.get(a["previous_level"]), names.get(a["level"]))
                 for a in changes if day <= a["window_start"] < day + 86400]
        print("day %s: %2d hours at the shore; pc night minimum %s, highest hourly median %s ug/L; "
              "pc hours with %s; pc polls missing %d; alert changes: %s"
              % (time.strftime("%Y-%m-%d", time.gmtime(day)), len(hours),
                 "%.2f" % night_min if night_min is not None and day > first else "-",
                 "%.2f" % max(means) if means else "-",
                 ", ".join("%s %d" % kv for kv in sorted(doubts.items())) or "no doubts", missing,
                 ", ".join(moves) or "none"), flush=True)
        day += 86400
    rising = len(nights) >= 3 and all(b - a > 1.0 for a, b in zip(nights[:3], nights[1:3]))
    print("days: pc night minima %s ug/L: %s" % (
        ", ".join("%.2f" % n for n in nights),
        "rising night after night, as in a bloom" if rising else "NOT rising over two nights"), flush=True)
    print("days: pc hours flagged fouling_drift: %d (%s)" % (
        fouled_hours, "the bloom was not taken for a biofilm" if fouled_hours == 0
        else "the bloom WAS taken for a biofilm"), flush=True)
    return rising and fouled_hours == 0


def show_cleaning(shore):
    """The cleaning records that reached the shore (`tarn decode` prints
    {"cleaning": {...}}): per channel the median before maintenance began and
    after it ended. True if the fluorometer's channels, and only they (the
    maintenance was of that instrument alone), sent one, and chlorophyll-a
    stepped down: the biofilm was wiped off."""
    recs = [r["cleaning"] for r in shore.cleaning if isinstance(r.get("cleaning"), dict)]
    if not recs:
        print("cleaning: no cleaning record reached the shore", flush=True)
        return False
    for c in recs:
        b, a = c.get("before"), c.get("after")
        print("cleaning at the shore: %-8s maintenance %s to %s: median %s before (%s values), "
              "%s after (%s values)%s"
              % (c.get("channel"), iso(c["maintenance_start"]), iso(c["maintenance_end"]),
                 b, c.get("n_before"), a, c.get("n_after"),
                 ": step %+.2f" % (a - b) if a is not None and b is not None else ""), flush=True)
    chans = sorted({c.get("channel") for c in recs})
    chla = [c for c in recs if c.get("channel") == "chla"
            and c.get("before") is not None and c.get("after") is not None]
    ok = chans == ["chla", "pc", "pe"] and bool(chla) and chla[0]["after"] < chla[0]["before"]
    print("cleaning at the shore: records for %s; %s" % (", ".join(map(str, chans)),
          "the fluorometer's channels only, chlorophyll-a stepped down" if ok else
          "NOT the fluorometer's three channels with a downward chlorophyll-a step"), flush=True)
    return ok


def export(tarn, cfg_path, t0, t1):
    """The station's archive between t0 and t1 (`tarn store export --format jsonl`)."""
    r = subprocess.run([tarn, "store", "export", "--config", cfg_path, "--format", "jsonl",
                        "--from", iso(t0), "--to", iso(t1)], capture_output=True, text=True)
    if r.returncode != 0:
        print("tarn store export failed (exit %d): %s" % (r.returncode, r.stderr.strip()), flush=True)
        return None
    return [json.loads(line) for line in r.stdout.splitlines() if line.strip()]


def median(v):
    v = sorted(v)
    return (v[len(v) // 2] + v[(len(v) - 1) // 2]) / 2 if v else None


def show_cleaning_in_archive(rows, began, ended):
    """The cleaning step as the station's archive holds it: per fluorometer
    channel, the median of the last 3 samples before maintenance began and of
    the first 3 after it ended. True if chlorophyll-a stepped down by at least
    half the simulated biofilm (the optics were cleaned)."""
    ok = False
    for ch in ("chla", "pc", "pe"):
        rs = [x for x in rows if x["ch"] == ch and x["v"] is not None and x["f"] in (1, 2, 3)]
        before = median([x["v"] for x in rs if x["t"] < began][-3:])
        after = median([x["v"] for x in rs if x["t"] > ended][:3])
        during = sum(1 for x in rows if x["ch"] == ch and began <= x["t"] <= ended
                     and x.get("r", 0) & (1 << 16))
        if before is None or after is None:
            print("cleaning in the archive: %s has no samples on both sides" % ch, flush=True)
            continue
        print("cleaning in the archive: %-4s median of 3 polls before %.2f, after %.2f ug/L: step %+.2f; "
              "%d polls during maintenance flagged fail (maintenance)"
              % (ch, before, after, after - before, during), flush=True)
        if ch == "chla":
            expected = FOULING_PER_DAY * (began - parse_time(START)) / 86400
            ok = after - before < -0.5 * expected and during > 0
            print("cleaning in the archive: the simulated biofilm was %.2f ug/L chlorophyll-a; %s"
                  % (expected, "the step shows it" if ok else "the step does NOT show it"), flush=True)
    # The maintenance was of the fluorometer alone: the other instruments'
    # channels carry no maintenance flag for that time.
    others = sorted({x["ch"] for x in rows if x["ch"] not in ("chla", "pc", "pe")
                     and began <= x["t"] <= ended and x.get("r", 0) & (1 << 16)})
    print("cleaning in the archive: other instruments' channels flagged for maintenance: %s"
          % (", ".join(others) if others else "none"), flush=True)
    return ok and not others


def count_missed(rows, label="archive"):
    """Samples without a value (flag 9) in the archive, by channel and reason."""
    missed = [x for x in rows if x["f"] == 9]
    by = {}
    for x in missed:
        key = (x["ch"], reason_names(x.get("r", 0)) or "r=%d" % x.get("r", 0))
        by[key] = by.get(key, 0) + 1
    print("%s: %d samples, %d without a value (flag 9)%s" % (
        label, len(rows), len(missed),
        ": " + ", ".join("%s %s %d" % (c, r, n) for (c, r), n in sorted(by.items()))
        + "; at " + ", ".join(sorted({iso(x["t"]) for x in missed})) if missed else ""), flush=True)
    return len(missed)


def apply_summer(cfg, summer):
    """demo/station.json with demo/buoy_summer.json applied (see there)."""
    cfg["sampling"] = summer["sampling"]
    for inst in cfg["instruments"]:
        for ch in inst["channels"]:
            for test in ch.get("qc", []):
                test.update(summer["qc"].get(test["kind"], {}))
    for rule in cfg["alerts"]["rules"]:
        rule.update(summer["alert_rules"].get(rule["name"], {}))
    cfg.setdefault("health", {}).update(summer["health"])
    return cfg


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
        cfg = apply_summer(cfg, fill(open(os.path.join(HERE, "buoy_summer.json")).read()))
        cfg["uplink"] = fill(open(os.path.join(HERE, "uplink.json")).read())
        cfg_path = os.path.join(work, "station.json")
        with open(cfg_path, "w") as f:
            json.dump(cfg, f, indent=2)
        period, window = cfg["sampling"]["period_s"], cfg["sampling"]["window_s"]
        print("== shore: mosquitto with a TLS listener on 127.0.0.1:%d, logins required (users "
              "station and shore, random passwords)" % broker.port, flush=True)
        cert = subprocess.run(["openssl", "x509", "-in", os.path.join(broker.pki, "server.pem"), "-noout",
                               "-subject", "-issuer", "-ext", "subjectAltName"],
                              capture_output=True, text=True).stdout
        cert = re.sub(r":\s*\n\s*", ": ", cert.strip())  # the SAN heading and its value on one line
        print("server certificate made for this run: " + "; ".join(cert.splitlines()), flush=True)
        print("station uplink: " + json.dumps(cfg["uplink"]), flush=True)
        print("== tarn check (demo/station.json with demo/buoy_summer.json: polls every %d s, "
              "%d-minute windows)" % (period, window // 60), flush=True)
        subprocess.run([tarn, "check", "--config", cfg_path], check=True)
        # The shore side: a subscriber printing each payload in hex, and
        # `tarn decode` turning the packets back into windows (it learns the
        # channel manifest from the manifest packet the station sends first).
        shore = Shore(tarn, broker, procs, period, window)
        shore.connect()
        time.sleep(1.0)

        # One clock for simulator and daemon: station time = T + (now - T) *
        # SPEED is START about a second from now, when both are up.
        start_t = parse_time(START)
        origin = ((time.time() + 1.0) * SPEED - start_t) / (SPEED - 1)

        def station_now():
            return origin + (time.time() - origin) * SPEED

        def real_at(station):
            return origin + (station - origin) / SPEED

        sim = subprocess.Popen([sys.executable, os.path.join(HERE, "sim", "station_sim.py"),
                                "--dir", os.path.join(work, "dev"), "--speed", str(SPEED),
                                "--speed-origin", "%.3f" % origin, "--story-start", str(start_t),
                                "--fouling-per-day", str(FOULING_PER_DAY)], stdout=subprocess.PIPE,
                               text=True)
        procs.append(sim)
        for _ in range(3):
            print(sim.stdout.readline().strip(), flush=True)  # the three ptys are there
        print("== tarn run --speed %d --speed-origin %.3f (station time %s now; one %d-minute window "
              "every %.0f s, a poll every %.0f ms of real time)"
              % (SPEED, origin, iso(station_now()), window // 60, window / SPEED, 1000.0 * period / SPEED),
              flush=True)
        run_args = [tarn, "run", "--config", cfg_path, "--speed", str(SPEED), "--speed-origin",
                    "%.3f" % origin]
        if os.geteuid() == 0:
            run_args.append("--allow-root")
        daemon = subprocess.Popen(run_args, stderr=subprocess.PIPE, text=True)
        procs.insert(1, daemon)  # stopped before the simulator and the broker
        # The daemon's log, but for its summary per instrument, one line every
        # 10 station minutes (every half second here): counted, not printed.
        summaries = []

        def relay_log():
            for line in daemon.stderr:
                if SUMMARY_LINE.search(line):
                    summaries.append(line)
                else:
                    sys.stdout.write(line)
                    sys.stdout.flush()
        threading.Thread(target=relay_log, daemon=True).start()
        deadline = started + LIMIT_S
        # The simulator's later lines (the cleaning) go to our stdout as they come.
        threading.Thread(target=lambda: [print(line.rstrip(), flush=True) for line in sim.stdout],
                         daemon=True).start()
        print("shore: one line per station hour from the decoded samples: pc median [lowest-highest], "
              "chla median (ug/L; samples flagged 1 to 3), pc flags pass/not evaluated/suspect/fail/"
              "missing, the doubts on pc, the packet", flush=True)

        def status_json():
            for _ in range(3):
                r = subprocess.run([tarn, "status", "--json", "--config", cfg_path], capture_output=True,
                                   text=True)
                if r.returncode == 0:
                    return json.loads(r.stdout)
                time.sleep(0.2)
            return None

        shore.pump(real_at(start_t + OUTAGE_AT_H * 3600) - time.time())

        # ---- the broker outage ----
        print("== broker outage: mosquitto stopped (SIGTERM) at station time %s; down for %.0f s of real "
              "time (%.1f station hours)" % (iso(station_now()), BROKER_DOWN_S,
                                              BROKER_DOWN_S * SPEED / 3600.0), flush=True)
        before = set(shore.seen)
        down_at = time.time()
        broker.stop()
        shore.pump(0.3)
        shore.disconnect()
        print("broker: down; the shore subscriber is disconnected too", flush=True)
        shown = False
        back_at = down_at + BROKER_DOWN_S
        while time.time() < back_at - 1.5:
            time.sleep(min(window / SPEED, max(0.0, back_at - 1.5 - time.time())))
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
        shore.pump(max(0.0, min(45.0, deadline - time.time())), until=lambda: held_seqs <= set(shore.seen))
        arrived = [s for s in held_seqs if s in shore.seen and s not in before]
        held_windows = [s for s, k in held if k == "window"]
        got_windows = [s for s in held_windows if s in shore.seen]
        seqs = sorted(shore.seen)
        contiguous = seqs == list(range(1, len(seqs) + 1))
        first = min((shore.seen[s][1] for s in arrived), default=up_at)
        print("backlog: %d of %d windows held during the outage arrived (%d of %d packets, %.1f s after "
              "the broker came back, at station time %s); sequence numbers at the shore %s 1..%d"
              % (len(got_windows), len(held_windows), len(arrived), len(held), first - up_at,
                 iso(station_now()), "contiguous" if contiguous else "NOT contiguous:",
                 seqs[-1] if seqs else 0), flush=True)
        backlog_ok = len(held_windows) > 0 and len(got_windows) == len(held_windows) and contiguous

        # ---- one downlink command ----
        # mosquitto_pub reads the command from its stdin (-l) once connected,
        # so that the command's time is taken when it leaves: the station
        # accepts |t - station time| <= 300 s, 0.3 s of real time here.
        pub = subprocess.Popen(broker.client_args("mosquitto_pub") + ["-q", "1", "-t", PREFIX + "cmd", "-l"],
                               stdin=subprocess.PIPE, text=True)
        procs.append(pub)
        shore.pump(1.0)
        cmd = sign({"id": "demo-ping-1", "cmd": "ping", "t": int(station_now()),
                    "nonce": os.urandom(8).hex()}, broker.command_key)
        pub.stdin.write(json.dumps(cmd) + "\n")
        pub.stdin.close()
        print("== downlink: signed ping on %scmd: %s" % (PREFIX, json.dumps(cmd)), flush=True)
        shore.pump(10, until=lambda: any(r.get("id") == cmd["id"] for r in shore.replies))
        pub.wait(timeout=5)
        reply = [r for r in shore.replies if r.get("id") == cmd["id"]]
        reply_ok = bool(reply) and reply[0].get("result") == "accepted"

        # ---- a config reload (SIGHUP): health twice as often. Neither the
        # pipeline nor the link is built from it, so the
        # daemon's log says both carry on (no reconnect, no alert repeated).
        old_health = cfg["health"]["interval_s"]
        cfg["health"]["interval_s"] = old_health // 2
        with open(cfg_path, "w") as f:
            json.dump(cfg, f, indent=2)
        print("== reload: health.interval_s %d -> %d in %s, then SIGHUP"
              % (old_health, cfg["health"]["interval_s"], cfg_path), flush=True)
        reload_t = station_now()
        daemon.send_signal(signal.SIGHUP)
        shore.pump(2.0)

        # ---- the fluorometer's optics are cleaned ----
        clean_t = parse_time(CLEAN_AT)
        # Maintenance of the fluorometer only: the temperature chain's record
        # goes on unflagged.
        which = ["--instrument", "fluorometer"]
        shore.pump(real_at(clean_t) - time.time())
        print("== cleaning the fluorometer's optics at station time %s: tarn maintenance start %s"
              % (iso(station_now()), " ".join(which + ["--note", '"optics cleaned"'])), flush=True)
        subprocess.run([tarn, "maintenance", "start", "--config", cfg_path, "--note", "optics cleaned"]
                       + which, check=True)
        began = station_now()  # maintenance is on from here at the latest
        sim.send_signal(signal.SIGUSR1)  # the simulated biofilm is wiped off
        shore.pump(real_at(began + CLEAN_POLLS * period) - time.time())
        print("== tarn maintenance stop%s at station time %s (%.0f polls after the simulator cleaned)"
              % ("".join(" " + w for w in which), iso(station_now()), (station_now() - began) / period),
              flush=True)
        subprocess.run([tarn, "maintenance", "stop", "--config", cfg_path] + which, check=True)
        ended = station_now()  # and off from here

        # ---- the rest of the story ----
        end_t = start_t + STORY_H * 3600
        shore.pump(max(0.0, min(deadline, real_at(end_t + 2 * period)) - time.time()))
        print("== tarn status (end)", flush=True)
        subprocess.run([tarn, "status", "--config", cfg_path])
        print("== stopping the daemon (SIGTERM) at station time %s" % iso(station_now()), flush=True)
        daemon.send_signal(signal.SIGTERM)
        rc = daemon.wait(timeout=10)
        shore.pump(1.0)
        print("== what reached the shore", flush=True)
        ladder_ok = show_alert_ladder(shore)
        days_ok = show_days(shore, start_t)
        sizes_ok = show_packet_sizes(shore, cfg)
        cleaning_at_shore = show_cleaning(shore)
        print("== hollin-buoy-1 archive: tarn store export --format jsonl", flush=True)
        rows = export(tarn, cfg_path, start_t, end_t) or []
        cleaning_ok = show_cleaning_in_archive(rows, began, ended)
        # A reload reopens the lines: the polls skipped meanwhile are archived
        # as missed (flag 9, README "Using tarn"); any other missed poll is a
        # defect of the demo's timing.
        at_reload = [x for x in rows if reload_t - period <= x["t"] <= reload_t + 3 * period]
        missed = count_missed([x for x in rows if x["t"] >= start_t + 2 * period and x not in at_reload],
                              "archive, but for the first polls and the reload")
        count_missed(at_reload, "archive around the reload at %s" % iso(reload_t))
        print("daemon log: %d summary lines per instrument not shown; the last: %s"
              % (len(summaries), summaries[-1].strip() if summaries else "-"), flush=True)
        jetty_ok = jetty.finish()
        print("== %d windows reached the shore; backlog after the outage %s; downlink reply %s; "
              "alert levels %s; pc night minimum %s; cleaning step %s in the archive, %s at the shore; "
              "%d polls missed; jetty quenching and fouling %s; daemon exit code %d; %.0f s"
              % (shore.windows, "complete" if backlog_ok else "INCOMPLETE",
                 reply[0]["result"] if reply else "MISSING",
                 "raised and cleared one by one" if ladder_ok else "NOT AS EXPECTED",
                 "rising over two nights" if days_ok else "NOT RISING",
                 "shown" if cleaning_ok else "NOT SHOWN",
                 "%d record(s)" % len(shore.cleaning) if cleaning_at_shore else "no record",
                 missed, "shown" if jetty_ok else "NOT SHOWN", rc, time.time() - started), flush=True)
        return 0 if (shore.windows >= 5 and rc == 0 and backlog_ok and reply_ok and ladder_ok and days_ok
                     and sizes_ok and cleaning_ok and cleaning_at_shore and missed == 0
                     and jetty_ok) else 1
    finally:
        cleanup()


if __name__ == "__main__":
    sys.exit(main())
