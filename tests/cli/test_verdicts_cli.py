"""End-to-end test of reviewers' verdicts and of training from records, running the residue binary
as a user would.

- scan --with-features --copies light: training from the records (labels from the folder, or from
  the records themselves) gives the model trained from the files, bit for bit (same id, weights,
  thresholds); records from another extractor version, or without the copies asked for, are
  refused with a message naming the cause.
- The same through the queue: enqueue -> worker --with-features -> collect -> train (a real
  redis-server on loopback, tests/cli/redis_fixture.py).
- residue verdict add (CSV with paths, CSV with hashes, JSONL), list, export, remove; an export
  read back into a new store exports the same verdicts.
- serve --verdicts: POST /v1/verdicts by hash after /v1/score (201), with the image (201), for an
  unknown hash (404), malformed (422), on a service without --verdicts (501); every answer checked
  against docs/openapi.yaml. Verdicts acknowledged before a kill -9 are all in the store.
- train --from OLD --verdicts, calibrate --verdicts, compare --verdicts and report --verdicts use
  them and say how many.

Images: scikit-image photo crops and SIMULATED generator output (tests/cli/make_labelled.py).
Usage: test_verdicts_cli.py PATH/TO/residue
"""
import csv
import hashlib
import json
import os
import signal
import subprocess
import sys
import tempfile
import threading
import urllib.error
import urllib.request

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, make_labelled, runner  # noqa: E402
import openapi_check  # noqa: E402
from redis_fixture import RedisServer  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))


def make(root, seed, count):
    make_labelled(root, seed, count)


def files_of(root):
    return sorted(os.path.join(d, f) for d, _, fs in os.walk(root) for f in fs)


def sha(path):
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def model_json(path):
    with open(path) as f:
        return json.load(f)


def same_model(a, b, what):
    ma, mb = model_json(a), model_json(b)
    check(ma["id"] == mb["id"] and ma["linear"] == mb["linear"] and ma["thresholds"] == mb["thresholds"],
          f"{what}: same model id ({ma['id']} / {mb['id']}), weights and thresholds")


def request(base, route, body, content_type="application/json", method="POST"):
    req = urllib.request.Request(base + route, data=body, method=method, headers={"Content-Type": content_type})
    try:
        with urllib.request.urlopen(req, timeout=60) as r:
            status, answer = r.status, json.loads(r.read())
    except urllib.error.HTTPError as e:
        status, answer = e.code, json.loads(e.read())
    problem = openapi_check.validate(route, method, status, answer)
    check(problem is None, f"{route} {status} matches docs/openapi.yaml: {problem}")
    return status, answer


def multipart(fields, image_path):
    boundary = "residue-test-boundary"
    parts = []
    for k, v in fields.items():
        parts.append(f"--{boundary}\r\nContent-Disposition: form-data; name=\"{k}\"\r\n\r\n{v}\r\n".encode())
    parts.append(f"--{boundary}\r\nContent-Disposition: form-data; name=\"image\"; filename=\"x.png\"\r\n"
                 "Content-Type: image/png\r\n\r\n".encode() + open(image_path, "rb").read() + b"\r\n")
    parts.append(f"--{boundary}--\r\n".encode())
    return b"".join(parts), "multipart/form-data; boundary=" + boundary


def serve(model, *extra):
    proc = subprocess.Popen([residue, "serve", model, "--port", "0", *extra], stderr=subprocess.PIPE, text=True)
    port = json.loads(proc.stderr.readline())["port"]
    threading.Thread(target=lambda: [None for _ in proc.stderr], daemon=True).start()  # the access log
    return proc, f"http://127.0.0.1:{port}"


