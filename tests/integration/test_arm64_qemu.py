#!/usr/bin/python3
"""arm64 build of the pure unit tests (test_codec: the wire format and its
test vectors; test_pipeline: QC, windows, alerts, sun position against
python3-ephem) cross-compiled with Debian's aarch64-linux-gnu-g++ and run
under qemu-user (qemu-aarch64-static). Drives tests/cross/build-pure-arm64.sh
and checks, besides its exit code, that the binaries really are AArch64 ELF
files and that Catch2 reported passing test cases for both.
"""
import os
import re
import subprocess

from harness import SOURCE_DIR, Harness, finish

with Harness("arm64") as h:
    out = h.path("cross")
    script = os.path.join(SOURCE_DIR, "tests", "cross", "build-pure-arm64.sh")
    r = subprocess.run(["sh", script, out], capture_output=True, text=True, timeout=560,
                       env=dict(os.environ, JOBS="2"))
    log = r.stdout + r.stderr
    print("\n".join(l for l in log.splitlines() if not l.startswith("  CXX"))[-4000:])
    h.check(r.returncode == 0, "build-pure-arm64.sh: exit %d" % r.returncode)
    for t in ("test_codec", "test_pipeline"):
        path = os.path.join(out, t)
        if not h.check(os.path.exists(path), "%s built" % t):
            continue
        with open(path, "rb") as f:
            head = f.read(20)
        # ELF header (System V ABI, ELF-64 object file format): e_ident "\x7fELF", class 2
        # (64-bit), data 1 (little endian); e_machine at offset 18 = 183 (EM_AARCH64).
        h.check(head[:4] == b"\x7fELF" and head[4] == 2 and head[5] == 1
                and int.from_bytes(head[18:20], "little") == 183, "%s is a 64-bit LE AArch64 ELF" % t)
    results = re.findall(r"running (test_\w+) under \S+\n(?:.*\n)*?All tests passed \((\d+) assertions? in (\d+) test cases?\)", log)
    seen = {name: (int(a), int(c)) for name, a, c in results}
    for t in ("test_codec", "test_pipeline"):
        a, c = seen.get(t, (0, 0))
        h.check(a > 0 and c > 0, "%s under qemu: all passed, %d assertions in %d test cases" % (t, a, c))
    finish(h)
