"""Offline evaluation: how well a rules file ranks the partners that shoppers actually combined.

From an interaction log (:mod:`harmony.events`) products of *different* categories that share a
session are **positives** of each other; the gain of a positive pair is the sum over the sessions
that hold both of the weaker of the two products' event weights (a purchased sofa with a viewed
rug counts as a view). For an **anchor** product and a partner category that holds at least one
of its positives, the **candidates** are those positives and every other in-stock product of that
category (the **negatives**); every method ranks the same candidates. One such (anchor, category)
is a *query*.

Per query: AUC (positives against negatives), NDCG@10 over the graded gains, and hit@10 (a
positive in the first ten). A product's value is the mean over its queries, a method's value the
mean over anchors, and the confidence interval a percentile bootstrap over anchors (Efron &
Tibshirani 1993) with the same resampled anchors for every method, so intervals are comparable.
Coverage is the share of the log's products that had a query at all.

Ties are handled exactly, never broken by order: AUC counts a tied pair as one half, NDCG
averages the gains of tied candidates over their positions (McSherry & Najork 2008), and hit@10
is the probability of a hit under a uniformly random order of the tied candidates. The *random
order* baseline therefore ties every candidate and gives the exact expectation over random
orders, without sampling noise.

Methods
-------
rules
    The exact pair score of a rules file (:mod:`harmony.rules`, bilinear contract), anchor first.
same colours
    Negative earth mover's distance between the weighted palettes in CAM02-UCS with Euclidean
    ground distance (Rubner, Tomasi & Guibas 2000): the more alike the colours, the higher.
colour attribute
    Word overlap (Jaccard index) of the catalogue's ``colour`` attribute, when it has one.
random order
    Every candidate tied (see above).

References
----------
K. Järvelin, J. Kekäläinen (2002). Cumulated gain-based evaluation of IR techniques. ACM
    Transactions on Information Systems 20(4):422-446.
C. Burges et al. (2005). Learning to rank using gradient descent. ICML 2005 (the discount
    1/log2(rank + 1) now standard, as in scikit-learn's ``ndcg_score``; the gain here stays
    linear, as in Järvelin & Kekäläinen).
F. McSherry, M. Najork (2008). Computing information retrieval performance measures efficiently
    in the presence of tied scores. ECIR 2008, LNCS 4956:414-421.
J. A. Hanley, B. J. McNeil (1982). The meaning and use of the area under a receiver operating
    characteristic (ROC) curve. Radiology 143(1):29-36.
Y. Rubner, C. Tomasi, L. J. Guibas (2000). The Earth Mover's Distance as a metric for image
    retrieval. International Journal of Computer Vision 40(2):99-121.
B. Efron, R. J. Tibshirani (1993). An Introduction to the Bootstrap. Chapman & Hall, ch. 13.
"""

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import sparse
from scipy.optimize import linprog
from scipy.stats import rankdata

from .catalogue import normalise_category
from .errors import EventsError, HarmonyError
from .fileio import write_text_whole

__all__ = [
    "CUTOFF",
    "auc",
    "ndcg_at_k",
    "hit_at_k",
    "emd",
    "emd_one_to_many",
    "Query",
    "QuerySet",
    "build_queries",
    "RulesMethod",
    "SameColoursMethod",
    "ColourAttributeMethod",
    "RandomMethod",
    "standard_methods",
    "MethodResult",
    "Evaluation",
    "evaluate",
    "METRICS",
    "READING_NOTE",
    "result_table",
    "render_html",
    "write_html",
]

#: Rank cutoff of NDCG and hit rate: ten partners is what a "complete the room" slider shows
#: (common practice).
CUTOFF = 10

# --------------------------------------------------------------------------------------------
# Metrics of one ranked list
# --------------------------------------------------------------------------------------------


def _as_list(scores, values, name):
    s = np.asarray(scores, dtype=float)
    v = np.asarray(values, dtype=float)
    if s.ndim != 1 or v.shape != s.shape:
        raise ValueError(f"scores and {name} must be 1-D of the same length, got {s.shape} and {v.shape}")
    if not np.all(np.isfinite(s)):
        raise ValueError("scores must be finite")
    return s, v


