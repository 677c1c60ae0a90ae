"""Fit a rules file's weights to a shop's own interaction log, and prove it on held-out sessions.

The log is split in two (by time: the earlier sessions train, the later ones are held out; or by
session: a seeded random half of the sessions). On the training half, the rule weights are fitted
by a coordinate search that maximises the mean AUC over query products (:mod:`harmony.evaluation`);
the score map (``[score] midpoint`` and ``scale``, which change no ranking) is then *measured* on
the training half's raw scores (median to 0.5, 5th and 95th percentiles to 0.2 and 0.8). Both
rules files are then evaluated on the held-out half, with bootstrap intervals over query products
and a paired interval of the difference (the same resampled query products for both): when that interval
covers 0, the gain is within noise and the report says so.

The raw score is linear in the rule weights: ``raw = sum_r weight_r * multiplier_r(pair) *
term_r``. The terms of every candidate are computed once per query, so each trial of the search
costs one small matrix product per query rather than a kernel evaluation.

What is fitted: each ``[rule.NAME] weight`` used by a scored section, except the reference (the
rule with the largest absolute weight: scaling every weight at once changes no ranking). A weight
keeps its sign and may drop to 0. Hue centres and spreads, the neutral threshold and the pair
multipliers stay as written (a stylist's intent; too many for a log of a few hundred sessions).

References
----------
B. Efron, R. J. Tibshirani (1993). An Introduction to the Bootstrap. Chapman & Hall, ch. 13
    (percentile intervals; paired resampling of the same units for a difference).
"""

import datetime as _dt
import math
import re
from dataclasses import dataclass, replace
from types import MappingProxyType

import numpy as np

from harmony.errors import HarmonyError
from harmony.evaluation.core import evaluate
from harmony.evaluation.methods import RulesMethod
from harmony.evaluation.metrics import CUTOFF, auc_table, metric_table
from harmony.evaluation.queries import build_queries
from harmony.rules import parse_rules

__all__ = [
    "FACTORS",
    "SPLITS",
    "TuneResult",
    "split_log",
    "query_terms",
    "fit_weights",
    "measure_score_map",
    "paired_difference",
    "tune_rules",
    "tuned_rules_text",
    "tune_note",
]

#: How a log is split: "time" (earlier sessions train) or "session" (seeded random half).
SPLITS = ("time", "session")
#: Multipliers tried for each weight in the coordinate search (and 0, to switch a rule off).
FACTORS = (0.0, 0.25, 0.5, 0.75, 1.33, 2.0, 4.0)
#: A step is kept only when the training AUC rises by more than this.
MIN_GAIN = 1e-4


def split_log(log, how, rng, train_share=0.5):
    """Two logs with disjoint sessions: ``(train, held_out)``.

    Parameters
    ----------
    log : harmony.shop.events.EventLog
    how : {"time", "session"}
        ``"time"``: sessions ordered by their first timestamp, the earliest ``train_share`` train
        (sessions without timestamps refuse this split); ``"session"``: a random subset drawn by ``rng``.
    rng : numpy.random.Generator
    train_share : float
        In (0, 1).

    Raises
    ------
    HarmonyError
        For an unknown split, a time split of a log without timestamps, or too few sessions.
    """
    if how not in SPLITS:
        raise HarmonyError(f"--split: expected one of {', '.join(SPLITS)}, got {how!r}")
    first = {}
    for ev in log.events:
        t = ev.timestamp
        if ev.session not in first:
            first[ev.session] = t
        elif t is not None and (first[ev.session] is None or t < first[ev.session]):
            first[ev.session] = t
    sessions = sorted(first)
    if len(sessions) < 4:
        raise HarmonyError(f"{log.path}: {len(sessions)} sessions are too few to split into training and held-out halves")
    if how == "time":
        missing = [s for s in sessions if first[s] is None]
        if missing:
            raise HarmonyError(f"{log.path}: session {missing[0]!r} has no timestamp; use --split session")
        ordered = sorted(sessions, key=lambda s: (first[s], s))
    else:
        ordered = [sessions[i] for i in rng.permutation(len(sessions))]
    cut = int(round(len(ordered) * float(train_share)))
    train = set(ordered[:cut])
    a = replace(log, events=tuple(ev for ev in log.events if ev.session in train))
    b = replace(log, events=tuple(ev for ev in log.events if ev.session not in train))
    return a, b


@dataclass(frozen=True)
class _QueryTerms:
    terms: np.ndarray  # (rules, candidates): unweighted rule term x pair multiplier, per candidate
    labels: np.ndarray
    gains: np.ndarray
    anchor: int


