#!/usr/bin/python3
"""ARM builds of the pure unit tests (test_codec: the wire format and its
test vectors; test_pipeline: QC, windows, alerts, sun position against
python3-ephem) cross-compiled with Debian's cross compilers and run under
qemu-user: arm64 (aarch64-linux-gnu-g++, qemu-aarch64-static) and armhf,
the 32-bit boards where size_t and Debian 12's time_t are 32 bits
(arm-linux-gnueabihf-g++, qemu-arm-static). Drives
tests/cross/build-pure-arm64.sh and checks, besides its exit code, that the
binaries really are ARM ELF files of the right class and that Catch2
reported passing test cases for both.
"""
import os
import re
import subprocess

from harness import SOURCE_DIR, Harness, finish

# ELF header (System V ABI): e_ident[4] class (1: 32-bit, 2: 64-bit), e_ident[5]
# data (1: little endian), e_machine at offset 18 (40: EM_ARM, 183: EM_AARCH64).
ARCHES = [
    ("arm64", {}, 2, 183),
    ("armhf", {"CXX_ARM64": "arm-linux-gnueabihf-g++", "QEMU_ARM64": "qemu-arm-static",
               "ARM64_SYSROOT": "/usr/arm-linux-gnueabihf"}, 1, 40),
]

with Harness("cross") as h:
    script = os.path.join(SOURCE_DIR, "tests", "cross", "build-pure-arm64.sh")
    for arch, env, elf_class, machine in ARCHES:
        out = h.path("cross-" + arch)
        r = subprocess.run(["sh", script, out], capture_output=True, text=True, errors="replace",
                           timeout=560,
                           env=dict(os.environ, JOBS="2", **env))
        log = r.stdout + r.stderr
        print("\n".join(l for l in log.splitlines() if not l.startswith("  CXX"))[-3000:])
        h.check(r.returncode == 0, "%s: build-pure-arm64.sh: exit %d" % (arch, r.returncode))
        for t in ("test_codec", "test_pipeline"):
            path = os.path.join(out, t)
            if not h.check(os.path.exists(path), "%s: %s built" % (arch, t)):
                continue
            with open(path, "rb") as f:
                head = f.read(20)
            h.check(head[:4] == b"\x7fELF" and head[4] == elf_class and head[5] == 1
                    and int.from_bytes(head[18:20], "little") == machine,
                    "%s: %s is an ELF of class %d for machine %d" % (arch, t, elf_class, machine))
        results = re.findall(r"running (test_\w+) under \S+\n(?:.*\n)*?All tests passed \((\d+) assertions? "
                             r"in (\d+) test cases?\)", log)
        seen = {name: (int(a), int(c)) for name, a, c in results}
        for t in ("test_codec", "test_pipeline"):
            a, c = seen.get(t, (0, 0))
            h.check(a > 0 and c > 0, "%s: %s under qemu: all passed, %d assertions in %d test cases"
                    % (arch, t, a, c))
    finish(h)