def auc(scores, labels):
    """Area under the ROC curve: the chance that a positive outranks a negative, ties count 1/2.

    Parameters
    ----------
    scores : array_like, shape (n,)
        Higher means ranked earlier.
    labels : array_like, shape (n,)
        True (or > 0) for positives.

    Returns
    -------
    float
        In [0, 1]; NaN when there is no positive or no negative.

    Notes
    -----
    The Mann-Whitney U statistic over mid-ranks divided by n_pos * n_neg (Hanley & McNeil 1982).
    """
    s, y = _as_list(scores, labels, "labels")
    pos = y > 0
    n_pos, n_neg = int(pos.sum()), int((~pos).sum())
    if n_pos == 0 or n_neg == 0:
        return math.nan
    ranks = rankdata(s)  # mid-ranks for ties
    u = ranks[pos].sum() - n_pos * (n_pos + 1) / 2.0
    return float(u / (n_pos * n_neg))


def _tie_groups(s):
    """Order by descending score, and the start index and size of each run of equal scores."""
    order = np.argsort(-s, kind="stable")
    sorted_s = s[order]
    starts = np.flatnonzero(np.r_[True, sorted_s[1:] != sorted_s[:-1]])
    sizes = np.diff(np.r_[starts, s.size])
    return order, starts, sizes


def ndcg_at_k(scores, gains, k=CUTOFF):
    """Normalised discounted cumulated gain of the first ``k`` (Järvelin & Kekäläinen 2002).

    Parameters
    ----------
    scores : array_like, shape (n,)
        Higher means ranked earlier.
    gains : array_like, shape (n,)
        Graded relevance, >= 0 (0 for negatives).
    k : int
        Rank cutoff.

    Returns
    -------
    float
        In [0, 1]; NaN when no gain is above 0.

    Notes
    -----
    DCG@k = sum over ranks i <= k of gain_i / log2(i + 1), and NDCG@k = DCG@k divided by the
    DCG@k of the candidates sorted by gain. The gain is the graded relevance itself (linear), as
    in Järvelin & Kekäläinen and in scikit-learn's ``ndcg_score``, not the 2**rel - 1 of Burges
    et al. (2005). The discount 1/log2(i + 1) is Burges et al.'s, also scikit-learn's;
    Järvelin & Kekäläinen's original leaves the first b ranks undiscounted and divides by
    log_b(i) after them, which for b = 2 differs from it at every rank after the first.
    Candidates with equal scores share the mean of their gains at each of their positions
    (McSherry & Najork 2008), which is the expected DCG over random orders of the tie and what
    ``ndcg_score(..., ignore_ties=False)`` computes. Unlike scikit-learn, which scores a list
    without any gain as 0, this returns NaN for it (such a query is never formed).
    """
    s, g = _as_list(scores, gains, "gains")
    if np.any(g < 0):
        raise ValueError("gains must be >= 0")
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    n = s.size
    discount = np.zeros(n)
    top = min(k, n)
    discount[:top] = 1.0 / np.log2(np.arange(2, top + 2))
    ideal = float(np.sort(g)[::-1] @ discount)
    if ideal <= 0:
        return math.nan
    order, starts, sizes = _tie_groups(s)
    group_gain = np.add.reduceat(g[order], starts) / sizes
    group_discount = np.add.reduceat(discount, starts)
    return float(group_gain @ group_discount / ideal)


def hit_at_k(scores, labels, k=CUTOFF):
    """Whether a positive is among the first ``k``, in expectation over random orders of ties.

    Parameters
    ----------
    scores : array_like, shape (n,)
    labels : array_like, shape (n,)
        True (or > 0) for positives.
    k : int

    Returns
    -------
    float
        1 or 0 without ties at the cutoff; otherwise the probability of a hit when the tie that
        straddles the cutoff is ordered at random (hypergeometric). NaN without positives.
    """
    s, y = _as_list(scores, labels, "labels")
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    pos = y > 0
    if not pos.any():
        return math.nan
    order, starts, sizes = _tie_groups(s)
    group_pos = np.add.reduceat(pos[order].astype(int), starts)
    above = 0
    for size, n_pos in zip(sizes.tolist(), group_pos.tolist()):
        slots = k - above
        if slots <= 0:
            return 0.0
        if slots >= size:
            if n_pos > 0:
                return 1.0
            above += size
            continue
        # ``slots`` of the ``size`` tied candidates make the cut: P(none of them is a positive).
        return 1.0 - math.comb(size - n_pos, slots) / math.comb(size, slots)
    return 0.0


