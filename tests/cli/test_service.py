"""End-to-end test of `residue serve`: a real server on loopback, started by this test.

Covers every route's success and error cases, 200 concurrent requests compared with `residue scan`,
a model reload under load (and by SIGHUP), overload with a tiny queue, and 200 slow or idle
connections (slowloris) with header and body deadlines and a connection cap. Images are made by
tests/cli/make_labelled.py (scikit-image crops and SIMULATED upsampling output). Traffic goes
only to 127.0.0.1, bounded in count and time.

Usage: test_service.py PATH/TO/residue
"""
import json
import os
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
import urllib.error
import urllib.request
import zlib

import numpy as np
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402
import openapi_check  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
lock = threading.Lock()
validated = [0]  # responses checked against docs/openapi.yaml
here = os.path.dirname(os.path.abspath(__file__))


def start(model, *extra):
    proc = subprocess.Popen([residue, "serve", model, "--port", "0", *extra], stderr=subprocess.PIPE, text=True)
    line = proc.stderr.readline()
    port = json.loads(line)["port"]
    threading.Thread(target=lambda: [None for _ in proc.stderr], daemon=True).start()  # drain the access log
    return proc, f"http://127.0.0.1:{port}"


def documented(path, method, status, payload):
    """Every JSON answer is checked against docs/openapi.yaml (tests/cli/openapi_check.py)."""
    if not payload.startswith(b"{"):
        return
    problem = openapi_check.validate(path, method, status, json.loads(payload))
    check(problem is None, f"response matches docs/openapi.yaml: {problem}")
    with lock:
        validated[0] += 1


def request(url, body=None, method=None, headers=None, timeout=30):
    req = urllib.request.Request(url, data=body, method=method, headers=headers or {})
    path = "/" + url.split("/", 3)[3]
    try:
        with urllib.request.urlopen(req, timeout=timeout) as r:
            answer = r.status, dict(r.headers), r.read()
    except urllib.error.HTTPError as e:
        answer = e.code, dict(e.headers), e.read()
    documented(path, req.get_method(), answer[0], answer[2])
    return answer


def score(base, data, headers=None, query=""):
    h = {"Content-Type": "application/octet-stream"}
    h.update(headers or {})
    status, hdrs, body = request(base + "/v1/score" + query, data, "POST", h)
    return status, hdrs, json.loads(body) if body else None


def raw(base, head, body=b"", timeout=5):
    """Sends `head` (request line and headers) and `body` on a plain socket; returns (status, seconds,
    JSON body or None). A server that waits for a body it was promised but not sent times out here."""
    host, port = base.split("//")[1].split(":")
    t0 = time.time()
    with socket.create_connection((host, int(port)), timeout=timeout) as sock:
        sock.sendall(head.encode() + b"\r\n" + body)
        answer = b""
        try:
            while b"\r\n\r\n" not in answer or len(answer.split(b"\r\n\r\n", 1)[1]) < content_length(answer):
                part = sock.recv(65536)
                if not part:
                    break
                answer += part
        except socket.timeout:
            return None, time.time() - t0, None
    seconds = time.time() - t0
    if not answer:
        return None, seconds, None
    status = int(answer.split(b" ", 2)[1])
    payload = answer.split(b"\r\n\r\n", 1)[1] if b"\r\n\r\n" in answer else b""
    method, path = head.split(" ")[:2]
    documented(path, method, status, payload)
    return status, seconds, json.loads(payload) if payload.startswith(b"{") else None


def content_length(answer):
    for line in answer.split(b"\r\n\r\n", 1)[0].split(b"\r\n")[1:]:
        name, _, value = line.partition(b":")
        if name.strip().lower() == b"content-length":
            return int(value)
    return 0


def chunked(data, size=3000):
    return b"".join(f"{len(data[i:i + size]):x}\r\n".encode() + data[i:i + size] + b"\r\n"
                    for i in range(0, len(data), size)) + b"0\r\n\r\n"


def stop(proc):
    proc.send_signal(signal.SIGTERM)
    try:
        proc.wait(timeout=20)
    except subprocess.TimeoutExpired:
        proc.kill()


