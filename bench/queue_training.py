#!/usr/bin/python3
"""Feature extraction for training spread over queue workers, measured on the development set (read
in place, never copied): `enqueue` -> 2 local `worker --with-features --copies full` -> `collect` ->
`train RECORDS --labels MANIFEST`, against `train MANIFEST` from the files, with an empty feature
cache each (both extract everything). The two models must be the same model, bit for bit (same id).

Starts its own redis-server (Debian package redis-server) on a free loopback port.
Usage: bench/queue_training.py [--residue build/residue] [--dev ../shared/data/dev] [--work /tmp/residue-queue-training]
"""
import argparse
import json
import os
import shutil
import socket
import subprocess
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import devset  # noqa: E402

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--dev", default="../shared/data/dev")
parser.add_argument("--work", default="/tmp/residue-queue-training")
parser.add_argument("--workers", type=int, default=2)
args = parser.parse_args()
residue = os.path.abspath(args.residue)
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)

items = devset.items(os.path.abspath(args.dev), work)
manifest = devset.manifest(items, work, "all", "as-is", "in")
paths = [it[0] for it in items]
print(f"{len(items)} images ({sum(1 for it in items if it[1] == 'camera')} camera); {os.cpu_count()} cores")


def timed(cmd, **kw):
    t0 = time.time()
    r = subprocess.run(cmd, capture_output=True, text=True, **kw)
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)}: exit {r.returncode}\n{r.stderr[-3000:]}")
    return r, time.time() - t0


def fresh(name):
    path = os.path.join(work, name)
    for suffix in ("", "-wal", "-shm"):
        if os.path.exists(path + suffix):
            os.remove(path + suffix)
    return path


# 1. From the files: train with an empty cache (everything extracted, augmented copies included).
from_files = os.path.join(work, "from-files.json")
_, files_s = timed([residue, "train", manifest, "-o", from_files, "--cache", fresh("cache.sqlite")])
print(f"train from the files: {files_s:.0f} s")

# 2. Through the queue: any model serves the workers (they score too); the records carry the
# vectors, the facts and the copies train --augment full makes.
s = socket.socket()
s.bind(("127.0.0.1", 0))
port = s.getsockname()[1]
s.close()
redis_dir = os.path.join(work, "redis")
shutil.rmtree(redis_dir, ignore_errors=True)
os.makedirs(redis_dir)
redis = subprocess.Popen(["redis-server", "--port", str(port), "--bind", "127.0.0.1", "--dir", redis_dir,
                          "--save", "", "--appendonly", "no"], stdout=subprocess.DEVNULL)
url = f"redis://127.0.0.1:{port}"
try:
    for _ in range(100):
        if subprocess.run(["redis-cli", "-p", str(port), "ping"], capture_output=True).returncode == 0:
            break
        time.sleep(0.1)
    t0 = time.time()
    timed([residue, "enqueue", "-", "--redis", url, "--stream", "extract"], input="".join(p + "\n" for p in paths))
    workers = [subprocess.Popen([residue, "worker", from_files, "--redis", url, "--stream", "extract",
                                 "--consumer", f"w{i}", "--with-features", "--copies", "full"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
               for i in range(args.workers)]
    records = os.path.join(work, "records.jsonl")
    timed([residue, "collect", "--redis", url, "--results", "extract:results", "-o", records,
           "--expect", str(len(paths)), "--wait", "3600"])
    queue_s = time.time() - t0
    for w in workers:
        w.terminate()
        w.wait()
finally:
    redis.terminate()
    redis.wait()
size_mb = os.path.getsize(records) / 1e6
print(f"enqueue -> {args.workers} workers --with-features --copies full -> collect: {queue_s:.0f} s, "
      f"{len(paths)} records, {size_mb:.0f} MB ({1000 * size_mb / len(paths):.0f} KB per record)")

# 3. From the records: no image is read.
from_records = os.path.join(work, "from-records.json")
_, records_s = timed([residue, "train", records, "--labels", manifest, "-o", from_records])
print(f"train from the records: {records_s:.0f} s")

a, b = json.load(open(from_files)), json.load(open(from_records))
print(f"model from the files:   {a['id']}\nmodel from the records: {b['id']}")
print("same model id:", a["id"] == b["id"], "; same thresholds:", a["thresholds"] == b["thresholds"],
      "; same weights:", a["linear"] == b["linear"])