# --------------------------------------------------------------------------------------------
# Earth mover's distance between weighted palettes
# --------------------------------------------------------------------------------------------


def _signature(jab, weights, name):
    jab = np.asarray(jab, dtype=float)
    w = np.asarray(weights, dtype=float)
    if jab.ndim != 2 or jab.shape[1] != 3 or w.shape != (jab.shape[0],) or jab.shape[0] == 0:
        raise ValueError(f"{name}: colours must have shape (k, 3) with weights (k,), got {jab.shape} and {w.shape}")
    total = w.sum()
    if np.any(w < 0) or not total > 0:
        raise ValueError(f"{name}: weights must be >= 0 with a positive sum")
    return jab, w / total


def emd_one_to_many(jab_a, weights_a, others, chunk=64):
    """Earth mover's distance from one weighted palette to each of several (Rubner et al. 2000).

    Parameters
    ----------
    jab_a : array_like, shape (n, 3)
        CAM02-UCS colours of the first palette.
    weights_a : array_like, shape (n,)
        Their weights (normalised to sum 1 here).
    others : sequence of (jab (m, 3), weights (m,))
        The palettes to compare with.
    chunk : int
        Palettes solved together in one linear programme.

    Returns
    -------
    ndarray, shape (len(others),)
        Minimum cost, in CAM02-UCS ΔE, of moving the first palette's weight onto each other's,
        with Euclidean ground distance.

    Notes
    -----
    Both signatures are normalised to total weight 1, so every unit of weight moves and the EMD
    is a metric (Rubner et al. 2000, section 4.1). Each transportation problem is solved exactly
    by the HiGHS solver through ``scipy.optimize.linprog``; several problems share one call as
    independent blocks of one programme, whose optimum is the sum of the blocks' optima, so each
    block's cost is its own optimum.
    """
    a, wa = _signature(jab_a, weights_a, "first palette")
    sigs = [_signature(j, w, f"palette {i}") for i, (j, w) in enumerate(others)]
    out = np.empty(len(sigs))
    n = a.shape[0]
    for lo in range(0, len(sigs), max(1, int(chunk))):
        block = sigs[lo : lo + max(1, int(chunk))]
        costs, rows, cols, rhs, owners = [], [], [], [], []
        var = con = 0
        for j, (b, wb) in enumerate(block):
            m = b.shape[0]
            cost = np.sqrt(((a[:, None, :] - b[None, :, :]) ** 2).sum(axis=-1)).ravel()
            idx = var + np.arange(n * m)
            # Row sums: flow leaving colour i of the first palette equals its weight.
            rows.append(con + np.repeat(np.arange(n), m))
            cols.append(idx)
            # Column sums: flow arriving at colour l of the other palette equals its weight.
            rows.append(con + n + np.tile(np.arange(m), n))
            cols.append(idx)
            rhs += [wa, wb]
            costs.append(cost)
            owners.append(np.full(n * m, j))
            var += n * m
            con += n + m
        r = np.concatenate(rows)
        c = np.concatenate(cols)
        a_eq = sparse.csr_array((np.ones(r.size), (r, c)), shape=(con, var))
        objective = np.concatenate(costs)
        result = linprog(objective, A_eq=a_eq, b_eq=np.concatenate(rhs), bounds=(0, None), method="highs")
        if result.status != 0:  # cannot happen for balanced transport problems; never return a guess
            raise RuntimeError(f"transport problem not solved: {result.message}")
        out[lo : lo + len(block)] = np.bincount(np.concatenate(owners), weights=objective * result.x, minlength=len(block))
    return out


def emd(jab_a, weights_a, jab_b, weights_b):
    """Earth mover's distance between two weighted palettes in CAM02-UCS (Rubner et al. 2000).

    See :func:`emd_one_to_many`.

    >>> round(emd([[50, 0, 0], [50, 10, 0]], [0.6, 0.4], [[50, 0, 0], [50, 0, 10]], [0.3, 0.7]), 4)
    8.6569
    """
    return float(emd_one_to_many(jab_a, weights_a, [(jab_b, weights_b)])[0])


