#!/usr/bin/python3
"""`tarn probe` against a Modbus RTU server of python3-pymodbus (Debian's
package) over a socat pty pair: register decoding (pymodbus's own
BinaryPayloadBuilder encodes the f32 values, high and low word first), an
exception reply (pymodbus answers 02 ILLEGAL DATA ADDRESS for a register it
does not have), the port-busy refusal (exit 75) and `tarn ports`.
External references: pymodbus 3.0 server and payload builder; exception code
names from the Modbus Application Protocol Specification V1.1b3 §7.
"""
import fcntl
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time

TARN = os.environ.get("TARN_BIN", "tarn")

SERVER = r'''
import sys
from pymodbus.server import StartSerialServer
from pymodbus.framer.rtu_framer import ModbusRtuFramer
from pymodbus.datastore import ModbusSequentialDataBlock, ModbusSlaveContext, ModbusServerContext
from pymodbus.payload import BinaryPayloadBuilder
from pymodbus.constants import Endian

def f32(v, word_order):
    b = BinaryPayloadBuilder(byteorder=Endian.Big, wordorder=word_order)
    b.add_32bit_float(v)
    return b.to_registers()

# 8N2 (the spec's framing without parity): pyserial 3.5 refuses even parity on a
# pty with EINVAL, so the pair runs without parity bits.
# Input registers: 0-1 f32 10000 ohm (high word first), 2-3 f32 -3.25 (low word
# first), 4 s16 -150, 5-6 u32 70000. Holding registers: 0..9 = 100..109.
ir = f32(10000.0, Endian.Big) + f32(-3.25, Endian.Little) + [(-150) & 0xFFFF] + [1, 70000 - 65536]
store = ModbusSlaveContext(ir=ModbusSequentialDataBlock(0, ir),
                           hr=ModbusSequentialDataBlock(0, list(range(100, 110))),
                           zero_mode=True)
ctx = ModbusServerContext(slaves={3: store}, single=False)
StartSerialServer(context=ctx, framer=ModbusRtuFramer, port=sys.argv[1], baudrate=19200,
                  parity="N", stopbits=2, bytesize=8, timeout=0.005)
'''

CONFIG = '''{
  "station": {"id": "hollin-test-1", "name": "Lake Hollin test rig (invented)",
              "latitude": 55.10, "longitude": 3.60, "elevation_m": 142},
  "sampling": {"period_s": 60, "window_s": 600},
  "paths": {"state_dir": "DIR/state", "runtime_dir": "DIR/run"},
  "lines": [{"name": "bus", "port": "DIR/B", "baud": 19200, "parity": "none", "stop_bits": 2,
             "timeout_ms": 500, "retries": 1}],
  "instruments": [
    {"name": "chain", "line": "bus", "driver": "modbus-rtu", "options": {"unit": 3, "function": 4},
     "channels": [
       {"name": "t0", "quantity": "water_temperature", "unit": "Cel", "resolution": 0.01,
        "source": {"register": 0, "type": "f32"},
        "calibration": {"kind": "steinhart_hart", "a": 1.032e-3, "b": 2.387e-4, "c": 1.58e-7}},
       {"name": "x1", "quantity": "other", "unit": "1", "resolution": 0.01,
        "source": {"register": 2, "type": "f32", "word_order": "low_first"}},
       {"name": "x2", "quantity": "other", "unit": "1", "resolution": 0.01,
        "source": {"register": 4, "type": "s16", "scale": 0.01}},
       {"name": "x3", "quantity": "other", "unit": "1", "resolution": 1,
        "source": {"register": 5, "type": "u32"}},
       {"name": "h9", "quantity": "other", "unit": "1", "resolution": 1,
        "source": {"register": 9, "function": 3}}]},
    {"name": "bad", "line": "bus", "driver": "modbus-rtu", "options": {"unit": 3},
     "channels": [{"name": "nowhere", "quantity": "other", "unit": "1", "resolution": 1,
                   "source": {"register": 500}}]}
  ],
  "uplink": {"backend": "mqtt", "options": {"host": "127.0.0.1", "port": 1883}}
}'''

