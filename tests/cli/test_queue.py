"""End-to-end test of work distribution over Redis Streams with a real redis-server on loopback
(tests/cli/redis_fixture.py): residue enqueue, several residue worker processes, residue collect.

- 1,000 jobs over 3 workers: every job has exactly one record; SIGTERM stops workers cleanly.
- SIGKILL of a worker mid-batch: its pending jobs are taken over; every job still scored once.
- Redis killed and restarted mid-batch (append-only file on, with enough data that it answers
  LOADING for a while after the restart): workers reconnect, wait and finish.
- Redis busy (a long script: every other client is answered BUSY): workers, enqueue and collect
  wait and go on.
- A broken file is a poison input: one error record, acknowledged. A missing file is retried a
  bounded number of times, then gets its error record.

Images: scikit-image photo crops and SIMULATED generator output (tests/cli/make_labelled.py).
Usage: test_queue.py PATH/TO/residue
"""
import json
import os
import signal
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, make_labelled, runner  # noqa: E402
from redis_fixture import RedisServer  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
COPIES = 10  # 100 files x 10 batches = 1,000 jobs


def make(root, seed, count):
    make_labelled(root, seed, count, "png", "jpeg")


def start_worker(redis, model, stream, name, log_folder, *extra):
    log = open(os.path.join(log_folder, name + ".log"), "w")
    worker = subprocess.Popen([residue, "worker", model, "--redis", redis.url, "--stream", stream, "--consumer", name,
                               "--block", "0.2"] + list(extra), stdout=log, stderr=subprocess.STDOUT)
    worker.log_path = log.name
    return worker


def logs_of(workers):
    return "".join(open(w.log_path).read() for w in workers)


def enqueue_copies(redis, stream, folder, copies=range(COPIES)):
    for k in copies:
        r = run(["enqueue", folder, "--redis", redis.url, "--stream", stream, "--batch", f"b{k}"])
        check(r.returncode == 0, f"enqueue exits 0: {r.stderr[-300:]}")


def collect(redis, stream, out, expect):
    r = run(["collect", "--redis", redis.url, "--results", stream + ":results", "-o", out, "--expect", str(expect),
             "--wait", "400"])
    check(r.returncode == 0, f"collect gets all {expect} results: {r.stderr[-300:]}")
    if not os.path.exists(out):
        return []
    with open(out) as f:
        return [json.loads(line) for line in f]


def every_job_once(records, what):
    jobs = [r["job"] for r in records]
    expected = {f"b{k}/{i}" for k in range(COPIES) for i in range(100)}
    check(len(jobs) == len(set(jobs)) == 1000, f"{what}: 1000 records, no job twice (got {len(jobs)}, "
                                               f"{len(set(jobs))} distinct)")
    check(set(jobs) == expected, f"{what}: every job id has its record")


def stop_all(workers, what):
    for w in workers:
        if w.poll() is None:
            w.send_signal(signal.SIGTERM)
    codes = []
    for w in workers:
        try:
            codes.append(w.wait(timeout=30))
        except subprocess.TimeoutExpired:
            w.kill()
            codes.append(None)
    clean = all(c == 0 for c in codes)
    check(clean, f"{what}: workers stop cleanly on SIGTERM (exit codes {codes})")
    if not clean:
        for w, c in zip(workers, codes):
            if c != 0:
                print(f"--- {w.log_path} (exit {c}), last lines:\n" + "".join(open(w.log_path).readlines()[-15:]))


started = time.time()


def stage(name):
    print(f"[{time.time() - started:6.1f} s] {name}", flush=True)


def wait_for(condition, seconds):
    deadline = time.time() + seconds
    while time.time() < deadline:
        if condition():
            return True
        time.sleep(0.05)
    return False


