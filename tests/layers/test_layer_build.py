#!/usr/bin/env python3
"""Proves that the build refuses an upward include: a copy of the source tree
with one injected include from daemon/store (low) of daemon/core (high) is
configured, and building its tarn_layer_check target must fail, naming the file
and line; the unchanged tree must pass the same check."""
import os
import shutil
import subprocess
import sys
import tempfile

ROOT = os.environ.get("TARN_SOURCE_DIR") or os.path.abspath(
    os.path.join(os.path.dirname(__file__), "..", ".."))
CHECK = os.path.join(ROOT, "tests", "layers", "check_layers.py")


def run(cmd, **kw):
    return subprocess.run(cmd, capture_output=True, text=True, timeout=240, **kw)


def main():
    clean = run([sys.executable, CHECK, ROOT])
    assert clean.returncode == 0, f"the repository breaks its own layers:\n{clean.stderr}"

    with tempfile.TemporaryDirectory(prefix="tarn-layers-") as tmp:
        src = os.path.join(tmp, "src")
        files = run(["git", "-C", ROOT, "ls-files"]).stdout.split("\n")
        for rel in filter(None, files):
            if not os.path.isfile(os.path.join(ROOT, rel)):
                continue
            os.makedirs(os.path.dirname(os.path.join(src, rel)) or src, exist_ok=True)
            shutil.copy2(os.path.join(ROOT, rel), os.path.join(src, rel))
        victim = os.path.join(src, "daemon", "store", "sqlite_db.cpp")
        with open(victim, encoding="utf-8") as f:
            text = f.read()
        with open(victim, "w", encoding="utf-8") as f:
            f.write('#include "daemon/core/station.h"\n' + text)

        build = os.path.join(tmp, "build")
        conf = run(["cmake", "-S", src, "-B", build, "-DCMAKE_BUILD_TYPE=Debug"])
        assert conf.returncode == 0, conf.stderr
        b = run(["cmake", "--build", build, "--target", "tarn_layer_check"])
        out = b.stdout + b.stderr
        assert b.returncode != 0, "an upward include built:\n" + out
        want = "daemon/store/sqlite_db.cpp:1: layer daemon/store includes daemon/core/station.h"
        assert want in out, "the refusal does not name the file and line:\n" + out
        # And the libraries depend on the check: building tarn_store must fail too.
        b2 = run(["cmake", "--build", build, "--target", "tarn_store"])
        assert b2.returncode != 0 and want in b2.stdout + b2.stderr, b2.stdout + b2.stderr
    print("layers: an upward include stops the build; the repository is clean")


if __name__ == "__main__":
    main()
