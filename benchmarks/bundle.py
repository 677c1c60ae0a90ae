"""Exact top-10 bundles: 5 slots x 200 candidates, random prices and scores.

Target: at most 2 s on this machine. The baseline, measured in the same run, is brute force on a
5 x 12 instance (248,832 bundles), scaled per bundle to the full enumeration count. Prints a table
and ends with one JSON line with ``seconds`` and ``nodes``.
"""

import json
import math
import time

import numpy as np

from harmony.suggest.bundle import (
    BundleProblem,
    BundleSlot,
    Candidate,
    brute_force_count,
    iter_bundles,
    search,
)


def instance(rng, n_slots, pool, budget):
    slots = tuple(BundleSlot(f"slot{s}", quantity=int(rng.integers(1, 5)), required=s < n_slots - 1)
                  for s in range(n_slots))
    pools = tuple(tuple(Candidate(f"p{s}-{i}", float(rng.uniform(20, 2500) / slots[s].quantity))
                        for i in range(pool)) for s in range(n_slots))
    scores = {(s, t): rng.uniform(0, 1, (pool, pool)) for s in range(n_slots) for t in range(s + 1, n_slots)}
    weights = {(s, t): float(rng.uniform(0.5, 3.0)) for s in range(n_slots) for t in range(s + 1, n_slots)}
    return BundleProblem(slots, pools, scores, weights, budget)


def main():
    rng = np.random.default_rng(2024)
    big = instance(rng, 5, 200, budget=4000.0)
    t0, c0 = time.perf_counter(), time.process_time()
    result = search(big, top=10)
    seconds = time.perf_counter() - t0
    cpu_seconds = time.process_time() - c0

    small = instance(rng, 5, 12, budget=4000.0)
    t0 = time.perf_counter()
    enumerated = sum(1 for _ in iter_bundles(small))
    brute_small = time.perf_counter() - t0
    per_bundle = brute_small / brute_force_count(small)
    brute_big = per_bundle * brute_force_count(big)
    t0 = time.perf_counter()
    small_bb = search(small, top=10)
    small_seconds = time.perf_counter() - t0
    assert math.isclose(small_bb.bundles[0].value, max(v for v, _, _ in iter_bundles(small)), abs_tol=1e-9)

    rows = [
        ("5 x 12, brute force (baseline)", brute_small, brute_force_count(small), 1.0),
        ("5 x 12, branch-and-bound", small_seconds, small_bb.nodes, brute_small / small_seconds),
        ("5 x 200, brute force (estimated)", brute_big, brute_force_count(big), 1.0),
        ("5 x 200, branch-and-bound top-10", seconds, result.nodes, brute_big / seconds),
    ]
    print(f"{'case':<36} {'seconds':>12} {'nodes / bundles':>18} {'speed-up':>12}")
    for name, sec, nodes, ratio in rows:
        print(f"{name:<36} {sec:>12.3f} {nodes:>18,} {ratio:>12.3g}")
    print(f"cpu time of the 5 x 200 search: {cpu_seconds:.3f} s (wall time is noisy on a shared machine)")
    print(f"exact: {result.exact}; target <= 2 s: {'met' if seconds <= 2.0 else 'MISSED'}; "
          f"{enumerated:,} of the small instance's bundles fit its budget")
    print(json.dumps({"seconds": round(seconds, 4), "cpu_seconds": round(cpu_seconds, 4), "nodes": result.nodes,
                      "brute_force_count": brute_force_count(big), "exact": result.exact,
                      "top": len(result.bundles)}))


if __name__ == "__main__":
    main()
