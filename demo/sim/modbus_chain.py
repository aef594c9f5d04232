"""A simulated thermistor chain on Modbus RTU (pure Python, no pymodbus).

Four thermistors at 0.5, 2, 5 and 10 m on the invented Lake Hollin. The
chain reports each thermistor's resistance (ohm) as a 32-bit float in two
input registers, high word first: depth k at input registers 2k, 2k+1. Holding
register 100 is a status word (0 = ok). Reading an address it does not have
answers exception 02 (ILLEGAL DATA ADDRESS); an unknown function answers
exception 01. Frames: Modbus over Serial Line V1.02 RTU (CRC-16/MODBUS, low
byte first); function and exception layout from the Modbus Application Protocol
V1.1b3. Invented data for the demo.
"""
import math
import struct
import time

from lake import water_temperature
from pty_instrument import PtyInstrument

DEPTHS_M = (0.5, 2.0, 5.0, 10.0)
# Steinhart-Hart set of a common 10 kohm (25 degC) thermistor: the set the
# station config uses to convert back (see demo/station.json).
SH_A, SH_B, SH_C = 1.032e-3, 2.387e-4, 1.580e-7


def crc16_modbus(data):
    crc = 0xFFFF
    for b in data:
        crc ^= b
        for _ in range(8):
            crc = (crc >> 1) ^ 0xA001 if crc & 1 else crc >> 1
    return crc


def with_crc(frame):
    c = crc16_modbus(frame)
    return frame + bytes((c & 0xFF, c >> 8))


def thermistor_ohm(t_celsius):
    """R(T) from the Steinhart-Hart equation, by bisection on ln R."""
    target = 1.0 / (t_celsius + 273.15)
    lo, hi = math.log(10.0), math.log(1e7)
    for _ in range(80):
        mid = (lo + hi) / 2
        inv_t = SH_A + SH_B * mid + SH_C * mid ** 3
        if inv_t > target:  # 1/T grows with ln R: mid is too cold, R must be lower
            hi = mid
        else:
            lo = mid
    return math.exp((lo + hi) / 2)


class ModbusChain(PtyInstrument):
    def __init__(self, link_path, clock, unit=1):
        super().__init__(link_path)
        self.clock = clock
        self.unit = unit
        self.exceptions = 0

    def registers(self, function):
        if function == 4:
            regs = {}
            t = self.clock.now()
            for k, depth in enumerate(DEPTHS_M):
                hi, lo = struct.unpack(">HH", struct.pack(">f", thermistor_ohm(
                    water_temperature(t, depth))))
                regs[2 * k], regs[2 * k + 1] = hi, lo
            return regs
        return {100: 0}

    def answer(self, req):
        unit, fn = req[0], req[1]
        start, count = struct.unpack(">HH", req[2:6])
        if fn not in (3, 4):
            self.exceptions += 1
            return with_crc(bytes((unit, fn | 0x80, 0x01)))
        regs = self.registers(fn)
        if not 1 <= count <= 125 or any(a not in regs for a in range(start, start + count)):
            self.exceptions += 1
            return with_crc(bytes((unit, fn | 0x80, 0x02)))
        body = b"".join(struct.pack(">H", regs[a]) for a in range(start, start + count))
        return with_crc(bytes((unit, fn, 2 * count)) + body)

    def on_bytes(self, buf):
        while len(buf) >= 8:
            req = buf[:8]
            if crc16_modbus(req[:6]) != (req[6] | req[7] << 8):
                buf = buf[1:]  # not a request frame here: resynchronise
                continue
            buf = buf[8:]
            self.requests += 1
            if self.mute or req[0] != self.unit:
                continue
            time.sleep(0.005)  # turnaround
            self.write(self.answer(req))
            self.replies += 1
        return buf[-256:]