def _stack(palettes, ids):
    jab = np.concatenate([palettes[i].jab for i in ids])
    w = np.concatenate([palettes[i].weights for i in ids])
    starts = np.r_[0, np.cumsum([len(palettes[i].weights) for i in ids])[:-1]]
    return jab, w, starts


def query_terms(rules, queries, palettes, products, progress=False):
    """Each query's candidates as per-rule raw-score terms, so that ``weights @ terms`` is the raw score.

    Returns
    -------
    names : tuple of str
        The rules of ``rules`` (file order).
    items : list of _QueryTerms
        One per query of a scored pair of categories; the others rank every candidate equally
        whatever the weights, so they are left out of the fit.
    query_products : int
        Number of distinct query products among ``items``.
    """
    names = tuple(rules.rules)
    index = {n: k for k, n in enumerate(names)}
    by_id = products if isinstance(products, dict) else {p.id: p for p in products}
    work = queries.queries
    if progress:
        from tqdm import tqdm

        work = tqdm(work, desc="terms", unit="query", leave=False)
    items, anchor_ids = [], {}
    for q in work:
        anchor = by_id[q.product]
        cands = [by_id[c] for c in q.candidates]
        if not rules.pairs_with(anchor.category, cands[0].category):
            continue
        pr = rules.for_pair(anchor.category, cands[0].category)
        pa = palettes[anchor.id]
        jab, w, starts = _stack(palettes, list(q.candidates))
        t = np.zeros((len(names), len(cands)))
        for (name, k), (rule, _) in zip(pr.kernel_terms(pa.jab, jab), pr.terms):
            if rule.weight == 0.0:
                continue  # the term cannot be told from 0; such a rule is never fitted
            # k is weight x multiplier x term: divided by the rule's weight, multiplier x term.
            t[index[name]] = np.add.reduceat((pa.weights @ k) * w, starts) / rule.weight
        items.append(_QueryTerms(t, q.gains > 0, q.gains, anchor_ids.setdefault(q.product, len(anchor_ids))))
    return names, items, len(anchor_ids)


def _mean_auc(weights, items, n_anchors):
    v = auc_table(np.concatenate([weights @ it.terms for it in items]), np.concatenate([it.labels for it in items]),
                  [it.labels.size for it in items])
    kept = ~np.isnan(v)
    anchors = np.array([it.anchor for it in items], dtype=np.int64)[kept]
    sums = np.bincount(anchors, weights=v[kept], minlength=n_anchors)  # in item order, as a loop adds
    counts = np.bincount(anchors, minlength=n_anchors).astype(float)
    ok = counts > 0
    return float((sums[ok] / counts[ok]).mean()) if ok.any() else math.nan


def fit_weights(names, weights, items, n_anchors, fixed=(), rounds=3, progress=False):
    """Coordinate search of the weights on the training items: ``(weights, training AUC, steps)``.

    Each free weight in turn is multiplied by each of :data:`FACTORS` (the others held) and the
    best value is kept when the mean training AUC rises by more than :data:`MIN_GAIN`; a weight at
    0 is tried back at its first value. Rounds stop early when nothing moves.
    """
    w = np.array(weights, dtype=float)
    start = w.copy()
    best = _mean_auc(w, items, n_anchors)
    steps = []
    free = [k for k, n in enumerate(names) if n not in fixed and start[k] != 0.0]
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=rounds * len(free), desc="tune", unit="weight", leave=False)
    for _ in range(rounds):
        moved = False
        for k in free:
            base = w[k] if w[k] != 0.0 else start[k]
            trials = sorted({round(base * f, 4) + 0.0 for f in FACTORS} - {w[k]})  # + 0.0: no -0
            for v in trials:
                cand = w.copy()
                cand[k] = v
                a = _mean_auc(cand, items, n_anchors)
                if a > best + MIN_GAIN:
                    best, w, moved = a, cand, True
                    steps.append((names[k], float(v), a))
            if bar is not None:
                bar.update(1)
        if not moved:
            break
    if bar is not None:
        bar.close()
    return w, best, steps


def measure_score_map(weights, items):
    """``(midpoint, scale)``: the median raw score of the items' candidates to 0.5, the 5th and
    95th percentiles to 0.2 and 0.8 (rounded to 3 decimals; scale at least 1e-3)."""
    raws = np.concatenate([weights @ it.terms for it in items]) if items else np.zeros(1)
    p5, p50, p95 = np.quantile(raws, [0.05, 0.5, 0.95])
    scale = max((p95 - p5) / (2.0 * math.log(4.0)), 1e-3)
    return round(float(p50), 3), round(float(scale), 3)


