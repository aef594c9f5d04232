#!/usr/bin/python3
"""Simulated instruments of the invented stations on Lake Hollin.

Usage: station_sim.py --dir DIR [--speed N] [--t0 UNIX | --speed-origin T]
                      [--story-hours H] [--story-start UNIX] [--fouling-per-day F]
                      [--station buoy|jetty]
buoy (default, hollin-buoy-1): creates DIR/fluorometer (a line-protocol
fluorometer), DIR/chain (a Modbus RTU thermistor chain, unit 1) and DIR/probe
(an SDI-12 temperature probe, address 0), each on a pty.
jetty (hollin-jetty): DIR/fluorometer only, in a quiet bay: no bloom, no stuck
period, a slow, steady biofilm (demo/jetty.json).
Keeps answering until SIGTERM/SIGINT. Prints one line per device it created.
SIGUSR1: the fluorometer's optics are cleaned (its fouling offset drops to
zero and grows again from there); prints one line saying so.

Station time: --t0 UNIX starts it at UNIX when the simulator starts;
--speed-origin T follows `tarn run --speed N --speed-origin T` exactly
(station time = T + (now - T) * N), so simulator and daemon share one clock.
The buoy's bloom story starts when the simulator starts, or at station time
--story-start UNIX.
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
    def __init__(self, t0, speed, origin=None):
        self.speed, self.real0, self.origin = speed, time.time(), origin
        self.t0 = t0 if origin is None else self.now()

    def now(self):
        if self.origin is not None:
            return self.origin + (time.time() - self.origin) * self.speed
        return self.t0 + (time.time() - self.real0) * self.speed


# The jetty post of demo/jetty.json (invented): a quiet bay, chlorophyll-a
# about 2 ug/L, and a biofilm that adds 0.4 ug/L a day, slowly and steadily
# (faster than on most real stations, so that four station days show it).
JETTY_LAT, JETTY_LON = 55.08, 3.62


def make_fluorometer(path, clock, station="buoy", fouling_per_day=None, story_start=None):
    hrs = STORY_HOURS[0]
    t0 = clock.t0 if story_start is None else story_start
    if station == "jetty":
        model = Fluorometer(t0, seed=11, bloom=False, stuck=False, chl_base=2.0,
                            fouling_per_day=0.4 if fouling_per_day is None else fouling_per_day,
                            spikes=(6.0, 9.0), lat=JETTY_LAT, lon=JETTY_LON)
    else:
        extra = {} if fouling_per_day is None else {"fouling_per_day": fouling_per_day}
        model = Fluorometer(t0, story_h=hrs or None, **extra)

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

    instrument = LineInstrument(path, reply)
    instrument.model = model
    return instrument


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--dir", required=True)
    ap.add_argument("--speed", type=float, default=1.0)
    ap.add_argument("--t0", type=float, default=None)
    ap.add_argument("--speed-origin", type=float, default=None,
                    help="station time = T + (now - T) * speed, as tarn run --speed-origin T")
    ap.add_argument("--story-hours", type=float, default=0,
                    help="tell the bloom story within this many station hours (demo)")
    ap.add_argument("--story-start", type=float, default=None,
                    help="station time (unix seconds) at which the bloom story starts")
    ap.add_argument("--fouling-per-day", type=float, default=None,
                    help="biofilm growth on the fluorometer's optics, ug/L chlorophyll-a a day")
    ap.add_argument("--station", choices=("buoy", "jetty"), default="buoy")
    args = ap.parse_args()
    STORY_HOURS[0] = args.story_hours
    os.makedirs(args.dir, exist_ok=True)
    clock = StationTime(args.t0 if args.t0 else time.time(), args.speed, args.speed_origin)
    fluorometer = make_fluorometer(os.path.join(args.dir, "fluorometer"), clock, args.station,
                                   args.fouling_per_day, args.story_start)
    devices = [fluorometer.start()]
    if args.station == "buoy":
        devices += [ModbusChain(os.path.join(args.dir, "chain"), clock, unit=1).start(),
                    Sdi12Probe(os.path.join(args.dir, "probe"), clock, address="0").start()]
    for d in devices:
        print("simulated instrument on %s" % d.link, flush=True)
    stop = []
    signal.signal(signal.SIGTERM, lambda *a: stop.append(1))
    signal.signal(signal.SIGINT, lambda *a: stop.append(1))
    cleaned = []
    signal.signal(signal.SIGUSR1, lambda *a: cleaned.append(clock.now()))
    while not stop:
        time.sleep(0.05)
        while cleaned:
            t = cleaned.pop(0)
            before = fluorometer.model.fouling(t)
            fluorometer.model.clean(t)
            print("simulator: fluorometer optics cleaned at station time %s (fouling offset %.2f ug/L "
                  "chlorophyll-a -> 0)" % (time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t)), before),
                  flush=True)
    for d in devices:
        d.stop()


if __name__ == "__main__":
    main()
