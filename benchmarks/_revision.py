"""What the benchmarks share: running a child Python on another revision's checkout, and the load.

Benchmarks run as scripts (``python benchmarks/NAME.py``), so this folder is first on sys.path.
"""

import json
import os
import subprocess
import sys


def run_child(code, checkout, args, env=None):
    """Run ``code`` in a fresh Python with ``args``; return the JSON object of its last line.

    The child puts ``checkout`` (when given) first on sys.path and reports the ``module`` it
    imported, which must lie inside the checkout, so a baseline never runs this revision's code.
    """
    argv = [sys.executable, "-c", code, os.path.abspath(checkout) if checkout else "", *map(str, args)]
    out = subprocess.run(argv, check=True, capture_output=True, text=True, env=env).stdout
    result = json.loads(out.strip().splitlines()[-1])
    if checkout and not result["module"].startswith(os.path.abspath(checkout)):
        raise SystemExit(f"error: the baseline imported {result['module']}, not the code in {checkout}")
    return result


def load_average():
    """The 1, 5 and 15 minute load averages as printed by /proc/loadavg, or "n/a"."""
    if not os.path.exists("/proc/loadavg"):
        return "n/a"
    with open("/proc/loadavg") as fh:
        return " ".join(fh.read().split()[:3])
