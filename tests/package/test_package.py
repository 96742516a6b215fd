"""The Debian package, built as an operator would (scripts/package.sh) and checked with Debian's own
tools: dpkg-deb --info/--contents, lintian (no errors), systemd-analyze verify on the units (and on
a deliberately broken copy, to show the check can fail), dpkg-shlibdeps' Depends against the
libraries the binary really links (readelf NEEDED, owners from dpkg -S); then the package unpacked
into a scratch root with dpkg -x, and its residue --version, residue demo and Python module run.

Usage: test_package.py BUILD_DIR VERSION
"""
import glob
import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import urllib.error
import urllib.request

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "cli"))
from harness import check, finish  # noqa: E402

build, version = os.path.abspath(sys.argv[1]), sys.argv[2]
source = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", ".."))


def sh(*args, env=None, timeout=600):
    return subprocess.run(list(args), capture_output=True, text=True, timeout=timeout, env=env)


made = sh(os.path.join(source, "scripts", "package.sh"), build)
check(made.returncode == 0, f"scripts/package.sh builds the package: {made.stderr[-500:]}")
deb = made.stdout.strip().splitlines()[-1] if made.stdout.strip() else ""
arch = sh("dpkg", "--print-architecture").stdout.strip()
check(os.path.basename(deb) == f"residue_{version}_{arch}.deb", f"the package is named residue_<version>_<arch>.deb: {deb}")
deb = os.path.join(source, deb) if not os.path.isabs(deb) else deb

# Control fields.
info = sh("dpkg-deb", "--info", deb).stdout
field = lambda name: (re.search(rf"^ {name}: (.*)$", info, re.M) or [None, ""])[1]  # noqa: E731
check(field("Package") == "residue" and field("Version") == version and field("Architecture") == arch,
      "control: package, version and architecture")
check("postinst" in info and "postrm" in info, "control: maintainer scripts that reload systemd's units")
depends = {d.strip().split(" ")[0] for d in field("Depends").split(",") if d.strip()}