# --------------------------------------------------------------------------------------------
# Queries from a log
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Query:
    """One anchor product and the candidates of one partner category.

    Attributes
    ----------
    anchor : str
        Product id.
    category : str
        The partner category, normalised.
    candidates : tuple of str
        Product ids: the positives first (sorted by id), then the negatives (sorted by id).
    gains : ndarray, shape (len(candidates),)
        Gain of each candidate, > 0 exactly for positives.
    """

    anchor: str
    category: str
    candidates: tuple
    gains: np.ndarray

    @property
    def positives(self):
        return int(np.count_nonzero(self.gains > 0))


@dataclass(frozen=True)
class QuerySet:
    """The queries of one log against one catalogue.

    Attributes
    ----------
    queries : tuple of Query
        Sorted by anchor, then category.
    events : int
        Interactions used (known product, weight above 0).
    products_seen : int
        Distinct products of the log that could be evaluated (known, and with a palette).
    anchors : int
        Of those, the products with at least one query (a positive of another category and at
        least one negative beside it).
    no_palette : tuple of str
        Products of the log left out because the store holds no palette for them.
    """

    queries: tuple
    events: int
    products_seen: int
    anchors: int
    no_palette: tuple = ()

    @property
    def coverage(self):
        """Share of the log's products that had a query; NaN for an empty log."""
        return self.anchors / self.products_seen if self.products_seen else math.nan


def build_queries(log, products, palettes=None):
    """Turn a log into queries over a catalogue.

    Parameters
    ----------
    log : harmony.events.EventLog
    products : iterable of harmony.catalogue.Product
        The catalogue (a store's ``products()``).
    palettes : mapping of str to Palette, optional
        When given, products without a palette take no part (neither as anchor nor candidate),
        so every colour method ranks the same candidates.

    Returns
    -------
    QuerySet
    """
    by_id = {p.id: p for p in products}
    usable = set(by_id) if palettes is None else {pid for pid in by_id if pid in palettes}
    category = {pid: normalise_category(by_id[pid].category) for pid in usable}
    in_stock = {}
    for pid in sorted(usable):
        if by_id[pid].in_stock():
            in_stock.setdefault(category[pid], []).append(pid)

    gains = {}  # (anchor, partner) -> gain
    seen, no_palette = set(), set()
    for session, weights in log.sessions().items():
        items = []
        for pid, w in weights.items():
            if pid not in by_id:
                continue
            if pid not in usable:
                no_palette.add(pid)
                continue
            items.append((pid, w))
            seen.add(pid)
        for i, (a, wa) in enumerate(items):
            for b, wb in items[i + 1 :]:
                if category[a] == category[b]:
                    continue
                g = min(wa, wb)
                gains[(a, b)] = gains.get((a, b), 0.0) + g
                gains[(b, a)] = gains.get((b, a), 0.0) + g
    n_events = sum(1 for ev in log.events if ev.product in usable)

    positives = {}  # anchor -> category -> {partner: gain}
    for (a, b), g in gains.items():
        positives.setdefault(a, {}).setdefault(category[b], {})[b] = g
    queries, anchors = [], set()
    for a in sorted(positives):
        for cat in sorted(positives[a]):
            pos = positives[a][cat]
            negatives = [pid for pid in in_stock.get(cat, ()) if pid not in pos and pid != a]
            if not negatives:
                continue
            ids = tuple(sorted(pos)) + tuple(negatives)
            g = np.array([pos.get(pid, 0.0) for pid in ids])
            g.setflags(write=False)
            queries.append(Query(anchor=a, category=cat, candidates=ids, gains=g))
            anchors.add(a)
    return QuerySet(
        queries=tuple(queries),
        events=n_events,
        products_seen=len(seen),
        anchors=len(anchors),
        no_palette=tuple(sorted(no_palette)),
    )


# --------------------------------------------------------------------------------------------
# Methods: each scores the candidates of a query, higher = ranked earlier
# --------------------------------------------------------------------------------------------


def _stack(palettes, ids):
    jab = np.concatenate([palettes[i].jab for i in ids])
    w = np.concatenate([palettes[i].weights for i in ids])
    sizes = np.array([len(palettes[i]) for i in ids])
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    return jab, w, starts


