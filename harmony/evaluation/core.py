"""Offline evaluation: how well a rules file ranks the partners that shoppers actually combined.

From an interaction log (:mod:`harmony.shop.events`) products of *different* categories that share a
session are **positives** of each other; the gain of a positive pair is the sum over the sessions
that hold both of the weaker of the two products' event weights (a purchased sofa with a viewed
rug counts as a view). For a **query product** and a partner category that holds at least one
of its positives, the **candidates** are those positives and every other in-stock product of that
category (the **negatives**); every method ranks the same candidates. One such (query product, category)
is a *query*.

Per query: AUC (positives against negatives), NDCG@10 over the graded gains, and hit@10 (a
positive in the first ten). A product's value is the mean over its queries, a method's value the
mean over query products, and the confidence interval a percentile bootstrap over query products (Efron &
Tibshirani 1993) with the same resampled query products for every method, so intervals are comparable.
Coverage is the share of the log's products that had a query at all.

Ties are handled exactly, never broken by order: AUC counts a tied pair as one half, NDCG
averages the gains of tied candidates over their positions (McSherry & Najork 2008), and hit@10
is the probability of a hit under a uniformly random order of the tied candidates. The *random
order* baseline therefore ties every candidate and gives the exact expectation over random
orders, without sampling noise.

Methods
-------
rules
    The exact pair score of a rules file (:mod:`harmony.rules`, bilinear contract), query product first.
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

from dataclasses import dataclass

import numpy as np

from harmony.errors import EventsError, HarmonyError
from harmony.evaluation.metrics import CUTOFF, ideal_dcgs, metric_table

__all__ = ["MethodResult", "Evaluation", "evaluate"]

# --------------------------------------------------------------------------------------------
# The evaluation
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MethodResult:
    """The metrics of one method: means over query products and bootstrap intervals ``(lo, hi)``."""

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
    events, query_products, products_seen, queries : int
        See :class:`QuerySet`; ``query_products`` is the number of products the metrics average over.
    coverage : float
        query_products / products_seen.
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
    query_products: int
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

        ``events``, ``query_products`` and ``results`` (each with ``name``, ``auc``, ``ndcg_at_10``,
        ``hit_at_10``, ``auc_ci``), plus what a reader needs to trust them: each result's
        ``kind`` and the intervals of the other two metrics; the ``coverage`` with the counts it
        comes from (``products_seen``, ``queries``); what was left out (``unknown_products`` with
        their row counts, ``no_palette``, ``skipped_events``: row counts of the kinds of event
        without a weight); and how the intervals were drawn
        (``confidence_level``, ``bootstrap_resamples``).
        """
        return {
            "events": self.events,
            "query_products": self.query_products,
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


def _per_product(values, owner, n_products):
    sums = np.bincount(owner, weights=values, minlength=n_products)
    counts = np.bincount(owner, minlength=n_products)
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


#: Candidates scored per chunk of queries (every method, then the next chunk): memory stays bounded
#: by the chunk, not by the log.
CHUNK_CANDIDATES = 1_000_000


def _chunks(sizes, budget):
    """Consecutive ``(lo, hi)`` ranges of queries holding at most ``budget`` candidates (one query at least)."""
    lo, total = 0, 0
    for i, n in enumerate(sizes):
        if i > lo and total + n > budget:
            yield lo, i
            lo, total = i, 0
        total += n
    if lo < len(sizes):
        yield lo, len(sizes)


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
        ``method(query_product, candidate_products) -> ndarray`` of scores, higher first
        (see :class:`RulesMethod` and the baselines). A method with
        ``score_queries([(query_product, candidate_products), ...])`` is asked for every query in
        that one call, which must give the same numbers as one call per query.
    products : mapping of str to Product, or iterable of Product
    rng : numpy.random.Generator
        Draws the bootstrap resamples of query products (shared by every method).
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

    product_ids = sorted({q.product for q in queries.queries})
    index = {a: i for i, a in enumerate(product_ids)}
    owner = np.array([index[q.product] for q in queries.queries])
    n_products = len(product_ids)
    draws = rng.integers(0, n_products, size=(int(resamples), n_products))
    alpha = (1.0 - float(level)) / 2.0

    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(methods) * len(queries.queries), desc="evaluate", unit="query", leave=False)
    values = {m.name: np.empty((len(queries.queries), 3)) for m in methods}
    for lo, hi in _chunks([len(q.candidates) for q in queries.queries], CHUNK_CANDIDATES):
        part = queries.queries[lo:hi]
        gains = np.concatenate([q.gains for q in part])
        sizes = [len(q.candidates) for q in part]
        ideal = ideal_dcgs(gains, sizes, CUTOFF)  # the same for every method
        asked = [(by_id[q.product], list(map(by_id.__getitem__, q.candidates))) for q in part]
        for method in methods:  # in this order, so a blend finds its rules method's scores remembered
            many = getattr(method, "score_queries", None)
            scores = many(asked) if many is not None else [method(product, cands) for product, cands in asked]
            for s, n in zip(scores, sizes):
                if getattr(s, "shape", None) != (n,) and np.shape(s) != (n,):
                    raise ValueError(f"{method.name}: {n} candidates need {n} scores, got shape {np.shape(s)}")
            # The chunk's metrics at once: the same numbers as auc, ndcg_at_k and hit_at_k per query.
            values[method.name][lo:hi] = metric_table(np.concatenate(scores), gains, sizes, CUTOFF, ideal)
            if bar is not None:
                bar.update(len(part))
    if bar is not None:
        bar.close()

    results = []
    for method in methods:
        per_product = np.stack([_per_product(values[method.name][:, j], owner, n_products) for j in range(3)])
        means = per_product.mean(axis=1)
        boot = per_product[:, draws].mean(axis=2)  # (3, resamples)
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
        query_products=queries.query_products,
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


