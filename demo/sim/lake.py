"""The invented Lake Hollin: signals for the simulated instruments of the demo.

Everything here is invented demo data (no real lake, no real instrument).
Station time t is UTC seconds; the demo runs the daemon and the simulator at
the same speed so that a simulated day passes in minutes.
"""
import math
import random

LAT, LON = 54.31, -2.97  # invented station position (used only for day/night shape)


def sun_up_fraction(t):
    """Crude daylight shape 0..1 (peak at local noon); the daemon computes the real sun."""
    hour = ((t % 86400) / 3600.0 + LON / 15.0) % 24
    return max(0.0, math.sin(math.pi * (hour - 6) / 12)) if 6 <= hour <= 18 else 0.0


class Fluorometer:
    """Chlorophyll-a, phycocyanin and phycoerythrin with a diel cycle, a midday
    quenching dip, a few spikes, a stuck period, slow fouling drift and a bloom
    that rises through the alert levels and falls back."""

    def __init__(self, t0, seed=7, bloom_peak_h=28.8, bloom_width_h=10.8, stuck_h=30.0):
        # The demo compresses the story into a few hours of station time
        # (station_sim.py --story-hours); the defaults tell it over two days.
        self.t0 = t0
        self.bloom_peak_h, self.bloom_width_h, self.stuck_h = bloom_peak_h, bloom_width_h, stuck_h
        self.rng = random.Random(seed)
        self.stuck_value = None

    def bloom(self, t):
        # Phycocyanin bloom: rises over ~1.5 simulated days from the start, then falls.
        h = (t - self.t0) / 3600.0
        return 16.0 * math.exp(-((h - self.bloom_peak_h) / self.bloom_width_h) ** 2)

    def values(self, t):
        day = sun_up_fraction(t)
        fouling = 0.15 * (t - self.t0) / 86400.0  # ug/L per day of biofilm
        quench = 1.0 - 0.35 * day ** 3             # daytime non-photochemical quenching dip
        diel = 1.0 + 0.15 * math.sin(2 * math.pi * ((t % 86400) / 86400.0 - 0.3))
        pc = self.bloom(t)
        chl = (4.0 + 0.4 * pc) * diel * quench + fouling + self.rng.gauss(0, 0.05)
        pcv = (0.6 + pc) * quench + fouling * 0.5 + self.rng.gauss(0, 0.03)
        pe = 0.8 * diel * quench + self.rng.gauss(0, 0.02)
        # A few spikes (fish, bubbles).
        if self.rng.random() < 0.01:
            chl += self.rng.choice([6.0, 9.0, -3.0])
        # A stuck period: for a while the instrument repeats one value.
        h = (t - self.t0) / 3600.0
        if self.stuck_h <= h < self.stuck_h + 0.5:
            if self.stuck_value is None:
                self.stuck_value = (chl, pcv, pe)
            chl, pcv, pe = self.stuck_value
        else:
            self.stuck_value = None
        return max(chl, 0.0), max(pcv, 0.0), max(pe, 0.0)


def water_temperature(t, depth_m=0.5):
    base = 17.0 - 0.6 * depth_m
    diel = 0.8 * math.exp(-depth_m / 3.0) * math.sin(2 * math.pi * ((t % 86400) / 86400.0 - 0.375))
    return base + diel