def records_training(tmp, train_root, model_files):
    records = os.path.join(tmp, "records.jsonl")
    r = run(["scan", model_files, train_root, "--with-features", "--copies", "light", "-o", records])
    check(r.returncode == 0, f"scan --with-features --copies light exits 0: {r.stderr[-300:]}")
    lines = [json.loads(line) for line in open(records)]
    f = lines[0]["features"]
    check(all("features" in x for x in lines) and f["encoding"] == "float64-le-base64" and f["extractor"] and f["schema"]
          and f["copies"]["level"] == "light" and len(f["copies"]["made"]) + len(f["copies"]["failed"]) == 2,
          "each record carries its vector, extractor, schema and two light copies")
    from_records = os.path.join(tmp, "from-records.json")
    r = run(["train", records, "--labels", train_root, "-o", from_records])
    check(r.returncode == 0, f"train RECORDS --labels ROOT exits 0: {r.stderr[-500:]}")
    same_model(model_files, from_records, "records labelled by the folder vs the files")
    # Labels carried in the records themselves (as a queue's producer may add them).
    labelled = os.path.join(tmp, "labelled.jsonl")
    with open(labelled, "w") as out:
        for x in lines:
            rel = os.path.relpath(x["path"], train_root).split(os.sep)
            x["label"] = rel[0]
            if rel[0] == "generated":
                x["generator"] = rel[1]
            out.write(json.dumps(x) + "\n")
    from_labelled = os.path.join(tmp, "from-labelled.json")
    r = run(["train", labelled, "-o", from_labelled])
    check(r.returncode == 0, f"train RECORDS with labels inside exits 0: {r.stderr[-500:]}")
    same_model(model_files, from_labelled, "records labelled inside vs the files")
    # More copies than the records carry: refused, saying how to get them.
    r = run(["train", records, "--labels", train_root, "--augment", "full", "-o", os.path.join(tmp, "x.json")])
    check(r.returncode == 1 and "--copies full" in r.stderr, f"--augment full from light records is refused: {r.stderr[-300:]}")
    # Another extractor version: refused by name.
    other = os.path.join(tmp, "other.jsonl")
    with open(other, "w") as out:
        for x in lines:
            x["features"]["extractor"] = "0.1-older"
            out.write(json.dumps(x) + "\n")
    r = run(["train", other, "--labels", train_root, "-o", os.path.join(tmp, "y.json")])
    check(r.returncode == 1 and "0.1-older" in r.stderr and "extract the images again" in r.stderr,
          f"records from another extractor version are refused: {r.stderr[-300:]}")
    check(not os.path.exists(os.path.join(tmp, "y.json")), "and no model is written")
    return records


def queue_training(tmp, train_root, model_files):
    os.makedirs(os.path.join(tmp, "redis"))
    redis = RedisServer(os.path.join(tmp, "redis"))
    redis.start()
    try:
        r = run(["enqueue", train_root, "--redis", redis.url, "--stream", "extract"])
        check(r.returncode == 0, f"enqueue exits 0: {r.stderr[-300:]}")
        workers = [subprocess.Popen([residue, "worker", model_files, "--redis", redis.url, "--stream", "extract",
                                     "--consumer", f"w{i}", "--block", "0.2", "--with-features", "--copies", "light"],
                                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL) for i in range(2)]
        collected = os.path.join(tmp, "collected.jsonl")
        r = run(["collect", "--redis", redis.url, "--results", "extract:results", "-o", collected,
                 "--expect", str(len(files_of(train_root))), "--wait", "300"])
        check(r.returncode == 0, f"collect gets every record: {r.stderr[-300:]}")
        for w in workers:
            w.send_signal(signal.SIGTERM)
            w.wait(timeout=60)
    finally:
        redis.stop()
    from_queue = os.path.join(tmp, "from-queue.json")
    r = run(["train", collected, "--labels", train_root, "-o", from_queue])
    check(r.returncode == 0, f"train from collected records exits 0: {r.stderr[-500:]}")
    same_model(model_files, from_queue, "enqueue -> 2 workers --with-features -> collect -> train vs the files")