@dataclass(frozen=True, eq=False)
class RulesMethod:
    """Rank by the raw pair score of a rules file, the anchor's category first.

    The raw score ``w_a @ kernel(jab_a, jab_b) @ w_b`` ranks exactly as the score in [0, 1], which
    is strictly increasing in it. Pairs the file does not score tie.
    """

    rules: object  # harmony.rules.RuleSet
    palettes: dict
    name: str = ""
    kind: str = field(default="rules", init=False)

    def __call__(self, anchor, candidates):
        cat_a, cat_b = anchor.category, candidates[0].category
        if not self.rules.pairs_with(cat_a, cat_b):
            return np.zeros(len(candidates))
        pair = self.rules.for_pair(cat_a, cat_b)
        pa = self.palettes[anchor.id]
        jab, w, starts = _stack(self.palettes, [c.id for c in candidates])
        per_colour = (pa.weights @ pair.kernel(pa.jab, jab)) * w
        return np.add.reduceat(per_colour, starts)


@dataclass(frozen=True, eq=False)
class SameColoursMethod:
    """Rank by palette likeness: minus the earth mover's distance (Rubner et al. 2000).

    The distance is symmetric, and a pair usually comes back with its roles swapped (when the
    partner is an anchor too), so each unordered pair is solved once and remembered.
    """

    palettes: dict
    name: str = "same colours (EMD)"
    kind: str = field(default="baseline", init=False)
    _known: dict = field(default_factory=dict, init=False, repr=False)

    def __call__(self, anchor, candidates):
        keys = [(min(anchor.id, c.id), max(anchor.id, c.id)) for c in candidates]
        todo = [(key, c.id) for key, c in zip(keys, candidates) if key not in self._known]
        if todo:
            pa = self.palettes[anchor.id]
            others = [(self.palettes[cid].jab, self.palettes[cid].weights) for _, cid in todo]
            self._known.update(zip([key for key, _ in todo], emd_one_to_many(pa.jab, pa.weights, others).tolist()))
        return -np.array([self._known[key] for key in keys])


def _colour_words(product, attribute):
    text = product.attributes.get(attribute, "") if product.attributes else ""
    return frozenset(normalise_category(text).replace("/", " ").replace(",", " ").replace("-", " ").split())


@dataclass(frozen=True, eq=False)
class ColourAttributeMethod:
    """Rank by the overlap of the catalogue's colour words (Jaccard index; no words scores 0)."""

    attribute: str = "colour"
    name: str = "colour attribute"
    kind: str = field(default="baseline", init=False)

    def __call__(self, anchor, candidates):
        mine = _colour_words(anchor, self.attribute)
        out = np.zeros(len(candidates))
        if not mine:
            return out
        for i, c in enumerate(candidates):
            theirs = _colour_words(c, self.attribute)
            if theirs:
                out[i] = len(mine & theirs) / len(mine | theirs)
        return out


@dataclass(frozen=True, eq=False)
class RandomMethod:
    """Random order: every candidate tied, so the metrics give their exact expectation."""

    name: str = "random order"
    kind: str = field(default="baseline", init=False)

    def __call__(self, anchor, candidates):
        return np.zeros(len(candidates))


def standard_methods(rulesets, palettes, products, attribute="colour"):
    """One method per rules file, then the baselines (the attribute one only when it applies).

    Parameters
    ----------
    rulesets : sequence of harmony.rules.RuleSet
        Named by file stem (by the full path when two stems are equal).
    palettes : mapping of str to Palette
    products : iterable of Product
        The attribute baseline is added when at least one product has ``attribute``.
    """
    stems = [Path(r.path).stem for r in rulesets]
    methods = []
    for rules, stem in zip(rulesets, stems):
        name = stem if stems.count(stem) == 1 else str(rules.path)
        methods.append(RulesMethod(rules, palettes, name=name))
    methods.append(SameColoursMethod(palettes))
    if any(str(p.attributes.get(attribute, "")).strip() for p in products if p.attributes):
        methods.append(ColourAttributeMethod(attribute))
    methods.append(RandomMethod())
    return methods