def _per_anchor_metrics(rules, queries, palettes, products):
    """(anchor ids, (anchors, 3) array of AUC, NDCG@10, hit@10 per anchor)."""
    method = RulesMethod(rules, palettes)
    by_id = products if isinstance(products, dict) else {p.id: p for p in products}
    scores = [method(by_id[q.product], [by_id[c] for c in q.candidates]) for q in queries.queries]
    v = metric_table(np.concatenate(scores), np.concatenate([q.gains for q in queries.queries]),
                     [len(q.candidates) for q in queries.queries], CUTOFF)
    owners = [q.product for q in queries.queries]
    ids = sorted(set(owners))
    pos = {a: i for i, a in enumerate(ids)}
    owner = np.array([pos[a] for a in owners])
    out = np.stack([np.bincount(owner, weights=v[:, j], minlength=len(ids)) / np.bincount(owner, minlength=len(ids))
                    for j in range(3)], axis=1)
    return ids, out


def paired_difference(before, after, queries, palettes, products, rng, resamples=1000, level=0.95):
    """Mean of ``after - before`` per metric over query products, and its paired bootstrap interval.

    Returns
    -------
    dict of str to (float, (float, float))
        Keys ``auc``, ``ndcg_at_10``, ``hit_at_10``.
    """
    _, a = _per_anchor_metrics(before, queries, palettes, products)
    _, b = _per_anchor_metrics(after, queries, palettes, products)
    d = b - a
    draws = rng.integers(0, len(d), size=(int(resamples), len(d)))
    boot = d[draws].mean(axis=1)  # (resamples, 3)
    alpha = (1.0 - level) / 2.0
    lo, hi = np.quantile(boot, alpha, axis=0), np.quantile(boot, 1.0 - alpha, axis=0)
    keys = ("auc", "ndcg_at_10", "hit_at_10")
    return {k: (float(d[:, j].mean()), (float(lo[j]), float(hi[j]))) for j, k in enumerate(keys)}


@dataclass(frozen=True)
class TuneResult:
    """What :func:`tune_rules` found.

    Attributes
    ----------
    rules : RuleSet
        The tuned rules.
    weights : dict of str to (float, float)
        Each rule's weight before and after.
    score_map : ((float, float), (float, float))
        ``(midpoint, scale)`` before and after.
    fixed : tuple of str
        Rules whose weight was held (the reference, and rules no scored section uses).
    train_auc : (float, float)
        Mean training AUC before and after.
    evaluation : harmony.evaluation.Evaluation
        Held-out results of the rules before (row 0) and after (row 1).
    difference : dict
        :func:`paired_difference` on the held-out half.
    within_noise : bool
        True when the AUC difference's interval covers 0 (or the tuned rules are not better).
    steps : list of (str, float, float)
        The search's kept steps: rule, new weight, training AUC.
    train_sessions, held_sessions : int
    """

    rules: object
    weights: dict
    score_map: tuple
    fixed: tuple
    train_auc: tuple
    evaluation: object
    difference: dict
    within_noise: bool
    steps: list
    train_sessions: int
    held_sessions: int


def _with_weights(rules, names, weights, score_map):
    new = dict(rules.rules)
    for name, w in zip(names, weights):
        if new[name].weight != w:
            new[name] = replace(new[name], weight=float(w))
    midpoint, scale = score_map
    return replace(rules, rules=MappingProxyType(new), midpoint=float(midpoint), scale=float(scale), _cache={})