# What the binary really links, and the package of each library: each must be depended on.
with tempfile.TemporaryDirectory() as root:
    sh("dpkg", "-x", deb, root)
    binary = os.path.join(root, "usr", "bin", "residue")
    needed = re.findall(r"\(NEEDED\)\s+Shared library: \[(.*)\]", sh("readelf", "-d", binary).stdout)
    check(len(needed) >= 10, f"readelf lists the shared libraries the binary needs ({len(needed)})")
    cache = sh("/sbin/ldconfig", "-p").stdout
    for library in needed:
        match = re.search(rf"^\s*{re.escape(library)} .*=> (\S+)$", cache, re.M)
        owner = ""
        if match:  # dpkg knows a file by the path it shipped it under (/lib or /usr/lib: usrmerge)
            real = os.path.realpath(match[1])
            for candidate in (match[1], real, real.removeprefix("/usr"), "/usr" + match[1]):
                found = sh("dpkg", "-S", candidate)
                if found.returncode == 0:
                    owner = found.stdout.split(":")[0]
                    break
        check(owner in depends, f"Depends names {owner or '?'}, the package of {library}")

    # Contents.
    listing = sh("dpkg-deb", "--contents", deb).stdout
    files = {line.split()[-1].lstrip(".") for line in listing.splitlines()}
    expected = ["/usr/bin/residue", "/lib/systemd/system/residue-serve.service",
                "/lib/systemd/system/residue-worker@.service", "/usr/share/doc/residue/copyright",
                "/usr/share/doc/residue/changelog.gz", "/usr/share/doc/residue/README.Debian",
                "/usr/share/doc/residue/service.md", "/usr/share/doc/residue/openapi.yaml",
                "/usr/share/doc/residue/examples/residue.default", "/usr/share/man/man1/residue.1.gz",
                "/usr/share/man/man1/residue-serve.1.gz", "/usr/share/man/man1/residue-worker.1.gz"]
    for path in expected:
        check(path in files, f"the package holds {path}")
    check(any(re.fullmatch(r"/usr/lib/python3/dist-packages/residue\.cpython-.*\.so", f) for f in files),
          "the package holds the Python module in dist-packages")
    check(all(" root/root " in line for line in listing.splitlines()), "every file belongs to root")

    # Manual pages made from --help, with the advisory.
    for page in glob.glob(os.path.join(root, "usr", "share", "man", "man1", "*.1.gz")):
        text = sh("zcat", page).stdout
        check(".SH NAME" in text and ".SH ADVISORY" in text and "sole basis" in text,
              f"{os.path.basename(page)} has NAME and the advisory")
    serve_page = sh("zcat", os.path.join(root, "usr", "share", "man", "man1", "residue-serve.1.gz")).stdout
    check("token\\-file" in serve_page, "residue-serve(1) documents --token-file")

    # lintian: no errors (warnings are printed).
    lint = sh("lintian", deb, timeout=900)
    tags = [line for line in lint.stdout.splitlines() if re.match(r"^[EW]: ", line)]
    print("lintian:", tags or "no errors or warnings")
    check(not [t for t in tags if t.startswith("E:")], f"lintian reports no errors: {tags}")

    # systemd-analyze verify, against the unpacked binary (the units name /usr/bin/residue).
    units = os.path.join(root, "units")
    os.makedirs(units)
    for unit in ("residue-serve.service", "residue-worker@.service"):
        text = open(os.path.join(root, "lib", "systemd", "system", unit)).read()
        for option in ("DynamicUser=yes", "ProtectSystem=strict", "NoNewPrivileges=yes", "ReadOnlyPaths=/etc/residue",
                       "LoadCredential="):
            check(option in text, f"{unit} has {option}")
        with open(os.path.join(units, unit), "w") as f:
            f.write(text.replace("/usr/bin/residue", binary))
        verify = sh("systemd-analyze", "verify", "--man=no", os.path.join(units, unit))
        check(verify.returncode == 0 and not verify.stderr.strip() and not verify.stdout.strip(),
              f"systemd-analyze verify accepts {unit}: {verify.stderr.strip()}")
    broken = os.path.join(units, "broken.service")
    with open(broken, "w") as f:
        f.write(open(os.path.join(units, "residue-serve.service")).read().replace("ProtectSystem=strict",
                                                                                   "ProtectSystem=everything"))
    verify = sh("systemd-analyze", "verify", "--man=no", broken)
    check("ProtectSystem" in verify.stderr or "protect system" in verify.stderr,
          "systemd-analyze verify does flag a broken unit (the check can fail)")

    # The unpacked package works.
    r = sh(binary, "--version")
    check(r.returncode == 0 and r.stdout.strip() == f"residue {version}", f"residue --version: {r.stdout.strip()}")
    demo_dir = os.path.join(root, "demo-output")
    r = sh(binary, "demo", "-o", demo_dir, timeout=900)
    check(r.returncode == 0, f"the unpacked residue demo runs: {r.stderr[-300:]}")
    check(any(name.endswith(".html") for _, _, names in os.walk(demo_dir) for name in names),
          "the demo wrote its HTML report")
    check(os.path.isfile(os.path.join(demo_dir, "model.json")), "the demo wrote its model")

    # Each unit's command line, expanded as systemd would expand it (its Environment= defaults,
    # %d the credentials folder, %H the host, %i the instance), runs. No systemd runs the units
    # themselves here (the test machine has none as PID 1).
    credentials = os.path.join(root, "credentials")
    os.makedirs(credentials)
    with open(os.path.join(credentials, "token"), "w") as f:
        f.write("package-test-token\n")
    open(os.path.join(credentials, "redis-password"), "w").close()  # empty: Redis without a password
    overrides = {"RESIDUE_MODEL": os.path.join(demo_dir, "model.json"), "RESIDUE_PORT": "0",
                 "RESIDUE_REDIS": "redis://127.0.0.1:9"}  # port 9 (discard): nothing listens
    for unit in ("residue-serve.service", "residue-worker@.service"):
        text = open(os.path.join(units, unit)).read()
        values = dict(re.findall(r"(\w+)=(\S*)", re.search(r"^Environment=(.*)$", text, re.M)[1]))
        values.update(overrides)
        line = re.search(r"^ExecStart=(.*)$", text, re.M)[1]
        line = line.replace("%d", credentials).replace("%H", "testhost").replace("%i", "1")
        line = re.sub(r"\$\{(\w+)\}|\$(\w+)", lambda m: values[m[1] or m[2]], line)
        process = subprocess.Popen(line.split(), stderr=subprocess.PIPE, text=True)
        first = process.stderr.readline()
        if unit.startswith("residue-serve"):
            port = json.loads(first)["port"]
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/v1/health", timeout=10) as answer:
                check(answer.status == 200, "the serve unit's command line serves the model")
            try:
                urllib.request.urlopen(f"http://127.0.0.1:{port}/v1/model", timeout=10)
                check(False, "the serve unit's command line requires the credential token")
            except urllib.error.HTTPError as e:
                check(e.code == 401, "the serve unit's command line requires the credential token")
        else:
            second = process.stderr.readline()
            check("jobs from residue-jobs" in first and "retrying" in second,
                  f"the worker unit's command line starts and waits for Redis: {first.strip()} {second.strip()}")
        process.send_signal(signal.SIGTERM)
        check(process.wait(timeout=60) == 0, f"{unit}'s command line stops cleanly on SIGTERM")

    env = dict(os.environ, PYTHONPATH=os.path.join(root, "usr", "lib", "python3", "dist-packages"))
    r = sh("/usr/bin/python3", "-c", "import residue; print(residue.__file__); print(len(residue.feature_names()))",
           env=env)
    lines = r.stdout.split()
    check(r.returncode == 0 and lines and lines[0].startswith(root) and int(lines[1]) > 100,
          f"Debian's python3 imports the packaged module: {r.stderr[-300:]}")

finish()
