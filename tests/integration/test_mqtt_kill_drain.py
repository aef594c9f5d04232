#!/usr/bin/python3
"""SIGKILL while the outbox drains to a real mosquitto (issue 7: at-least-once
delivery across crashes).

1. A mosquitto (Debian's package) on a free 127.0.0.1 port, and a shore
   subscriber with a persistent session (mosquitto_sub -c -i ID -q 1) that is
   subscribed before the station starts, so it misses nothing.
2. Backlog: the daemon runs at --speed with the demo's simulated instruments
   while its uplink points at a loopback port where no broker listens (the
   broker is down for the station), so the outbox fills with windows, health
   packets and alerts (a test rule whose level holds from the first window on
   and is repeated every window).
3. Drain with kills: the daemon is started with the broker's port (one packet
   in flight at a time), and once a random number (1..6) of this run's packets
   are acknowledged it is killed with SIGKILL after a further random delay of
   up to 30 ms (seeded RNG; the seed is printed, set TARN_KILL_SEED to repeat
   a schedule), and started again; TARN_KILL_DRAIN_KILLS times (default 30).
   All runs share one station timeline (--speed-origin).
4. The last run drains the rest and stops with SIGTERM.

Checks: every packet the outbox marked sent arrived at the subscriber at least
once; a sequence number that arrived more than once carried the identical
payload each time, equal to the outbox's bytes; nothing arrived that the
outbox does not hold; every kill happened while packets still waited; the
backlog drained. Prints sent, received and duplicate counts.
"""
import os
import random
import signal
import subprocess
import time

from harness import (KIND_TOPIC, Harness, LineCollector, codec_packets, demo_config, finish, free_port,
                     outbox_counts, outbox_rows, stop_daemon, wait_ready)

KILLS = int(os.environ.get("TARN_KILL_DRAIN_KILLS", "30"))
SEED = int(os.environ.get("TARN_KILL_SEED", str(random.SystemRandom().randrange(1 << 31))))
SPEED = 4000  # a 600 s window closes every 0.15 s, a health packet (3600 s) every 0.9 s
BACKLOG_S = 55  # real seconds with the broker out of reach
# A kill comes after a random number of this run's acknowledgements (1..MAX_ACKS),
# plus a random delay: counting acks keeps the kills inside the drain whatever
# the machine's load makes the drain rate.
MAX_ACKS = 6
MAX_DELAY_S = 0.03
STATION = "hollin-buoy-1"
BASE = "tarn/" + STATION
CLIENT_ID = "tarn-test-shore-killdrain"


def wait_acks(outbox, at_least, limit_s=20.0):
    """Until the outbox has at least `at_least` acknowledged packets; the count, or None."""
    deadline = time.time() + limit_s
    while time.time() < deadline:
        c = outbox_counts(outbox, timeout_s=0.5)
        if c and c[1] >= at_least:
            return c[1]
        time.sleep(0.005)
    return None


