#!/usr/bin/python3
"""Reference decoder of the tarn packet format, written from codec/FORMAT.md alone.

It shares no code with the C++ codec: it exists to show that FORMAT.md is enough
to decode the packets, and it checks the test vectors independently.

  reference_decoder.py --check codec/vectors     decode every vector, compare with its JSON
  reference_decoder.py --trace MANIFEST.json HEX print every field of one packet
Standard library only; run with /usr/bin/python3.
"""
import datetime
import json
import math
import os
import struct
import sys

EPOCH = 1704067200
MIN_T, MAX_T = -2208988800, 10413792000
MAX_Q = 2 ** 53 - 1
VERSIONS = (1, 2)
KINDS = ("change", "stale", "resumed")
CAUSES = ("none", "instrument_offline", "no_values", "all_failed_qc")
DAY0 = datetime.date(1970, 1, 1)


class Bad(Exception):
    pass


def crc32c(data):
    """CRC-32/ISCSI, bit by bit from the catalogue parameters (FORMAT.md §2)."""
    crc = 0xFFFFFFFF
    for b in data:
        crc ^= b
        for _ in range(8):
            crc = (crc >> 1) ^ 0x82F63B78 if crc & 1 else crc >> 1
    return crc ^ 0xFFFFFFFF


def unzigzag(z):
    return (z >> 1) ^ -(z & 1)


class Bytes:
    def __init__(self, data):
        self.d, self.p = data, 0

    def left(self):
        return len(self.d) - self.p

    def u8(self):
        if self.p >= len(self.d):
            raise Bad("truncated")
        self.p += 1
        return self.d[self.p - 1]

    def varint(self):
        v = 0
        for i in range(10):
            b = self.u8()
            v |= (b & 0x7F) << (7 * i)
            if not b & 0x80:
                if v >= 2 ** 64:
                    raise Bad("varint overflow")
                return v
        raise Bad("varint too long")

    def svarint(self):
        return unzigzag(self.varint())

    def take(self, n):
        if n > self.left():
            raise Bad("truncated")
        self.p += n
        return self.d[self.p - n:self.p]

    def string(self):
        n = self.varint()
        s = self.take(n)
        if n > 255:
            raise Bad("string over 255 bytes")
        return s.decode("utf-8")


class Bits:
    def __init__(self, data, trace=None):
        self.d, self.p, self.trace = data, 0, trace

    def left(self):
        return len(self.d) * 8 - self.p

    def bits(self, n, what=None):
        if n > self.left():
            raise Bad("bit stream cut short")
        v = 0
        for _ in range(n):
            v = (v << 1) | ((self.d[self.p >> 3] >> (7 - (self.p & 7))) & 1)
            self.p += 1
        if what and self.trace is not None:
            self.trace.append((what, n, v))
        return v

    def eg(self, k, what=None):
        start = self.p
        zeros = 0
        while self.bits(1) == 0:
            zeros += 1
            if zeros > 55 - k:
                raise Bad("Exp-Golomb prefix too long")
        m = zeros + k
        w = (1 << m) | self.bits(m)
        v = w - (1 << k)
        if what and self.trace is not None:
            self.trace.append((what, self.p - start, v))
        return v

    def sl(self, what=None):
        n = self.bits(6)
        if n > 56:
            raise Bad("SL length over 56")
        v = unzigzag(self.bits(n))
        if what and self.trace is not None:
            self.trace.append((what, 6 + n, v))
        return v

    def rice(self, k):
        q = 0
        while q < 16 and self.bits(1) == 1:
            q += 1
        if q == 16:
            n = self.bits(6)
            if n > 56:
                raise Bad("escape length over 56")
            return self.bits(n)
        return (q << k) | self.bits(k)

    def mask(self):
        count = self.eg(0) + 1
        if count > 32:
            raise Bad("mask with more than 32 bits")
        m, last = 0, -1
        for _ in range(count):
            b = self.bits(5)
            if b <= last:
                raise Bad("mask bits not ascending")
            m |= 1 << b
            last = b
        return m

    def finish(self):
        if self.left() >= 8 or (self.left() and self.bits(self.left()) != 0):
            raise Bad("trailing data after the last field")


def check_q(q):
    if abs(q) > MAX_Q:
        raise Bad("value out of range")
    return q


