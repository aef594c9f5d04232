#!/usr/bin/env python3
"""The layer rule of DEVELOPERS.md ("Layers"), enforced: every #include "..." of a
project header must name a folder that the including folder may use. An include
upward (a lower layer naming a higher one) is an error, and the build stops
(target tarn_layer_check runs this script before the libraries are compiled).

Usage: check_layers.py [ROOT]    (ROOT defaults to the repository)
Exit: 0 clean; 65 (EX_DATAERR) with one line per upward include.
"""
import os
import re
import sys

# Folder -> the folders it may include (itself always). Longest prefix wins.
# Order, bottom up: os, settings, codec | protocol, pipeline, config | drivers |
# store, uplink, control | core | cli.
ALLOWED = {
    "drivers/os": set(),
    "config/settings": set(),  # settings types: standard library (and nlohmann) only
    "codec": set(),
    "drivers/protocol": {"codec"},  # Result (codec/result.h)
    "daemon/pipeline": {"config/settings", "codec"},  # the QARTOD flag (codec/qartod_flag.h)
    "config": {"config/settings"},
    "drivers": {"drivers/os", "drivers/protocol", "config", "config/settings"},
    "daemon/store": {"drivers/os", "config", "config/settings", "codec", "daemon/pipeline"},
    "daemon/uplink": {"drivers/os", "config", "config/settings", "codec", "drivers"},  # drivers: the serial opener
    "daemon/control": {"drivers/os"},
    "daemon/core": {"drivers/os", "drivers/protocol", "drivers", "config", "config/settings",
                    "codec", "daemon/pipeline", "daemon/store", "daemon/uplink", "daemon/control"},
    "daemon/cli": {"drivers/os", "drivers/protocol", "drivers", "config", "config/settings",
                   "codec", "daemon/pipeline", "daemon/store", "daemon/uplink", "daemon/control",
                   "daemon/core"},
    "daemon": {"daemon/cli"},  # daemon/main.cpp
}

INCLUDE = re.compile(r'^\s*#\s*include\s+"([^"]+)"')


def folder_of(rel):
    """The layer a repository path belongs to (longest matching prefix)."""
    best = None
    for f in ALLOWED:
        if rel == f or rel.startswith(f + "/"):
            if best is None or len(f) > len(best):
                best = f
    return best


def check(root):
    problems = []
    for top in ("codec", "config", "drivers", "daemon"):
        for dirpath, _, files in os.walk(os.path.join(root, top)):
            for name in sorted(files):
                if not name.endswith((".h", ".cpp")):
                    continue
                path = os.path.join(dirpath, name)
                rel = os.path.relpath(path, root)
                mine = folder_of(os.path.dirname(rel))
                if mine is None:
                    continue
                with open(path, encoding="utf-8", errors="replace") as f:
                    for lineno, line in enumerate(f, 1):
                        m = INCLUDE.match(line)
                        if not m:
                            continue
                        target = m.group(1)
                        theirs = folder_of(os.path.dirname(target))
                        if theirs is None or theirs == mine:
                            continue  # a system-style or same-folder include
                        if theirs not in ALLOWED[mine]:
                            problems.append(
                                f"{rel}:{lineno}: layer {mine} includes {target} from layer "
                                f"{theirs}; {mine} may include only "
                                f"{', '.join(sorted(ALLOWED[mine])) or 'itself'}"
                                " (DEVELOPERS.md, Layers)")
    return problems


def main():
    root = sys.argv[1] if len(sys.argv) > 1 else os.path.join(os.path.dirname(__file__), "..", "..")
    problems = check(os.path.abspath(root))
    for p in problems:
        print(p, file=sys.stderr)
    return 65 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
