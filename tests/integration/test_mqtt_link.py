#!/usr/bin/python3
"""The mqtt backend against mosquitto (Debian's package) on free loopback
ports, with a test CA and server certificate made by openssl and a password
file made by mosquitto_passwd:

1. TLS with the right CA and password: windows arrive.
2. TLS with the wrong CA, and a wrong password: refused, logged, retried with
   backoff, no packet marked sent.
   The wrong-CA refusal must be logged so that a person can act on it: the
   line names the certificate check and the CA file.
3. A secrets file readable by group or others is refused at start: exit 78
   (EX_CONFIG, sysexits(3)), one line naming the file, its mode and what is
   allowed, and nothing started (no store created).
4. Broker down for 30 simulated minutes, then up again. A shore subscriber
   with a persistent session (mosquitto_sub -c -i ID -q 1, subscribed before
   the station starts; the broker keeps sessions across its restart) records
   what arrives. An alert rule with a threshold the demo water always exceeds
   and a reminder every window (renotify_s = window length) makes alerts
   wait beside windows during the outage. Checks: every window closed during
   the outage arrives, byte for byte as the outbox holds it, and was not
   acknowledged before the broker came back; the sequence numbers at the
   shore run 1..N without a gap and match the outbox; every alert waiting when
   the broker came back arrives before every normal packet that was waiting
   (older ones included); duplicates only as repeated sequence numbers with
   the same payload.
"""
import json
import os
import sqlite3
import subprocess
import time

from harness import (KIND_TOPIC, TARN, Harness, LineCollector, codec_packets, demo_config, finish, outbox_counts,
                     outbox_rows, read_lines, station_time)


def make_pki(h):
    d = h.path("pki")
    os.makedirs(d)
    run = lambda *a: subprocess.run(list(a), cwd=d, check=True, capture_output=True)
    for ca in ("ca", "other-ca"):
        run("openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj", "/CN=tarn test %s" % ca,
            "-keyout", ca + ".key", "-out", ca + ".pem")
    run("openssl", "req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=localhost", "-keyout", "server.key",
        "-out", "server.csr")
    with open(os.path.join(d, "ext.cnf"), "w") as f:
        f.write("subjectAltName=DNS:localhost,IP:127.0.0.1\n")
    run("openssl", "x509", "-req", "-in", "server.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial",
        "-days", "2", "-extfile", "ext.cnf", "-out", "server.pem")
    subprocess.run(["mosquitto_passwd", "-b", "-c", os.path.join(d, "passwd"), "station", "lake-secret"],
                   check=True, capture_output=True)
    # mosquitto started as root drops to its own user: let it read the test PKI.
    os.chmod(h.dir, 0o755)
    os.chmod(d, 0o755)
    for f in os.listdir(d):
        os.chmod(os.path.join(d, f), 0o644)
    return d


def secrets(h, name, password):
    p = h.path(name)
    with open(p, "w") as f:
        json.dump({"username": "station", "password": password}, f)
    os.chmod(p, 0o600)
    return p


