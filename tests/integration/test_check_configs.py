#!/usr/bin/python3
"""`tarn check` against the shipped examples and the broken configs.

Each broken config's first line names the JSON pointer (or line:column) the
error must point at. Each must exit 78 (EX_CONFIG, sysexits(3)), print one
line per problem in the form `FILE: WHERE: what; allowed`, no stack trace, and
never open a port or a socket (checked with strace).
"""
import glob
import os
import re
import shutil
import subprocess

from harness import SOURCE_DIR, TARN, Harness, finish

with Harness("check") as h:
    for ex in sorted(glob.glob(os.path.join(SOURCE_DIR, "config", "examples", "*.json"))):
        r = subprocess.run([TARN, "check", "--config", ex], capture_output=True, text=True)
        h.check(r.returncode == 0, "example %s is valid (exit %d) %s" %
                (os.path.basename(ex), r.returncode, r.stderr.strip()[:300]))
    broken = sorted(glob.glob(os.path.join(SOURCE_DIR, "tests", "config", "broken", "*.json")))
    h.check(len(broken) >= 15, "at least 15 broken configs (%d)" % len(broken))
    # strace is installed by .ci/install-deps: without it the "no port, no
    # socket" half of these checks could not run, which is a failure here.
    have_strace = shutil.which("strace") is not None
    h.check(have_strace, "strace is there to watch for opened ports and sockets")
    for b in broken:
        expect = open(b).readline().split("expect:", 1)[1].strip()
        args = [TARN, "check", "--config", b]
        trace = h.path("strace.log")
        if have_strace:
            args = ["strace", "-f", "-qq", "-e", "trace=openat,open,socket,connect", "-o", trace] + args
        # LeakSanitizer cannot run under ptrace (strace): leaks are checked in the other runs.
        env = dict(os.environ, ASAN_OPTIONS=os.environ.get("ASAN_OPTIONS", "") + ":detect_leaks=0")
        r = subprocess.run(args, capture_output=True, text=True, timeout=20, env=env)
        name = os.path.basename(b)
        h.check(r.returncode == 78, "%s exits 78 (got %d)" % (name, r.returncode))
        lines = [l for l in r.stderr.splitlines() if l.strip()]
        problems = [l for l in lines if l.startswith(b + ": ") and not l.endswith("nothing was started")]
        h.check(any(expect in l for l in problems), "%s names %s: %s" % (name, expect, lines[:2]))
        h.check(all(re.match(re.escape(b) + r": (/|line \d+:column \d+)\S*: .+", l) for l in problems),
                "%s: every problem line is FILE: WHERE: message" % name)
        h.check(not re.search(r"terminate called|Traceback|what\(\)|Aborted|stack", r.stderr),
                "%s: no stack trace or crash" % name)
        if have_strace:
            t = open(trace).read()
            opened_dev = [l for l in t.splitlines() if "/dev/serial" in l or "/dev/tty" in l]
            sockets = [l for l in t.splitlines() if re.search(r"\bsocket\(|\bconnect\(", l)]
            h.check(not opened_dev and not sockets,
                    "%s: no port opened, no socket (%s)" % (name, (opened_dev + sockets)[:1]))
    # Several problems in one file are all reported, not the first only.
    r = subprocess.run([TARN, "check", "--config", os.path.join(SOURCE_DIR, "tests", "config", "many-problems.json")],
                       capture_output=True, text=True)
    n = len([l for l in r.stderr.splitlines() if ": /" in l])
    h.check(r.returncode == 78 and n >= 4, "many-problems.json reports all %d problems at once" % n)
finish(h)
