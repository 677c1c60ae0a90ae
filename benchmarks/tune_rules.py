"""Tune a few numbers of a rules file on the demo shop, with a held-out half to show overfitting.

The objective is the mean AUC over query products of :func:`harmony.evaluation.evaluate` (the
rules method only) on the demo interaction log. The log's sessions are split in two halves with
a seeded ``numpy.random.Generator``: the numbers are chosen on the *tuning* half only, and the
*held-out* half's AUC is printed beside it at every step, so a gain that does not carry over is
visible.

The search is a plain coordinate search: each parameter in turn is multiplied by each factor of
:data:`FACTORS`, every other parameter held, and the best value is kept when it beats the current
tuning AUC by more than :data:`MIN_GAIN` (smaller gains are within the noise of a few hundred
sessions). Two rounds over the parameters. No weight is tried at 0: a rule the invented shoppers
happen not to care about would otherwise be switched off, which says more about the simulator
than about the rule.

Left fixed on purpose: the hue rules' centres (published, Moon & Spencer 1944 as commonly cited,
and the geometry of the hue circle), the neutral threshold and fade (equal to
``harmony.colour.neutral.NEUTRAL_COLOURFULNESS`` and ``NEUTRAL_FADE``), the lightness rules (the
invented shoppers of ``harmony.demo.shoppers`` have no taste for lightness at all, so the demo log
cannot say anything about them; ``--with-lightness`` searches them anyway, to show what it
does), and the analogous weight (the
reference the other weights are relative to: scaling every weight at once does not change a
ranking). ``[score] midpoint`` and ``scale`` do not change any ranking either (the score is
increasing in the raw score), so AUC cannot tune them; they are *measured* here instead: the
median raw score of the tuning half's scored pairs, and the scale that maps its 5th and 95th
percentiles to scores of 0.2 and 0.8.

The pair sections' multipliers are too many for a few hundred sessions to tune honestly; the
script reports the held-out AUC with them as written and with all of them set to 1, so one can
see whether they help.

The shopper model behind the demo log is invented (``harmony.demo.shoppers``), so numbers tuned
here say how well the rules fit that model, nothing about real shoppers.

Run: ``harmony demo --out /tmp/tune`` once, then
``python benchmarks/tune_rules.py --db /tmp/tune/harmony.db [--rules rules/default.toml]``.
The last line printed is one JSON object.
"""

import argparse
import json
import math
import time
from dataclasses import replace
from types import MappingProxyType

import numpy as np

from harmony.evaluation import RulesMethod, build_queries, evaluate
from harmony.resources import DEFAULT_RULES, DEMO_DIR
from harmony.rules import load_rules
from harmony.shop.events import read_events
from harmony.shop.store import Store

#: Multipliers tried for each parameter.
FACTORS = (0.5, 0.75, 1.33, 2.0)
#: A change is kept only when the tuning AUC rises by more than this.
MIN_GAIN = 0.001
#: Rules whose weight is searched (the analogous weight is the fixed reference).
WEIGHTS = ("complementary", "split_complementary", "triadic", "clash", "neutral_anchor")
#: Searched only with ``--with-lightness``.
LIGHTNESS_WEIGHTS = ("lightness_step", "lightness_contrast")
#: Hue rules whose spread is searched (centres stay fixed). The analogous and complementary
#: spreads are not: they are set so that Munsell neighbours (12-28 degrees apart in CAM02-UCS) and
#: complements (160-173 degrees apart) fall well inside their bumps, which tests/test_rules.py
#: checks on the renotation data; the narrower spreads the demo prefers fail those checks.
SPREADS = ("clash",)