with tempfile.TemporaryDirectory() as tmp:
    for name, seed in (("train_a", 1), ("train_b", 3), ("images", 5)):
        subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), os.path.join(tmp, name), str(seed),
                        "jpeg", "png", "16"], check=True)
    model_a, model_b, served = (os.path.join(tmp, n) for n in ("a.json", "b.json", "served.json"))
    check(run(["train", os.path.join(tmp, "train_a"), "-o", model_a, "--no-cache"]).returncode == 0, "train model a")
    check(run(["train", os.path.join(tmp, "train_b"), "-o", model_b, "--no-cache", "--folds", "4"]).returncode == 0,
          "train model b")
    id_a, id_b = (json.load(open(m))["id"] for m in (model_a, model_b))
    check(id_a != id_b, "two different models")
    with open(model_a) as f, open(served, "w") as g:
        g.write(f.read())
    images = sorted(os.path.join(d, f) for d, _, fs in os.walk(os.path.join(tmp, "images")) for f in fs)
    scan = {json.loads(x)["path"]: json.loads(x) for x in run(["scan", served] + images).stdout.splitlines()}

    proc, base = start(served, "--workers", "2")
    try:
        status, _, body = request(base + "/v1/health")
        check(status == 200 and json.loads(body)["model"] == id_a, "health is ready with the model")
        status, _, body = request(base + "/v1/model")
        m = json.loads(body)
        check(status == 200 and m["id"] == id_a and "thresholds" in m and "provenance" in m, "model route")
        with open(images[0], "rb") as f:
            data = f.read()
        status, _, r = score(base, data)
        check(status == 200 and abs(r["p_generated"] - scan[images[0]]["p_generated"]) < 1e-12
              and r["band"] == scan[images[0]]["band"] and r["sha256"] == scan[images[0]]["sha256"],
              "score equals residue scan for the same file")
        check("must never be the sole basis" in r["advisory"], "advisory in the response")
        boundary = "residue-test-boundary"
        form = (f"--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"x\"\r\n"
                f"Content-Type: application/octet-stream\r\n\r\n").encode() + data + f"\r\n--{boundary}--\r\n".encode()
        status, _, body = request(base + "/v1/score", form, "POST",
                                  {"Content-Type": f"multipart/form-data; boundary={boundary}"})
        check(status == 200 and json.loads(body)["p_generated"] == r["p_generated"], "multipart upload")
        status, _, low = score(base, data, query="?prior=0.01")
        check(status == 200 and low["p_generated"] < r["p_generated"], "prior query option")
        check(score(base, data, query="?prior=2")[0] == 400, "bad prior is a 400")
        check(score(base, b"")[0] == 400, "empty body is a 400")
        status, _, e = score(base, b"garbage bytes that are no image")
        check(status == 422 and e["error"]["code"] == "not-an-image", "garbage is a 422 not-an-image")
        jpeg = next(p for p in images if p.endswith(".jpg"))
        with open(jpeg, "rb") as f:
            cut = f.read()
        status, _, e = score(base, cut[: len(cut) // 2])
        check(status == 422 and e["error"]["code"] == "truncated", "truncated JPEG is a 422 truncated")
        chunk = lambda kind, body: (len(body).to_bytes(4, "big") + kind + body
                                    + zlib.crc32(kind + body).to_bytes(4, "big"))
        bomb = (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", (100000).to_bytes(4, "big") * 2 + bytes([8, 2, 0, 0, 0]))
                + chunk(b"IEND", b""))
        status, _, e = score(base, bomb)
        check(status == 422 and e["error"]["code"] == "too-large", "bomb-sized PNG header is a 422 too-large")
        check(request(base + "/v1/score")[0] == 405, "GET on the score route is a 405")
        check(request(base + "/v1/health", b"x", "POST")[0] == 405, "POST on health is a 405")
        status, _, body = request(base + "/nowhere")
        check(status == 404 and json.loads(body)["error"]["code"] == "not-found", "unknown route is a JSON 404")
        # The most common first call: curl --data-binary @photo.jpg declares a form, not an image.
        status, _, body = request(base + "/v1/score", data, "POST",
                                  {"Content-Type": "application/x-www-form-urlencoded"})
        check(status == 200 and json.loads(body)["p_generated"] == r["p_generated"],
              f"raw image bytes declared as a form are scored as the image ({status})")
        status, _, body = request(base + "/v1/score", data, "POST", {"Content-Type": "text/plain"})
        check(status == 200 and json.loads(body)["sha256"] == r["sha256"], "raw image bytes of any declared type")
        # A chunked body (no Content-Length) is read and scored the same.
        status, _, c = raw(base, "POST /v1/score HTTP/1.1\r\nHost: x\r\nTransfer-Encoding: chunked\r\n"
                                 "Connection: close\r\n", chunked(data))
        check(status == 200 and c["p_generated"] == r["p_generated"], f"chunked body is scored ({status})")
        # Route and method are checked on the headers: a promised 40 MB body is never waited for.
        for head, want, what in (
                ("POST /nowhere HTTP/1.1", 404, "unknown route"),
                ("POST /v1/health HTTP/1.1", 405, "wrong method"),
                ("POST /v1/score HTTP/1.1", None, "within the limit")):
            status, seconds, _ = raw(base, head + "\r\nHost: x\r\nContent-Length: 40000000\r\n", timeout=3)
            if want is None:
                check(status is None, "a body within the limit is waited for (the check below is not vacuous)")
            else:
                check(status == want and seconds < 2, f"{what}: {want} without reading the body ({status}, {seconds:.1f} s)")

        # 200 concurrent requests from 8 threads: all answered, scores identical to scan.
        results = []

        def client(k):
            for i in range(25):
                path = images[(k * 25 + i) % len(images)]
                with open(path, "rb") as f:
                    status, _, r = score(base, f.read())
                with lock:
                    results.append((path, status, r))
        threads = [threading.Thread(target=client, args=(k,)) for k in range(8)]
        [t.start() for t in threads]
        [t.join() for t in threads]
        check(len(results) == 200 and all(s == 200 for _, s, _ in results), "200 concurrent requests all answered 200")
        check(all(abs(r["p_generated"] - scan[p]["p_generated"]) < 1e-12 for p, _, r in results),
              "concurrent scores identical to residue scan")
        status, _, body = request(base + "/metrics")
        text = body.decode()
        check('residue_requests_total{route="/v1/score",status="200"}' in text, "metrics count requests by status")
        # The exposition format checked by Prometheus's own linter (promtool, Debian package prometheus).
        lint = subprocess.run(["promtool", "check", "metrics"], input=text, capture_output=True, text=True)
        check(lint.returncode == 0, f"promtool check metrics accepts /metrics: {lint.stdout}{lint.stderr}")
        check("residue_request_duration_seconds_bucket" in text and "residue_queue_depth" in text
              and 'residue_scores_total{band="likely-camera"}' in text, "metrics: latency histogram, queue, bands")

        # Reload under load: clients keep scoring while the model file is swapped and reloaded.
        flowing, seen, failures = True, [], []

        def steady(k):
            while flowing:
                with open(images[k], "rb") as f:
                    status, _, r = score(base, f.read())
                with lock:
                    (seen.append((k, r["model"])) if status == 200 else failures.append(status))
        threads = [threading.Thread(target=steady, args=(k,)) for k in range(4)]
        [t.start() for t in threads]
        time.sleep(0.5)
        with open(model_b) as f, open(served + ".tmp", "w") as g:
            g.write(f.read())
        os.replace(served + ".tmp", served)
        status, _, body = request(base + "/v1/model/reload", b"", "POST")
        check(status == 200 and json.loads(body)["model"] == id_b, "reload answers with the new model id")
        with lock:
            count_at_reload = len(seen)
        time.sleep(0.5)
        flowing = False
        [t.join() for t in threads]
        check(not failures, f"no failed request during the reload: {failures[:5]}")
        for k in range(4):
            ids = [m for kk, m in seen if kk == k]
            switches = sum(1 for x, y in zip(ids, ids[1:]) if x != y)
            check(switches == 1 and ids[0] == id_a and ids[-1] == id_b, f"client {k} switched model exactly once")
        check(len(seen) > count_at_reload, "requests kept flowing after the reload")

        # A damaged model file is refused and the served model stays.
        with open(served, "w") as f:
            f.write("{ not a model")
        status, _, body = request(base + "/v1/model/reload", b"", "POST")
        check(status == 422 and json.loads(body)["error"]["code"] == "model-refused", "a bad model file is refused")
        check(json.loads(request(base + "/v1/health")[2])["model"] == id_b, "the previous model stays")
        # SIGHUP reloads too.
        with open(model_a) as f, open(served, "w") as g:
            g.write(f.read())
        proc.send_signal(signal.SIGHUP)
        for _ in range(50):
            if json.loads(request(base + "/v1/health")[2])["model"] == id_a:
                break
            time.sleep(0.1)
        check(json.loads(request(base + "/v1/health")[2])["model"] == id_a, "SIGHUP reloads the model file")
    finally:
        stop(proc)
    check(proc.returncode == 0, f"SIGTERM stops the server cleanly, exit {proc.returncode}")

    # Authentication and limits.
    token_file = os.path.join(tmp, "token")
    with open(token_file, "w") as f:
        f.write("s3cret-token\n")
    proc, base = start(served, "--token-file", token_file, "--max-body-mb", "0.01")
    try:
        check(score(base, b"x" * 100)[0] == 401, "missing token is a 401")
        check(score(base, b"x" * 100, {"Authorization": "Bearer wrong"})[0] == 401, "wrong token is a 401")
        check(request(base + "/v1/health")[0] == 200, "health needs no token (for load balancers)")
        status, _, e = score(base, b"\0" * 20000, {"Authorization": "Bearer s3cret-token"})
        check(status == 413 and e["error"]["code"] == "too-large", "oversized body is a 413")
        # The token and the declared size are checked on the headers, before any body is read: an
        # unauthenticated client promising 40 MB gets its 401 at once (before: after reading it all).
        for head, want, what in (
                ("POST /v1/score HTTP/1.1\r\nHost: x\r\nContent-Length: 40000000\r\n", 401, "no token"),
                ("POST /v1/score HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer wrong\r\n"
                 "Content-Length: 40000000\r\n", 401, "wrong token"),
                ("POST /v1/model/reload HTTP/1.1\r\nHost: x\r\nContent-Length: 40000000\r\n", 401, "reload, no token"),
                ("POST /v1/score HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer s3cret-token\r\n"
                 "Content-Length: 40000000\r\n", 413, "declared over the limit")):
            status, seconds, e = raw(base, head, timeout=3)
            check(status == want and e is not None and seconds < 2,
                  f"{what}: {want} on the headers alone ({status}, {seconds:.1f} s)")
        status, _, e = raw(base, "POST /v1/score HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer s3cret-token\r\n"
                                 "Transfer-Encoding: chunked\r\nConnection: close\r\n", chunked(b"\0" * 20000))
        check(status == 413 and e["error"]["code"] == "too-large", f"a chunked body is held to the limit ({status})")
        status, _, r2 = score(base, open(images[1], "rb").read()[:9000], {"Authorization": "Bearer s3cret-token"})
        check(status in (200, 422), "a body under the limit with the right token is scored or refused cleanly")
    finally:
        stop(proc)
    refused = subprocess.run([residue, "serve", served, "--host", "0.0.0.0", "--port", "0"], capture_output=True,
                             text=True, timeout=60)
    check(refused.returncode == 1 and "without authentication" in refused.stderr,
          "a non-loopback address without a token is refused")

    # Overload: one worker, a queue of one; excess requests get 503 quickly; the service recovers.
    big = os.path.join(tmp, "big.png")
    rng = np.random.RandomState(1)
    Image.fromarray(rng.randint(0, 255, (1536, 1536, 3), dtype=np.uint8)).save(big)
    with open(big, "rb") as f:
        big_data = f.read()
    proc, base = start(served, "--workers", "1", "--queue", "1")
    try:
        answers = []

        def burst():
            t0 = time.time()
            status, hdrs, _ = score(base, big_data)
            with lock:
                answers.append((status, time.time() - t0, hdrs.get("Retry-After")))
        threads = [threading.Thread(target=burst) for _ in range(12)]
        [t.start() for t in threads]
        [t.join() for t in threads]
        busy = [a for a in answers if a[0] == 503]
        check(len(answers) == 12 and all(a[0] in (200, 503) for a in answers), "every request answered 200 or 503")
        check(len(busy) >= 5, f"excess requests get 503 ({len(busy)} of 12)")
        check(all(a[2] == "1" for a in busy), "503 carries Retry-After")
        # Relative, not a wall-clock bound (the machine may be loaded): a refusal must not wait for
        # scoring, so every 503 arrives before the fastest accepted request is answered.
        served_times = [a[1] for a in answers if a[0] == 200]
        check(served_times and all(a[1] < min(served_times) for a in busy),
              f"503 comes before any scored answer: 503 {[round(a[1], 2) for a in busy]}, "
              f"200 {[round(t, 2) for t in served_times]}")
        check(score(base, data)[0] == 200, "the service recovers after the burst")
    finally:
        stop(proc)

    # Slow and idle clients (slowloris): every connection has its own thread, a head or body sent too
    # slowly is cut at its deadline (not only when one read waits --timeout seconds), and beyond
    # --max-connections a connection gets 503 and is closed at once.
    proc, base = start(served, "--max-connections", "230", "--header-timeout", "3", "--body-timeout", "3")
    address = ("127.0.0.1", int(base.rsplit(":", 1)[1]))
    try:
        held = []
        for i in range(200):
            sock = socket.create_connection(address, timeout=5)
            if i % 2:
                sock.sendall(b"GET /v1/health HTTP/1.1\r\nHost: x\r\n")  # a head never finished
            held.append(sock)
        slow_body = socket.create_connection(address, timeout=5)
        slow_body.sendall(b"POST /v1/score HTTP/1.1\r\nHost: x\r\nContent-Length: 100000\r\n\r\n")
        opened = time.time()
        t0 = time.time()
        status = request(base + "/v1/health", timeout=5)[0]
        check(status == 200 and time.time() - t0 < 1.0,
              f"health answers within a second with 200 slow connections open ({status}, {time.time() - t0:.2f} s)")
        status, _, r = score(base, data)
        check(status == 200 and r["band"] in ("likely-camera", "inconclusive", "likely-generated"),
              f"scores still flow with 200 slow connections open ({status})")
        # Over the cap: 60 more connections at once; those past 230 get 503 without sending anything.
        extra = [socket.create_connection(address, timeout=5) for _ in range(60)]
        time.sleep(0.5)  # let the server take them all before any is answered (and frees its place)
        answers = []
        for sock in extra:
            sock.sendall(b"POST /v1/score HTTP/1.1\r\nHost: x\r\nContent-Length: 0\r\nConnection: close\r\n\r\n")
            answer = b""
            try:
                while True:
                    part = sock.recv(65536)
                    if not part:
                        break
                    answer += part
            except OSError:
                pass
            sock.close()
            if answer:
                answers.append(int(answer.split(b" ", 2)[1]))
                documented("/v1/score", "POST", answers[-1], answer.split(b"\r\n\r\n", 1)[1])
        refused = answers.count(503)
        check(len(answers) == 60 and set(answers) <= {400, 503} and 25 <= refused <= 32,
              f"past 230 connections: 503 and closed ({refused} of 60 refused; {sorted(set(answers))})")
        # Trickle a byte every half second into the unfinished heads and the body: per-read timeouts
        # (--timeout, 30 s) would never fire; the 3 s deadlines must.
        while time.time() - opened < 4.5:
            for sock in held[1::2] + [slow_body]:
                try:
                    sock.sendall(b"x")
                except OSError:
                    pass
            time.sleep(0.5)

        def closed(sock):
            sock.settimeout(2.5)
            try:
                while sock.recv(65536):
                    pass
                return True
            except socket.timeout:
                return False
            except OSError:
                return True
        still = sum(not closed(sock) for sock in held + [slow_body])
        check(still == 0, f"every slow or idle connection is cut within its deadline ({still} of 201 still open "
                          f"{time.time() - opened:.1f} s after connecting)")
        for sock in held + [slow_body]:
            sock.close()
        status, _, metrics = request(base + "/metrics")
        values = {line.split(" ")[0]: float(line.split(" ")[1]) for line in metrics.decode().splitlines()
                  if line and not line.startswith("#")}
        check(values.get('residue_connections_timed_out_total{phase="head"}', 0) >= 190
              and values.get('residue_connections_timed_out_total{phase="body"}', 0) >= 1
              and values.get("residue_connections_refused_total", 0) == refused,
              f"/metrics counts the cut and refused connections: "
              f"{ {k: v for k, v in values.items() if k.startswith('residue_connections')} }")
        check(request(base + "/v1/health")[0] == 200 and score(base, data)[0] == 200,
              "the service answers normally afterwards")
    finally:
        stop(proc)

check(validated[0] > 250, f"every JSON response was checked against docs/openapi.yaml ({validated[0]})")
finish()