# --------------------------------------------------------------------------------------------
# The evaluation
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MethodResult:
    """The metrics of one method: means over anchors and bootstrap intervals ``(lo, hi)``."""

    name: str
    kind: str
    auc: float
    auc_ci: tuple
    ndcg_at_10: float
    ndcg_ci: tuple
    hit_at_10: float
    hit_ci: tuple

    def to_dict(self):
        return {
            "name": self.name,
            "kind": self.kind,
            "auc": self.auc,
            "ndcg_at_10": self.ndcg_at_10,
            "hit_at_10": self.hit_at_10,
            "auc_ci": list(self.auc_ci),
            "ndcg_at_10_ci": list(self.ndcg_ci),
            "hit_at_10_ci": list(self.hit_ci),
        }


@dataclass(frozen=True)
class Evaluation:
    """Every method's result on one log.

    Attributes
    ----------
    results : tuple of MethodResult
        In the order the methods were given.
    events, anchors, products_seen, queries : int
        See :class:`QuerySet`; ``anchors`` is the number of products the metrics average over.
    coverage : float
        anchors / products_seen.
    unknown : tuple of (str, int)
        Product ids of the log not in the catalogue, with their row counts.
    no_palette : tuple of str
    level : float
        Confidence level of the intervals; ``resamples`` bootstrap resamples.
    skipped : tuple of (str, int)
        Kinds of event of the log that had no weight, with their row counts (left out).
    """

    results: tuple
    events: int
    anchors: int
    products_seen: int
    queries: int
    coverage: float
    unknown: tuple = ()
    no_palette: tuple = ()
    level: float = 0.95
    resamples: int = 1000
    k: int = CUTOFF
    skipped: tuple = ()

    def to_dict(self):
        """The JSON of ``harmony evaluate --json``.

        ``events``, ``anchors`` and ``results`` (each with ``name``, ``auc``, ``ndcg_at_10``,
        ``hit_at_10``, ``auc_ci``), plus what a reader needs to trust them: each result's
        ``kind`` and the intervals of the other two metrics; the ``coverage`` with the counts it
        comes from (``products_seen``, ``queries``); what was left out (``unknown_products`` with
        their row counts, ``no_palette``, ``skipped_events``: row counts of the kinds of event
        without a weight); and how the intervals were drawn
        (``confidence_level``, ``bootstrap_resamples``).
        """
        return {
            "events": self.events,
            "anchors": self.anchors,
            "results": [r.to_dict() for r in self.results],
            "products_seen": self.products_seen,
            "queries": self.queries,
            "coverage": self.coverage,
            "unknown_products": {pid: n for pid, n in self.unknown},
            "no_palette": list(self.no_palette),
            "skipped_events": {kind: n for kind, n in self.skipped},
            "confidence_level": self.level,
            "bootstrap_resamples": self.resamples,
        }


def _per_anchor(values, owner, n_anchors):
    sums = np.bincount(owner, weights=values, minlength=n_anchors)
    counts = np.bincount(owner, minlength=n_anchors)
    return sums / counts


def _why_nothing(queries, unknown, skipped):
    """Why a log formed no query, as the end of the one-line error."""
    if queries.products_seen == 0 and unknown and not queries.no_palette:
        n = len(unknown)
        ids = "the only product id" if n == 1 else f"all {n} product ids"
        return f"nothing to evaluate: {ids} in the log {'is' if n == 1 else 'are'} unknown to the store (most frequent: {unknown[0][0]})"
    if queries.products_seen == 0 and queries.no_palette:
        n = len(queries.no_palette)
        return (
            f"nothing to evaluate: no known product of the log has a palette in the store "
            f"({n} without one, first: {queries.no_palette[0]})"
        )
    if queries.events == 0:
        left = f" (kinds without a weight: {', '.join(f'{k} {n}' for k, n in skipped)})" if skipped else ""
        return f"nothing to evaluate: no row of the log is an event with a weight above 0{left}"
    return (
        "no product of the log has a partner of another category in the same session with "
        "in-stock alternatives beside it; nothing to evaluate"
    )


def _duplicates(names):
    seen, twice = set(), []
    for name in names:
        if name in seen and name not in twice:
            twice.append(name)
        seen.add(name)
    return twice


