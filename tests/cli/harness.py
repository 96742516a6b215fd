"""Shared helpers of the end-to-end CLI tests: counted checks and running the residue binary.

Each test prints the closing line "N passed, N failed" and exits non-zero on any failure.
"""
import os
import subprocess
import sys

_counts = {"passed": 0, "failed": 0}


# The feature families a default model learns from (features/src/extract.cpp has one more, the
# coding surprise, which the model's camera model reads instead).
FAMILIES = {"spectral", "noise", "resampling", "sensor", "texture", "coding"}


def check(condition, what):
    _counts["passed" if condition else "failed"] += 1
    if not condition:
        print("FAILED:", what)


def make_labelled(root, seed, count, camera_format="png", generated_format="png"):
    """A small labelled set under `root` (tests/cli/make_labelled.py: scikit-image photo crops and
    SIMULATED generator output), `count` images per class."""
    script = os.path.join(os.path.dirname(os.path.abspath(__file__)), "make_labelled.py")
    subprocess.run(["/usr/bin/python3", script, root, str(seed), camera_format, generated_format, str(count)],
                   check=True)


def runner(residue):
    """Returns run(args, stdin=None) -> CompletedProcess for the given residue binary."""
    def run(args, stdin=None):
        return subprocess.run([residue] + args, input=stdin, capture_output=True, text=True, timeout=600)
    return run


def finish():
    print(f"{_counts['passed']} passed, {_counts['failed']} failed")
    sys.exit(1 if _counts["failed"] else 0)
