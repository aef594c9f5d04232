#!/usr/bin/python3
"""systemd/tarn.service: `systemd-analyze verify` finds nothing wrong, and
`systemd-analyze security --offline=true` rates it 2.0 or lower ("OK").

The unit names /usr/bin/tarn; the test verifies a copy that points at the
binary under test (the package test checks the installed path). The
man page reference is checked only where the man page is installed.
"""
import os
import re
import shutil
import subprocess

from harness import SOURCE_DIR, TARN, Harness, finish

with Harness("systemd") as h:
    unit = open(os.path.join(SOURCE_DIR, "systemd", "tarn.service")).read()
    text = unit.replace("/usr/bin/tarn", os.path.abspath(TARN))
    if subprocess.run(["man", "-w", "tarn"], capture_output=True).returncode != 0:
        text = re.sub(r"^Documentation=.*\n", "", text, flags=re.M)
    copy = h.path("tarn.service")
    with open(copy, "w") as f:
        f.write(text)
    r = subprocess.run(["systemd-analyze", "verify", copy], capture_output=True, text=True)
    out = (r.stdout + r.stderr).strip()
    h.check(r.returncode == 0 and not out, "systemd-analyze verify: clean (%d) %s" % (r.returncode, out[:400]))
    r = subprocess.run(["systemd-analyze", "security", "--offline=true", copy], capture_output=True, text=True)
    m = re.search(r"Overall exposure level for \S+: ([0-9.]+) (\w+)", r.stdout)
    h.check(m is not None, "security rating printed")
    if m:
        h.check(float(m.group(1)) <= 2.0, "exposure %s %s (target 2.0 or lower)" % (m.group(1), m.group(2)))
    for key in ("Type=notify", "WatchdogSec=", "Restart=on-failure", "User=tarn", "SupplementaryGroups=dialout",
                "StateDirectory=tarn", "RuntimeDirectory=tarn", "ConfigurationDirectory=tarn",
                "NoNewPrivileges=yes", "ProtectSystem=strict", "ProtectHome=yes", "PrivateTmp=yes",
                "CapabilityBoundingSet=\n", "RestrictAddressFamilies=AF_UNIX AF_INET AF_INET6",
                "SystemCallFilter=@system-service", "MemoryMax="):
        h.check(key in unit, "unit has %s" % key.strip())
finish(h)
