"""The demo's evaluate stage, timed as ``harmony demo`` times it, in fresh processes.

The demo shop is extracted once into a temporary store; then each run is a new Python process
that loads what a demo run has loaded before its evaluate stage (the demo, extraction, feed and
bundle modules) and times the stage itself: reading the store, the log and the candidate list,
every method, the metrics and the table. The modules the stage imports (the evaluation, and
scipy or POT where a revision uses them) are imported inside the timing, once, as in a real run.
The best of ``--runs`` runs counts. The output names the heavy packages (scipy, scikit-learn,
POT) each revision's stage imported.

Where POT is installed, a row times ``import ot`` alone after the same start, for scale: what
its package import costs a stage that uses it (earlier revisions solved their earth mover's
distances with it). With ``--baseline DIR`` (a checkout of another revision) the same stage of
that code runs in the same way, between this revision's runs, and the two revisions' tables are
compared.

Modules load from a warm bytecode cache, as in any run after the first: the children keep their
compiled modules in a temporary folder (``PYTHONPYCACHEPREFIX``; the checkouts are not written
to) and one untimed run of each kind fills it. ``--no-bytecode-cache`` compiles every module from
its source in every run instead (``PYTHONDONTWRITEBYTECODE=1``: installed packages keep the
bytecode pip wrote, a checkout's modules are compiled each time).

Prints a table and, as its last line, one JSON object with ``evaluate_s``, ``target_s`` and ``met``.

    python benchmarks/evaluate_stage.py [--runs N] [--baseline DIR] [--no-bytecode-cache]
"""

import argparse
import importlib.util
import json
import os
import tempfile
from pathlib import Path

from _revision import load_average, run_child

TARGET_S = 1.5

# Run in a fresh process; argv: checkout (or ""), store, shop folder, what ("stage" or "ot").
_CHILD = """
import json, sys, time
from pathlib import Path
if sys.argv[1]:
    sys.path.insert(0, sys.argv[1])
import harmony.demo.run as demo
# What a demo run has loaded by its evaluate stage (extraction, feed, bundles).
import harmony.shop.engine, harmony.suggest.feed, harmony.suggest.bundle
loaded = sorted(m for m in ("scipy", "sklearn", "ot") if m in sys.modules)
shop = Path(sys.argv[3])
t0, c0 = time.perf_counter(), time.process_time()
if sys.argv[4] == "ot":
    import ot
    tables = None
else:
    tables = demo._evaluation_tables(Path(sys.argv[2]), shop / "events.csv", demo.DEFAULT_RULES, False,
                                     shop / "candidates.csv")
seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
imported = sorted(m for m in ("scipy", "sklearn", "ot") if m in sys.modules)
print(json.dumps({"seconds": seconds, "cpu": cpu, "module": demo.__file__, "loaded_before": loaded,
                  "imported": imported, "tables": tables}))
"""


def _child(checkout, db, shop, what, env):
    result = run_child(_CHILD, checkout, [db, shop, what], env=env)
    if result["loaded_before"]:
        raise SystemExit(f"error: {', '.join(result['loaded_before'])} loaded before the stage; its import would not count")
    return result


def _store(folder):
    """The demo shop extracted into ``folder/harmony.db``; returns (store, shop folder)."""
    from harmony.demo.run import demo_catalogue
    from harmony.shop.engine import run_extraction

    catalogue = demo_catalogue(folder)
    db = Path(folder) / "harmony.db"
    run_extraction(catalogue, db)
    return db, catalogue.parent


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3, help="fresh processes per revision; the best counts")
    parser.add_argument("--baseline", metavar="DIR", help="a checkout of the revision to compare with")
    parser.add_argument("--no-bytecode-cache", action="store_true",
                        help="compile every module from source in every run (no cached bytecode)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        db, shop = _store(folder)
        env = dict(os.environ)
        if args.no_bytecode_cache:  # installed packages keep the bytecode pip wrote, a checkout has none
            env["PYTHONDONTWRITEBYTECODE"] = "1"
            env.pop("PYTHONPYCACHEPREFIX", None)
        else:
            env["PYTHONPYCACHEPREFIX"] = str(Path(folder) / "bytecode")
            env.pop("PYTHONDONTWRITEBYTECODE", None)
        with_ot = importlib.util.find_spec("ot") is not None
        kinds = [(key, checkout, what) for key, checkout, what in
                 (("this", None, "stage"), ("baseline", args.baseline, "stage"), ("ot", None, "ot"))
                 if (key != "baseline" or args.baseline) and (key != "ot" or with_ot)]
        if not args.no_bytecode_cache:
            for _key, checkout, what in kinds:  # untimed: fills the bytecode cache
                _child(checkout, db, shop, what, env)
        load_before = load_average()
        times = {"this": [], "baseline": [], "ot": []}
        cpus = {"this": [], "baseline": [], "ot": []}
        tables, imported = {}, {}
        for _ in range(args.runs):
            # Interleaved, so that every row sees the same machine.
            for key, checkout, what in kinds:
                result = _child(checkout, db, shop, what, env)
                times[key].append(result["seconds"])
                cpus[key].append(result["cpu"])
                tables[key] = result["tables"]
                imported[key] = result["imported"]
        load_after = load_average()
    best = {key: min(v) for key, v in times.items() if v}
    base = best.get("baseline")
    print(f"{'stage':<44}{'best s':>8}{'cpu s':>8}{'x baseline':>12}  runs (s)")
    rows = [("baseline: evaluate stage", "baseline"), ("this revision: evaluate stage", "this"),
            ("for scale: import ot (POT) alone", "ot")]
    for label, key in rows:
        if key not in best:
            continue
        ratio = f"{best[key] / base:>12.2f}" if base else f"{'':>12}"
        print(f"{label:<44}{best[key]:>8.3f}{min(cpus[key]):>8.3f}{ratio}  {' '.join(f'{t:.2f}' for t in times[key])}")
    for key in ("baseline", "this"):
        if key in imported:
            print(f"{key}: the stage imported {', '.join(imported[key]) or 'none of scipy, sklearn, ot'}")
    if base:
        same = tables["this"] == tables["baseline"]
        print(f"baseline: {args.baseline}; tables of both revisions identical: {'yes' if same else 'NO'}")
    print(f"load average: {load_before} before, {load_after} after; bytecode "
          f"{'compiled in every run' if args.no_bytecode_cache else 'cached (warm)'}")
    met = best["this"] <= TARGET_S
    print(f"target: evaluate stage <= {TARGET_S} s; {'met' if met else 'NOT met'}")
    summary = {"evaluate_s": round(best["this"], 3), "target_s": TARGET_S, "met": met,
               "evaluate_cpu_s": round(min(cpus["this"]), 3),
               "import_ot_s": round(best["ot"], 3) if "ot" in best else None, "stage_imported": imported["this"], "runs": args.runs, "load": load_before,
               "bytecode_cache": not args.no_bytecode_cache}
    if base:
        summary.update(baseline_s=round(base, 3), ratio_to_baseline=round(best["this"] / base, 3),
                       same_tables=tables["this"] == tables["baseline"])
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
