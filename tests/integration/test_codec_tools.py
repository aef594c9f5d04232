#!/usr/bin/python3
"""`tarn encode` and `tarn decode`, the codec tools, driven as an integrator would.

1. Round trip: three hours of generated samples (4 channels of
   codec/vectors/manifest_hollin.json, every QARTOD flag, missing samples,
   reason bits, negative and unrounded values) through `tarn encode` and back
   through `tarn decode`: every sample comes back with its flag and reason
   bits, its value the quantised input (round half away from zero,
   codec/FORMAT.md §1.7), within half a resolution step of the input.
2. --windows-per-packet N: ceil(windows / N) packets with N windows each,
   consecutive sequence numbers from --first-sequence.
3. --mtu: every packet within the MTU (48 and 100 bytes), the split batch
   still decodes to every sample.
4. --stats-only: window records with the flag counts of the input and
   mean/min/max/sd within one resolution step of Python's statistics module
   over the passed samples (definitions of FORMAT.md §4.4).
5. --format csv: the same samples as jsonl, with the header t,ch,v,f,r.
6. Bad packets among good ones (one flipped byte, one truncated, one from a
   manifest the decoder does not know, one too short, one not hex): one error
   line each naming the file:line and the reason; the good packets decoded in
   full; nothing of a rejected packet output; exit code 65 (EX_DATAERR,
   sysexits.h).
7. Outside checks:
   - CRC-32C of every packet recomputed here, bit by bit from the parameters of
     Greg Cook's "Catalogue of parametrised CRC algorithms" (CRC-32/ISCSI,
     check value 0xe3069283, asserted first);
   - the committed vectors codec/vectors/v01_hour_six_windows,
     v05_mtu_split_48 and v07_stats_only_one_window (v07 is the worked example
     of FORMAT.md §10.1): their input fed to `tarn encode` as JSON Lines gives
     the committed hex byte for byte, and `tarn decode` of the committed hex
     gives the committed values and flags.
Run: TARN_BIN=build/daemon/tarn /usr/bin/python3 tests/integration/test_codec_tools.py
"""
import json
import math
import os
import random
import statistics
import struct
import subprocess
import sys
from decimal import ROUND_HALF_UP, Decimal

from harness import SOURCE_DIR, TARN, Harness, finish, seq_of

# The CRC and varint of the reference decoder written from codec/FORMAT.md
# alone (it shares no code with the daemon); the CRC's own check value is
# asserted by the codec tests against the CRC catalogue.
sys.path.insert(0, os.path.join(SOURCE_DIR, "codec"))
from reference_decoder import crc32c  # noqa: E402


VECTORS = os.path.join(SOURCE_DIR, "codec", "vectors")
MANIFEST = os.path.join(VECTORS, "manifest_hollin.json")
EX_DATAERR = 65  # sysexits.h


def quantised(x, res):
    """round(x / res) half away from zero (FORMAT.md §1.7), times res. Decimal
    holds the double x / res exactly, so the halfway case is decided exactly."""
    q = int(Decimal(x / res).quantize(Decimal(1), rounding=ROUND_HALF_UP))
    return q * res


def run(args, stdin=None, timeout=60):
    return subprocess.run([TARN] + args, input=stdin, capture_output=True, text=True,
                          timeout=timeout)


def encode(samples, *opts):
    text = "".join(json.dumps(s) + "\n" for s in samples)
    r = run(["encode", "--manifest", MANIFEST] + list(opts), stdin=text)
    return r, [l for l in r.stdout.split("\n") if l]


def decode(hex_lines, *opts, manifest=MANIFEST):
    args = ["decode", "--hex"] + (["--manifest", manifest] if manifest else []) + list(opts)
    return run(args, stdin="".join(l + "\n" for l in hex_lines))


def jsonl(text):
    return [json.loads(l) for l in text.split("\n") if l.strip()]