with tempfile.TemporaryDirectory() as tmp:
    images, train = os.path.join(tmp, "images"), os.path.join(tmp, "train")
    make(train, 1, 30)
    make(images, 5, 49)  # 49 camera + 2 x 24 generated = 97 images
    for name, content in (("broken_a.png", b"\x89PNG\r\n\x1a\n" + b"\x00" * 40), ("broken_b.png", b"<html>"),
                          ("empty.jpg", b"")):  # poison inputs: never decodable
        with open(os.path.join(images, "camera", name), "wb") as f:
            f.write(content)
    model = os.path.join(tmp, "model.json")
    r = run(["train", train, "-o", model, "--no-cache"])
    check(r.returncode == 0, f"train exits 0: {r.stderr[-300:]}")
    redis = RedisServer(tmp)
    redis.start()
    try:
        stage("three workers")
        # 1. Three workers, 1,000 jobs.
        workers = [start_worker(redis, model, "jobs", f"w{i}", tmp) for i in range(3)]
        enqueue_copies(redis, "jobs", images)
        records = collect(redis, "jobs", os.path.join(tmp, "all.jsonl"), 1000)
        every_job_once(records, "3 workers")
        stop_all(workers, "3 workers")
        check(redis.int("XLEN", "jobs:results") == 1000, "no result was written twice")
        check(redis.int("XLEN", "jobs") == 0, "finished jobs are deleted from the job stream")
        check(redis.cli("XPENDING", "jobs", "residue").splitlines()[0] == "0", "nothing is left pending")
        poison = [r for r in records if "error" in r]
        check(len(poison) == 3 * COPIES and {r["error"]["code"] for r in poison} <= {"not-an-image", "empty", "corrupt"},
              f"each broken-file job has one error record: {sorted({r['error']['code'] for r in poison})}")
        scored = [r for r in records if "error" not in r]
        check(all(r["advisory"].startswith("Advisory:") and r["band"] for r in scored), "records follow the contract")
        check(len({r["worker"] for r in records}) == 3, "all three workers took jobs")
        report = os.path.join(tmp, "report.html")
        r = run(["report", os.path.join(tmp, "all.jsonl"), "-o", report])
        check(os.path.exists(report), f"residue report accepts the collected JSONL (exit {r.returncode})")

        stage("SIGKILL of a worker")
        # 2. SIGKILL one worker mid-batch.
        fast = ["--reclaim-after", "1", "--read-count", "16"]
        workers = [start_worker(redis, model, "jobs2", f"k{i}", tmp, *fast) for i in range(3)]
        enqueue_copies(redis, "jobs2", images)
        check(wait_for(lambda: redis.int("XLEN", "jobs2:results") >= 150, 120), "work starts")
        # Kill k0 while it holds jobs. (Holding is not constant: on a slow build a batch of 16 takes
        # longer than --reclaim-after 1 s, and the others take idle jobs over from live k0 too.)
        held_by_k0 = lambda: redis.cli("XPENDING", "jobs2", "residue", "-", "+", "100", "k0").count("k0")  # noqa: E731
        check(wait_for(lambda: held_by_k0() > 0, 60), "the worker to be killed holds jobs")
        workers[0].kill()
        workers[0].wait()
        held = held_by_k0()
        records = collect(redis, "jobs2", os.path.join(tmp, "killed.jsonl"), 1000)
        every_job_once(records, "after SIGKILL")
        logs = "".join(open(os.path.join(tmp, f"k{i}.log")).read() for i in (1, 2))
        print(f"  the killed worker held {held} jobs when it died")
        check("took over" in logs, "its pending jobs were taken over by the others")
        check(wait_for(lambda: redis.cli("XPENDING", "jobs2", "residue", "-", "+", "100", "k0") == "", 10),
              "the killed worker holds nothing any more")
        stop_all(workers[1:], "after SIGKILL")

        stage("Redis restart")
        # 3. Redis crashes mid-batch and comes back from its append-only file.
        # A million small keys make Redis spend about 1.5 s loading after the restart, answering
        # LOADING to every command meanwhile (CI once caught a worker giving up on that reply).
        redis.ballast(1_000_000)
        workers = [start_worker(redis, model, "jobs3", f"r{i}", tmp) for i in range(2)]
        enqueue_copies(redis, "jobs3", images)
        check(wait_for(lambda: redis.int("XLEN", "jobs3:results") >= 200, 120), "work starts before the crash")
        redis.kill()
        time.sleep(1.5)
        redis.start()
        records = collect(redis, "jobs3", os.path.join(tmp, "restart.jsonl"), 1000)
        every_job_once(records, "after a Redis restart")
        logs = logs_of(workers)
        check("reconnected to Redis" in logs, "workers reconnect after the restart")
        print("  workers saw Redis loading:", "not ready (LOADING" in logs)
        stop_all(workers, "after a Redis restart")
        redis.cli("FLUSHDB")

        stage("Redis busy")
        # 4. A long script: Redis answers every other client BUSY for 3 s. Workers, enqueue and
        # collect must wait and go on (before, a worker took any error reply as fatal).
        # The script starts while both workers are busy scoring (a worker waiting inside a blocking
        # read would only see the script end), and half of the jobs are enqueued during it.
        workers = [start_worker(redis, model, "jobs5", f"b{i}", tmp) for i in range(2)]
        enqueue_copies(redis, "jobs5", images, range(COPIES // 2))
        check(wait_for(lambda: redis.int("XLEN", "jobs5:results") >= 100, 120), "work starts before the script")
        script = redis.busy(3)
        time.sleep(0.3)
        enqueue_copies(redis, "jobs5", images, range(COPIES // 2, COPIES))
        records = collect(redis, "jobs5", os.path.join(tmp, "busy.jsonl"), 1000)
        script.wait()
        every_job_once(records, "while Redis was busy")
        logs = logs_of(workers)
        check(all("not ready (BUSY" in open(w.log_path).read() for w in workers),
              "each worker was told BUSY, waited and went on")
        check("ready again" in logs, "workers say when Redis answers again")
        stop_all(workers, "while Redis was busy")

        stage("missing file")
        # 5. A missing file: retried once more, then its error record; never redelivered forever.
        worker = start_worker(redis, model, "jobs4", "m0", tmp, "--reclaim-after", "0.3", "--max-deliveries", "2")
        r = run(["enqueue", "-", "--redis", redis.url, "--stream", "jobs4", "--batch", "gone"],
                stdin=os.path.join(tmp, "no-such-file.png") + "\n")
        check(r.returncode == 0, "enqueue takes paths on stdin")
        r = run(["collect", "--redis", redis.url, "--results", "jobs4:results", "--expect", "1", "--wait", "60"])
        record = json.loads(r.stdout.splitlines()[0]) if r.stdout else {}
        check(record.get("error", {}).get("code") == "unreadable", "the missing file ends with an error record")
        check("will retry" in open(os.path.join(tmp, "m0.log")).read(), "the worker retried it first")
        stop_all([worker], "missing file")
        check(redis.int("XLEN", "jobs4:results") == 1, "exactly one record for the missing file")

        stage("bad settings")
        # Bad settings are refused clearly.
        r = run(["worker", model, "--redis", "http://localhost", "--stream", "x"])
        check(r.returncode == 2 and "redis://" in r.stderr, "a bad Redis URL is a usage error")
        r = run(["collect", "--redis", "redis://127.0.0.1:1", "--results", "x", "--timeout", "0.5"])
        check(r.returncode == 1 and "Redis" in r.stderr, "collect without Redis fails with a clear message")

        stage("password file")
        # The password from a file (what the packaged worker@ unit passes through LoadCredential=),
        # never on the command line.
        secret = os.path.join(tmp, "redis-password")
        with open(secret, "w") as f:
            f.write("queue-test-secret\n")
        wrong = os.path.join(tmp, "wrong-password")
        with open(wrong, "w") as f:
            f.write("not-it\n")
        redis.cli("CONFIG", "SET", "requirepass", "queue-test-secret")
        r = run(["enqueue", "-", "--redis", redis.url, "--redis-password-file", secret, "--stream", "jobs6"],
                stdin=os.path.join(images, "camera", sorted(os.listdir(os.path.join(images, "camera")))[0]) + "\n")
        check(r.returncode == 0, f"enqueue authenticates with --redis-password-file: {r.stderr[-200:]}")
        r = run(["collect", "--redis", redis.url, "--redis-password-file", wrong, "--results", "jobs6:results",
                 "--timeout", "2"])
        check(r.returncode == 1 and "password" in r.stderr, f"a wrong password file is refused clearly: {r.stderr[-200:]}")
        r = run(["collect", "--redis", redis.url, "--redis-password-file", os.path.join(tmp, "none"),
                 "--results", "jobs6:results"])
        check(r.returncode == 2, "a missing password file is a usage error")
        subprocess.run(["redis-cli", "-p", str(redis.port), "-a", "queue-test-secret", "--no-auth-warning",
                        "CONFIG", "SET", "requirepass", ""], capture_output=True, timeout=10)
    finally:
        redis.stop()

finish()
