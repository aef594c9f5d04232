"""A simulated instrument on a pseudo-terminal pair.

The instrument owns the master side; the daemon opens the slave through a
stable symlink (as /dev/serial/by-id/... would be on a station). unplug()
closes the pair (the daemon sees EOF/EIO) and replug() makes a new one behind
the same symlink, like a USB adapter that comes back.
"""
import os
import select
import threading
import time
import tty


class PtyInstrument:
    def __init__(self, link_path):
        self.link = link_path
        self.master = None
        self.slave = None
        self.stop_flag = threading.Event()
        self.thread = None
        self.lock = threading.Lock()
        self.plugged = False
        self.mute = False  # when True the instrument ignores requests (dead)
        self.garbage = False  # when True it answers with noise
        self.requests = 0
        self.replies = 0

    # --- lifecycle -------------------------------------------------------
    def plug(self):
        master, slave = os.openpty()
        tty.setraw(master)
        tty.setraw(slave)
        name = os.ttyname(slave)
        tmp = self.link + ".tmp"
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        os.symlink(name, tmp)
        os.replace(tmp, self.link)
        with self.lock:
            self.master, self.slave = master, slave
            self.plugged = True

    def unplug(self):
        with self.lock:
            self.plugged = False
            for fd in (self.master, self.slave):
                if fd is not None:
                    try:
                        os.close(fd)
                    except OSError:
                        pass
            self.master = self.slave = None
        try:
            os.unlink(self.link)
        except FileNotFoundError:
            pass

    def start(self):
        self.plug()
        self.thread = threading.Thread(target=self._loop, daemon=True)
        self.thread.start()
        return self

    def stop(self):
        self.stop_flag.set()
        if self.thread:
            self.thread.join(timeout=2)
        self.unplug()

    # --- I/O ---------------------------------------------------------------
    def write(self, data):
        with self.lock:
            fd = self.master
        if fd is not None:
            try:
                os.write(fd, data)
            except OSError:
                pass

    def _loop(self):
        buf = b""
        while not self.stop_flag.is_set():
            with self.lock:
                fd = self.master
            if fd is None:
                time.sleep(0.05)
                continue
            try:
                r, _, _ = select.select([fd], [], [], 0.1)
            except (OSError, ValueError):
                time.sleep(0.05)
                continue
            if not r:
                self.idle()
                continue
            try:
                chunk = os.read(fd, 4096)
            except OSError:
                time.sleep(0.05)
                continue
            buf += chunk
            buf = self.on_bytes(buf)

    # --- to override ---------------------------------------------------------
    def on_bytes(self, buf):
        """Consume what forms a request, answer it, return the rest."""
        return b""

    def idle(self):
        pass


class LineInstrument(PtyInstrument):
    """Answers each CR/LF-terminated poll command with reply(command)."""

    def __init__(self, link_path, reply):
        super().__init__(link_path)
        self.reply = reply
        self.delay_s = 0.0

    def on_bytes(self, buf):
        while b"\n" in buf:
            line, buf = buf.split(b"\n", 1)
            self.requests += 1
            if self.mute:
                continue
            if self.delay_s:
                time.sleep(self.delay_s)
            if self.garbage:
                self.write(os.urandom(40) + b"\r\n")
                continue
            out = self.reply(line.strip().decode("ascii", "replace"))
            if out is not None:
                self.write(out.encode("ascii"))
                self.replies += 1
        return buf[-1024:]


def nmea_checksum(body):
    c = 0
    for ch in body.encode("ascii"):
        c ^= ch
    return "%02X" % c
