"""Regenerate the README's evaluation tables (deterministic; prints Markdown, then one JSON line).

Table 1, on the demo shop's simulated shoppers (harmony.demo.shoppers): every method on the
held-out sessions of a seeded session split, with the simulator's own expected appeal as the
ceiling row, and the rules that `harmony tune` fits on the training sessions.

Table 2: Spearman agreement (95 % bootstrap interval over pairs) of each shipped rules file's
[default] section with the Ou & Luo (2006) model, on every pair of 110 Munsell renotation colours
(colour-science) and on random in-gamut sRGB pairs (harmony.evaluation.agreement). It also prints
the score map the defaults take from the Munsell pairs.

Run: ``python benchmarks/evaluation_tables.py [--db shop.db]`` (extracts the demo shop into a
temporary store when no --db is given). Needs the test extra (colour-science).
"""

import argparse
import json
import math
import sys
import tempfile
from pathlib import Path

import numpy as np

from harmony.demo.shoppers import TasteMethod
from harmony.evaluation import RulesMethod, build_queries, evaluate, standard_methods
from harmony.evaluation.agreement import RANDOM_PAIRS, agreement, all_pairs, munsell_renotation_jab, random_srgb_jab
from harmony.evaluation.tune import split_log, tune_rules
from harmony.resources import DEFAULT_RULES, DEMO_DIR, RULES_DIR
from harmony.rules import load_rules
from harmony.shop.events import read_events
from harmony.shop.store import Store

SEED = 0


def _ci(lo, hi):
    return f"{lo:.3f}-{hi:.3f}"


def evaluation_table(db, events, progress):
    with Store(db) as store:
        products, palettes = store.products(), store.palettes()
    log = read_events(events, known_products={p.id for p in products})
    rules = load_rules(DEFAULT_RULES)
    tuned = tune_rules(rules, log, products, palettes, split="session", rng=np.random.default_rng(SEED),
                       resamples=1000, progress=progress)
    _, held = split_log(log, "session", np.random.default_rng(SEED))  # the same split as tune's
    queries = build_queries(held, products, palettes)
    methods = [RulesMethod(rules, palettes, name="default rules"),
               RulesMethod(tuned.rules, palettes, name="default rules tuned on the training sessions")]
    methods += standard_methods([], palettes, products)
    methods.append(TasteMethod(palettes, products, name="ceiling: the simulated shoppers' own taste"))
    result = evaluate(queries, methods, products, np.random.default_rng(SEED), resamples=1000, progress=progress)
    lines = [f"Held-out half of the sessions ({tuned.held_sessions} of {tuned.held_sessions + tuned.train_sessions}; "
             f"{result.query_products} query products, {result.queries} queries), simulated shoppers:", "",
             "| method | AUC | AUC 95 % CI | NDCG@10 | NDCG@10 95 % CI | hit@10 | hit@10 95 % CI |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for r in result.results:
        lines.append(f"| {r.name} | {r.auc:.3f} | {_ci(*r.auc_ci)} | {r.ndcg_at_10:.3f} | {_ci(*r.ndcg_ci)} | "
                     f"{r.hit_at_10:.3f} | {_ci(*r.hit_ci)} |")
    m, (lo, hi) = tuned.difference["auc"]
    lines += ["", f"Tuning changed the held-out AUC by {m:+.3f} (paired 95 % interval {lo:+.3f} to {hi:+.3f}; "
              f"{'within noise' if tuned.within_noise else 'beyond noise'}). Tuned weights: "
              + ", ".join(f"{n} {a:g} -> {b:g}" for n, (a, b) in tuned.weights.items() if a != b) + "."]
    data = {r.name: {"auc": r.auc, "auc_ci": list(r.auc_ci), "ndcg_at_10": r.ndcg_at_10, "hit_at_10": r.hit_at_10}
            for r in result.results}
    data["tune_auc_difference"] = {"mean": m, "ci": [lo, hi], "within_noise": tuned.within_noise}
    return "\n".join(lines), data


def agreement_table():
    munsell = munsell_renotation_jab()
    i, j = all_pairs(len(munsell))
    rng = np.random.default_rng(2)
    a, b = random_srgb_jab(RANDOM_PAIRS, rng), random_srgb_jab(RANDOM_PAIRS, rng)
    lines = ["| rules file | Munsell renotation pairs | 95 % CI | random in-gamut pairs | 95 % CI |",
             "| --- | --- | --- | --- | --- |"]
    data = {}
    for path in sorted(Path(RULES_DIR).glob("*.toml")):
        pr = load_rules(path).default_rules()
        m = agreement(pr, munsell[i], munsell[j], np.random.default_rng(SEED))
        r = agreement(pr, a, b, np.random.default_rng(SEED))
        lines.append(f"| {path.name} | {m.rho:.3f} | {_ci(*m.ci)} | {r.rho:.3f} | {_ci(*r.ci)} |")
        data[path.name] = {"munsell": m.rho, "munsell_ci": list(m.ci), "random": r.rho, "random_ci": list(r.ci)}
    raw = load_rules(DEFAULT_RULES).default_rules().pairwise(munsell[i], munsell[j])
    p5, p50, p95 = np.quantile(raw, [0.05, 0.5, 0.95])
    scale = (p95 - p5) / (2 * math.log(4.0))
    note = (f"{len(i)} Munsell pairs ({len(munsell)} colours), {RANDOM_PAIRS} random pairs. Score map of "
            f"default.toml measured on the Munsell pairs: midpoint {p50:.3f}, scale {scale:.3f}.")
    data["score_map"] = {"midpoint": float(p50), "scale": float(scale)}
    return "\n".join(lines) + "\n\n" + note, data


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--db", help="store of the demo shop (default: extract into a temporary one)")
    parser.add_argument("--events", default=str(DEMO_DIR / "shop" / "events.csv"))
    args = parser.parse_args(argv)
    progress = sys.stderr.isatty()
    with tempfile.TemporaryDirectory() as tmp:
        db = args.db
        if db is None:
            from harmony.shop.engine import run_extraction

            db = str(Path(tmp) / "shop.db")
            run_extraction(DEMO_DIR / "shop" / "catalogue.csv", db, progress=progress)
        table1, d1 = evaluation_table(db, args.events, progress)
    table2, d2 = agreement_table()
    print(table1 + "\n\n" + table2 + "\n")
    print(json.dumps({"evaluation": d1, "agreement": d2}))


if __name__ == "__main__":
    main()
