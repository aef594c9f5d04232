"""The invented Lake Hollin: signals for the simulated instruments of the demo.

Everything here is invented demo data (no real lake, no real instrument).
Station time t is UTC seconds; the demo runs the daemon and the simulator at
the same speed so that a simulated day passes in minutes.
"""
import math
import random
import time

LAT, LON = 55.10, 3.60  # invented station position


def sun_elevation_deg(t, lat=LAT, lon=LON):
    """A rough sun elevation (Cooper's declination, no equation of time): enough
    to shape invented data. The daemon computes the real sun itself."""
    day = time.gmtime(t).tm_yday
    decl = math.radians(23.45) * math.sin(2 * math.pi * (284 + day) / 365.0)
    hour_angle = math.radians(((t % 86400) / 3600.0 + lon / 15.0 - 12.0) * 15.0)
    phi = math.radians(lat)
    s = math.sin(phi) * math.sin(decl) + math.cos(phi) * math.cos(decl) * math.cos(hour_angle)
    return math.degrees(math.asin(max(-1.0, min(1.0, s))))


def quenching_factor(t, lat=LAT, lon=LON):
    """1 at night and under a low sun, down to 0.65 under a high summer sun
    (non-photochemical quenching depresses daytime chlorophyll fluorescence).
    At 54 N in December the sun stays below 15 degrees: no dip at all."""
    s = math.sin(math.radians(sun_elevation_deg(t, lat, lon)))
    lo, hi = math.sin(math.radians(15)), math.sin(math.radians(60))
    return 1.0 - 0.35 * max(0.0, min(1.0, (s - lo) / (hi - lo)))


# The bloom, as phycocyanin (ug/L) at fractions of the story's length, with
# exponential growth and decay between the points. Told against the demo's
# alert rule (demo/station.json: watch 3.4 while phycocyanin is above
# chlorophyll-a, warning 6.7, bloom 13.4, hysteresis 1.0, 2 windows to raise
# and to lower): in a 4.5-hour story with 10-minute windows each level is
# crossed about 3 windows after the one below, on the way up (3.4, 6.7, 13.4)
# and on the way down (12.4, 5.7, 2.4), so the station raises watch, warning
# and bloom one after another and lowers them one by one.
BLOOM_POINTS = (
    (0.000, 0.60), (0.122, 0.70), (0.189, 3.40), (0.289, 6.70), (0.389, 13.40),
    (0.433, 16.00), (0.467, 16.00), (0.522, 12.40), (0.633, 5.70), (0.744, 2.40),
    (0.822, 1.20), (0.933, 0.80), (1.000, 0.70))
STUCK_AT, STUCK_FOR = 0.044, 0.067  # a stuck period before the rise (fractions of the story)
# Without a story length (the integration tests): the bloom over about two
# and a half days, a half-hour stuck period after 30 hours.
DEFAULT_STORY_H, DEFAULT_STUCK_H = 64.0, (30.0, 0.5)


def bloom_pc(fraction):
    """Phycocyanin of the bloom story at `fraction` (0..1) of its length."""
    pts = BLOOM_POINTS
    if fraction <= pts[0][0]:
        return pts[0][1]
    for (f0, v0), (f1, v1) in zip(pts, pts[1:]):
        if fraction <= f1:
            a = (fraction - f0) / (f1 - f0)
            return math.exp(math.log(v0) + a * (math.log(v1) - math.log(v0)))
    return pts[-1][1]


class Fluorometer:
    """Chlorophyll-a, phycocyanin and phycoerythrin with a diel cycle, a midday
    quenching dip (under a high sun), a few spikes, a stuck period, slow
    fouling drift and a bloom that rises through the alert levels and falls
    back.

    The buoy's story fits `story_h` station hours (the demo: 4.5). The jetty
    (bloom=False, stuck=False) shows a quiet bay over summer days instead:
    a chlorophyll-a baseline, the quenching dip and a fast biofilm."""

    def __init__(self, t0, seed=7, story_h=None, bloom=True, stuck=True,
                 chl_base=1.8, fouling_per_day=0.15, spikes=(6.0, 9.0, -3.0), lat=LAT, lon=LON):
        self.t0 = t0
        self.story_h = story_h or DEFAULT_STORY_H
        self.stuck_h = ((STUCK_AT * story_h, STUCK_FOR * story_h) if story_h else DEFAULT_STUCK_H)
        self.with_bloom, self.with_stuck = bloom, stuck
        self.chl_base, self.fouling_per_day, self.spikes = chl_base, fouling_per_day, spikes
        self.lat, self.lon = lat, lon
        self.rng = random.Random(seed)
        self.stuck_value = None

    def fraction(self, t):
        return (t - self.t0) / 3600.0 / self.story_h

    def values(self, t):
        quench = quenching_factor(t, self.lat, self.lon)
        fouling = self.fouling_per_day * (t - self.t0) / 86400.0  # biofilm on the optics, ug/L
        # Diel cycle: least at 06 UTC, most at 18 UTC (level at noon and midnight).
        diel = 1.0 + 0.1 * math.sin(2 * math.pi * ((t % 86400) / 86400.0 - 0.5))
        pc = bloom_pc(self.fraction(t)) if self.with_bloom else 0.6
        # Chlorophyll-a grows less than phycocyanin in a cyanobacteria bloom, so
        # phycocyanin overtakes it early in the rise (about 2 to 3 ug/L, below
        # the first level). Quenching acts on chlorophyll-a and phycoerythrin;
        # phycocyanin is left unquenched here so the bloom reads the same at
        # any hour and season the demo runs in.
        chl = (self.chl_base + 0.25 * pc) * diel * quench + fouling + self.rng.gauss(0, 0.05)
        pcv = pc + fouling * 0.5 + self.rng.gauss(0, 0.03)
        pe = 0.8 * diel * quench + self.rng.gauss(0, 0.02)
        # A few spikes (fish, bubbles).
        if self.spikes and self.rng.random() < 0.01:
            chl += self.rng.choice(self.spikes)
        # A stuck period: for a while the instrument repeats one value.
        h = (t - self.t0) / 3600.0
        if self.with_stuck and self.stuck_h[0] <= h < self.stuck_h[0] + self.stuck_h[1]:
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