def evaluate(queries, methods, products, rng, resamples=1000, level=0.95, unknown=(), progress=False, skipped=()):
    """Score every query with every method and summarise.

    Parameters
    ----------
    queries : QuerySet
    methods : sequence of callables with ``name`` and ``kind``
        ``method(anchor_product, candidate_products) -> ndarray`` of scores, higher first
        (see :class:`RulesMethod` and the baselines).
    products : mapping of str to Product, or iterable of Product
    rng : numpy.random.Generator
        Draws the bootstrap resamples of anchors (shared by every method).
    resamples : int
        Bootstrap resamples (>= 1).
    level : float
        Confidence level of the percentile intervals, in (0, 1).
    unknown : tuple of (str, int)
        Passed through from the log (``EventLog.unknown``), for the report and for the error
        when no query could be formed.
    progress : bool
        Show a progress bar on stderr.
    skipped : tuple of (str, int)
        Passed through from the log (``EventLog.skipped``), likewise.

    Returns
    -------
    Evaluation

    Raises
    ------
    EventsError
        When no query could be formed; the message says why (every product id unknown to the
        store, no palettes, no weighted event, or no product with a positive of another category
        beside an in-stock negative).
    HarmonyError
        When two methods share a name (the message names the shared ones).
    """
    if not isinstance(rng, np.random.Generator):
        raise TypeError("rng must be a numpy.random.Generator")
    if int(resamples) < 1 or not 0.0 < float(level) < 1.0:
        raise ValueError(f"need resamples >= 1 and 0 < level < 1, got {resamples} and {level}")
    names = [m.name for m in methods]
    twice = _duplicates(names)
    if twice:
        raise HarmonyError(f"more than one method is named {', '.join(repr(n) for n in twice)}")
    if not queries.queries:
        raise EventsError(_why_nothing(queries, tuple(unknown), tuple(skipped)))
    by_id = products if isinstance(products, dict) else {p.id: p for p in products}

    anchor_ids = sorted({q.anchor for q in queries.queries})
    index = {a: i for i, a in enumerate(anchor_ids)}
    owner = np.array([index[q.anchor] for q in queries.queries])
    n_anchors = len(anchor_ids)
    draws = rng.integers(0, n_anchors, size=(int(resamples), n_anchors))
    alpha = (1.0 - float(level)) / 2.0

    work = [(m, q) for m in methods for q in queries.queries]
    if progress:
        from tqdm import tqdm

        work = tqdm(work, desc="evaluate", unit="query", leave=False)
    values = {m.name: np.empty((len(queries.queries), 3)) for m in methods}
    row_of = {id(q): i for i, q in enumerate(queries.queries)}
    for method, q in work:
        cands = [by_id[c] for c in q.candidates]
        s = np.asarray(method(by_id[q.anchor], cands), dtype=float)
        labels = q.gains > 0
        values[method.name][row_of[id(q)]] = (auc(s, labels), ndcg_at_k(s, q.gains, CUTOFF), hit_at_k(s, labels, CUTOFF))

    results = []
    for method in methods:
        per_anchor = np.stack([_per_anchor(values[method.name][:, j], owner, n_anchors) for j in range(3)])
        means = per_anchor.mean(axis=1)
        boot = per_anchor[:, draws].mean(axis=2)  # (3, resamples)
        lo = np.quantile(boot, alpha, axis=1)
        hi = np.quantile(boot, 1.0 - alpha, axis=1)
        results.append(
            MethodResult(
                name=method.name,
                kind=getattr(method, "kind", "method"),
                auc=float(means[0]),
                auc_ci=(float(lo[0]), float(hi[0])),
                ndcg_at_10=float(means[1]),
                ndcg_ci=(float(lo[1]), float(hi[1])),
                hit_at_10=float(means[2]),
                hit_ci=(float(lo[2]), float(hi[2])),
            )
        )
    return Evaluation(
        results=tuple(results),
        events=queries.events,
        anchors=queries.anchors,
        products_seen=queries.products_seen,
        queries=len(queries.queries),
        coverage=queries.coverage,
        unknown=tuple(unknown),
        no_palette=queries.no_palette,
        level=float(level),
        resamples=int(resamples),
        k=CUTOFF,
        skipped=tuple(skipped),
    )


# --------------------------------------------------------------------------------------------
# Tables and the HTML page
# --------------------------------------------------------------------------------------------

