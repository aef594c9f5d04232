#!/usr/bin/python3
"""The store's size budget under the running daemon (issue 6, "Limits and
wear"): a station whose link is down for weeks fills its store.

The daemon runs at x4000 on the simulated instruments with the broker out of
reach and a 1 MiB budget (the smallest the config allows), policy
drop_oldest_normal, and an alert rule that fires every window so alerts wait
in the outbox beside the windows. It must:

  * keep the two files within the budget, measured from outside with
    SQLite's own page accounting (PRAGMA page_count, freelist_count and
    page_size, https://www.sqlite.org/pragma.html), the same "pages in use"
    the budget is defined on (daemon/store/README.md);
  * drop the oldest unsent normal packets first and never an alert: every
    alert event the daemon logged is still in the outbox, the oldest windows
    are gone;
  * count every drop and show the counts in `tarn status` (JSON, the plain
    view by kind, the live view's total), the archive's sample drops included;
  * log the drops at most once per station hour;
  * keep sampling: the archive's newest sample is recent.
"""
import json
import os
import re
import sqlite3
import subprocess
import time

from harness import TARN, Harness, demo_config, finish, free_port, outbox_rows, stop_daemon

SPEED = 4000
BUDGET_MIB = 1
LIMIT_S = 150  # real seconds to reach the budget and drop (about 40 s at x4000)


def status(h):
    r = subprocess.run([TARN, "status", "--json", "--socket", h.path("run", "control.sock")],
                       capture_output=True, text=True, timeout=20)
    return json.loads(r.stdout) if r.returncode == 0 else None


def pages_in_use(path):
    """(page_count - freelist_count) * page_size, read-only; None if busy."""
    try:
        db = sqlite3.connect("file:%s?mode=ro" % path, uri=True, timeout=2.0)
        try:
            pc = db.execute("PRAGMA page_count").fetchone()[0]
            fl = db.execute("PRAGMA freelist_count").fetchone()[0]
            ps = db.execute("PRAGMA page_size").fetchone()[0]
            return (pc - fl) * ps
        finally:
            db.close()
    except sqlite3.Error:
        return None