def split_sessions(log, rng):
    """Two logs with disjoint halves of the sessions, drawn by ``rng``."""
    sessions = sorted({ev.session for ev in log.events})
    pick = rng.permutation(len(sessions))
    first = {sessions[i] for i in pick[: len(sessions) // 2]}
    a = replace(log, events=tuple(ev for ev in log.events if ev.session in first))
    b = replace(log, events=tuple(ev for ev in log.events if ev.session not in first))
    return a, b


def _with_rule(rules, name, **changes):
    new = dict(rules.rules)
    new[name] = replace(new[name], **changes)
    return replace(rules, rules=MappingProxyType(new), _cache={})


def _pairs_all_ones(rules):
    pairs = {
        key: replace(sec, weights=MappingProxyType({n: 1.0 for n in sec.weights}))
        for key, sec in rules.pairs.items()
    }
    return replace(rules, pairs=MappingProxyType(pairs), _cache={})


def parameters(rules, with_lightness=False):
    """The searched parameters as ``(label, getter, setter)``, present in ``rules`` only."""
    out = []
    for name in WEIGHTS + (LIGHTNESS_WEIGHTS if with_lightness else ()):
        if name in rules.rules:
            out.append((f"rule.{name}.weight", lambda r, n=name: r.rules[n].weight,
                        lambda r, v, n=name: _with_rule(r, n, weight=v)))
    for name in SPREADS:
        if name in rules.rules:
            out.append((f"rule.{name}.spread", lambda r, n=name: r.rules[n].spread,
                        lambda r, v, n=name: _with_rule(r, n, spread=v)))
    return out


def mean_auc(rules, queries, palettes, products):
    """Mean AUC over query products of the rules method on ``queries``."""
    method = RulesMethod(rules, palettes, name="rules")
    result = evaluate(queries, [method], products, np.random.default_rng(0), resamples=1)
    return result.results[0].auc


def flat_queries(rules, queries, palettes, by_id):
    """Queries whose candidates all get the same raw score, and the raw scores of all pairs."""
    method = RulesMethod(rules, palettes)
    flat, raws = 0, []
    for q in queries.queries:
        s = method(by_id[q.product], [by_id[c] for c in q.candidates])
        if rules.pairs_with(by_id[q.product].category, by_id[q.candidates[0]].category):
            raws.append(s)
            flat += int(np.ptp(s) < 1e-12)
    return flat, np.concatenate(raws) if raws else np.zeros(0)


def tune(rules, tuning, held, palettes, products, rounds=2, with_lightness=False, log=print):
    """Coordinate search; returns the tuned rules and the steps taken."""
    score = lambda r: (mean_auc(r, tuning, palettes, products), mean_auc(r, held, palettes, products))
    best, (t_best, h_best) = rules, score(rules)
    steps = [("start", None, t_best, h_best)]
    log(f"{'step':<38} {'value':>8} {'tuning AUC':>11} {'held-out AUC':>13}")
    log(f"{'start':<38} {'':>8} {t_best:11.4f} {h_best:13.4f}")
    for rnd in range(rounds):
        moved = False
        for label, get, set_ in parameters(best, with_lightness):
            current = get(best)
            trials = []
            for v in sorted({round(current * f, 3) for f in FACTORS}):
                cand = set_(best, v)
                trials.append((mean_auc(cand, tuning, palettes, products), v, cand))
            t, v, cand = max(trials, key=lambda x: x[0])
            if t > t_best + MIN_GAIN:
                h = mean_auc(cand, held, palettes, products)
                best, t_best, h_best, moved = cand, t, h, True
                steps.append((label, v, t, h))
                log(f"{f'round {rnd + 1}: {label}':<38} {v:8.3g} {t:11.4f} {h:13.4f}")
        if not moved:
            break
    return best, steps


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--db", required=True, help="store written by 'harmony demo --out-dir DIR'")
    parser.add_argument("--events", default=str(DEMO_DIR / "shop" / "events.csv"))
    parser.add_argument("--rules", default=str(DEFAULT_RULES))
    parser.add_argument("--seed", type=int, default=7, help="seed of the session split")
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--with-lightness", action="store_true", help="also search the lightness rules' weights")
    args = parser.parse_args(argv)

    started = time.perf_counter()
    with Store(args.db) as store:
        products, palettes = store.products(), store.palettes()
    by_id = {p.id: p for p in products}
    log = read_events(args.events, known_products=set(by_id))
    half_a, half_b = split_sessions(log, np.random.default_rng(args.seed))
    tuning = build_queries(half_a, products, palettes)
    held = build_queries(half_b, products, palettes)
    rules = load_rules(args.rules)
    print(f"{args.rules}: {len(tuning.queries)} tuning queries ({tuning.query_products} query products), "
          f"{len(held.queries)} held-out queries ({held.query_products} query products), split seed {args.seed}")

    tuned, steps = tune(rules, tuning, held, palettes, by_id, rounds=args.rounds, with_lightness=args.with_lightness)

    ones = _pairs_all_ones(tuned)
    pairs_cmp = {
        "as written": (mean_auc(tuned, tuning, palettes, by_id), mean_auc(tuned, held, palettes, by_id)),
        "all 1": (mean_auc(ones, tuning, palettes, by_id), mean_auc(ones, held, palettes, by_id)),
    }
    print("\npair multipliers (tuned rules)   tuning AUC  held-out AUC")
    for k, (t, h) in pairs_cmp.items():
        print(f"{k:<32} {t:10.4f} {h:13.4f}")

    all_queries = build_queries(log, products, palettes)
    flat_before, _ = flat_queries(rules, all_queries, palettes, by_id)
    flat_after, _ = flat_queries(tuned, all_queries, palettes, by_id)
    _, raws = flat_queries(tuned, tuning, palettes, by_id)
    p5, p50, p95 = np.quantile(raws, [0.05, 0.5, 0.95])
    scale = (p95 - p5) / (2.0 * math.log(4.0))  # p5 -> 0.2, p95 -> 0.8
    print(f"\nqueries (whole log) whose candidates all tie: {flat_before} before, {flat_after} after "
          f"of {len(all_queries.queries)}")
    print(f"raw scores of the tuning half's pairs: 5th {p5:.3f}, median {p50:.3f}, 95th {p95:.3f} "
          f"-> midpoint {p50:.3f}, scale {scale:.3f}")

    print("\ntuned values:")
    for label, get, _ in parameters(tuned, args.with_lightness):
        print(f"  {label} = {get(tuned):g}  (was {get(rules):g})")
    out = {
        "rules": args.rules,
        "seed": args.seed,
        "tuning_queries": len(tuning.queries),
        "held_out_queries": len(held.queries),
        "start": {"tuning_auc": steps[0][2], "held_out_auc": steps[0][3]},
        "tuned": {"tuning_auc": steps[-1][2], "held_out_auc": steps[-1][3]},
        "steps": [{"parameter": s[0], "value": s[1], "tuning_auc": s[2], "held_out_auc": s[3]} for s in steps[1:]],
        "values": {label: get(tuned) for label, get, _ in parameters(tuned, args.with_lightness)},
        "pair_multipliers": {k: {"tuning_auc": t, "held_out_auc": h} for k, (t, h) in pairs_cmp.items()},
        "flat_queries": {"before": flat_before, "after": flat_after, "of": len(all_queries.queries)},
        "score_midpoint": round(float(p50), 3),
        "score_scale": round(float(scale), 3),
        "seconds": round(time.perf_counter() - started, 1),
    }
    print(json.dumps(out))


if __name__ == "__main__":
    main()
