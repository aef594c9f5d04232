#!/usr/bin/python3
"""The demo's simulated instruments (demo/sim/station_sim.py) read with
`tarn probe` through demo/station.json: the line-protocol fluorometer (NMEA
checksum, counts calibration), the Modbus RTU thermistor chain (Steinhart-Hart)
and the SDI-12 probe (aMC! with CRC, identify). The simulators are project
code; the check against an outside implementation is test_drivers_pymodbus.py.
Here the values are compared with the simulator's own model (demo/sim/lake.py)
to show the calibrations invert what the instruments encode.
"""
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time

TARN = os.environ.get("TARN_BIN", "tarn")
SRC = os.environ.get("TARN_SOURCE_DIR", os.path.join(os.path.dirname(__file__), "..", ".."))
sys.path.insert(0, os.path.join(SRC, "demo", "sim"))
from lake import water_temperature  # noqa: E402

failures = []


def check(cond, what):
    print(("ok   " if cond else "FAIL ") + what, flush=True)
    if not cond:
        failures.append(what)


def values(out):
    got = {}
    for m in re.finditer(r"^channel (\S+)\s+(\S+)\s+(\S+)\s+(ok|[a-z ]+?)\s+calibration", out, re.M):
        got[m.group(1)] = (None if m.group(2) == "-" else float(m.group(2)), m.group(4))
    return got


def main():
    work = tempfile.mkdtemp(prefix="tarn-sims-")
    sim = None
    try:
        os.makedirs(work + "/dev")
        cfg = open(os.path.join(SRC, "demo", "station.json")).read()
        cfg = cfg.replace("@DIR@", work).replace("@MQTT_PORT@", "1883")
        path = os.path.join(work, "station.json")
        with open(path, "w") as f:
            f.write(cfg)
        # Speed 1: the simulators' station time is the real time, so the model
        # can be evaluated at the same moment.
        sim = subprocess.Popen(["/usr/bin/python3", os.path.join(SRC, "demo", "sim", "station_sim.py"),
                                "--dir", work + "/dev", "--speed", "1"], stdout=subprocess.PIPE,
                               text=True)
        for _ in range(3):
            sim.stdout.readline()

        def probe(name):
            r = subprocess.run([TARN, "probe", "--config", path, "--instrument", name],
                               capture_output=True, text=True, timeout=60)
            print(r.stdout + r.stderr)
            return r

        r = probe("fluorometer")
        v = values(r.stdout)
        check(r.returncode == 0, "fluorometer: exit 0")
        check(all(v.get(c, (None, ""))[1] == "ok" for c in ("chla", "pc", "pe")),
              "fluorometer: chla, pc, pe ok")
        check(re.search(r'rx .*\$HOLF,\d+,\d+,\d+,[-\d.]+\*[0-9A-F]{2}\\r\\n', r.stdout) is not None,
              "fluorometer: raw NMEA sentence shown")
        check(v.get("chla", (0,))[0] is not None and 0 < v["chla"][0] < 50,
              "fluorometer: chla in the model's range")

        r = probe("chain")
        v = values(r.stdout)
        t = time.time()
        check(r.returncode == 0, "chain: exit 0")
        for name, depth in (("temp_0m5", 0.5), ("temp_2m", 2.0), ("temp_5m", 5.0), ("temp_10m", 10.0)):
            got = v.get(name, (None, ""))[0]
            want = water_temperature(t, depth)
            # f32 resistance quantisation is about 1e-7 relative: far below 0.01 degC.
            check(got is not None and abs(got - want) < 0.02,
                  "chain %s: %s degC vs model %.3f" % (name, got, want))
        check(re.search(r"^tx\s+8 B  01 04 00 00 00 08 ", r.stdout, re.M) is not None,
              "chain: one request for 8 input registers, hex shown")

        r = probe("probe")
        v = values(r.stdout)
        check(r.returncode == 0, "sdi12 probe: exit 0")
        check("identify  address query ?!: '" in r.stdout and "' answers; " in r.stdout,
              "sdi12 probe: address query reply")
        check('; SDI-12 1.4, vendor "HOLLINLK"' in r.stdout, "sdi12 probe: identify reply")
        check('tx    4 B  "0MC!"' in r.stdout, "sdi12 probe: aMC! sent")
        tp = v.get("temp_probe", (None,))[0]
        check(tp is not None and abs(tp - water_temperature(time.time(), 1.0)) < 0.05,
              "sdi12 probe: temperature %s matches the model" % tp)
        check(v.get("probe_supply", (None,))[0] == 12.31, "sdi12 probe: supply voltage")
    finally:
        if sim:
            sim.send_signal(signal.SIGTERM)
            try:
                sim.wait(timeout=5)
            except subprocess.TimeoutExpired:
                sim.kill()
        shutil.rmtree(work, ignore_errors=True)
    print("%d failures" % len(failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
