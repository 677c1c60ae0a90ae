"""Look-alikes: products of the *same* category whose colours look like a given product's.

Two palettes are compared by the earth mover's distance (EMD; Rubner, Tomasi & Guibas 2000) in
CAM02-UCS with the Euclidean ground distance (ΔE, what the space is built for): the least total
share × ΔE needed to turn one palette's shares into the other's. The transport problems are solved
exactly, a block at a time, by :func:`harmony.colour.emd.emd_pairs`.

Screen
------
All pairs of a category would cost n² EMDs. Rubner et al. (2000, section 4.2) prove that, between
signatures of equal total weight, the EMD is at least the distance between their centroids (the
share-weighted mean colours). The screen sorts a product's candidates by that bound (one n × n
matrix of centroid distances) and solves exact EMDs in that order, stopping once the next bound
exceeds the ``top``-th best distance found: the answer is the exact top, not an approximation, and
the EMDs saved are measured by ``benchmarks/lookalike.py``. The EMDs are solved in blocks of the
next candidates in that order, each block cut where the bound passes the ``top``-th best so far.

Score
-----
``score = exp(-EMD / SIMILAR_DELTA_E)``, in (0, 1], 1 for identical palettes.

References
----------
Y. Rubner, C. Tomasi, L. J. Guibas (2000). The Earth Mover's Distance as a metric for image
    retrieval. International Journal of Computer Vision 40(2):99-121.
M. R. Luo, G. Cui, C. Li (2006). Uniform colour spaces based on CIECAM02 colour appearance model.
    Color Research & Application 31(4):320-330.
"""

from dataclasses import dataclass

import numpy as np

from harmony.colour.emd import emd_pairs, signature
from harmony.errors import HarmonyError, StoreError
from harmony.suggest.rows import PartnerRow

__all__ = [
    "SIMILAR_DELTA_E",
    "SimilarRow",
    "centroid_bound",
    "nearest_colour_distance",
    "top_similar",
    "similar_products",
    "similar_rows",
]

#: Length scale (CAM02-UCS ΔE) of the look-alike score ``exp(-EMD / scale)``. Hand-set to the same
#: ten just-noticeable differences as the feed's palette similarity (a JND is about 1 ΔE in
#: CAM02-UCS, Luo, Cui & Li 2006): an EMD of 10 scores 0.37.
SIMILAR_DELTA_E = 10.0


@dataclass(frozen=True)
class SimilarRow(PartnerRow):
    """A feed row of the ``similar`` relation: ``partner`` is the ``rank``-th closest palette of
    the same category; ``distance`` is the EMD in CAM02-UCS ΔE."""

    distance: float
    relation: str = "similar"


def _normalised(weights):
    w = np.asarray(weights, dtype=float)
    return w / w.sum()


#: Candidates whose EMDs are solved together, at most: enough to share the solver's steps, few
#: enough that the bound cuts the search soon after the top is found.
BLOCK = 32


def centroid_bound(jab_a, weights_a, jab_b, weights_b):
    """The centroid lower bound of the EMD (Rubner et al. 2000, section 4.2): ``|mean_a - mean_b|``."""
    ca = _normalised(weights_a) @ np.asarray(jab_a, dtype=float)
    cb = _normalised(weights_b) @ np.asarray(jab_b, dtype=float)
    return float(np.linalg.norm(ca - cb))


def nearest_colour_distance(lab_a, weights_a, lab_b, weights_b):
    """The plain baseline: each colour's distance to the nearest colour of the other palette,
    times its share, summed both ways (CIE 1976 ΔE*ab when given CIELAB)."""
    a = np.asarray(lab_a, dtype=float)
    b = np.asarray(lab_b, dtype=float)
    d = np.sqrt(((a[:, None, :] - b[None, :, :]) ** 2).sum(axis=-1))
    return float(_normalised(weights_a) @ d.min(axis=1) + _normalised(weights_b) @ d.min(axis=0))


def _centroids(palettes):
    return np.stack([_normalised(p.weights) @ np.asarray(p.jab, dtype=float) for p in palettes])


def top_similar(query, palettes, top, centroids=None, query_centroid=None, known=None, key=None, signatures=None):
    """The ``top`` palettes closest to ``query`` by exact EMD, using the centroid bound to skip work.

    Parameters
    ----------
    query : Palette
    palettes : sequence of Palette
        The candidates (the query itself excluded by the caller).
    top : int
    centroids : ndarray, shape (len(palettes), 3), optional
        Precomputed centroids of ``palettes``.
    known : dict, optional
        A cache of solved distances, keyed by ``key(j)``; filled as EMDs are solved.
    signatures : sequence of harmony.colour.emd.Signature, optional
        Those of ``palettes``, when the caller keeps them for many queries (made here otherwise).

    Returns
    -------
    (indices, distances, solved)
        Indices into ``palettes`` nearest first (ties by index), their EMDs, and how many EMDs were
        solved (the rest were skipped by the bound).
    """
    n = len(palettes)
    if n == 0:
        return np.zeros(0, dtype=int), np.zeros(0), 0
    cents = _centroids(palettes) if centroids is None else centroids
    qc = _normalised(query.weights) @ np.asarray(query.jab, dtype=float) if query_centroid is None else query_centroid
    bound = np.linalg.norm(cents - qc, axis=1)
    order = np.lexsort((np.arange(n), bound))
    found = []  # (distance, index), nearest first, at most ``top``
    solved, start, first = 0, 0, None
    while start < n:
        block = order[start : start + BLOCK]
        if len(found) >= top:
            block = block[bound[block] <= found[-1][0]]  # a prefix: the order is by bound
            if block.size == 0:
                break
        start += block.size
        new = []
        for j in block.tolist():
            k = key(j) if key is not None else None
            if known is not None and k in known:
                found.append((known[k], j))
            else:
                new.append((j, k))
        if new:
            if first is None:
                first = signature(query.jab, query.weights, "query palette")
            others = [signature(palettes[j].jab, palettes[j].weights, f"palette {j}") if signatures is None
                      else signatures[j] for j, _ in new]
            for (j, k), d in zip(new, emd_pairs([first] * len(new), others).tolist()):
                found.append((d, j))
                if known is not None:
                    known[k] = d
            solved += len(new)
        found.sort()
        del found[top:]
    return np.array([j for _, j in found], dtype=int), np.array([d for d, _ in found]), solved