def tune_rules(rules, log, products, palettes, split="session", rng=None, resamples=1000, rounds=3, progress=False):
    """Split, fit on the training half, evaluate both rules files on the held-out half.

    Parameters
    ----------
    rules : RuleSet
    log : EventLog
    products : list of Product
    palettes : mapping of str to Palette
    split : {"time", "session"}
    rng : numpy.random.Generator
        Draws the session split (for ``"session"``) and the bootstrap resamples.
    resamples : int
    rounds : int
    progress : bool

    Returns
    -------
    TuneResult
    """
    rng = np.random.default_rng(0) if rng is None else rng
    train_log, held_log = split_log(log, split, rng)
    train_q = build_queries(train_log, products, palettes)
    held_q = build_queries(held_log, products, palettes)
    if not train_q.queries or not held_q.queries:
        which = "training" if not train_q.queries else "held-out"
        raise HarmonyError(f"{log.path}: the {which} half of the log forms no query; nothing to tune on")
    names, items, n_anchors = query_terms(rules, train_q, palettes, products, progress=progress)
    if not items:
        raise HarmonyError(f"{log.path}: no query of the training half is of a pair of categories the rules score")
    used = {n for it in items for n, row in zip(names, it.terms) if np.any(row)}
    start = np.array([rules.rules[n].weight for n in names], dtype=float)
    candidates = [n for n in names if n in used]
    reference = max(candidates, key=lambda n: abs(rules.rules[n].weight)) if candidates else None
    fixed = tuple(n for n in names if n not in used or n == reference)
    w, train_after, steps = fit_weights(names, start, items, n_anchors, fixed=fixed, rounds=rounds, progress=progress)
    train_before = _mean_auc(start, items, n_anchors)
    score_map = measure_score_map(w, items)
    tuned = _with_weights(rules, names, w, score_map)

    before_m = RulesMethod(rules, palettes, name="before")
    after_m = RulesMethod(tuned, palettes, name="after")
    evaluation = evaluate(held_q, [before_m, after_m], products, rng, resamples=resamples, progress=progress)
    diff = paired_difference(rules, tuned, held_q, palettes, products, rng, resamples=resamples)
    mean, (lo, hi) = diff["auc"]
    return TuneResult(
        rules=tuned,
        weights={n: (float(a), float(b)) for n, a, b in zip(names, start, w)},
        score_map=((rules.midpoint, rules.scale), score_map),
        fixed=fixed,
        train_auc=(train_before, train_after),
        evaluation=evaluation,
        difference=diff,
        within_noise=not lo > 0.0,
        steps=steps,
        train_sessions=len({ev.session for ev in train_log.events}),
        held_sessions=len({ev.session for ev in held_log.events}),
    )


_HEADER = re.compile(r"^\s*\[\s*([^\[\]]+?)\s*\]\s*(#.*)?$")
_KEY = re.compile(r"^(\s*)(weight|midpoint|scale)(\s*=\s*)([^#]*?)(\s*#.*)?$")


def _fmt(v):
    return f"{v:.4g}" if v != 0 else "0.0"


def tuned_rules_text(text, result, note, where="<tuned>"):
    """The rules file ``text`` with the tuned numbers put in, each with a comment ``note``.

    Only ``weight`` lines of ``[rule.NAME]`` tables whose weight changed, and ``[score]`` midpoint
    and scale, are rewritten; every other line stays as written. A file without a ``[score]``
    table gets one at the end. The result is validated with :func:`harmony.rules.parse_rules`.

    Raises
    ------
    HarmonyError
        If the rewritten text does not validate (a bug; the message names the problem).
    """
    changed = {n: b for n, (a, b) in result.weights.items() if a != b}
    (_, _), (midpoint, scale) = result.score_map
    lines = text.splitlines(keepends=True)
    table = None
    seen_score = set()
    out = []
    for line in lines:
        head = _HEADER.match(line)
        if head and not line.lstrip().startswith("[["):
            table = head.group(1).strip()
        elif line.lstrip().startswith("[["):
            table = None
        m = _KEY.match(line.rstrip("\n"))
        if m and table is not None:
            key = m.group(2)
            if table.startswith("rule.") and key == "weight" and table[5:] in changed:
                old = m.group(4).strip()
                line = f"{m.group(1)}weight = {_fmt(changed[table[5:]])}  # {note}; was {old}\n"
            elif table == "score" and key in ("midpoint", "scale"):
                old = m.group(4).strip()
                value = midpoint if key == "midpoint" else scale
                line = f"{m.group(1)}{key} = {_fmt(value)}  # {note}; measured on the training half; was {old}\n"
                seen_score.add(key)
        out.append(line)
    new = "".join(out)
    if not seen_score:
        if not new.endswith("\n"):
            new += "\n"
        new += (f"\n[score]\nmidpoint = {_fmt(midpoint)}  # {note}; measured on the training half\n"
                f"scale = {_fmt(scale)}  # {note}; measured on the training half\n")
    elif seen_score != {"midpoint", "scale"}:
        raise HarmonyError(f"{where}: [score] has only {', '.join(sorted(seen_score))}; write both midpoint and scale")
    parse_rules(new, where=where)
    return new


def tune_note(log_path, split, seed, when=None):
    """The comment beside each tuned number: the log, the split and the date."""
    when = when or _dt.date.today().isoformat()
    return f"tuned by harmony tune on {log_path} (split by {split}, seed {seed}) on {when}"