with Harness("budget") as h:
    here = os.path.dirname(os.path.abspath(__file__))
    h.start(["/usr/bin/python3", os.path.join(here, "..", "..", "demo", "sim", "station_sim.py"),
             "--dir", h.path("dev"), "--speed", str(SPEED)], stdout=subprocess.DEVNULL)
    time.sleep(1.0)
    cfg = demo_config(h, free_port())  # nothing listens there: the link stays down
    cfg["log"] = {"level": "info"}
    cfg["store"] = {"budget_mb": BUDGET_MIB, "when_full": "drop_oldest_normal"}
    # An alert every window (chlorophyll-a is never below 0), so alerts wait too.
    cfg["alerts"]["rules"].append({"name": "budget-test", "channel": "chla", "statistic": "mean",
                                   "levels": [{"name": "test-level", "threshold": 0.0}],
                                   "renotify_s": cfg["sampling"]["window_s"]})
    cfg_path = h.write_config(cfg)
    origin = time.time()
    d = h.daemon(cfg_path, speed=SPEED, extra=("--speed-origin", "%.3f" % origin))

    outbox, archive = h.path("state", "outbox.db"), h.path("state", "archive.db")
    deadline = time.time() + LIMIT_S
    st, worst, samples = None, 0, 0
    while time.time() < deadline and d.poll() is None:
        time.sleep(1.0)
        a, b = pages_in_use(outbox), pages_in_use(archive)
        if a is not None and b is not None:
            worst = max(worst, a + b)
            samples += 1
        st = status(h)
        drops = (st or {}).get("store", {}).get("drops", {})
        if drops.get("dropped.unsent_normal", 0) > 0 and drops.get("dropped.archive_samples", 0) > 0:
            break
    # A while longer at the limit: the budget must hold while drops go on.
    for _ in range(10):
        time.sleep(1.0)
        a, b = pages_in_use(outbox), pages_in_use(archive)
        if a is not None and b is not None:
            worst = max(worst, a + b)
            samples += 1
    st = status(h) or {}
    store = st.get("store", {})
    drops = store.get("drops", {})
    budget = BUDGET_MIB << 20
    print("      store: %d page readings, largest %.3f MiB in use (budget %d MiB); status %s"
          % (samples, worst / 2 ** 20, BUDGET_MIB, json.dumps(store)), flush=True)

    h.check(d.poll() is None, "the daemon runs on at its budget")
    # The budget is checked after every write and a write adds at most one
    # poll cycle or one packet: a little over the budget for a moment is
    # allowed, 64 KiB (16 pages of 4 KiB).
    h.check(samples >= 10 and worst <= budget + 64 * 1024,
            "the two files stay within the budget by SQLite's page accounting (largest %.3f MiB, "
            "budget %d MiB)" % (worst / 2 ** 20, BUDGET_MIB))
    h.check(drops.get("dropped.unsent_normal", 0) > 0,
            "status counts the unsent normal packets dropped (%s)" % drops)
    h.check(drops.get("dropped.archive_samples", 0) > 0,
            "status counts the archive's samples dropped too (%s)" % drops)
    h.check(not any("alert" in k for k in drops), "no alert counted as dropped (%s)" % drops)

    sock = h.path("run", "control.sock")
    plain = subprocess.run([TARN, "status", "--socket", sock], capture_output=True, text=True,
                           timeout=20).stdout
    m = re.search(r"^drops +(.*)$", plain, re.M)
    h.check(m is not None and re.search(r"unsent_normal \d+", m.group(1))
            and re.search(r"archive_samples \d+", m.group(1)),
            "tarn status lists the drops by kind (%s)" % (m.group(0) if m else plain[-300:]))
    watch = subprocess.run(["timeout", "-s", "INT", "3", TARN, "status", "--watch", "--interval", "1",
                            "--socket", sock], capture_output=True, text=True).stdout
    m = re.search(r"^OUTBOX .*drops (\d+)$", watch, re.M)
    h.check(m is not None and int(m.group(1)) > 0, "the live view shows the drops' total (%s)"
            % (m.group(0) if m else watch[-300:]))

    # Read once the daemon has stopped: nothing is written between the log and
    # the outbox read.
    now_t = int(origin + (time.time() - origin) * SPEED)
    stop_daemon(h, d, timeout=15)
    log = open(h.path("daemon.log")).read()
    rows = outbox_rows(outbox) or []
    # kind 1 window, 2 alert (PacketKind in daemon/store/outbox_store.h)
    alerts = [r for r in rows if r["kind"] == 2]
    normal = [r for r in rows if r["kind"] == 1 and r["sent_t"] is None]
    print("      outbox: %d alert packets (created %s..%s), %d unsent window packets (oldest %s)"
          % (len(alerts), alerts[0]["created_t"] if alerts else None,
             alerts[-1]["created_t"] if alerts else None, len(normal),
             normal[0]["created_t"] if normal else None), flush=True)
    # Every alert event the daemon logged is still in the outbox (the first one
    # included), and the oldest windows are not.
    logged = len(re.findall(
        r"alerts: budget-test: (?:raised|lowered|cleared|reminder|resumed|level \S+ is stale)", log))
    h.check(alerts and len(alerts) == logged,
            "every alert logged is still in the outbox (%d logged, %d alert packets)"
            % (logged, len(alerts)))
    h.check(alerts and (not normal or normal[0]["created_t"] > alerts[0]["created_t"]),
            "the oldest window packets were dropped before any alert (oldest unsent window %s)"
            % (normal[0]["created_t"] if normal else None))

    # Sampling went on: the archive's newest sample is within 2 station hours of
    # the stop; its oldest ones were dropped.
    start_t = int(origin)
    db = sqlite3.connect("file:%s?mode=ro" % archive, uri=True, timeout=5.0)
    newest = db.execute("SELECT MAX(t) FROM samples").fetchone()[0]
    oldest = db.execute("SELECT MIN(t) FROM samples").fetchone()[0]
    db.close()
    h.check(newest is not None and now_t - newest <= 7200,
            "sampling goes on at the limit: newest archived sample %s s before the stop"
            % (None if newest is None else now_t - newest))
    h.check(oldest is not None and oldest > start_t + 600,
            "the oldest archived samples were dropped (oldest %s s after the start)"
            % (None if oldest is None else oldest - start_t))

    notices = len(re.findall(r"store dropped data under policy drop_oldest_normal", log))
    hours = (now_t - start_t) / 3600
    h.check(1 <= notices <= int(hours) + 1,
            "the drops are logged at most once per station hour (%d notices in %.0f station hours)"
            % (notices, hours))
finish(h)
