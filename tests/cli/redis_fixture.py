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
             "--appendonly", "yes", "--appendfsync", "always", "--save", "", "--protected-mode", "yes",
             "--enable-debug-command", "local"],
            stdout=open(os.path.join(self.folder, "redis.log"), "a"), stderr=subprocess.STDOUT)
        for _ in range(600):  # up to 30 s: after a restart it answers LOADING while reading its file
            if self.ping():
                return
            time.sleep(0.05)
        raise RuntimeError("redis-server did not start")

    def ballast(self, keys):
        """Fill Redis with `keys` small keys and write them into the append-only file, so that a
        restart spends a while loading (Redis answers LOADING meanwhile)."""
        self.cli("DEBUG", "POPULATE", keys, "ballast", 64, timeout=120)
        self.cli("BGREWRITEAOF")
        for _ in range(600):
            info = self.cli("INFO", "persistence")
            if "aof_rewrite_in_progress:0" in info and "aof_rewrite_scheduled:0" in info:
                return
            time.sleep(0.1)
        raise RuntimeError("the append-only file rewrite did not finish")

    def busy(self, seconds):
        """A script that runs for `seconds`: meanwhile Redis answers every other client BUSY
        (after busy-reply-threshold, set here to 100 ms). Returns the redis-cli process."""
        self.cli("CONFIG", "SET", "busy-reply-threshold", 100)
        script = ("local function now() local t = redis.call('TIME') return t[1] + t[2] / 1e6 end "
                  f"local t0 = now() while now() - t0 < {seconds} do end return 1")
        return subprocess.Popen(["redis-cli", "-p", str(self.port), "EVAL", script, "0"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)

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

    def cli(self, *args, timeout=10):
        out = subprocess.run(["redis-cli", "-p", str(self.port)] + [str(a) for a in args],
                             capture_output=True, text=True, timeout=timeout)
        return out.stdout.strip()

    def int(self, *args):
        value = self.cli(*args)
        return int(value) if value.lstrip("-").isdigit() else -1
