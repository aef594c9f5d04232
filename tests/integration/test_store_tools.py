#!/usr/bin/python3
"""`tarn store stats|export|packets`, the field tools, beside a running daemon.

The demo station (demo/station.json, simulated instruments of
demo/sim/station_sim.py) runs at --speed 60 (a 600 s window every 10 s) with
its broker down, so packets pile up unsent. While it runs:

1. `tarn store stats` (--db and --config): unsent packets, bytes and alerts,
   oldest unsent, sample count and range, drops; each figure checked against
   sqlite3 (Debian's command-line shell) reading the same files read-only
   (mode=ro URI). The daemon keeps writing, so a count must lie between
   sqlite3's count just before and just after the tool's run.
2. `tarn store export --from --to` in csv and jsonl (ISO 8601 and unix-second
   bounds): every row has from <= t < to, a QARTOD flag (1, 2, 3, 4, 9), a value
   exactly when the flag is not 9, and the rows equal sqlite3's rows of that
   range one for one (time, channel, value, flag, reasons); --channel filters.
3. `tarn store packets --unsent`: one comment line per packet whose seq, size
   and kind agree with the packet's own header bytes (codec/FORMAT.md §2);
   the --bare hex decodes with `tarn decode --hex` with no error, the manifest
   learned from the manifest packet in the stream, and every decoded sample
   agrees with the archive (same flag, value within half a resolution step).
4. A broker comes up (SIGHUP with a config naming it): the backlog drains,
   every packet the tool listed arrives at a real mosquitto with the same
   bytes, and the tools then show no unsent packet.
Bad arguments: one line on stderr, exit 64 (EX_USAGE, sysexits.h).
Run: TARN_BIN=build/daemon/tarn /usr/bin/python3 tests/integration/test_store_tools.py
"""
import csv
import io
import json
import os
import re
import signal
import subprocess
import time

from harness import (SOURCE_DIR, TARN, Harness, demo_config, finish, free_port, read_lines, seq_of,
                     stop_daemon)

STATION = "hollin-buoy-1"


def tool(*args):
    return subprocess.run([TARN] + list(args), capture_output=True, text=True, timeout=60)


def sql(path, query):
    """sqlite3 on a read-only URI: the test never writes the store either."""
    r = subprocess.run(["sqlite3", "-batch", "-cmd", ".timeout 5000", "file:%s?mode=ro" % path, query],
                       capture_output=True, text=True, timeout=30)
    if r.returncode != 0:
        raise RuntimeError("sqlite3: %s" % r.stderr.strip())
    return [row.split("|") for row in r.stdout.strip().split("\n") if row]


def utc(t):
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def stats_fields(text):
    f = {}
    m = re.search(r"unsent:\s+(\d+) packets, (\d+) bytes, (\d+) alerts", text)
    if m:
        f["unsent"], f["unsent_bytes"], f["unsent_alerts"] = map(int, m.groups())
    m = re.search(r"oldest unsent:\s+(\S+)", text)
    f["oldest"] = m.group(1) if m else None
    m = re.search(r"sent, kept:\s+(\d+) packets", text)
    f["sent_kept"] = int(m.group(1)) if m else None
    m = re.search(r"samples:\s+(\d+) in (\d+) channels, (\S+) \.\. (\S+)", text)
    if m:
        f["samples"], f["channels"] = int(m.group(1)), int(m.group(2))
        f["oldest_sample"], f["newest_sample"] = m.group(3), m.group(4)
    m = re.search(r"drops:\s+(\d+) in all", text)
    f["drops"] = int(m.group(1)) if m else None
    return f