failures = []


def check(cond, what):
    print(("ok   " if cond else "FAIL ") + what, flush=True)
    if not cond:
        failures.append(what)


def probe(cfg, name):
    return subprocess.run([TARN, "probe", "--config", cfg, "--instrument", name],
                          capture_output=True, text=True, timeout=30)


def value(out, channel):
    m = re.search(r"^channel %s\s+(\S+)\s" % re.escape(channel), out, re.M)
    return float(m.group(1)) if m and m.group(1) != "-" else None


def main():
    work = tempfile.mkdtemp(prefix="tarn-pymodbus-")
    procs = []
    try:
        procs.append(subprocess.Popen(
            ["socat", "-d", "-d", "pty,raw,echo=0,link=%s/A" % work,
             "pty,raw,echo=0,link=%s/B" % work], stderr=subprocess.DEVNULL))
        for _ in range(50):
            if os.path.exists(work + "/A") and os.path.exists(work + "/B"):
                break
            time.sleep(0.1)
        procs.append(subprocess.Popen(["/usr/bin/python3", "-c", SERVER, work + "/A"]))
        cfg = os.path.join(work, "station.json")
        with open(cfg, "w") as f:
            f.write(CONFIG.replace("DIR", work))

        # pymodbus takes a while to import and start on a loaded machine: the
        # first probe is tried again until the server answers (at most 20 s).
        deadline = time.time() + 20
        time.sleep(1.0)
        r = probe(cfg, "chain")
        while r.returncode != 0 and time.time() < deadline:
            time.sleep(0.5)
            r = probe(cfg, "chain")
        print(r.stdout + r.stderr)
        check(r.returncode == 0, "probe chain exits 0")
        # 10000 ohm on this thermistor set is 25.00 degC (maker's table, see test_calibration).
        t0 = value(r.stdout, "t0")
        check(t0 is not None and abs(t0 - 25.0) < 0.01, "f32 high word first + Steinhart-Hart: %s" % t0)
        check(value(r.stdout, "x1") == -3.25, "f32 low word first (pymodbus Endian.Little)")
        check(value(r.stdout, "x2") == -1.5, "s16 with scale")
        check(value(r.stdout, "x3") == 70000, "u32 across two registers")
        check(value(r.stdout, "h9") == 109, "holding register by function 03")
        check(re.search(r"^tx\s+8 B  03 04 00 00 00 07 ", r.stdout, re.M) is not None,
              "input registers 0..6 in one request")

        r = probe(cfg, "bad")
        print(r.stdout + r.stderr)
        check(r.returncode == 69, "probe of a missing register exits 69")
        check("ILLEGAL DATA ADDRESS" in r.stdout, "exception 02 reported by name")
        check(re.search(r"^rx\s+5 B  03 83 02 ", r.stdout, re.M) is not None,
              "exception frame printed in hex")

        # A holder of the port (as the daemon holds it) makes probe refuse at once.
        fd = os.open(os.path.realpath(work + "/B"), os.O_RDWR | os.O_NOCTTY)
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        r = probe(cfg, "chain")
        os.close(fd)
        print(r.stderr)
        check(r.returncode == 75, "busy port: exit 75")
        check(len(r.stderr.strip().splitlines()) == 1 and "in use" in r.stderr,
              "busy port: one line saying so")

        r = subprocess.run([TARN, "ports"], capture_output=True, text=True, timeout=30)
        check(r.returncode == 0 and r.stdout.strip() != "", "tarn ports runs")
    finally:
        for p in procs:
            p.send_signal(signal.SIGTERM)
            try:
                p.wait(timeout=5)
            except subprocess.TimeoutExpired:
                p.kill()
        shutil.rmtree(work, ignore_errors=True)
    print("%d failures" % len(failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