#: The three metrics as (attribute of MethodResult, attribute of its interval, label).
METRICS = (("auc", "auc_ci", "AUC"), ("ndcg_at_10", "ndcg_ci", "NDCG@10"), ("hit_at_10", "hit_ci", "hit@10"))

#: How to read the numbers; shown on the terminal (with --explain) and on the HTML page.
READING_NOTE = (
    "Each row ranks, for every product of the log, the products of another category that shoppers "
    "combined with it (positives) among that category's other in-stock products (negatives). "
    "AUC is the chance that a positive outranks a negative (0.5 = random order, below 0.5 = worse "
    "than random); NDCG@10 rewards positives near the top of the first ten, weighted by purchase over "
    "cart over view; hit@10 is the share of products with a positive in the first ten. The interval "
    "is a bootstrap over products: two rows whose intervals do not overlap differ beyond chance."
)


def _fmt(x, digits=3):
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.{digits}f}"


def result_table(evaluation):
    """The comparison as ``(header, rows)`` of strings, for terminals and the HTML report."""
    pct = f"{evaluation.level * 100:g} %"
    header = ("method", "AUC", f"AUC {pct} CI", "NDCG@10", f"NDCG@10 {pct} CI", "hit@10", f"hit@10 {pct} CI")
    rows = []
    for r in evaluation.results:
        row = [r.name]
        for attr, ci, _ in METRICS:
            lo, hi = getattr(r, ci)
            row += [_fmt(getattr(r, attr)), f"{_fmt(lo)}-{_fmt(hi)}"]
        rows.append(tuple(row))
    return header, tuple(rows)


def _chart(evaluation, width=640, row_height=24, label_width=190):
    """Geometry of one horizontal bar chart per metric, with interval whiskers, in SVG units."""
    plot = width - label_width - 50
    charts = []
    for attr, ci, label in METRICS:
        bars = []
        for i, r in enumerate(evaluation.results):
            value = getattr(r, attr)
            lo, hi = getattr(r, ci)
            ok = not math.isnan(value)
            y = 8 + i * row_height
            bars.append(
                {
                    "name": r.name,
                    "kind": r.kind,
                    "y": y,
                    "mid": y + row_height / 2 - 3,
                    "h": row_height - 8,
                    "w": plot * value if ok else 0.0,
                    "lo": label_width + plot * (lo if ok else 0.0),
                    "hi": label_width + plot * (hi if ok else 0.0),
                    "text": _fmt(value),
                    "title": f"{r.name}: {label} {_fmt(value)} ({_fmt(lo)} to {_fmt(hi)})",
                }
            )
        height = 8 + len(bars) * row_height + 26
        ticks = [{"x": label_width + plot * t, "label": f"{t:g}"} for t in (0.0, 0.25, 0.5, 0.75, 1.0)]
        charts.append(
            {
                "label": label,
                "bars": bars,
                "width": width,
                "height": height,
                "x0": label_width,
                "plot": plot,
                "axis_y": height - 20,
                "ticks": ticks,
                # AUC of random order is 0.5: draw it as a reference line.
                "reference": label_width + plot * 0.5 if attr == "auc" else None,
            }
        )
    return charts


def render_html(evaluation, inputs=(), title="Offline evaluation"):
    """The comparison as one self-contained HTML page (autoescaped jinja2, inline CSS and SVG).

    Parameters
    ----------
    evaluation : Evaluation
    inputs : sequence of (label, value)
        What was evaluated (store, log, rules files), shown as written; everything is escaped.
    title : str
    """
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(Path(__file__).parent / "templates")),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    header, rows = result_table(evaluation)
    return env.get_template("evaluate.html.j2").render(
        title=title,
        e=evaluation,
        header=header,
        rows=rows,
        charts=_chart(evaluation),
        inputs=tuple(inputs),
        note=READING_NOTE,
        coverage=_fmt(evaluation.coverage * 100, 0) + " %" if evaluation.products_seen else "n/a",
    )


def write_html(evaluation, out, inputs=(), title="Offline evaluation"):
    """Write :func:`render_html` to ``out`` whole (through a temporary file); returns the path."""
    return write_text_whole(out, render_html(evaluation, inputs=inputs, title=title), what="evaluation page")
