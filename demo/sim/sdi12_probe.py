"""A simulated SDI-12 temperature probe behind a transparent adapter, on a pty.

Answers a!, aI!, aM!, aMC!, aC!, aCC!, aD0! (SDI-12 v1.4 reply formats: aM! ->
atttn, aC! -> atttnn, aDn! -> a<values>[CRC], aI! -> allccccccccmmmmmmvvvxxx).
A measurement takes READY_S of real time, which is less than the announced ttt
seconds; with aM! the probe sends the service request "a" when ready. A data
request before the measurement is ready, or without one, gets "a" (no values).
CRC: CRC-16/ARC of the reply, sent as three characters 0x40|bits. Invented
identity and data for the demo.
"""
import threading
import time

from lake import water_temperature
from pty_instrument import PtyInstrument

READY_S = 0.25  # real time; instruments are not sped up
ANNOUNCED_S = 1


def crc16_arc(text):
    crc = 0
    for b in text.encode("ascii"):
        crc ^= b
        for _ in range(8):
            crc = (crc >> 1) ^ 0xA001 if crc & 1 else crc >> 1
    return crc


def crc_chars(text):
    c = crc16_arc(text)
    return "".join(chr(0x40 | v) for v in ((c >> 12), (c >> 6) & 0x3F, c & 0x3F))


class Sdi12Probe(PtyInstrument):
    def __init__(self, link_path, clock, address="0", depth_m=1.0):
        super().__init__(link_path)
        self.clock = clock
        self.address = address
        self.depth_m = depth_m
        self.values = None  # values of the last finished measurement
        self.crc = False
        self.ready_at = None

    def measure(self, service_request):
        t = self.clock.now()
        temp = water_temperature(t, self.depth_m)
        self.values = None
        self.ready_at = time.time() + READY_S

        def finish():
            time.sleep(READY_S)
            self.values = [temp, 12.31]  # temperature (Cel), supply voltage (V)
            if service_request:
                self.write((self.address + "\r\n").encode("ascii"))
        threading.Thread(target=finish, daemon=True).start()

    def reply(self, cmd):
        a = self.address
        if cmd == a + "!" or cmd == "?!":
            return a
        if cmd == a + "I!":
            return a + "14" + "HOLLINLK" + "TPRB01" + "100" + "SIM0001"
        for name, kind, crc in (("MC", "M", True), ("CC", "C", True), ("M", "M", False),
                                ("C", "C", False)):
            if cmd == a + name + "!":
                self.crc = crc
                self.measure(service_request=(kind == "M"))
                return a + "%03d" % ANNOUNCED_S + ("2" if kind == "M" else "02")
        if cmd == a + "D0!":
            body = a
            if self.values is not None:
                body += "".join("%+.3f" % v for v in self.values)
            return body + (crc_chars(body) if self.crc else "")
        return None  # not for us, or not supported: silence, as the spec asks

    def on_bytes(self, buf):
        while b"!" in buf:
            cmd, buf = buf.split(b"!", 1)
            self.requests += 1
            if self.mute:
                continue
            text = cmd.decode("ascii", "replace").strip() + "!"
            out = self.reply(text)
            if out is not None:
                time.sleep(0.01)
                self.write((out + "\r\n").encode("ascii"))
                self.replies += 1
        return buf[-256:]
