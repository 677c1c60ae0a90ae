"""Start-up time of the command line against a bare ``python -c "import click"``.

Each command is run ``--runs`` times in a fresh interpreter, alternating with the baseline so a
busy machine slows both alike; the table gives the medians and their ratio. Target: ``harmony
--help`` and ``harmony feed --help`` at most 4 times the baseline. Ends with one JSON line.

    python benchmarks/startup.py [--runs 9]
"""

import argparse
import json
import statistics
import subprocess
import sys
import time

COMMANDS = {
    "harmony --help": ["-m", "harmony.cli", "--help"],
    "harmony feed --help": ["-m", "harmony.cli", "feed", "--help"],
    "harmony extract --help": ["-m", "harmony.cli", "extract", "--help"],
}
BASELINE = ["-c", "import click"]
TARGET_RATIO = 4.0


def _seconds(args):
    start = time.perf_counter()
    subprocess.run([sys.executable, *args], check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def _cached_extract(runs):
    """A re-run of ``harmony extract`` on the unchanged demo catalogue, against the import time of
    the modules it needs: the rest is checking files (stat and content hashes)."""
    import tempfile

    from harmony.resources import SHOP_DIR

    with tempfile.TemporaryDirectory() as folder:
        db = f"{folder}/demo.db"
        cmd = ["-m", "harmony.cli", "extract", str(SHOP_DIR / "catalogue.csv"), "--db", db]
        subprocess.run([sys.executable, *cmd], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        imports = ["-c", "import harmony.cli, harmony.shop.engine, harmony.shop.catalogue"]
        rerun = statistics.median(_seconds(cmd) for _ in range(runs))
        load = statistics.median(_seconds(imports) for _ in range(runs))
    print(f"{'extract re-run (demo)':<26} {rerun:>9.3f}   of which imports {load:.3f} s ({load / rerun * 100:.0f} %)")
    return {"extract_rerun_s": round(rerun, 3), "extract_imports_s": round(load, 3)}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=9)
    args = parser.parse_args(argv)
    _seconds(BASELINE)  # warm the file cache
    base, times = [], {name: [] for name in COMMANDS}
    for _ in range(args.runs):
        for name, cmd in COMMANDS.items():
            base.append(_seconds(BASELINE))
            times[name].append(_seconds(cmd))
    b = statistics.median(base)
    print(f"{'command':<26} {'median s':>9} {'x import click':>15}")
    label = 'python -c "import click"'
    print(f"{label:<26} {b:>9.3f} {1.0:>15.2f}")
    result = {"baseline_s": round(b, 4), "target_ratio": TARGET_RATIO}
    for name, ts in times.items():
        m = statistics.median(ts)
        print(f"{name:<26} {m:>9.3f} {m / b:>15.2f}")
        result[name.replace("harmony ", "").replace(" ", "_").replace("--", "") + "_ratio"] = round(m / b, 2)
    result["met"] = all(v <= TARGET_RATIO for k, v in result.items() if k.endswith("_ratio"))
    result.update(_cached_extract(args.runs))
    print(json.dumps(result))


if __name__ == "__main__":
    main()