def generate(rng, start, windows, channels, period=60, window=600):
    """Samples for every slot of `windows` windows from `start`: unrounded values,
    some negative, flags 1/2/3/4 with values, flag 9 without, reason bits on
    some non-pass samples."""
    out = []
    for w in range(windows):
        for i in range(window // period):
            t = start + w * window + i * period
            for c in channels:
                roll = rng.random()
                if roll < 0.04:
                    out.append({"t": t, "ch": c, "v": None, "f": 9, "r": 1})
                    continue
                f = 1 if roll < 0.80 else rng.choice([2, 3, 4])
                base = {"chl": 3.1, "pc": 6.8, "pe": -0.4, "temp": 19.2}[c]
                v = base + rng.gauss(0, 0.7) + rng.random() * 1e-4
                s = {"t": t, "ch": c, "v": v, "f": f}
                if f in (3, 4):
                    s["r"] = rng.choice([2, 4, 8, 2 | 16])
                out.append(s)
    return out


def compare_samples(h, what, sent, got, res):
    """Every sent sample comes back once, flag and reasons equal, value quantised."""
    by_key = {}
    dup = 0
    for g in got:
        k = (g["t"], g["ch"])
        dup += k in by_key
        by_key[k] = g
    h.check(dup == 0, "%s: no sample decoded twice" % what)
    h.check(len(got) == len(sent), "%s: %d samples decoded for %d sent" % (what, len(got), len(sent)))
    flag_bad = value_bad = worst = 0
    for s in sent:
        g = by_key.get((s["t"], s["ch"]))
        if g is None or g["f"] != s["f"] or g.get("r", 0) != s.get("r", 0):
            flag_bad += 1
            continue
        r = res[s["ch"]]
        if s["v"] is None:
            value_bad += g["v"] is not None
            continue
        err = abs(g["v"] - s["v"])
        worst = max(worst, err / r)
        if g["v"] is None or abs(g["v"] - quantised(s["v"], r)) > r * 1e-6 or err > r * (0.5 + 1e-9):
            value_bad += 1
    h.check(flag_bad == 0, "%s: flags and reason bits equal (%d differ)" % (what, flag_bad))
    h.check(value_bad == 0, "%s: values equal the quantised input (%d differ; largest error "
            "%.3f resolution steps, at most 0.5 allowed)" % (what, value_bad, worst))


def check_crc(h, what, hex_lines):
    bad = 0
    for l in hex_lines:
        b = bytes.fromhex(l)
        bad += crc32c(b[:-4]) != struct.unpack("<I", b[-4:])[0]
    h.check(bad == 0 and hex_lines, "%s: CRC-32C of all %d packets recomputed from the catalogue "
            "parameters matches" % (what, len(hex_lines)))


def vector_samples(v, names):
    """The JSON Lines form of a vector's input windows."""
    out = []
    for w in v["input"]["windows"]:
        for i in range(w["slots"]):
            for ci, c in enumerate(w["channels"]):
                s = {"t": w["start"] + 60 * i, "ch": names[w.get("first_channel", 0) + ci],
                     "v": c["values"][i], "f": c["flags"][i]}
                if c["reasons"][i]:
                    s["r"] = c["reasons"][i]
                out.append(s)
    return out


with Harness("codectools") as h:
    man = json.load(open(MANIFEST))
    names = [c["name"] for c in man["channels"]]
    res = {c["name"]: c["resolution"] for c in man["channels"]}

    # Source: Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-32/ISCSI.
    h.check(crc32c(b"123456789") == 0xE3069283, "CRC-32C of '123456789' is the catalogue check "
            "value 0xe3069283")

    # ---- 1. round trip, windows per packet ----------------------------------------
    rng = random.Random(20240601)
    start = 1717243200  # 2024-06-01T12:00:00Z, a window boundary
    sent = generate(rng, start, 18, names)
    r, pk = encode(sent, "--first-sequence", "100")
    h.check(r.returncode == 0, "encode exits 0 (%d; %s)" % (r.returncode, r.stderr.strip()[:200]))
    h.check(len(pk) == 3, "18 windows at the default 6 per packet: 3 packets (%d)" % len(pk))
    h.check([seq_of(bytes.fromhex(p)) for p in pk] == [100, 101, 102],
            "sequence numbers consecutive from --first-sequence 100")
    check_crc(h, "default", pk)
    d = decode(pk)
    h.check(d.returncode == 0 and d.stderr == "", "decode exits 0, nothing on stderr (%d; %s)"
            % (d.returncode, d.stderr.strip()[:200]))
    compare_samples(h, "round trip", sent, jsonl(d.stdout), res)
    flags_seen = sorted({s["f"] for s in sent})
    h.check(flags_seen == [1, 2, 3, 4, 9], "input holds every QARTOD flag %s" % flags_seen)
    h.check(any(s["v"] is not None and s["v"] < 0 for s in sent), "input holds negative values")

    for n, want in ((1, 18), (4, 5), (18, 1)):
        r, pk_n = encode(sent, "--windows-per-packet", str(n))
        h.check(r.returncode == 0 and len(pk_n) == want,
                "--windows-per-packet %d: %d packets (%d)" % (n, want, len(pk_n)))
        per = []
        for p in pk_n:
            dw = decode([p], "--records", "windows")
            per.append(len({rec["start"] for rec in jsonl(dw.stdout)}))
        expect = [n] * (18 // n) + ([18 % n] if 18 % n else [])
        h.check(per == expect, "--windows-per-packet %d: windows per packet %s" % (n, per))
        compare_samples(h, "--windows-per-packet %d" % n, sent, jsonl(decode(pk_n).stdout), res)

    # A stream that begins and ends inside a window: slots outside it come back
    # as missing (flag 9, no value), the windows are marked partial.
    part = [s for s in sent if start + 180 <= s["t"] < start + 1500]
    r, pk_p = encode(part)
    dp = jsonl(decode(pk_p).stdout)
    given = {(s["t"], s["ch"]) for s in part}
    extra = [g for g in dp if (g["t"], g["ch"]) not in given]
    h.check(all(g["f"] == 9 and g["v"] is None for g in extra) and len(extra) == 3 * 4,
            "stream starting mid-window: the 3 slots before it decode as missing (%d extra samples)"
            % len(extra))
    compare_samples(h, "partial windows", part, [g for g in dp if (g["t"], g["ch"]) in given], res)
    recs = jsonl(decode(pk_p, "--records", "windows").stdout)
    h.check(recs and all(rec["partial"] for rec in recs if rec["start"] in (start, start + 1200)),
            "first and last windows marked partial")

    # ---- 3. MTU --------------------------------------------------------------------
    for mtu in (48, 100):
        r, pk_m = encode(sent, "--mtu", str(mtu), "--windows-per-packet", "6")
        sizes = [len(p) // 2 for p in pk_m]
        h.check(r.returncode == 0 and sizes and max(sizes) <= mtu,
                "--mtu %d: all %d packets within the MTU (largest %d bytes)"
                % (mtu, len(sizes), max(sizes) if sizes else -1))
        check_crc(h, "--mtu %d" % mtu, pk_m)
        dm = decode(pk_m)
        h.check(dm.returncode == 0, "--mtu %d: every packet decodes on its own terms (%s)"
                % (mtu, dm.stderr.strip()[:200]))
        compare_samples(h, "--mtu %d" % mtu, sent, jsonl(dm.stdout), res)
    r = run(["encode", "--manifest", MANIFEST, "--mtu", "9"], stdin="")
    h.check(r.returncode == 64 and r.stderr.count("\n") == 1 and "--mtu" in r.stderr,
            "--mtu below the minimum packet: one usage line, exit 64 (%d: %s)"
            % (r.returncode, r.stderr.strip()))

    # ---- 4. statistics only -----------------------------------------------------------
    r, pk_s = encode(sent, "--stats-only", "--windows-per-packet", "1")
    h.check(r.returncode == 0 and len(pk_s) == 18, "--stats-only: one packet per window (%d)"
            % len(pk_s))
    ds = decode(pk_s)
    h.check(ds.stdout == "" and ds.stderr.count("statistics-only packet") == 18,
            "--records samples on a stats-only packet: no samples, a note per packet")
    recs = jsonl(decode(pk_s, "--records", "windows").stdout)
    h.check(len(recs) == 18 * 4 and all(rec["stats_only"] for rec in recs),
            "stats-only: 72 window records marked stats_only (%d)" % len(recs))
    worst, bad_counts = 0.0, 0
    for rec in recs:
        mine = [s for s in sent if s["ch"] == rec["ch"] and rec["start"] <= s["t"] < rec["start"] + 600]
        counts = {str(f): sum(1 for s in mine if s["f"] == f) for f in (1, 2, 3, 4, 9)}
        bad_counts += counts != rec["counts"]
        passed = [s["v"] for s in mine if s["f"] == 1]
        r_ = res[rec["ch"]]
        if len(passed) >= 2:
            for key, val in (("mean", statistics.fmean(passed)), ("min", min(passed)),
                             ("max", max(passed)), ("sd", statistics.stdev(passed))):
                worst = max(worst, abs(rec[key] - val) / r_)
    h.check(bad_counts == 0, "stats-only: flag counts equal the input's (%d records differ)"
            % bad_counts)
    h.check(worst <= 1.0, "stats-only: mean, min, max, sd within one resolution step of "
            "Python's statistics module (worst %.3f steps)" % worst)

    # ---- 5. csv ----------------------------------------------------------------------
    dc = decode(pk, "--format", "csv")
    rows = dc.stdout.strip().split("\n")
    h.check(dc.returncode == 0 and rows[0] == "t,ch,v,f,r", "csv: header t,ch,v,f,r (%r)" % rows[0])
    as_json = []
    for row in rows[1:]:
        t, ch, v, f, rb = row.split(",")
        s = {"t": int(t), "ch": ch, "v": float(v) if v else None, "f": int(f)}
        if int(rb):
            s["r"] = int(rb)
        as_json.append(s)
    compare_samples(h, "csv", sent, as_json, res)

    # ---- 6. bad packets among good ones ---------------------------------------------
    r, one = encode(sent, "--windows-per-packet", "1")
    foreign_m = dict(man, station="other-buoy-9")
    fm_path = h.path("foreign.json")
    with open(fm_path, "w") as f:
        json.dump(foreign_m, f)
    fr = run(["encode", "--manifest", fm_path], stdin="".join(json.dumps(s) + "\n" for s in sent[:40]))
    foreign = fr.stdout.split()[0]
    flipped = bytearray.fromhex(one[1])
    flipped[len(flipped) // 2] ^= 0x04
    lines = [one[0], flipped.hex(), one[2][:len(one[2]) // 4 * 2], foreign, one[3], one[4][:12],
             "not-a-packet", one[5]]
    bad_file = h.path("mixed.hex")
    with open(bad_file, "w") as f:
        f.write("\n".join(lines) + "\n")
    dx = run(["decode", "--hex", "--manifest", MANIFEST, bad_file])
    errs = [l for l in dx.stderr.split("\n") if l]
    per_line = {}
    for e in errs:
        for n in range(1, 9):
            if e.startswith("tarn decode: %s:%d: " % (bad_file, n)):
                per_line.setdefault(n, []).append(e)
    print("      decode stderr:\n        " + "\n        ".join(errs))
    h.check(dx.returncode == EX_DATAERR, "mixed file: exit code 65 (%d)" % dx.returncode)
    h.check(sorted(per_line) == [2, 3, 4, 6, 7] and all(len(v) == 1 for v in per_line.values()),
            "one error line for each bad packet, naming file:line (lines %s)" % sorted(per_line))
    reasons = {2: "CRC", 3: "CRC", 4: "manifest", 6: "shorter", 7: "hex"}
    h.check(all(reasons[n].lower() in per_line.get(n, [""])[0].lower() for n in reasons),
            "each error line gives the reason (CRC, not known manifest, too short, not hex)")
    h.check(len(errs) == 6 and "5 packets rejected" in errs[-1],
            "one summary line; nothing else on stderr (%d lines)" % len(errs))
    got = jsonl(dx.stdout)
    good = [s for w in (0, 3, 5) for s in sent if start + w * 600 <= s["t"] < start + (w + 1) * 600]
    compare_samples(h, "good packets around bad ones", good, got, res)
    bad_windows = {start + 600, start + 1200, start + 2400}
    h.check(not any(g["t"] - g["t"] % 600 in bad_windows for g in got),
            "nothing of the rejected packets is output")

    # Binary files, one packet each (the form a file-based uploader keeps).
    bins = []
    for i, b in enumerate((bytes.fromhex(one[0]), bytes(flipped), bytes.fromhex(one[3]))):
        bins.append(h.path("packet%d.bin" % i))
        with open(bins[-1], "wb") as f:
            f.write(b)
    db = run(["decode", "--manifest", MANIFEST] + bins)
    errs = [l for l in db.stderr.split("\n") if l]
    h.check(db.returncode == EX_DATAERR and len(errs) == 2 and errs[0].startswith(
        "tarn decode: %s: CRC-32C mismatch" % bins[1]),
            "binary files: the corrupt one named with its reason, exit 65 (%s)" % errs[:1])
    good = [s for w in (0, 3) for s in sent if start + w * 600 <= s["t"] < start + (w + 1) * 600]
    compare_samples(h, "binary files", good, jsonl(db.stdout), res)

    # ---- 7. committed vectors ----------------------------------------------------------
    for name, opts in (("v01_hour_six_windows", ["--first-sequence", "1"]),
                       ("v05_mtu_split_48", ["--first-sequence", "30", "--mtu", "48"]),
                       ("v07_stats_only_one_window",
                        ["--first-sequence", "50", "--windows-per-packet", "1", "--stats-only"])):
        v = json.load(open(os.path.join(VECTORS, name + ".json")))
        want = [l.strip() for l in open(os.path.join(VECTORS, name + ".hex")) if l.strip()]
        vs = vector_samples(v, names)
        partial = any(w["partial"] or w["clock_unsynced"] for w in v["input"]["windows"])
        h.check(not partial, "codec/vectors/%s: input windows complete, clock synchronised (what "
                "JSON Lines input can express)" % name)
        r, mine = encode(vs, *opts)
        h.check(r.returncode == 0 and mine == want,
                "codec/vectors/%s: tarn encode of its input gives the committed %d packet(s) byte "
                "for byte" % (name, len(want)))
        check_crc(h, name, want)
        if v["encode"]["stats_only"]:
            recs = jsonl(decode(want, "--records", "windows").stdout)
            exp = v["packets"][0]["windows"][0]["channels"]
            ok = len(recs) == len(exp) and all(
                math.isclose(rec[k], e["stats"][k], abs_tol=1e-9) for rec, e in zip(recs, exp)
                for k in ("mean", "min", "max", "sd"))
            h.check(ok, "codec/vectors/%s: decoded statistics equal the committed ones" % name)
            continue
        got = jsonl(decode(want).stdout)
        exp = []
        for p in v["packets"]:
            for w in p["windows"]:
                for i in range(w["slots"]):
                    for ci, c in enumerate(w["channels"]):
                        exp.append((w["start"] + 60 * i, names[w["first_channel"] + ci],
                                    c["values"][i], c["flags"][i]))
        mine = [(g["t"], g["ch"], g["v"], g["f"]) for g in got]
        ok = len(mine) == len(exp) and all(
            a[:2] == b[:2] and a[3] == b[3] and (a[2] is None) == (b[2] is None) and
            (a[2] is None or abs(a[2] - b[2]) < 1e-9) for a, b in zip(sorted(mine), sorted(exp)))
        h.check(ok, "codec/vectors/%s: tarn decode gives the committed values and flags (%d samples)"
                % (name, len(exp)))
finish(h)
