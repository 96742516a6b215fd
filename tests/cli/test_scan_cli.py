"""End-to-end test of scan, report and explain as a reviewer runs them.

A model is trained on a small simulated set (tests/cli/make_labelled.py: scikit-image photo crops
and SIMULATED upsampling output); then a folder of entries with broken files is scanned.
Declared provenance is written by outside tools: the exiv2 command (Debian package exiv2) sets
XMP Iptc4xmpExt:DigitalSourceType, Pillow writes a PNG text chunk with generation settings.
Values are IPTC NewsCodes digital source types (cv.iptc.org/newscodes/digitalsourcetype).

Usage: test_scan_cli.py PATH/TO/residue
"""
import csv
import io
import json
import os
import re
import subprocess
import sys
import tempfile
import urllib.parse

from PIL import Image, PngImagePlugin

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import FAMILIES, check, finish, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
RECORD_FIELDS = ["path", "sha256", "width", "height", "format", "p_generated", "band", "margin", "contributions",
                 "declared", "model", "advisory"]




def lines(path):
    with open(path) as f:
        return [json.loads(x) for x in f if x.strip()]


with tempfile.TemporaryDirectory() as tmp:
    train = os.path.join(tmp, "train")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), train, "1", "jpeg", "png", "24"],
                   check=True)
    model = os.path.join(tmp, "model.json")
    cache = os.path.join(tmp, "cache.sqlite")
    trained = run(["train", train, "-o", model, "--cache", cache])
    check(trained.returncode == 0, f"train for the scan test: {trained.stderr[-300:]}")

    entries = os.path.join(tmp, "entries")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), entries, "5", "png", "png", "10"],
                   check=True)
    # Declared provenance, written by outside tools.
    tagged = os.path.join(entries, "camera", "photo_5_000.png")
    subprocess.run(["exiv2", "-M", "set Xmp.iptcExt.DigitalSourceType "
                    "http://cv.iptc.org/newscodes/digitalsourcetype/trainedAlgorithmicMedia", tagged], check=True)
    settings = os.path.join(entries, "generated", "sim-tconv", "sim_5_001.png")
    info = PngImagePlugin.PngInfo()
    info.add_text("parameters", "a lighthouse at dusk\nSteps: 30, Sampler: Euler a, CFG scale: 7")
    Image.open(settings).save(settings, pnginfo=info)
    # Broken inputs.
    with open(os.path.join(entries, "camera", "photo_5_000.png"), "rb") as f:
        good = f.read()
    bad = os.path.join(entries, "bad")
    os.makedirs(bad)
    with open(os.path.join(bad, "truncated.png"), "wb") as f:
        f.write(good[: len(good) // 2])
    open(os.path.join(bad, "empty.jpg"), "wb").close()
    with open(os.path.join(bad, "notes.txt"), "w") as f:
        f.write("not an image")
    total = sum(len(files) for _, _, files in os.walk(entries))

    out = os.path.join(tmp, "scan.jsonl")
    scan = run(["scan", model, entries, "-o", out, "--jobs", "2"])
    check(scan.returncode == 3, f"exit 3 when some inputs fail, got {scan.returncode}")
    records = lines(out)
    check(len(records) == total, f"one record per input: {len(records)} of {total}")
    by_name = {os.path.basename(r["path"]): r for r in records}
    for r in records:
        if "error" in r:
            check(set(r["error"]) == {"code", "message"} and "p_generated" not in r, "error records carry no score")
        else:
            check(list(r)[:len(RECORD_FIELDS)] == RECORD_FIELDS, f"record fields in contract order: {list(r)}")
            check(0.0 <= r["p_generated"] <= 1.0, "p_generated in 0..1")
            check(r["band"] in ("likely-camera", "inconclusive", "likely-generated"), "band is one of three")
            check(re.fullmatch(r"[0-9a-f]{64}", r["sha256"]) is not None, "sha256 is 64 hex digits")
            check(set(r["contributions"]) == FAMILIES, "contributions per family")
            check("must never be the sole basis" in r["advisory"], "advisory in every record")
    check(by_name["truncated.png"]["error"]["code"] == "truncated", "truncated PNG")
    check(by_name["empty.jpg"]["error"]["code"] == "empty", "empty file")
    check(by_name["notes.txt"]["error"]["code"] == "not-an-image", "text file")
    d = by_name["photo_5_000.png"]["declared"]
    check(d is not None and d["digital_source_type"] == "trainedAlgorithmicMedia" and d["declares_generated"],
          f"XMP digital source type read: {d}")
    d = by_name["sim_5_001.png"]["declared"]
    check(d is not None and d["generation_settings_text"] and d["declares_generated"], f"PNG settings text: {d}")
    check(by_name["photo_5_001.png"]["declared"] is None, "no metadata: declared is null")

    # Resume after an interrupted scan: keep the first 7 records and half of the 8th line.
    with open(out) as f:
        text = f.read().splitlines(keepends=True)
    partial = os.path.join(tmp, "partial.jsonl")
    with open(partial, "w") as f:
        f.write("".join(text[:7]) + text[7][: len(text[7]) // 2])
    resumed = run(["scan", model, entries, "--resume", partial])
    check(resumed.returncode == 3, "resume exits as a scan does")
    again = lines(partial)
    paths = sorted(r["path"] for r in again)
    check(paths == sorted(r["path"] for r in records), f"after resume every input exactly once ({len(again)})")
    check(len(set(paths)) == len(paths), "no duplicates after resume")

    # File names that are not valid UTF-8 (old code pages, ZIP extracts): every record is written,
    # as valid UTF-8, with the exact bytes in "path_bytes" (RFC 3986 percent-encoding), and --resume
    # and the CSV keep them apart. Before, one such name aborted the whole batch (exit 134).
    names = os.path.join(tmp, "names").encode()
    os.makedirs(names)
    odd = [b"photo-\xff\xfe.png", b"broken-\xe9t\xe9.jpg", "caf\u00e9 100%41.png".encode()]
    for name in odd:
        with open(os.path.join(names, name), "wb") as f:
            f.write(b"" if name.endswith(b".jpg") else good)
    odd_out = os.path.join(tmp, "odd.jsonl")
    odd_scan = run(["scan", model, names.decode("utf-8", "surrogateescape"), "-o", odd_out])
    check(odd_scan.returncode == 3, f"a folder with non-UTF-8 names scans to the end (exit {odd_scan.returncode})")
    with open(odd_out, "rb") as f:
        raw = f.read()
    check(raw.decode("utf-8", "strict") is not None, "the output is valid UTF-8")
    odd_records = [json.loads(x) for x in raw.decode().splitlines()]
    exact = sorted(urllib.parse.unquote_to_bytes(r["path_bytes"]) if "path_bytes" in r else r["path"].encode()
                   for r in odd_records)
    check(exact == sorted(os.path.join(names, n) for n in odd), f"every name given back exactly: {exact}")
    by_odd = {os.path.basename(r["path"]): r for r in odd_records}
    check("path_bytes" not in by_odd["caf\u00e9 100%41.png"], "a valid UTF-8 name is written as it is")
    check(by_odd["photo-\ufffd\ufffd.png"].get("band") is not None, "the non-UTF-8 photo is scored")
    check(by_odd["broken-\ufffdt\ufffd.jpg"]["error"]["code"] == "empty", "the non-UTF-8 broken file has its error")
    with open(odd_out, "rb") as f:
        first = f.read().split(b"\n")[0]
    with open(odd_out, "wb") as f:
        f.write(first + b"\n")
    check(run(["scan", model, names.decode("utf-8", "surrogateescape"), "--resume", odd_out]).returncode == 3,
          "resume over non-UTF-8 names")
    check(len(lines(odd_out)) == 3, "resume matches non-UTF-8 names: no loss, no duplicate")
    odd_csv = subprocess.run([residue, "scan", model, names, "--format", "csv"], capture_output=True)
    rows = list(csv.DictReader(io.StringIO(odd_csv.stdout.decode("utf-8", "strict"))))
    check(len(rows) == 3 and sum(1 for r in rows if r["path_bytes"]) == 2, "CSV: valid UTF-8 with path_bytes")
    odd_features = subprocess.run([residue, "features", names], capture_output=True)
    check(odd_features.returncode == 3 and len(odd_features.stdout.decode("utf-8", "strict").splitlines()) == 3,
          "features: every non-UTF-8 name gets its record")
    odd_report = os.path.join(tmp, "odd.html")
    check(run(["report", odd_out, "-o", odd_report]).returncode == 0, "report on records with non-UTF-8 names")

    # Shards: 1/3, 2/3, 3/3 together equal the unsharded scan.
    union = []
    for k in (1, 2, 3):
        shard_out = os.path.join(tmp, f"shard{k}.jsonl")
        run(["scan", model, entries, "-o", shard_out, "--shard", f"{k}/3"])
        union += lines(shard_out)
    key = lambda r: (r["path"], r.get("p_generated"))
    check(sorted(map(key, union)) == sorted(map(key, records)), "shards concatenate into the whole scan")
    check(run(["scan", model, entries, "--shard", "4/3"]).returncode == 2, "bad shard is a usage error")

    # Paths on stdin, include/exclude, CSV and table output, prior.
    listed = run(["scan", model, "-", "--format", "csv"], stdin=tagged + "\n" + settings + "\n")
    rows = list(csv.DictReader(io.StringIO(listed.stdout)))
    check(listed.returncode == 0 and len(rows) == 2 and rows[0]["path"] == tagged, "stdin paths and CSV output")
    only_png = run(["scan", model, entries, "--include", "*.png", "--exclude", "*/bad/*"])
    check(only_png.returncode == 0 and len(only_png.stdout.splitlines()) == total - 3, "include/exclude patterns")
    table = run(["scan", model, entries, "--format", "table"])
    check("must never be the sole basis" in table.stdout, "table output ends with the advisory notice")
    low = [json.loads(x) for x in run(["scan", model, tagged, "--prior", "0.01"]).stdout.splitlines()]
    check(low[0]["p_generated"] < by_name["photo_5_000.png"]["p_generated"], "a low prior lowers P")
    check(run(["scan", model]).returncode == 2, "missing inputs is a usage error")

    # Report: valid, self-contained, every section present.
    report = os.path.join(tmp, "report.html")
    rep = run(["report", out, os.path.join(tmp, "shard1.jsonl"), "-o", report, "--model", model])
    check(rep.returncode == 0, f"report exits 0: {rep.stderr}")
    with open(report) as f:
        html = f.read()
    for section in ("Bands", "Score distribution", "Highest scores", "Declared provenance that disagrees",
                    "By folder", "Errors", "Model provenance"):
        check(f"<h2>{section}" in html, f"report has section {section}")
    check("must never be the sole basis" in html, "report carries the advisory")
    check("data:image/png;base64," in html, "report embeds its pictures")
    check(not re.findall(r"(?:src|href)\s*=\s*['\"](?!data:)|<link|@import|url\(", html), "no external references")
    check(html.count("<table") == html.count("</table>") and html.rstrip().endswith("</html>"), "balanced tables")
    check("truncated" in html and "not-an-image" in html, "errors grouped by kind")
    subprocess.run(["/usr/bin/python3", "-c", "import html.parser,sys; html.parser.HTMLParser().feed(open(sys.argv[1]).read())",
                    report], check=True)

    # Explain writes its pictures.
    exp_dir = os.path.join(tmp, "explain")
    exp = run(["explain", model, settings, "-o", exp_dir])
    check(exp.returncode == 0, f"explain exits 0: {exp.stderr}")
    for name in ("noise_residual.png", "residual_spectrum.png", "resampling_pmap_spectrum.png"):
        path = os.path.join(exp_dir, name)
        check(os.path.exists(path) and Image.open(path).size[0] >= 64, f"explain wrote {name}")
    with open(os.path.join(exp_dir, "summary.json")) as f:
        summary = json.load(f)
    check(len(summary["strongest_evidence"]) == 8, "summary names the strongest evidence")
    check(open(os.path.join(exp_dir, "contributions.svg")).read().startswith("<svg"), "contributions chart")
    check(run(["explain", model, os.path.join(bad, "empty.jpg"), "-o", exp_dir]).returncode == 3,
          "explain of a broken file exits 3")

finish()
