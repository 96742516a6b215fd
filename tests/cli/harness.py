"""Shared helpers of the end-to-end CLI tests: counted checks and running the residue binary.

Each test prints the closing line "N passed, N failed" and exits non-zero on any failure.
"""
import subprocess
import sys

_counts = {"passed": 0, "failed": 0}


# The feature families of the vector (features/src/extract.cpp).
FAMILIES = {"spectral", "noise", "resampling", "sensor", "texture", "coding"}


def check(condition, what):
    _counts["passed" if condition else "failed"] += 1
    if not condition:
        print("FAILED:", what)


def runner(residue):
    """Returns run(args, stdin=None) -> CompletedProcess for the given residue binary."""
    def run(args, stdin=None):
        return subprocess.run([residue] + args, input=stdin, capture_output=True, text=True, timeout=600)
    return run


def finish():
    print(f"{_counts['passed']} passed, {_counts['failed']} failed")
    sys.exit(1 if _counts["failed"] else 0)