with Harness("storetools") as h:
    port = free_port()  # nothing listens here until part 4
    h.start(["/usr/bin/python3", os.path.join(SOURCE_DIR, "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", "60"], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, port)
    cfg_path = h.write_config(cfg)
    channels = [c for i in cfg["instruments"] for c in i["channels"]]
    res = {c["name"]: c["resolution"] for c in channels}
    state = h.path("state")
    outbox, archive = h.path("state", "outbox.db"), h.path("state", "archive.db")
    d = h.daemon(cfg_path, speed=60)
    t0 = time.time()
    # Four windows closed (40 s of station minutes at x60) with the broker down.
    while time.time() - t0 < 60:
        if os.path.exists(outbox) and d.poll() is None:
            try:
                span = sql(archive, "SELECT coalesce(max(t) - min(t), 0) FROM samples")[0][0]
                if (int(sql(outbox, "SELECT count(*) FROM packets WHERE kind = 1")[0][0]) >= 4 and
                        int(span) >= 2400):
                    break
            except RuntimeError:
                pass
        time.sleep(1)
    h.check(d.poll() is None, "daemon runs with its broker down")

    # ---- 1. stats ---------------------------------------------------------------------
    q_unsent = "SELECT count(*), coalesce(sum(size), 0), min(created_t) FROM packets WHERE sent_t IS NULL"
    before = sql(outbox, q_unsent)[0]
    s_before = int(sql(archive, "SELECT count(*) FROM samples")[0][0])
    r = tool("store", "stats", "--db", state)
    after = sql(outbox, q_unsent)[0]
    s_after = int(sql(archive, "SELECT count(*) FROM samples")[0][0])
    print("      " + r.stdout.replace("\n", "\n      "))
    st = stats_fields(r.stdout)
    h.check(r.returncode == 0, "store stats exits 0 beside the running daemon (%d %s)"
            % (r.returncode, r.stderr.strip()))
    h.check(int(before[0]) <= st.get("unsent", -1) <= int(after[0]) and st["unsent"] >= 5,
            "stats: unsent packets %s within sqlite3's %s..%s (manifest and >= 4 windows)"
            % (st.get("unsent"), before[0], after[0]))
    h.check(int(before[1]) <= st.get("unsent_bytes", -1) <= int(after[1]),
            "stats: unsent bytes %s within sqlite3's %s..%s" % (st.get("unsent_bytes"), before[1],
                                                              after[1]))
    h.check(st.get("oldest") == utc(int(before[2])),
            "stats: oldest unsent %s is sqlite3's min(created_t) %s" % (st.get("oldest"),
                                                                       utc(int(before[2]))))
    h.check(s_before <= st.get("samples", -1) <= s_after and st.get("channels") == len(channels),
            "stats: %s samples in %s channels (sqlite3: %d..%d samples, config: %d channels)"
            % (st.get("samples"), st.get("channels"), s_before, s_after, len(channels)))
    first_t = int(sql(archive, "SELECT min(t) FROM samples")[0][0])
    h.check(st.get("oldest_sample") == utc(first_t), "stats: oldest sample %s is sqlite3's min(t)"
            % st.get("oldest_sample"))
    drops_db = sum(int(v) for db in (outbox, archive)
                   for (v,) in sql(db, "SELECT coalesce(sum(value), 0) FROM counters "
                                       "WHERE name LIKE 'dropped.%'"))
    h.check(st.get("drops") == drops_db == 0, "stats: drops %s, sqlite3's dropped.* counters %d"
            % (st.get("drops"), drops_db))
    rc = tool("store", "stats", "--config", cfg_path)
    h.check(rc.returncode == 0 and "unsent:" in rc.stdout and state in rc.stdout,
            "stats --config finds the store through paths.state_dir")
    r = tool("store", "stats", "--db", h.path("nowhere"))
    h.check(r.returncode == 66 and r.stderr.count("\n") == 1,
            "stats on a missing store: one line, exit 66 EX_NOINPUT (%d: %s)"
            % (r.returncode, r.stderr.strip()[:120]))

    # ---- 2. export --------------------------------------------------------------------
    # A closed stretch 10 station minutes behind the newest sample: 20 minutes,
    # starting mid-window.
    newest = int(sql(archive, "SELECT max(t) FROM samples")[0][0])
    t_from = newest - 600 - 1200 - 300
    t_to = t_from + 1200
    h.check(t_from > first_t, "the archive holds more than the exported range (%s .. %s)"
            % (utc(first_t), utc(newest)))
    # quote() prints a REAL with 20 significant digits: it parses back to the same double.
    db_rows = sql(archive, "SELECT s.t, c.name, quote(s.value), s.flag, s.reasons FROM samples s "
                  "JOIN channels c ON c.id = s.channel WHERE s.t >= %d AND s.t < %d" % (t_from, t_to))
    db_set = sorted((int(t), ch, float(v) if v != "NULL" else None, int(f), int(rb))
                    for t, ch, v, f, rb in db_rows)
    ex_csv = tool("store", "export", "--db", state, "--from", utc(t_from), "--to", utc(t_to),
                  "--format", "csv")
    rows = list(csv.reader(io.StringIO(ex_csv.stdout)))
    h.check(ex_csv.returncode == 0 and rows and rows[0] == ["time_utc", "t", "channel", "value",
                                                            "flag", "reasons"],
            "export csv: exit 0, header time_utc,t,channel,value,flag,reasons")
    got_csv = sorted((int(t), ch, float(v) if v else None, int(f), int(rb))
                     for tu, t, ch, v, f, rb in rows[1:])
    h.check(all(tu == utc(int(t)) for tu, t, *_ in rows[1:]), "export csv: time_utc is t in ISO 8601")
    h.check(len(got_csv) == len(db_set) and len(db_set) >= 9 * 19,
            "export csv: %d rows, sqlite3 counts %d in [from, to)" % (len(got_csv), len(db_set)))
    h.check(all(t_from <= x[0] < t_to for x in got_csv), "export csv: every time within [from, to)")
    h.check(all(x[3] in (1, 2, 3, 4, 9) and (x[2] is None) == (x[3] == 9) for x in got_csv),
            "export csv: QARTOD flags; a value exactly when the flag is not 9")
    h.check(got_csv == db_set, "export csv: rows equal sqlite3's (time, channel, value, flag, "
            "reasons; values as the same double)")
    ex_j = tool("store", "export", "--db", state, "--from", str(t_from), "--to", str(t_to),
                "--format", "jsonl")
    jrows = [json.loads(l) for l in ex_j.stdout.split("\n") if l]
    got_j = sorted((x["t"], x["ch"], x["v"], x["f"], x["r"]) for x in jrows)
    h.check(ex_j.returncode == 0 and got_j == db_set,
            "export jsonl with unix-second bounds: the same %d rows as sqlite3" % len(got_j))
    ex_c = tool("store", "export", "--config", cfg_path, "--from", str(t_from), "--to", str(t_to),
                "--format", "jsonl", "--channel", "pc")
    crow = [json.loads(l) for l in ex_c.stdout.split("\n") if l]
    h.check(crow and all(x["ch"] == "pc" for x in crow) and
            len(crow) == sum(1 for x in db_set if x[1] == "pc"),
            "export --channel pc: only pc, all %d of them" % len(crow))
    bad = tool("store", "export", "--db", state, "--from", str(t_to), "--to", str(t_from))
    h.check(bad.returncode == 64 and bad.stderr.count("\n") == 1 and bad.stdout == "",
            "export with from >= to: one line, exit 64 (%d: %s)" % (bad.returncode,
                                                                    bad.stderr.strip()[:120]))
    bad = tool("store", "export", "--db", state, "--from", str(t_from), "--to", str(t_to),
               "--format", "xml")
    h.check(bad.returncode == 64 and bad.stderr.count("\n") == 1, "export --format xml: one line, exit 64")

    # ---- 3. packets --unsent ----------------------------------------------------------
    before = int(sql(outbox, "SELECT count(*) FROM packets WHERE sent_t IS NULL")[0][0])
    pk = tool("store", "packets", "--db", state, "--unsent")
    after = int(sql(outbox, "SELECT count(*) FROM packets WHERE sent_t IS NULL")[0][0])
    lines = [l for l in pk.stdout.split("\n") if l]
    comments = [l for l in lines if l.startswith("# ")]
    hexes = [l for l in lines if not l.startswith("# ")]
    h.check(pk.returncode == 0 and len(comments) == len(hexes) and before <= len(hexes) <= after,
            "packets --unsent: %d packets, a comment line each (sqlite3: %d..%d unsent)"
            % (len(hexes), before, after))
    agree = 0
    listed = {}
    for c, x in zip(comments, hexes):
        b = bytes.fromhex(x)
        m = re.match(r"# seq=(\d+) kind=(\S+) priority=(\S+) created=(\S+) size=(\d+) attempts=\d+", c)
        if m and int(m.group(1)) == seq_of(b) and int(m.group(5)) == len(b) and b[0] >> 4 == 2:
            agree += 1
        listed[seq_of(b)] = (m.group(2) if m else None, b)
    h.check(agree == len(hexes) > 0, "packets: seq and size of each comment agree with the packet's "
            "header and length (%d of %d)" % (agree, len(hexes)))
    kinds = [v[0] for v in listed.values()]
    h.check(kinds.count("manifest") == 1 and kinds.count("window") >= 4,
            "packets: the manifest and >= 4 windows unsent (%s)" % kinds)
    bare = tool("store", "packets", "--db", state, "--unsent", "--bare")
    bare_hex = [l for l in bare.stdout.split("\n") if l]
    h.check(bare_hex[:len(hexes)] == hexes, "packets --bare: the same hex lines, without comments")
    dec = subprocess.run([TARN, "decode", "--hex"], input="\n".join(hexes) + "\n",
                         capture_output=True, text=True, timeout=60)
    h.check(dec.returncode == 0 and "manifest of station %s learned" % STATION in dec.stderr and
            dec.stderr.count("\n") == 1,
            "tarn decode --hex of the unsent packets: exit 0, manifest learned from the stream, "
            "no error (%d: %s)" % (dec.returncode, dec.stderr.strip()[:300]))
    decoded = [json.loads(l) for l in dec.stdout.split("\n") if l]
    lo, hi = min(x["t"] for x in decoded), max(x["t"] for x in decoded)
    arch = {(int(t), ch): (float(v) if v != "" else None, int(f)) for t, ch, v, f in sql(
        archive, "SELECT s.t, c.name, coalesce(s.value, ''), s.flag FROM samples s JOIN channels c "
        "ON c.id = s.channel WHERE s.t >= %d AND s.t <= %d" % (lo, hi))}
    flag_diff, value_diff, absent = [], 0, 0
    for x in decoded:
        a = arch.get((x["t"], x["ch"]))
        if a is None:
            absent += x["f"] != 9  # a missed poll may have no archive row; anything else must
            continue
        if a[1] != x["f"]:
            flag_diff.append((x["t"], x["ch"], a[1], x["f"]))
        elif x["v"] is not None and abs(a[0] - x["v"]) > res[x["ch"]] / 2 + 1e-9:
            value_diff += 1
    h.check(len(decoded) >= 4 * 10 * len(channels),
            "decoded %d samples from the unsent windows" % len(decoded))
    h.check(absent == 0, "every decoded sample with a value is in the archive (%d not)" % absent)
    h.check(not flag_diff, "decoded flags equal the archive's (%d differ%s)"
            % (len(flag_diff), ", e.g. (t, ch, archive, packet) %s" % flag_diff[:3] if flag_diff else ""))
    h.check(value_diff == 0, "decoded values within half a resolution step of the archive's (%d not)"
            % value_diff)
    bad = tool("store", "packets", "--db", state, "--unsent", "--all")
    h.check(bad.returncode == 64 and bad.stderr.count("\n") == 1, "packets --unsent --all: one line, exit 64")

    # ---- 4. the broker comes up: the backlog drains -----------------------------------
    # A broker on another port and SIGHUP with the config naming it: the daemon
    # rebuilds its link at once instead of waiting out its reconnect backoff.
    port2, _ = h.mosquitto()
    sub = h.subscribe(port2, topic="tarn/%s/#" % STATION, hex_payload=True)
    cfg["uplink"]["options"]["port"] = port2
    h.write_config(cfg)
    d.send_signal(signal.SIGHUP)
    drained, got = False, []
    deadline = time.time() + 40
    while time.time() < deadline and not drained:
        got += read_lines(sub, 2)
        left = int(sql(outbox, "SELECT count(*) FROM packets WHERE sent_t IS NULL AND seq <= %d"
                       % max(listed))[0][0])
        drained = left == 0
    got += read_lines(sub, 2)
    h.check(drained, "the backlog drained once the broker was up (%.0f s after the start)"
            % (time.time() - t0))
    at_broker = {}
    for line in got:
        topic, _, payload = line.partition(" ")
        if topic.endswith(("/data", "/manifest", "/alert")):
            b = bytes.fromhex(payload)
            at_broker[seq_of(b)] = b
    missing = [s for s in listed if at_broker.get(s) != listed[s][1]]
    h.check(not missing, "every listed packet reached the broker with the same bytes (%d of %d; "
            "missing %s)" % (len(listed) - len(missing), len(listed), missing[:5]))
    st2 = stats_fields(tool("store", "stats", "--db", state).stdout)
    unsent_now = int(sql(outbox, "SELECT count(*) FROM packets WHERE sent_t IS NULL")[0][0])
    h.check(st2.get("sent_kept", 0) >= len(listed) and st2.get("unsent", 99) <= max(unsent_now, 1),
            "stats after the drain: %s sent and kept, %s unsent" % (st2.get("sent_kept"),
                                                                   st2.get("unsent")))
    pk2 = tool("store", "packets", "--db", state, "--unsent", "--bare")
    left_seqs = {seq_of(bytes.fromhex(l)) for l in pk2.stdout.split("\n") if l}
    h.check(not (left_seqs & set(listed)), "packets --unsent no longer lists the drained packets")
    stop_daemon(h, d)
    print("      test took %.0f s" % (time.time() - t0))
finish(h)