def verdict_commands(tmp, fresh_root):
    store = os.path.join(tmp, "cli-verdicts.sqlite")
    cams = files_of(os.path.join(fresh_root, "camera"))
    gens = files_of(os.path.join(fresh_root, "generated"))
    table = os.path.join(tmp, "verdicts.csv")
    with open(table, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["path", "verdict", "generator", "reviewer", "note"])
        for p in cams:
            w.writerow([os.path.relpath(p, tmp), "camera", "", "rev-1", "looked at the sensor noise"])
        for p in gens:
            w.writerow([os.path.relpath(p, tmp), "generated", "sim-new", "rev-2", ""])
        w.writerow(["no/such/file.png", "camera", "", "", ""])
        w.writerow([os.path.relpath(cams[0], tmp), "perhaps", "", "", ""])
    r = run(["verdict", "add", "--verdicts", store, table, "--no-cache"])
    check(r.returncode == 3 and f"{len(cams) + len(gens)} verdicts recorded" in r.stdout
          and f"{len(cams) + len(gens)} with a feature vector" in r.stdout and "2 rows refused" in r.stdout,
          f"verdict add: every good row recorded with its vector, the two bad rows refused (exit 3): {r.stdout} {r.stderr}")
    check("no/such/file.png" in r.stderr and "camera\" or \"generated" in r.stderr, "each refused row is named with why")
    # A hash alone, disagreeing with the earlier verdict: a conflict, kept and reported.
    by_hash = os.path.join(tmp, "by-hash.csv")
    with open(by_hash, "w") as f:
        f.write(f"sha256,verdict\n{sha(cams[0])},generated\n")
    r = run(["verdict", "add", "--verdicts", store, by_hash, "--no-cache"])
    check(r.returncode == 0 and "1 conflict" in r.stdout and "conflict" in r.stderr, "a disagreeing verdict is a conflict")
    r = run(["verdict", "list", "--verdicts", store, "--conflicts", "--json"])
    listed = [json.loads(line) for line in r.stdout.splitlines()]
    check(len(listed) == 2 and {v["verdict"] for v in listed} == {"camera", "generated"} and all(v["conflict"] for v in listed),
          "list --conflicts shows both verdicts on the image")
    export = os.path.join(tmp, "export.jsonl")
    check(run(["verdict", "export", "--verdicts", store, "-o", export]).returncode == 0, "verdict export exits 0")
    copy = os.path.join(tmp, "copy.sqlite")
    r = run(["verdict", "add", "--verdicts", copy, export])
    check(r.returncode == 0, f"an export reads back into a new store: {r.stderr[-300:]}")
    again = os.path.join(tmp, "again.jsonl")
    run(["verdict", "export", "--verdicts", copy, "-o", again])
    strip = lambda path: [{k: v for k, v in json.loads(line).items() if k != "id"} for line in open(path)]  # noqa: E731
    check(strip(export) == strip(again), "export -> add -> export gives the same verdicts, vectors included")
    last = listed[-1]["id"]
    r = run(["verdict", "remove", "--verdicts", store, str(last)])
    check(r.returncode == 0 and "1 verdicts removed" in r.stdout, "verdict remove takes one back")
    r = run(["verdict", "list", "--verdicts", store, "--conflicts", "--json"])
    check(r.stdout.strip() == "", "and the conflict is gone")
    return store


def service(tmp, model, fresh_root):
    store = os.path.join(tmp, "service-verdicts.sqlite")
    cams = files_of(os.path.join(fresh_root, "camera"))
    gens = files_of(os.path.join(fresh_root, "generated"))
    proc, base = serve(model, "--verdicts", store, "--remember", "2")
    try:
        status, record = request(base, "/v1/score", open(gens[0], "rb").read(), "application/octet-stream")
        check(status == 200 and "features" not in record, "the score answer does not carry the vector")
        status, answer = request(base, "/v1/verdicts", json.dumps(
            {"sha256": record["sha256"], "verdict": "generated", "generator": "sim-new", "reviewer": "rev-9"}).encode())
        check(status == 201 and answer["recorded"]["has_features"] and answer["recorded"]["band"] == record["band"]
              and answer["recorded"]["model"] == record["model"] and not answer["conflict"],
              f"a verdict by hash after /v1/score is recorded with the vector, model and band: {answer}")
        status, answer = request(base, "/v1/verdicts", json.dumps({"sha256": "0" * 64, "verdict": "camera"}).encode())
        check(status == 404 and answer["error"]["code"] == "unknown-image" and "send the image" in answer["error"]["message"],
              "a verdict for an unknown hash without the image: 404 with what to do")
        for body in (b"not json", json.dumps({"sha256": "xyz", "verdict": "camera"}).encode(),
                     json.dumps({"sha256": record["sha256"], "verdict": "unsure"}).encode(), b"[1, 2]"):
            status, answer = request(base, "/v1/verdicts", body)
            check(status == 422 and answer["error"]["code"] == "malformed", f"malformed verdict {body[:30]!r}: 422")
        body, kind = multipart({"verdict": "camera", "reviewer": "rev-9"}, cams[0])
        status, answer = request(base, "/v1/verdicts", body, kind)
        check(status == 201 and answer["recorded"]["sha256"] == sha(cams[0]) and answer["recorded"]["has_features"],
              "a verdict sent with the image is recorded with its vector")
        # Acknowledged verdicts survive a kill -9 of the service.
        acknowledged = 0
        for p in cams[1:] + gens[1:]:
            status, record = request(base, "/v1/score", open(p, "rb").read(), "application/octet-stream")
            status, answer = request(base, "/v1/verdicts", json.dumps(
                {"sha256": record["sha256"], "verdict": "camera" if "/camera/" in p else "generated"}).encode())
            acknowledged += status == 201
        with urllib.request.urlopen(base + "/metrics", timeout=10) as r:
            metrics = r.read().decode()
        check("residue_remembered_vectors 2" in metrics, "the service remembers at most --remember vectors")
    finally:
        proc.kill()  # SIGKILL: no chance to flush anything
        proc.wait()
    r = run(["verdict", "list", "--verdicts", store, "--json"])
    stored = [json.loads(line) for line in r.stdout.splitlines()]
    check(len(stored) == acknowledged + 2 and all(v["has_features"] for v in stored),
          f"after kill -9, every acknowledged verdict is in the store ({len(stored)} of {acknowledged + 2})")
    proc, base = serve(model, "--verdicts", os.path.join(tmp, "forgetful.sqlite"), "--remember", "0")
    try:
        body, kind = multipart({"verdict": "generated", "generator": "sim-new"}, gens[0])
        status, answer = request(base, "/v1/verdicts", body, kind)
        check(status == 201 and answer["recorded"]["has_features"],
              "--remember 0: a verdict sent with the image still keeps its vector")
        status, answer = request(base, "/v1/verdicts", json.dumps({"sha256": sha(cams[0]), "verdict": "camera"}).encode())
        check(status == 404, "--remember 0: a verdict by hash alone is 404")
    finally:
        proc.terminate()
        proc.wait()
    proc, base = serve(model)
    try:
        status, answer = request(base, "/v1/verdicts", json.dumps({"sha256": "0" * 64, "verdict": "camera"}).encode())
        check(status == 501 and answer["error"]["code"] == "not-enabled", "without --verdicts: 501 not-enabled")
    finally:
        proc.terminate()
        proc.wait()
    return store