def window_start(index, window_s):
    t = (index + EPOCH // window_s) * window_s
    if not MIN_T <= t <= MAX_T:
        raise Bad("time out of range")
    return t


def canonical_manifest(m, version=2):
    def s(x):
        b = x.encode("utf-8")
        return varint(len(b)) + b
    out = s(m["station"]) + varint(m["period_s"]) + varint(m["window_s"])
    if version >= 2:
        out += bytes([(1 if "latitude" in m else 0) | (2 if "elevation_m" in m else 0)])
        if "latitude" in m:
            out += struct.pack("<dd", m["latitude"], m["longitude"])
        if "elevation_m" in m:
            out += struct.pack("<d", m["elevation_m"])
    out += varint(len(m["channels"]))
    for c in m["channels"]:
        out += s(c["name"]) + s(c["quantity"]) + s(c["unit"])
        out += struct.pack("<d", c["resolution"]) + s(c.get("instrument", ""))
        if version >= 2:
            out += bytes([(1 if "depth_m" in c else 0) | (2 if "calibrated_on" in c else 0)])
            if "depth_m" in c:
                out += struct.pack("<d", c["depth_m"])
            out += s(c.get("model", "")) + s(c.get("serial", ""))
            if "calibrated_on" in c:
                days = (datetime.date.fromisoformat(c["calibrated_on"]) - DAY0).days
                out += varint((days << 1) ^ (days >> 63))
    return out


def varint(v):
    out = bytearray()
    while v >= 0x80:
        out.append((v & 0x7F) | 0x80)
        v >>= 7
    out.append(v)
    return bytes(out)


def parse_manifest(data, version):
    r = Bytes(data)
    m = {"station": r.string(), "period_s": r.varint(), "window_s": r.varint()}
    if version >= 2:
        fields = r.u8()
        if fields & ~3:
            raise Bad("unknown station field bits")
        if fields & 1:
            m["latitude"], m["longitude"] = struct.unpack("<dd", r.take(16))
        if fields & 2:
            m["elevation_m"] = struct.unpack("<d", r.take(8))[0]
    m["channels"] = []
    for _ in range(r.varint()):
        c = {"name": r.string(), "quantity": r.string(), "unit": r.string(),
             "resolution": struct.unpack("<d", r.take(8))[0]}
        inst = r.string()
        if inst:
            c["instrument"] = inst
        if version >= 2:
            fields = r.u8()
            if fields & ~3:
                raise Bad("unknown channel field bits")
            if fields & 1:
                c["depth_m"] = struct.unpack("<d", r.take(8))[0]
            for key in ("model", "serial"):
                text = r.string()
                if text:
                    c[key] = text
            if fields & 2:
                day = DAY0 + datetime.timedelta(days=r.svarint())
                if not 1900 <= day.year <= 2299:
                    raise Bad("calibration date outside 1900..2299")
                c["calibrated_on"] = day.isoformat()
        m["channels"].append(c)
    if r.left():
        raise Bad("trailing manifest bytes")
    return m


def stats_of(values, flags, reasons, start, period, version):
    counts = [flags.count(f) for f in (1, 2, 3, 4, 9)]
    # §4.4: over the passed samples; in version 2, without any, the not-evaluated ones.
    basis = 2 if version >= 2 and counts[0] == 0 and counts[1] > 0 else 1
    passed = [(i, v) for i, (v, f) in enumerate(zip(values, flags)) if f == basis]
    s = {"counts": counts, "mean": None, "min": None, "max": None, "sd": None,
         "first_t": None, "last_t": None, "reasons_any": 0,
         "basis": "not_evaluated" if basis == 2 else "used"}
    for r in reasons:
        s["reasons_any"] |= r
    if passed:
        xs = [v for _, v in passed]
        mean = sum(xs) / len(xs)
        s.update(mean=mean, min=min(xs), max=max(xs),
                 sd=math.sqrt(sum((x - mean) ** 2 for x in xs) / (len(xs) - 1)) if len(xs) > 1 else 0.0,
                 first_t=start + passed[0][0] * period, last_t=start + passed[-1][0] * period)
    return s


def window_list(body, m, min_bits, trace):
    r = Bytes(body)
    index = r.svarint()
    count = r.varint()
    if not 1 <= count <= 255:
        raise Bad("window count outside 1..255")
    b = Bits(body[r.p:], trace)
    C = len(m["channels"])
    if b.bits(1, "fragment"):
        c0 = b.eg(0, "first channel")
        cn = b.eg(0, "channel count - 1") + 1
        if c0 + cn > C:
            raise Bad("channel range outside the manifest")
    else:
        c0, cn = 0, C
    if count * (2 + min_bits * cn) > b.left():
        raise Bad("windows cannot fit in the section")
    n = m["window_s"] // m["period_s"]
    wins = []
    for w in range(count):
        if w:
            index += b.eg(0, "window gap") + 1
        partial = b.bits(1, "partial")
        clock = b.bits(1, "clock unsynced")
        slots = n
        if partial:
            d = b.eg(0, "n - slots")
            if d >= n:
                raise Bad("partial window without slots")
            slots = n - d
        wins.append({"start": window_start(index, m["window_s"]), "slots": slots,
                     "partial": bool(partial), "clock_unsynced": bool(clock),
                     "first_channel": c0, "channels": [{} for _ in range(cn)]})
    if count > 1 and cn * sum(w["slots"] for w in wins) > 65536:
        raise Bad("too many channel-slots")
    return wins, b, c0, cn


def samples_section(body, m, trace):
    wins, b, c0, cn = window_list(body, m, 1, trace)
    S = sum(w["slots"] for w in wins)
    for ci in range(cn):
        res = m["channels"][c0 + ci]["resolution"]
        flags = [1] * S
        if b.bits(1, "ch%d exceptions" % ci):
            runs = b.eg(0, "runs - 1") + 1
            pos = 0
            for _ in range(runs):
                pos += b.eg(3, "pass gap")
                flag = (2, 3, 4, 9)[b.bits(2, "flag code")]
                length = b.eg(0, "run length - 1") + 1
                if pos + length > S:
                    raise Bad("flag runs exceed the slots")
                flags[pos:pos + length] = [flag] * length
                pos += length
        present = S - flags.count(9)
        qs = []
        if present:
            qs.append(check_q(b.sl("ch%d first value" % ci)))
        if present > 1:
            k = b.bits(5, "rice k")
            for _ in range(present - 1):
                qs.append(check_q(qs[-1] + unzigzag(b.rice(k))))
            if trace is not None:
                trace.append(("%d differences" % (present - 1), None, None))
        it = iter(qs)
        s = 0
        for w in wins:
            f = flags[s:s + w["slots"]]
            w["channels"][ci] = {"flags": f, "values": [None if x == 9 else next(it) * res for x in f]}
            s += w["slots"]
    b.finish()
    return wins


def reasons_section(body, wins):
    b = Bits(body)
    S = sum(w["slots"] for w in wins)
    prev = 0
    for ci in range(len(wins[0]["channels"])):
        entries = b.eg(0)
        if entries > S:
            raise Bad("too many reason entries")
        slot = -1
        for _ in range(entries):
            slot += b.eg(3) + 1
            if slot >= S:
                raise Bad("reason entry beyond the slots")
            if b.bits(1):
                if prev == 0:
                    raise Bad("repeated mask before any mask")
                mask = prev
            else:
                mask = b.mask()
            prev = mask
            base = 0
            for w in wins:
                if slot < base + w["slots"]:
                    ch = w["channels"][ci]
                    ch.setdefault("reasons", [0] * w["slots"])[slot - base] = mask
                    break
                base += w["slots"]
    b.finish()


def stats_section(body, m, version, trace):
    wins, b, c0, cn = window_list(body, m, 2, trace)
    prev = [None] * cn
    for w in wins:
        slots = w["slots"]
        for ci in range(cn):
            res = m["channels"][c0 + ci]["resolution"]
            allpass = b.bits(1, "all pass")
            counts = [slots, 0, 0, 0, 0]
            if not allpass:
                for i in range(1, 5):
                    counts[i] = b.eg(0, "count")
                counts[0] = slots - sum(counts[1:])
                if counts[0] < 0:
                    raise Bad("flag counts exceed the slots")
            n1 = counts[0]
            basis = "used"
            if version >= 2 and n1 == 0 and counts[1] > 0:
                n1, basis = counts[1], "not_evaluated"
            st = {"counts": counts, "mean": None, "min": None, "max": None, "sd": None,
                  "first_t": None, "last_t": None, "reasons_any": 0, "basis": basis}
            if n1:
                if prev[ci] is None:
                    mean = b.sl("mean")
                else:
                    mean = prev[ci] + unzigzag(b.eg(2, "mean delta"))
                prev[ci] = check_q(mean)
                lo = hi = mean
                sd = 0
                if n1 >= 2:
                    lo = mean - b.eg(2, "mean - min")
                    hi = mean + b.eg(2, "max - mean")
                    sd = b.eg(2, "sd")
                first, last = 0, slots - 1
                if not allpass:
                    first = b.eg(0, "first slot")
                    if first > slots - n1:
                        raise Bad("first slot out of range")
                    last = first
                    if n1 >= 2:
                        last = first + n1 - 1 + b.eg(0, "last slot extra")
                        if last > slots - 1:
                            raise Bad("last slot out of range")
                st.update(mean=mean * res, min=check_q(lo) * res, max=check_q(hi) * res,
                          sd=check_q(sd) * res, first_t=w["start"] + first * m["period_s"],
                          last_t=w["start"] + last * m["period_s"])
            if b.bits(1, "reasons present"):
                st["reasons_any"] = b.mask()
            w["channels"][ci] = {"stats": st}
    b.finish()
    for w in wins:
        w["stats_only"] = True
    return wins


def sequence_of(packet):
    """The packet's sequence number (the varint after the flags byte and the
    manifest hash, FORMAT.md §2), without checking the rest; None if cut short."""
    try:
        r = Bytes(packet)
        r.take(5)
        return r.varint()
    except (Bad, IndexError):
        return None


def lookup(manifests, version, mhash):
    return manifests.get((version, mhash), manifests.get(mhash))


def decode(packet, manifests, trace=None):
    """Returns the packet as the JSON form of codec/vectors; raises Bad. `manifests`
    maps (version, hash) -> manifest (see known()), or hash -> manifest."""
    if not 10 <= len(packet) <= 65535:
        raise Bad("packet size")
    if crc32c(packet[:-4]) != struct.unpack("<I", packet[-4:])[0]:
        raise Bad("CRC-32C mismatch")
    version = packet[0] >> 4
    if version not in VERSIONS:
        raise Bad("format version %d" % version)
    r = Bytes(packet[:-4])
    h = r.u8()
    mhash = struct.unpack("<I", r.take(4))[0]
    out = {"version": version, "sequence": r.varint(), "clock_unsynced": bool(h & 1), "partial": bool(h & 2),
           "manifest_hash": "%08x" % mhash, "windows": [], "alerts": [], "health": [],
           "cleanings": [], "skipped_sections": []}
    last_type = 7 if version >= 2 else 6
    needs_manifest = (1, 2, 3, 4, 7)
    seen, samples = set(), False
    while r.left():
        t = r.u8()
        body = r.take(r.varint())
        if t == 0:
            raise Bad("section type 0")
        if t > last_type:
            out["skipped_sections"].append(t)
            continue
        if t in seen or (t in (1, 2) and seen & {1, 2}):
            raise Bad("repeated section")
        seen.add(t)
        m = lookup(manifests, version, mhash) if t in needs_manifest else None
        if t in needs_manifest and m is None:
            raise Bad("unknown manifest %08x" % mhash)
        if t == 1:
            out["windows"], samples = samples_section(body, m, trace), True
        elif t == 2:
            out["windows"] = stats_section(body, m, version, trace)
        elif t == 3:
            if not samples:
                raise Bad("reasons without windows")
            reasons_section(body, out["windows"])
        elif t == 4:
            b = Bytes(body)
            count = b.varint()
            if count > b.left() // (8 if version >= 2 else 7):
                raise Bad("alert count")
            for _ in range(count):
                ch, level, name, prev = b.varint(), b.varint(), b.string(), b.varint()
                start = window_start(b.svarint(), m["window_s"])
                stat = check_q(b.svarint()) * m["channels"][ch]["resolution"]
                ev = {"channel": ch, "level": level, "level_name": name,
                      "previous_level": prev, "window_start": start,
                      "statistic": stat, "rule_id": b.string(), "kind": "change", "cause": "none"}
                if version >= 2:
                    kc = b.u8()
                    if kc & 15 > 2 or kc >> 4 > 3:
                        raise Bad("alert kind or cause")
                    ev["kind"], ev["cause"] = KINDS[kc & 15], CAUSES[kc >> 4]
                    if (ev["kind"] == "change") != (ev["cause"] == "none") and ev["kind"] != "resumed":
                        raise Bad("alert cause does not fit its kind")
                out["alerts"].append(ev)
            if b.left():
                raise Bad("trailing alert bytes")
        elif t == 5:
            b = Bytes(body)
            index, count = b.varint(), b.varint()
            if not (1 <= count <= 2 ** 21 and index < count):
                raise Bad("manifest part")
            part = b.take(b.left())
            out["manifest_part"] = {"index": index, "count": count, "bytes": part.hex()}
            if count == 1:
                if crc32c(part) != mhash:
                    raise Bad("manifest hash")
                out["manifest"] = parse_manifest(part, version)
        elif t == 7:
            b = Bytes(body)
            count = b.varint()
            if count > b.left() // 5:
                raise Bad("cleaning count")
            for _ in range(count):
                ch = b.varint()
                if ch >= len(m["channels"]):
                    raise Bad("cleaning channel")
                t0 = b.svarint() + EPOCH
                t1 = t0 + b.varint()
                if not (MIN_T <= t0 and t1 <= MAX_T):
                    raise Bad("cleaning time out of range")
                rec = {"channel": ch, "maintenance_start": t0, "maintenance_end": t1,
                       "n_before": b.u8(), "n_after": b.u8(), "before": None, "after": None}
                res = m["channels"][ch]["resolution"]
                if rec["n_before"]:
                    rec["before"] = check_q(b.svarint()) * res
                if rec["n_after"]:
                    rec["after"] = check_q(b.svarint()) * res
                out["cleanings"].append(rec)
            if b.left():
                raise Bad("trailing cleaning bytes")
        elif t == 6:
            b = Bytes(body)
            for _ in range(b.varint()):
                mask = b.u8()
                if mask & ~7:
                    raise Bad("unknown health field")
                rec = {"t": b.svarint() + EPOCH, "board_temp_c": None, "disk_free_mib": None,
                       "supply_v": None}
                if mask & 1:
                    rec["board_temp_c"] = b.svarint() * 0.1
                if mask & 2:
                    rec["disk_free_mib"] = b.varint()
                if mask & 4:
                    rec["supply_v"] = b.varint() * 0.001
                out["health"].append(rec)
            if b.left():
                raise Bad("trailing health bytes")
    if out["windows"]:
        if (any(w["clock_unsynced"] for w in out["windows"]) != out["clock_unsynced"] or
                any(w["partial"] for w in out["windows"]) != out["partial"]):
            raise Bad("header flags disagree with the windows")
    m = lookup(manifests, version, mhash)
    for w in out["windows"]:
        w.setdefault("stats_only", False)
        for ch in w["channels"]:
            if not w["stats_only"]:
                ch["stats"] = stats_of(ch["values"], ch["flags"], ch.get("reasons", []),
                                       w["start"], m["period_s"], version)
    return out


def close(a, b):
    if isinstance(a, bool) or isinstance(b, bool):
        return a == b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return abs(a - b) <= 1e-9 * max(1.0, abs(b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(close(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(close(x, y) for x, y in zip(a, b))
    return a == b


def load_manifest(path):
    """The manifest of an M.json file and its version 2 hash (§5.1)."""
    m = json.load(open(path))
    return crc32c(canonical_manifest(m)), m


def known(m):
    """The manifests argument of decode(): m under the hash each version gives it."""
    return {(v, crc32c(canonical_manifest(m, v))): m for v in VERSIONS}


def check(folder):
    passed = failed = 0
    for name in sorted(os.listdir(folder)):
        if not name.endswith(".hex"):
            continue
        v = json.load(open(os.path.join(folder, name[:-4] + ".json")))
        h, m = load_manifest(os.path.join(folder, v["manifest"]))
        lines = [l.strip() for l in open(os.path.join(folder, name)) if l.strip()]
        for i, (line, want) in enumerate(zip(lines, v["packets"])):
            try:
                got = decode(bytes.fromhex(line), known(m))
                ok = close(got, want)
            except Bad as e:
                ok, got = False, str(e)
            if ok and len(lines) == len(v["packets"]):
                passed += 1
            else:
                failed += 1
                print("FAIL %s packet %d: %s" % (name, i, json.dumps(got)[:300]))
    print("%d passed, %d failed" % (passed, failed))
    return failed == 0 and passed > 0


def main(argv):
    if len(argv) == 3 and argv[1] == "--check":
        return 0 if check(argv[2]) else 1
    if len(argv) == 4 and argv[1] == "--trace":
        h, m = load_manifest(argv[2])
        trace = []
        p = bytes.fromhex(argv[3])
        print(json.dumps(decode(p, known(m), trace)))
        for what, nbits, value in trace:
            print("  %-20s %4s bits  %s" % (what, nbits if nbits is not None else "", value))
        return 0
    print(__doc__)
    return 64


if __name__ == "__main__":
    sys.exit(main(sys.argv))