def start_sim(h):
    here = os.path.dirname(os.path.abspath(__file__))
    h.start(["/usr/bin/python3", os.path.join(here, "..", "..", "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)


def case_config(h, port, pki, ca, password, tag):
    cfg = demo_config(h, port)
    cfg["paths"]["state_dir"] = h.path("state-" + tag)
    cfg["paths"]["runtime_dir"] = h.path("run-" + tag)
    cfg["uplink"]["options"].update({"host": "localhost", "tls": {"ca_file": os.path.join(pki, ca)},
                                     "secrets_file": secrets(h, "secrets-%s.json" % tag, password)})
    return cfg


def run_case(h, port, pki, ca, password, tag, seconds, mutate=None, extra=()):
    cfg = case_config(h, port, pki, ca, password, tag)
    if mutate:
        mutate(cfg)
    path = h.write_config(cfg, "station-%s.json" % tag)
    d = h.daemon(path, speed=60, extra=extra)
    return d, cfg


with Harness("mqtt") as h:
    pki = make_pki(h)
    extra = ("listener %%d 127.0.0.1\n" "cafile %s/ca.pem\ncertfile %s/server.pem\nkeyfile %s/server.key\n"
             "allow_anonymous false\npassword_file %s/passwd\n") % (pki, pki, pki, pki)
    # harness writes its own listener line; give it the TLS part. The broker keeps
    # sessions and queued messages across a restart (the outage case needs that).
    port, broker, broker_conf = h.persistent_mosquitto(extra=extra.replace("listener %d 127.0.0.1\n", ""))
    start_sim(h)
    sub = subprocess.Popen(["mosquitto_sub", "-h", "localhost", "-p", str(port), "--cafile", pki + "/ca.pem",
                            "-u", "station", "-P", "lake-secret", "-t", "tarn/#", "-F", "%t %x"],
                           stdout=subprocess.PIPE)
    h.procs.append(sub)
    time.sleep(0.5)
    d, _ = run_case(h, port, pki, "ca.pem", "lake-secret", "good", 0)
    got = read_lines(sub, 40, until=lambda ls: sum("/data " in l for l in ls) >= 2)
    h.check(sum("/data " in l for l in got) >= 2, "TLS + password: windows arrive (%d)" % sum("/data " in l for l in got))
    d.terminate()
    d.wait(timeout=10)

    for tag, ca, pw, what in (("wrongca", "other-ca.pem", "lake-secret", "wrong CA"),
                              ("wrongpw", "ca.pem", "not-the-password", "wrong password")):
        open(h.path("daemon.log"), "w").close()
        d, cfg = run_case(h, port, pki, ca, pw, tag, 0)
        time.sleep(12)
        log = open(h.path("daemon.log")).read()
        h.check(d.poll() is None, "%s: daemon keeps running" % what)
        tries = log.count("link down -> connecting") + log.count("link connecting -> down")
        h.check("cannot connect" in log, "%s: refusal logged (%s)" % (what, [l for l in log.splitlines() if "cannot connect" in l][:1]))
        h.check(tries >= 3, "%s: retried with backoff (%d state changes)" % (what, tries))
        if tag == "wrongca":
            # Actionable: says that the server's certificate failed verification and
            # against which CA file, so that a person knows what to fix.
            ca_path = os.path.join(pki, ca)
            refusals = [l for l in log.splitlines() if "cannot connect" in l]
            h.check(any("certificate" in l.lower() and (ca_path in l or "ca_file" in l) for l in refusals),
                    "wrong CA: the log line names the certificate check and the CA file (%s) (got %s)"
                    % (ca_path, refusals[:1]))
        d.terminate()
        d.wait(timeout=10)
        db = sqlite3.connect(os.path.join(cfg["paths"]["state_dir"], "outbox.db"))
        sent = db.execute("SELECT COUNT(*) FROM packets WHERE sent_t IS NOT NULL").fetchone()[0]
        total = db.execute("SELECT COUNT(*) FROM packets").fetchone()[0]
        h.check(total > 0 and sent == 0, "%s: no packet marked sent (%d of %d)" % (what, sent, total))

    # A secrets file readable by group or others: refused at start, one line, exit 78.
    for mode in (0o640, 0o604):
        tag = "open%o" % mode
        cfg = case_config(h, port, pki, "ca.pem", "lake-secret", tag)
        os.chmod(cfg["uplink"]["options"]["secrets_file"], mode)
        path = h.write_config(cfg, "station-%s.json" % tag)
        args = [TARN, "run", "--config", path, "--speed", "60"] + (["--allow-root"] if os.geteuid() == 0 else [])
        try:
            r = subprocess.run(args, capture_output=True, text=True, timeout=20)
            rc, out = r.returncode, [l for l in (r.stdout + r.stderr).splitlines() if l.strip()]
        except subprocess.TimeoutExpired:
            rc, out = "still running after 20 s", []
        secrets_path = cfg["uplink"]["options"]["secrets_file"]
        h.check(rc == 78, "secrets file mode %04o: refused at start with exit 78, EX_CONFIG of sysexits(3) (%s)"
                % (mode, rc))
        h.check(len(out) == 1 and secrets_path in out[0] and "%04o" % mode in out[0] and "allowed" in out[0],
                "secrets file mode %04o: one line naming the file, its mode and what is allowed (%s)" % (mode, out))
        h.check(not os.path.exists(cfg["paths"]["state_dir"]), "secrets file mode %04o: nothing started (no store)"
                % mode)

    # Broker outage: 30 simulated minutes at --speed 60 are 30 s.
    SPEED = 60
    open(h.path("daemon.log"), "w").close()
    tls_args = ["--cafile", pki + "/ca.pem", "-u", "station", "-P", "lake-secret"]
    base = "tarn-outage/hollin-buoy-1"  # a prefix of its own: the runs above used sequence 1.. too
    osub = h.persistent_subscriber(port, "tarn-test-shore-outage", base + "/+", tls_args)
    early = h.wait_subscribed(osub, port, base, tls_args)
    shore = LineCollector(osub)

    def outage_config(cfg):
        cfg["uplink"]["options"]["topic_prefix"] = "tarn-outage"
        # The demo's bloom comes hours later; this rule holds a level from the first
        # window on (chlorophyll-a is never below 0) and repeats it every window,
        # so alerts wait beside windows during the outage.
        cfg["alerts"]["rules"].append({"name": "outage-test", "channel": "chla", "statistic": "mean",
                                       "levels": [{"name": "test-level", "threshold": 0.0}],
                                       "renotify_s": cfg["sampling"]["window_s"]})

    origin = int(time.time())
    d, cfg = run_case(h, port, pki, "ca.pem", "lake-secret", "outage", 0, mutate=outage_config,
                      extra=["--speed-origin", str(origin)])
    outbox = os.path.join(cfg["paths"]["state_dir"], "outbox.db")
    deadline = time.time() + 40
    while time.time() < deadline:
        kinds = [k for k, _, _ in codec_packets(shore.snapshot(), base)]
        if kinds.count("data") >= 2 and "alert" in kinds:
            break
        time.sleep(0.2)
    kinds = [k for k, _, _ in codec_packets(shore.snapshot(), base)]
    h.check(kinds.count("data") >= 2 and "alert" in kinds,
            "before the outage windows and alerts arrive (%d data, %d alert)" % (kinds.count("data"),
                                                                                kinds.count("alert")))
    # t_down once the broker is gone: a window acknowledged while mosquitto
    # shuts down was acknowledged by a broker that was still there.
    broker.terminate()
    broker.wait(timeout=5)
    t_down = time.time()
    time.sleep(30)
    waiting = [r for r in (outbox_rows(outbox) or []) if r["sent_t"] is None]
    t_up = time.time()
    h.restart_mosquitto(broker_conf, port)
    down_s, up_s = station_time(origin, SPEED, t_down), station_time(origin, SPEED, t_up)
    print("outage: station time %d..%d (%.0f simulated minutes); %d packets waiting when the broker came back"
          % (down_s, up_s, (up_s - down_s) / 60, len(waiting)), flush=True)

    def at_shore():
        return {s for _, s, _ in codec_packets(shore.snapshot(), base)}

    # Drain: the station reconnects at its next retry (backoff up to ~40 s here).
    deadline = time.time() + 75
    while time.time() < deadline:
        c = outbox_counts(outbox, timeout_s=0.5)
        if c and c[0] == c[1] and {r["seq"] for r in waiting} <= at_shore():
            break
        time.sleep(0.2)
    time.sleep(2)
    d.terminate()
    rc = d.wait(timeout=10)
    h.check(rc == 0, "outage run stopped in order (exit %s)" % rc)
    rows = outbox_rows(outbox) or []
    deadline = time.time() + 10
    while time.time() < deadline:
        if {r["seq"] for r in rows if r["sent_t"] is not None} <= at_shore():
            break
        time.sleep(0.2)
    time.sleep(0.5)
    osub.terminate()
    osub.wait(timeout=5)
    shore.join(timeout=2)
    received = codec_packets(early + shore.snapshot(), base)

    by_seq = {r["seq"]: r for r in rows}
    first_at, payloads = {}, {}
    for i, (topic, seq, payload) in enumerate(received):
        first_at.setdefault(seq, i)
        payloads.setdefault(seq, set()).add(payload)
    seqs = sorted(by_seq)
    unsent = [r["seq"] for r in rows if r["sent_t"] is None]
    dups = len(received) - len(first_at)
    print("outage: outbox %d packets (%s), %d unsent at the end; shore %d received, %d distinct, %d duplicates"
          % (len(rows), ", ".join("%d %s" % (sum(1 for r in rows if KIND_TOPIC.get(r["kind"]) == k), k)
                                  for k in ("data", "alert", "manifest", "health")),
             len(unsent), len(received), len(first_at), dups), flush=True)

    # Every window closed during the outage arrived, as the outbox holds it, after the broker was back.
    during = [r for r in rows if r["kind"] == 1 and down_s <= r["created_t"] <= up_s]
    h.check(len(during) >= 3, "windows closed during the outage (%d, expected 3 for 30 minutes of 10-minute windows)"
            % len(during))
    lost = [r["seq"] for r in during if payloads.get(r["seq"]) != {r["bytes"]}]
    h.check(not lost, "every window closed during the outage arrived byte for byte (not: %s)" % lost)
    early_ack = [r["seq"] for r in during if r["sent_t"] is None or r["sent_t"] < up_s - SPEED]
    h.check(not early_ack, "no window of the outage was acknowledged before the broker was back (%s)" % early_ack)

    # Sequence numbers at the shore: 1..N without a gap, the outbox's packets.
    got = sorted(first_at)
    h.check(seqs == list(range(1, len(seqs) + 1)) and got == seqs and not unsent,
            "sequence numbers at the shore run 1..%d without a gap and match the outbox (shore gaps: %s, unsent: %s)"
            % (len(seqs), sorted(set(range(1, max(got + [0]) + 1)) - set(got))[:10], unsent))
    conflicts = [s for s, p in payloads.items() if len(p) > 1 or (s in by_seq and by_seq[s]["bytes"] not in p)]
    h.check(not conflicts, "duplicates only as repeated sequence numbers with the outbox's payload (%s)" % conflicts)

    # Priorities: every alert that waited arrived before every normal packet that waited.
    w_alert = [r["seq"] for r in waiting if r["priority"] == 0]
    w_normal = [r["seq"] for r in waiting if r["priority"] != 0]
    order = "".join("A" if by_seq[s]["priority"] == 0 else "n"
                    for s in sorted((s for s in first_at if s in {r["seq"] for r in waiting}), key=first_at.get))
    print("outage: waiting alerts %s, waiting normal packets %s; arrival order %s" % (w_alert, w_normal, order))
    h.check(len(w_alert) >= 1 and len(w_normal) >= 3, "alerts and normal packets both waited (%d alerts, %d normal)"
            % (len(w_alert), len(w_normal)))
    h.check(all(s in first_at for s in w_alert + w_normal) and w_alert and w_normal and
            max(first_at[s] for s in w_alert) < min(first_at[s] for s in w_normal),
            "alerts first: every waiting alert arrived before every waiting normal packet, older ones included")
finish(h)
