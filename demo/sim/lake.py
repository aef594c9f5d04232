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


# The bloom, as phycocyanin (ug/L) at station hours from the story's start,
# with exponential growth and decay between the points (invented). The demo
# starts the story at 21:00 UTC on an August evening, so that hour 6 is the
# end of the first night, 30 the second, 54 the third. Told against the demo's
# alert rule (demo/station.json: watch 3.4 while phycocyanin is above
# chlorophyll-a, warning 6.7, bloom 13.4, hysteresis 1.0) with one-hour
# windows and 2 windows to raise and to lower (demo/buoy_summer.json):
#   night 1 minimum about 1; day 1 afternoon up to 5 (watch);
#   night 2 minimum about 4 (above 2.4: watch stays); day 2 up to 17
#   (warning in the morning, bloom in the late afternoon);
#   night 3 minimum about 14.5 (above 12.4: bloom stays);
#   day 3 from 04:00 a cold front mixes the bloom down: below 12.4 about
#   05:00, below 5.7 about 08:00, below 2.4 about 10:00, so the station lowers
#   bloom, warning and watch one at a time, 2 to 4 windows apart.
# The night minimum rises day after day (1, 4, 14.5), as in a real bloom: a
# biofilm on the optics rises slowly and steadily instead.
BLOOM_POINTS = (
    (0, 1.20), (6, 1.00), (9, 1.05), (13, 1.80), (16, 3.40), (19, 5.00), (22, 5.00),
    (30, 4.00), (33, 4.40), (36, 6.70), (39, 9.50), (42, 13.40), (44, 16.50), (46, 17.00),
    (54, 14.50), (55, 14.50), (56, 11.00), (59, 4.50), (62, 1.60), (64, 1.30))
STORY_H = 64.0               # the story's length in station hours, as told above
STUCK_H = (9.0, 1.5)         # a stuck period (start hour, hours): 06:00-07:30 on day 1


def bloom_pc(hour):
    """Phycocyanin of the bloom story `hour` station hours after its start."""
    pts = BLOOM_POINTS
    if hour <= pts[0][0]:
        return pts[0][1]
    for (h0, v0), (h1, v1) in zip(pts, pts[1:]):
        if hour <= h1:
            a = (hour - h0) / (h1 - h0)
            return math.exp(math.log(v0) + a * (math.log(v1) - math.log(v0)))
    return pts[-1][1]


class Fluorometer:
    """Chlorophyll-a, phycocyanin and phycoerythrin with a diel cycle, a midday
    quenching dip (under a high sun), a few spikes, a stuck period, a slow
    fouling drift (until the optics are cleaned, clean()) and a bloom that
    rises through the alert levels over two days and falls back on the third.

    The buoy's story takes STORY_H station hours; `story_h` stretches or
    shrinks it. The jetty (bloom=False, stuck=False) shows a quiet bay over
    summer days instead: a chlorophyll-a baseline, the quenching dip and a
    slow, steady biofilm."""

    def __init__(self, t0, seed=7, story_h=None, bloom=True, stuck=True,
                 chl_base=1.8, fouling_per_day=0.15, spikes=(6.0, 9.0, -3.0), lat=LAT, lon=LON):
        self.t0 = t0
        self.scale = (story_h or STORY_H) / STORY_H
        self.stuck_h = (STUCK_H[0] * self.scale, STUCK_H[1] * self.scale)
        self.with_bloom, self.with_stuck = bloom, stuck
        self.chl_base, self.fouling_per_day, self.spikes = chl_base, fouling_per_day, spikes
        self.lat, self.lon = lat, lon
        self.rng = random.Random(seed)
        self.stuck_value = None
        self.clean_t = t0  # the optics were last cleaned at the start

    def clean(self, t):
        """The optics are cleaned at station time t: the biofilm is gone."""
        self.clean_t = t

    def fouling(self, t):
        """Biofilm on the optics (ug/L chlorophyll-a equivalent) at station time t."""
        return self.fouling_per_day * max(0.0, t - self.clean_t) / 86400.0

    def values(self, t):
        quench = quenching_factor(t, self.lat, self.lon)
        fouling = self.fouling(t)
        # Diel cycle: least at 06 UTC, most at 18 UTC (level at noon and midnight).
        diel = 1.0 + 0.1 * math.sin(2 * math.pi * ((t % 86400) / 86400.0 - 0.5))
        h = (t - self.t0) / 3600.0
        pc = bloom_pc(h / self.scale) if self.with_bloom else 0.6
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
