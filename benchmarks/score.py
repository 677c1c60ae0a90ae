"""Exact pair scores per second, for two 10-colour palettes under the default rules.

Rows: the score with its explanation (``pair_score``), the raw score only (``pair_raw``), raw
scores of many palette pairs in one broadcast call (``PairRules.pairwise`` on (256, 10, 10)
colour pairs, the path of the screen's exact re-rank), and a baseline measured in the same run:
the same kernel evaluated colour pair by colour pair in a Python loop. Ratios are against that
baseline. The last line is one JSON object.

Run on a quiet machine: ``python benchmarks/score.py [--seconds 1.0]``.
"""

import argparse
import json
import time

import numpy as np

from harmony.colour import srgb1_to_jab
from harmony.photo.palette import Palette
from harmony.rules import load_rules
from harmony.rules.score import pair_raw, pair_score


def _palettes(rng, count, k=10):
    out = []
    for _ in range(count):
        out.append(Palette(srgb1_to_jab(rng.uniform(0, 1, size=(k, 3))), rng.dirichlet(np.ones(k))))
    return out


def _looped_raw(pal_a, pal_b, pair_rules):
    total = 0.0
    for i in range(len(pal_a)):
        for j in range(len(pal_b)):
            total += pal_a.weights[i] * pal_b.weights[j] * pair_rules.kernel(pal_a.jab[i : i + 1], pal_b.jab[j : j + 1])[0, 0]
    return total


def _batched_rate(pals, pair_rules, seconds, batch=256):
    """Palette pairs per second scored by one ``pairwise`` call over ``batch`` pairs at a time."""
    jab = np.stack([p.jab for p in pals])
    w = np.stack([p.weights for p in pals])
    pick = np.arange(batch) % len(pals)
    ja, wa = jab[pick][:, :, None, :], w[pick]
    jb, wb = jab[(pick + 1) % len(pals)][:, None, :, :], w[(pick + 1) % len(pals)]
    n, start = 0, time.perf_counter()
    while True:
        np.einsum("pa,pab,pb->p", wa, pair_rules.pairwise(ja, jb), wb)
        n += batch
        elapsed = time.perf_counter() - start
        if elapsed >= seconds:
            return n / elapsed


def _rate(fn, pals, pair_rules, seconds):
    n, start = 0, time.perf_counter()
    while True:
        a, b = pals[n % len(pals)], pals[(n + 1) % len(pals)]
        fn(a, b, pair_rules)
        n += 1
        elapsed = time.perf_counter() - start
        if elapsed >= seconds:
            return n / elapsed


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=1.0, help="time per row")
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    pals = _palettes(rng, 64)
    pair_rules = load_rules().for_pair("sofa", "rug")
    for a, b in zip(pals[:5], pals[1:6]):  # the four paths agree
        assert abs(_looped_raw(a, b, pair_rules) - pair_raw(a, b, pair_rules)) < 1e-9
        assert abs(pair_score(a, b, pair_rules).raw - pair_raw(a, b, pair_rules)) < 1e-9
        broadcast = a.weights @ pair_rules.pairwise(a.jab[:, None], b.jab[None, :]) @ b.weights
        assert abs(broadcast - pair_raw(a, b, pair_rules)) < 1e-9
    baseline = _rate(_looped_raw, pals, pair_rules, args.seconds)
    rows = [
        ("loop over colour pairs (baseline)", baseline),
        ("pair_raw (vectorised, no explanation)", _rate(pair_raw, pals, pair_rules, args.seconds)),
        ("pair_score (vectorised, with explanation)", _rate(pair_score, pals, pair_rules, args.seconds)),
        ("pairwise, 256 palette pairs per call", _batched_rate(pals, pair_rules, args.seconds)),
    ]
    print(f"{'path':<44} {'pairs/s':>10} {'x baseline':>11}")
    for name, rate in rows:
        print(f"{name:<44} {rate:>10.0f} {rate / baseline:>11.1f}")
    print(json.dumps({
        "benchmark": "score",
        "palette_colours": 10,
        "rules": "default.toml sofa / rug",
        "baseline_pairs_per_s": round(baseline, 1),
        "raw_pairs_per_s": round(rows[1][1], 1),
        "explained_pairs_per_s": round(rows[2][1], 1),
        "batched_pairs_per_s": round(rows[3][1], 1),
    }))


if __name__ == "__main__":
    main()
