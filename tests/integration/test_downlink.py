#!/usr/bin/python3
"""Downlink commands end to end: mosquitto on a free loopback port, the demo
simulator, the daemon at --speed 60 with a command_key in its secrets file.
Commands go in with mosquitto_pub on tarn/hollin-buoy-1/cmd; answers come
back on tarn/hollin-buoy-1/reply.

The MAC is computed here with Python's hmac/hashlib (the standard library,
an implementation independent of ours) over the canonical bytes as written in
daemon/uplink/DOWNLINK.md.

Checks: a signed set, maintenance and ping are accepted and applied; a
malformed, an unknown, two out-of-range, an unsigned, a wrongly signed and a
replayed command are refused with their reason, and `tarn status --json`
shows nothing changed; the override survives a restart.
"""
import calendar
import hashlib
import hmac
import json
import os
import signal
import subprocess
import time

from harness import TARN, Harness, demo_config, finish, read_lines

SPEED = 60
STATION = "hollin-buoy-1"
KEY = bytes(range(32))


def canonical(cmd):
    # DOWNLINK.md, "Canonical bytes".
    args = json.dumps(cmd.get("args", {}), sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return ("tarn-command-v1\n%s\n%s\n%s\n%s\n%s\n%s" % (
        STATION, cmd["id"], cmd["cmd"], cmd.get("t", ""), cmd.get("nonce", ""), args)).encode()


def signed(cmd, key=KEY):
    c = dict(cmd)
    c["mac"] = hmac.new(key, canonical(c), hashlib.sha256).hexdigest()
    return json.dumps(c)


with Harness("downlink") as h:
    port, _ = h.mosquitto()
    sim = h.start(["/usr/bin/python3", os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..",
                                                     "demo", "sim", "station_sim.py"),
                   "--dir", h.path("dev"), "--speed", str(SPEED)], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    secrets = h.path("secrets.json")
    with open(secrets, "w") as f:
        json.dump({"command_key": KEY.hex()}, f)
    os.chmod(secrets, 0o600)
    cfg = demo_config(h, port)
    cfg["uplink"]["options"]["secrets_file"] = secrets
    cfg_path = h.write_config(cfg)
    replies = h.subscribe(port, topic="tarn/%s/reply" % STATION)

    def status():
        r = subprocess.run([TARN, "status", "--json", "--config", cfg_path], capture_output=True, text=True)
        return json.loads(r.stdout) if r.returncode == 0 else None

    def wait_up(seconds=20):
        deadline = time.time() + seconds
        while time.time() < deadline:
            st = status()
            if st and st["link"]["state"] == "up":
                time.sleep(1.0)  # the subscription to cmd follows the connect
                return st
            time.sleep(0.2)
        return None

    def station_now():
        st = status()
        t0 = time.time()
        s0 = calendar.timegm(time.strptime(st["now"], "%Y-%m-%dT%H:%M:%SZ"))
        return int(s0 + (time.time() - t0) * SPEED)

    def send(payload, rid, seconds=10):
        subprocess.run(["mosquitto_pub", "-h", "127.0.0.1", "-p", str(port), "-q", "1",
                        "-t", "tarn/%s/cmd" % STATION, "-m", payload], check=True)
        got = read_lines(replies, seconds, until=lambda ls: any('"id":"%s"' % rid in l for l in ls))
        for l in got:
            if '"id":"%s"' % rid in l:
                return json.loads(l.split(" ", 1)[1])
        return None

    def snapshot():
        st = status()
        return {"settings": st["settings"], "maintenance": st["maintenance"]}

    n = [0]

    def cmd(name, args=None, t=None):
        n[0] += 1
        c = {"id": "c%d" % n[0], "cmd": name, "t": station_now() if t is None else t, "nonce": "n%d-%d" % (n[0], time.time_ns())}
        if args is not None:
            c["args"] = args
        return c

    d = h.daemon(cfg_path, speed=SPEED)
    h.check(wait_up() is not None, "link up")
    st = st0 = status()
    h.check(st["downlink"]["signed_only"] is True, "status: signed commands only (key configured)")

    # Valid commands: applied and answered.
    c = cmd("ping")
    r = send(signed(c), c["id"])
    h.check(r is not None and r["result"] == "accepted" and r["data"]["version"], "signed ping accepted (%s)" % r)

    # Resend of sent packets from the outbox (the manifest is sequence 1, sent at start).
    data = h.subscribe(port, topic="tarn/%s/manifest" % STATION)
    read_lines(data, 1.0)  # the retained copy
    c = cmd("resend", {"first_seq": 1, "last_seq": 1})
    r = send(signed(c), c["id"])
    h.check(r is not None and r["result"] == "accepted" and r["data"]["queued"] == 1,
            "signed resend of sequence 1 accepted, 1 packet queued (%s)" % r)
    again = read_lines(data, 5, until=lambda ls: len(ls) >= 1)
    h.check(len(again) >= 1, "the resent manifest packet arrived again (%d)" % len(again))

    c = cmd("set", {"setting": "/sampling/period_s", "value": 120})
    r = send(signed(c), c["id"])
    h.check(r is not None and r["result"] == "accepted", "signed set period_s=120 accepted (%s)" % r)
    wait_up()
    st = status()
    h.check(st["settings"]["period_s"] == 120 and st["settings"]["overrides"] == {"/sampling/period_s": 120},
            "status: period_s 120, override recorded (%s)" % st["settings"])

    # Its t is 240 s ahead (inside the +-300 s window): the replay further down
    # then has 540 station seconds (9 real s at x60) before only the window
    # could refuse it, time a loaded machine may need for the steps between.
    start = cmd("maintenance", {"action": "start", "note": "sonde wipe"}, t=station_now() + 240)
    start_bytes = signed(start)
    r = send(start_bytes, start["id"])
    h.check(r is not None and r["result"] == "accepted" and status()["maintenance"] is True,
            "signed maintenance start accepted and active (%s)" % r)
    c = cmd("maintenance", {"action": "stop"})
    r = send(signed(c), c["id"])
    h.check(r is not None and r["result"] == "accepted" and status()["maintenance"] is False,
            "signed maintenance stop accepted, maintenance over (%s)" % r)

    # Refused ones: each answered with its reason, nothing changed. The
    # replay goes first, while its t is still inside the +-300 s window
    # (5 real seconds at --speed 60), so only the nonce can refuse it.
    before = snapshot()

    def one(what, make, reason, rid=None):
        payload, cid = make()
        r = send(payload, cid if rid is None else rid)
        h.check(r is not None and r["result"] == "refused" and reason in r["reason"],
                "%s: refused with reason (%s)" % (what, r))
        after = snapshot()
        h.check(after == before, "%s: nothing changed (%s)" % (what, after))

    def make_signed(name, args=None, key=KEY, t=None):
        def f():
            c = cmd(name, args, t=None if t is None else station_now() + t)
            return signed(c, key), c["id"]
        return f

    one("replayed maintenance start", lambda: (start_bytes, start["id"]), "replayed")
    # Not JSON: no id can be read, the reply has "id": "".
    one("malformed", lambda: ('{"id":"bad1","cmd":"ping",', ""), "not valid JSON")
    one("unknown command", make_signed("reboot"), "unknown command")
    one("out of range period_s=0", make_signed("set", {"setting": "/sampling/period_s", "value": 0}),
        "/sampling/period_s")
    one("window_s=650 (not a multiple of the period)",
        make_signed("set", {"setting": "/sampling/window_s", "value": 650}), "/sampling/window_s")
    one("setting not on the allow list", make_signed("set", {"setting": "/station/id", "value": 1}),
        "/args/setting")
    one("interval_min with mode always", make_signed("set", {"setting": "/uplink/policy/interval_min", "value": 30}),
        "mode is \"always\"")
    one("bad argument", make_signed("maintenance", {"action": "pause"}), "/args/action")

    def unsigned():
        c = cmd("maintenance", {"action": "start"})
        return json.dumps(c), c["id"]
    one("unsigned", unsigned, "unsigned")
    one("wrong key", make_signed("maintenance", {"action": "start"}, key=b"\x01" * 32), "mac does not match")
    one("stale t", make_signed("maintenance", {"action": "start"}, t=-3600), "outside the window")
    ncases = 11
    st = status()
    h.check(st["downlink"]["refused"] >= ncases, "status counts the refusals (%s)" % st["downlink"])

    # Per instrument (issue 11, item 3): the probe only, with its own maximum;
    # an unknown instrument is refused naming the configured ones.
    c = cmd("maintenance", {"action": "start", "instrument": "probe", "max_minutes": 90, "note": "probe swap"})
    r = send(signed(c), c["id"])
    st = status()
    periods = st["maintenance_periods"] if st else []
    h.check(r is not None and r["result"] == "accepted" and len(periods) == 1
            and periods[0]["instrument"] == "probe" and periods[0]["note"] == "probe swap",
            "signed maintenance start of instrument probe accepted, only probe in maintenance (%s, %s)"
            % (r, periods))
    h.check(st and all(ch["maintenance"] == (ch["instrument"] == "probe") for ch in st["channels"]),
            "status: the probe's channels are in maintenance, the others not (%s)"
            % [(ch["name"], ch["maintenance"]) for ch in (st or {}).get("channels", [])])
    if periods:
        since = calendar.timegm(time.strptime(periods[0]["since"], "%Y-%m-%dT%H:%M:%SZ"))
        until = calendar.timegm(time.strptime(periods[0]["until"], "%Y-%m-%dT%H:%M:%SZ"))
        h.check(until - since == 90 * 60, "its own maximum: ends by itself 90 min after its start (%d s)"
                % (until - since))
    c = cmd("maintenance", {"action": "start", "instrument": "sonde-9"})
    r = send(signed(c), c["id"])
    h.check(r is not None and r["result"] == "refused" and "unknown instrument \"sonde-9\"" in r["reason"]
            and "fluorometer, chain, probe" in r["reason"],
            "unknown instrument refused, naming the configured ones (%s)" % r)
    c = cmd("maintenance", {"action": "stop", "instrument": "probe"})
    r = send(signed(c), c["id"])
    st = status()
    h.check(r is not None and r["result"] == "accepted" and st["maintenance"] is False
            and st.get("maintenance_last", {}).get("instrument") == "probe"
            and st["maintenance_last"]["ended_by"] == "stop",
            "signed stop of instrument probe accepted; status: none active, last the probe's, ended by a stop "
            "(%s, %s)" % (r, st.get("maintenance_last")))

    # The override is persisted: a restart keeps period_s 120.
    first_run_from = calendar.timegm(time.strptime(st0["now"], "%Y-%m-%dT%H:%M:%SZ"))
    first_run_to = station_now()
    # The last command before the restart: its nonce is the one still inside
    # the window, so the persisted cache must hold it after the restart.
    last = cmd("ping")
    last_bytes = signed(last)
    r = send(last_bytes, last["id"])
    h.check(r is not None and r["result"] == "accepted", "last ping before the restart accepted (%s)" % r)
    d.send_signal(signal.SIGTERM)
    h.check(d.wait(timeout=10) == 0, "daemon stopped with exit 0")
    # The outbox is deleted (as if its retention had passed): a resend by time
    # of the first run must then be rebuilt from the archive.
    for suffix in ("", "-wal", "-shm"):
        if os.path.exists(h.path("state", "outbox.db" + suffix)):
            os.unlink(h.path("state", "outbox.db" + suffix))
    # The restarted daemon's station time is set back to the replayed
    # command's t (--speed-origin T: station time = T + (now - T) * SPEED),
    # so its t is inside the +-300 s window again however long the run above
    # took: only the persisted nonce can refuse it.
    restart = time.time()
    origin = (restart * SPEED - (last["t"] - 290)) / (SPEED - 1)  # 290 s before t: 9.8 s of slack
    d = h.daemon(cfg_path, speed=SPEED, extra=("--speed-origin", "%.3f" % origin))
    st = wait_up()
    h.check(st is not None and st["settings"]["period_s"] == 120, "override kept across a restart (%s)"
            % (st and st["settings"]))
    # The nonce cache too: the replay is still refused after the restart.
    r = send(last_bytes, last["id"])
    h.check(r is not None and r["result"] == "refused" and "replayed" in r["reason"],
            "replay after restart refused by the persisted nonce cache (%s)" % r)
    # Resend by time with nothing left in the outbox: rebuilt from the archive,
    # published as new data packets that decode on the shore.
    data = h.subscribe(port, topic="tarn/%s/data" % STATION, hex_payload=True)
    c = cmd("resend", {"from_t": first_run_from, "to_t": first_run_to})
    r = send(signed(c), c["id"])
    rebuilt = r["data"].get("rebuilt_windows", 0) if r and r.get("data") else 0
    h.check(r is not None and r["result"] == "accepted" and rebuilt >= 1,
            "resend by time beyond the outbox: rebuilt from the archive (%s)" % r)
    got = read_lines(data, 15, until=lambda ls: len(ls) >= rebuilt)
    h.check(rebuilt >= 1 and len(got) >= rebuilt, "the rebuilt windows were published (%d of %d)"
            % (len(got), rebuilt))
    # The shore learns the manifest (with the period_s override) from its
    # retained manifest packet, as tarn decode does in the demo.
    man = read_lines(h.subscribe(port, topic="tarn/%s/manifest" % STATION, hex_payload=True), 3,
                     until=lambda ls: len(ls) >= 1)
    dec = subprocess.run([TARN, "decode", "--hex", "--records", "windows"],
                         input="\n".join(l.split(" ", 1)[1] for l in man + got) + "\n",
                         capture_output=True, text=True)
    starts = sorted({json.loads(l)["start"] for l in dec.stdout.splitlines() if l.startswith("{")})
    h.check(dec.returncode == 0 and starts and first_run_from - 600 <= starts[0] and starts[-1] <= first_run_to,
            "they decode, and their windows lie in the asked range (%s..%s; %s)"
            % (starts[:1], starts[-1:], dec.stderr.strip()[:200]))
    d.send_signal(signal.SIGTERM)
    d.wait(timeout=10)
finish(h)