def main():
    t_begin = time.time()
    rng = random.Random(SEED)
    print("kill schedule seed %d (TARN_KILL_SEED=%d repeats it)" % (SEED, SEED), flush=True)
    with Harness("killdrain") as h:
        port, _ = h.mosquitto(extra="allow_anonymous true\nmax_queued_messages 0\n")
        sub = h.persistent_subscriber(port, CLIENT_ID, BASE + "/+")
        early = h.wait_subscribed(sub, port, BASE)
        shore = LineCollector(sub)

        here = os.path.dirname(os.path.abspath(__file__))
        h.start(["/usr/bin/python3", os.path.join(here, "..", "..", "demo", "sim", "station_sim.py"),
                 "--dir", h.path("dev"), "--speed", str(SPEED)], stdout=subprocess.DEVNULL)
        time.sleep(1.0)

        cfg = demo_config(h, port)
        cfg["log"] = {"level": "info"}
        # Acknowledged packets stay in the outbox for the whole run (the run spans
        # weeks of station time), so the test can compare them with the shore.
        cfg["store"] = {"sent_retention_days": 3650}
        # One packet in flight at a time: the drain takes long enough for 30 kills
        # to land in it, and a kill between PUBACK and mark-sent is more likely.
        cfg["uplink"]["options"]["max_inflight"] = 1
        # Alerts in the backlog too: a level that holds from the first window on
        # (chlorophyll-a is never below 0), repeated every window.
        cfg["alerts"]["rules"].append({"name": "kill-drain-test", "channel": "chla", "statistic": "mean",
                                       "levels": [{"name": "test-level", "threshold": 0.0}],
                                       "renotify_s": cfg["sampling"]["window_s"]})
        cfg_up = h.write_config(cfg, "station.json")
        cfg["uplink"]["options"]["port"] = free_port()  # nothing listens there
        cfg_down = h.write_config(cfg, "station-broker-down.json")
        outbox = h.path("state", "outbox.db")
        sock = h.path("run", "control.sock")
        origin = int(time.time())
        extra = ["--speed-origin", str(origin)]

        # 2. Backlog with the broker out of reach.
        d = h.daemon(cfg_down, speed=SPEED, extra=extra)
        time.sleep(BACKLOG_S)
        d.send_signal(signal.SIGTERM)
        rc = d.wait(timeout=15)
        h.procs.remove(d)
        rows = outbox_rows(outbox) or []
        backlog = sum(1 for r in rows if r["sent_t"] is None)
        h.check(rc == 0, "backlog run stopped in order (exit %s)" % rc)
        h.check(backlog >= 300 and all(r["sent_t"] is None for r in rows),
                "a backlog built up with the broker out of reach (%d packets, none sent)" % backlog)

        # 3. Drain, killed at random moments.
        kills = []  # (acked before start, acked at kill, waiting after kill, acks asked for)
        acked = sum(1 for r in rows if r["sent_t"] is not None)
        for i in range(KILLS):
            d = h.daemon(cfg_up, speed=SPEED, extra=extra)
            if not wait_ready(sock, 15):
                h.check(False, "run %d: daemon ready within 15 s" % (i + 1))
                break
            n_acks = rng.randint(1, MAX_ACKS)
            got = wait_acks(outbox, acked + n_acks)
            if got is None:
                h.check(False, "run %d: %d packets acknowledged within 20 s of the start" % (i + 1, n_acks))
                break
            delay = rng.uniform(0.0, MAX_DELAY_S)
            time.sleep(delay)
            d.send_signal(signal.SIGKILL)
            d.wait()
            h.procs.remove(d)
            c = outbox_counts(outbox) or (0, 0)
            kills.append((acked, c[1], c[0] - c[1], n_acks))
            acked = c[1]
        h.check(len(kills) == KILLS, "%d kills done" % len(kills))
        while_draining = sum(1 for k in kills if k[1] > k[0] and k[2] > 0)
        h.check(while_draining == len(kills),
                "every kill hit a draining outbox: acks in that run and packets still waiting (%d of %d)"
                % (while_draining, len(kills)))
        print("kills: acknowledged in each run before its kill: %s" % " ".join(str(k[1] - k[0]) for k in kills))
        print("kills: waiting after each kill: %s" % " ".join(str(k[2]) for k in kills), flush=True)

        # 4. The last run drains what the kills left, then stops in order. The
        # backlog is the packets waiting when it starts: how many new windows
        # wait beside them depends on the machine's speed, not on the drain.
        left_by_kills = {r["seq"] for r in (outbox_rows(outbox) or []) if r["sent_t"] is None}
        d = h.daemon(cfg_up, speed=SPEED, extra=extra)
        deadline = time.time() + 60
        left = None
        while time.time() < deadline:
            rows = outbox_rows(outbox, timeout_s=0.5)
            if rows is not None:
                left = left_by_kills - {r["seq"] for r in rows if r["sent_t"] is not None}
                if not left:
                    break
            time.sleep(0.2)
        h.check(left_by_kills and left is not None and not left,
                "the last run drained the backlog of %d packets the kills left while windows kept "
                "closing (still waiting: %s)" % (len(left_by_kills), sorted(left)[:5] if left else left))
        rc = stop_daemon(h, d, "final orderly stop exits 0", timeout=15)

        # Let the last publications reach the subscriber.
        rows = outbox_rows(outbox) or []
        sent_seqs = {r["seq"] for r in rows if r["sent_t"] is not None}
        deadline = time.time() + 10
        while time.time() < deadline:
            if sent_seqs <= {s for _, s, _ in codec_packets(shore.snapshot(), BASE)}:
                break
            time.sleep(0.2)
        time.sleep(0.5)
        sub.terminate()
        sub.wait(timeout=5)
        shore.join(timeout=2)
        received = codec_packets(early + shore.snapshot(), BASE)

        by_seq = {r["seq"]: r for r in rows}
        first_payload, count = {}, {}
        conflicts, not_in_outbox, differs_from_outbox, wrong_topic = [], [], [], []
        for topic, seq, payload in received:
            count[seq] = count.get(seq, 0) + 1
            if seq in first_payload and first_payload[seq] != payload:
                conflicts.append(seq)
            first_payload.setdefault(seq, payload)
            r = by_seq.get(seq)
            if r is None:
                not_in_outbox.append(seq)
                continue
            if r["bytes"] != payload:
                differs_from_outbox.append(seq)
            if KIND_TOPIC.get(r["kind"]) != topic:
                wrong_topic.append(seq)
        duplicates = sum(n - 1 for n in count.values())
        dup_seqs = sum(1 for n in count.values() if n > 1)
        missing = sorted(sent_seqs - set(count))
        kinds = {}
        for r in rows:
            kinds[KIND_TOPIC.get(r["kind"], "?")] = kinds.get(KIND_TOPIC.get(r["kind"], "?"), 0) + 1
        print("outbox: %d packets (%s), %d marked sent, %d unsent" %
              (len(rows), ", ".join("%d %s" % (n, k) for k, n in sorted(kinds.items())), len(sent_seqs),
               len(rows) - len(sent_seqs)))
        print("shore: %d received, %d distinct sequences, %d duplicates (%d sequences delivered more than once)"
              % (len(received), len(count), duplicates, dup_seqs))
        print("sent %d, received %d, duplicates %d" % (len(sent_seqs), len(received), duplicates), flush=True)

        h.check(not missing, "every packet marked sent arrived at least once (missing %d: %s)"
                % (len(missing), missing[:10]))
        h.check(not conflicts, "a repeated sequence number always carried the same payload (conflicts %s)"
                % sorted(set(conflicts))[:10])
        h.check(not differs_from_outbox, "every payload equals the outbox's bytes for its sequence (differ %s)"
                % sorted(set(differs_from_outbox))[:10])
        h.check(not not_in_outbox, "nothing arrived that the outbox does not hold (%s)"
                % sorted(set(not_in_outbox))[:10])
        h.check(not wrong_topic, "each packet arrived on its kind's topic (%s)" % sorted(set(wrong_topic))[:10])
        h.check(len(sent_seqs) >= backlog, "at least the whole backlog was acknowledged (%d >= %d)"
                % (len(sent_seqs), backlog))
        print("elapsed %.0f s" % (time.time() - t_begin))
        finish(h)


if __name__ == "__main__":
    main()
