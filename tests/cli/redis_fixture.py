"""A real redis-server (Debian package redis-server) on loopback for the work-queue tests and
benchmark: a free port, a scratch folder, append-only file on with fsync at every write."""
import os
import socket
import subprocess
import time


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class RedisServer:
    def __init__(self, folder):
        self.folder = folder
        self.port = free_port()
        self.process = None

    @property
    def url(self):
        return f"redis://127.0.0.1:{self.port}"

    def start(self):
        self.process = subprocess.Popen(
            ["redis-server", "--port", str(self.port), "--bind", "127.0.0.1", "--dir", self.folder,
             "--appendonly", "yes", "--appendfsync", "always", "--save", "", "--protected-mode", "yes"],
            stdout=open(os.path.join(self.folder, "redis.log"), "a"), stderr=subprocess.STDOUT)
        for _ in range(100):
            if self.ping():
                return
            time.sleep(0.05)
        raise RuntimeError("redis-server did not start")

    def kill(self):
        """SIGKILL: a crash, not a clean shutdown."""
        self.process.kill()
        self.process.wait()

    def stop(self):
        if self.process and self.process.poll() is None:
            self.process.terminate()
            self.process.wait()

    def ping(self):
        try:
            return self.cli("PING") == "PONG"
        except subprocess.SubprocessError:
            return False

    def cli(self, *args):
        out = subprocess.run(["redis-cli", "-p", str(self.port)] + [str(a) for a in args],
                             capture_output=True, text=True, timeout=10)
        return out.stdout.strip()

    def int(self, *args):
        value = self.cli(*args)
        return int(value) if value.lstrip("-").isdigit() else -1
