#!/usr/bin/python3
"""Simulated instruments of the invented station hollin-buoy-1 on Lake Hollin.

Usage: station_sim.py --dir DIR [--speed N] [--t0 UNIX]
Creates DIR/fluorometer (a line-protocol fluorometer), DIR/chain (a Modbus RTU
thermistor chain, unit 1) and DIR/probe (an SDI-12 temperature probe, address
0), each on a pty, and keeps answering until SIGTERM/SIGINT. Prints one line
per device it created.
"""
import argparse
import os
import signal
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from lake import Fluorometer, water_temperature  # noqa: E402
from pty_instrument import LineInstrument, nmea_checksum  # noqa: E402
from modbus_chain import ModbusChain  # noqa: E402
from sdi12_probe import Sdi12Probe  # noqa: E402


STORY_HOURS = [0.0]


class StationTime:
    def __init__(self, t0, speed):
        self.t0, self.speed, self.real0 = t0, speed, time.time()

    def now(self):
        return self.t0 + (time.time() - self.real0) * self.speed


def make_fluorometer(path, clock):
    hrs = STORY_HOURS[0]
    model = Fluorometer(clock.t0) if not hrs else Fluorometer(
        clock.t0, bloom_peak_h=hrs * 0.45, bloom_width_h=hrs * 0.17, stuck_h=hrs * 0.12)

    def reply(cmd):
        if cmd != "MEAS":
            return "ERR,unknown command\r\n"
        t = clock.now()
        chl, pc, pe = model.values(t)
        # Raw counts; demo/station.json turns them back into ug/L (counts calibration).
        counts = [round(v / scale + dark) for v, dark, scale in
                  ((chl, 48, 0.0121), (pc, 40, 0.0085), (pe, 35, 0.0062))]
        body = "HOLF,%d,%d,%d,%.2f" % (counts[0], counts[1], counts[2],
                                       water_temperature(t, 0.3))
        return "$%s*%s\r\n" % (body, nmea_checksum(body))

    return LineInstrument(path, reply)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--dir", required=True)
    ap.add_argument("--speed", type=float, default=1.0)
    ap.add_argument("--t0", type=float, default=None)
    ap.add_argument("--story-hours", type=float, default=0,
                    help="tell the bloom story within this many station hours (demo)")
    args = ap.parse_args()
    STORY_HOURS[0] = args.story_hours
    os.makedirs(args.dir, exist_ok=True)
    clock = StationTime(args.t0 if args.t0 else time.time(), args.speed)
    devices = [make_fluorometer(os.path.join(args.dir, "fluorometer"), clock).start(),
               ModbusChain(os.path.join(args.dir, "chain"), clock, unit=1).start(),
               Sdi12Probe(os.path.join(args.dir, "probe"), clock, address="0").start()]
    for d in devices:
        print("simulated instrument on %s" % d.link, flush=True)
    stop = []
    signal.signal(signal.SIGTERM, lambda *a: stop.append(1))
    signal.signal(signal.SIGINT, lambda *a: stop.append(1))
    while not stop:
        time.sleep(0.2)
    for d in devices:
        d.stop()


if __name__ == "__main__":
    main()
