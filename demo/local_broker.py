"""The demo's shore-side broker: mosquitto with a TLS listener on 127.0.0.1.

Everything is made fresh in the demo's scratch directory for each run: a CA
and a server certificate for 127.0.0.1 (openssl), a password file with two
users (the station and the shore, random passwords; mosquitto_passwd), and
the station's secrets file (broker login and a random downlink command key).
The broker keeps its state on disk (persistence), so that the shore's
subscription and the messages queued for it survive a broker restart.
"""
import json
import os
import pwd
import secrets
import socket
import subprocess
import time


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LocalBroker:
    def __init__(self, work):
        self.work = work
        self.pki = os.path.join(work, "pki")
        self.state = os.path.join(work, "broker")
        self.port = free_port()
        self.passwords = {"station": secrets.token_urlsafe(12), "shore": secrets.token_urlsafe(12)}
        self.command_key = secrets.token_bytes(32)
        self.proc = None

    def prepare(self):
        """CA, server certificate, password file, broker config, station secrets file."""
        os.makedirs(self.pki)
        os.makedirs(self.state)

        def run(*args):
            subprocess.run(list(args), cwd=self.pki, check=True, capture_output=True)

        run("openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "1",
            "-subj", "/CN=Lake Hollin demo CA", "-keyout", "ca.key", "-out", "ca.pem")
        run("openssl", "req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=127.0.0.1",
            "-keyout", "server.key", "-out", "server.csr")
        with open(os.path.join(self.pki, "server.ext"), "w") as f:
            f.write("subjectAltName=IP:127.0.0.1\n")
        run("openssl", "x509", "-req", "-in", "server.csr", "-CA", "ca.pem", "-CAkey", "ca.key",
            "-CAcreateserial", "-days", "1", "-extfile", "server.ext", "-out", "server.pem")
        passwd = os.path.join(self.pki, "passwd")
        for i, (user, pw) in enumerate(self.passwords.items()):
            run("mosquitto_passwd", "-b", *(["-c"] if i == 0 else []), passwd, user, pw)
        # mosquitto started as root runs as its own user: let it read the
        # scratch PKI and write its state directory.
        os.chmod(self.work, 0o755)
        os.chmod(self.pki, 0o755)
        for f in os.listdir(self.pki):
            os.chmod(os.path.join(self.pki, f), 0o644)
        if os.geteuid() == 0:
            try:
                u = pwd.getpwnam("mosquitto")
                os.chown(self.state, u.pw_uid, u.pw_gid)
            except KeyError:
                pass
        self.conf = os.path.join(self.work, "mosquitto.conf")
        with open(self.conf, "w") as f:
            f.write("listener %d 127.0.0.1\n" % self.port)
            f.write("cafile %s/ca.pem\ncertfile %s/server.pem\nkeyfile %s/server.key\n"
                    % (self.pki, self.pki, self.pki))
            f.write("allow_anonymous false\npassword_file %s\n" % passwd)
            f.write("persistence true\npersistence_location %s/\n" % self.state)
        path = os.path.join(self.work, "secrets.json")
        with open(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600), "w") as f:
            json.dump({"username": "station", "password": self.passwords["station"],
                       "command_key": self.command_key.hex()}, f)

    def start(self):
        """Starts mosquitto on self.port and waits until it listens."""
        log = open(os.path.join(self.work, "mosquitto.log"), "a")
        self.proc = subprocess.Popen(["mosquitto", "-c", self.conf], stdout=log, stderr=log)
        deadline = time.time() + 5
        while time.time() < deadline:
            try:
                socket.create_connection(("127.0.0.1", self.port), timeout=0.2).close()
                return self.proc
            except OSError:
                time.sleep(0.05)
        raise RuntimeError("mosquitto did not start on 127.0.0.1:%d" % self.port)

    def stop(self):
        """SIGTERM, as a broker host going down in order; waits for the exit."""
        self.proc.terminate()
        self.proc.wait(timeout=10)

    def client_args(self, tool):
        """mosquitto_sub/mosquitto_pub argv start for the shore user, over TLS."""
        return [tool, "-h", "127.0.0.1", "-p", str(self.port), "--cafile",
                os.path.join(self.pki, "ca.pem"), "-u", "shore", "-P", self.passwords["shore"]]