def learning(tmp, train_root, fresh_root, model, store):
    new = os.path.join(tmp, "new.json")
    r = run(["train", train_root, "--from", model, "--verdicts", store, "-o", new, "--no-cache"])
    check(r.returncode == 0, f"train --from --verdicts exits 0: {r.stderr[-400:]}")
    added = model_json(new)["provenance"]["verdicts"]
    n = len(files_of(fresh_root))
    check(added["images_added"] == n and "sim-new" in added["per_generator"],
          f"the judged images join the data, generated ones under their generator: {added}")
    check(f"Verdicts from {store}" in r.stdout, "train says what it took from the verdicts")
    calibrated = os.path.join(tmp, "calibrated.json")
    r = run(["calibrate", model, "--verdicts", store, "-o", calibrated])
    check(r.returncode == 0 and "camera and" in r.stdout, f"calibrate --verdicts uses the judged images: {r.stdout[-300:]} {r.stderr[-300:]}")
    check(model_json(calibrated)["provenance"]["calibration_verdicts"]["camera_images"] ==
          len(files_of(os.path.join(fresh_root, "camera"))), "and records how many camera verdicts it used")
    r = run(["compare", model, new, fresh_root, "--verdicts", store, "--json", "--no-cache"])
    c = json.loads(r.stdout)
    old_table = c["verdicts"]["old"]
    check(old_table["images"] == n and c["verdicts"]["new"]["left_out_trained_on"] == n,
          "compare --verdicts: OLD's bands on every judged image; NEW trained on them, so they are left out")
    check(sum(old_table["by_verdict"]["camera"].values()) == len(files_of(os.path.join(fresh_root, "camera"))),
          "the confusion table counts each judged camera photo once")
    check("trained on " + str(n) + " judged images" in c["verdicts"]["new_used"], "compare says what NEW was trained on")
    records = os.path.join(tmp, "fresh.jsonl")
    run(["scan", model, fresh_root, "-o", records])
    page = os.path.join(tmp, "report.html")
    r = run(["report", records, "--verdicts", store, "--model", new, "-o", page])
    html = open(page).read() if os.path.exists(page) else ""
    check(r.returncode == 0 and "Reviewers' verdicts" in html and f"{n} of these images were judged" in html,
          "report --verdicts shows the bands against the verdicts")


def main():
    with tempfile.TemporaryDirectory() as tmp:
        train_root, fresh_root = os.path.join(tmp, "train"), os.path.join(tmp, "fresh")
        make(train_root, 21, 20)
        make(fresh_root, 22, 22)
        model_files = os.path.join(tmp, "from-files.json")
        r = run(["train", train_root, "-o", model_files, "--augment", "light", "--no-cache"])
        check(r.returncode == 0, f"train from the files: {r.stderr[-300:]}")
        records_training(tmp, train_root, model_files)
        queue_training(tmp, train_root, model_files)
        store = verdict_commands(tmp, fresh_root)
        service(tmp, model_files, fresh_root)
        learning(tmp, train_root, fresh_root, model_files, store)
    finish()


main()