def _reason(distance):
    return f"colours alike: earth mover's distance {distance:.1f} ΔE in CAM02-UCS"


def similar_products(source, product_id, top=10, categories=None, in_stock=None):
    """The ``top`` products of the same category whose palettes are closest to ``product_id``'s.

    Parameters
    ----------
    source : harmony.shop.store.Store or mapping of str to Palette
        A store (its palettes, categories and stock are read), or palettes by product id.
    product_id : str
    top : int
    categories : mapping of str to str, optional
        Category of each product id; required when ``source`` is a mapping.
    in_stock : set of str, optional
        Only these ids may be returned (default: every product in stock for a store, all for a mapping).

    Returns
    -------
    list of dict
        ``{"partner", "category", "rank", "score", "distance", "reason"}``, closest first (the
        JSON an API would return for ``/products/{id}/similar``).

    Raises
    ------
    StoreError
        Unknown product, a product without a palette, or no other product of its category.
    """
    top = int(top)
    if top < 1:
        raise HarmonyError(f"top must be at least 1, got {top}")
    if hasattr(source, "palettes") and callable(source.palettes):
        products = source.products()
        palettes = source.palettes()
        categories = {p.id: p.category_key for p in products}
        if in_stock is None:
            in_stock = {p.id for p in products if p.in_stock()}
        where = str(getattr(source, "path", "store"))
    else:
        palettes = dict(source)
        if categories is None:
            raise HarmonyError("similar_products: categories are needed with a mapping of palettes")
        where = "palettes"
    if product_id not in categories:
        raise StoreError(f"{where}: unknown product '{product_id}'")
    if product_id not in palettes:
        raise StoreError(f"{where}: product '{product_id}' has no palette")
    cat = categories[product_id]
    ids = sorted(i for i, c in categories.items()
                 if c == cat and i != product_id and i in palettes and (in_stock is None or i in in_stock))
    if not ids:
        raise StoreError(f"{where}: no other product of category '{cat}' with a palette")
    idx, dist, _ = top_similar(palettes[product_id], [palettes[i] for i in ids], top)
    return [
        {"partner": ids[j], "category": cat, "rank": r, "score": float(np.exp(-d / SIMILAR_DELTA_E)),
         "distance": float(d), "reason": _reason(d)}
        for r, (j, d) in enumerate(zip(idx, dist), start=1)
    ]


def similar_rows(store, top=10, progress=False):
    """Feed rows of the ``similar`` relation for every product with a palette.

    Partners are in-stock products of the same category with a palette; each unordered pair's EMD
    is solved at most once. Returns ``(rows, solved, pairs)``: the rows sorted by product and rank,
    the EMDs solved and the candidate pairs there were.
    """
    products = store.products()
    palettes = store.palettes()
    by_cat = {}
    for p in products:
        if p.id in palettes:
            by_cat.setdefault(p.category_key, []).append(p)
    rows, solved, pairs = [], 0, 0
    groups = sorted(by_cat.items())
    if progress:
        from tqdm import tqdm

        groups = tqdm(groups, desc="look-alikes", unit="category", leave=False)
    for cat, group in groups:
        group = sorted(group, key=lambda p: p.id)
        stock = [p.id for p in group if p.in_stock()]
        pals = [palettes[i] for i in stock]
        cents = _centroids(pals) if pals else np.zeros((0, 3))
        sigs = [signature(pal.jab, pal.weights, pid) for pid, pal in zip(stock, pals)]  # once per category
        known = {}
        for p in group:
            others = [j for j, pid in enumerate(stock) if pid != p.id]
            if not others:
                continue
            pairs += len(others)
            idx, dist, n = top_similar(
                palettes[p.id], [pals[j] for j in others], top, centroids=cents[others],
                known=known, key=lambda j, me=p.id: tuple(sorted((me, stock[others[j]]))),
                signatures=[sigs[j] for j in others],
            )
            solved += n
            for r, (j, d) in enumerate(zip(idx, dist), start=1):
                rows.append(SimilarRow(p.id, cat, stock[others[j]], cat, r, float(np.exp(-d / SIMILAR_DELTA_E)),
                                       _reason(d), float(d)))
    rows.sort(key=lambda r: (r.product, r.rank))
    return rows, solved, pairs
