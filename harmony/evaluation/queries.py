"""Queries from an interaction log: a product, a partner category, its positives and negatives."""

import math
from collections import defaultdict
from dataclasses import dataclass

import numpy as np

from harmony.shop.catalogue import normalise_category

__all__ = ["Query", "QuerySet", "build_queries"]

# --------------------------------------------------------------------------------------------
# Queries from a log
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Query:
    """One query product and the candidates of one partner category.

    Attributes
    ----------
    product : str
        Product id.
    category : str
        The partner category, normalised.
    candidates : tuple of str
        Product ids: the positives first (sorted by id), then the negatives (sorted by id).
    gains : ndarray, shape (len(candidates),)
        Gain of each candidate, > 0 exactly for positives.
    """

    product: str
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
        Sorted by query product, then category.
    events : int
        Interactions used (known product, weight above 0).
    products_seen : int
        Distinct products of the log that could be evaluated (known, and with a palette).
    query_products : int
        Of those, the products with at least one query (a positive of another category and at
        least one negative beside it).
    no_palette : tuple of str
        Products of the log left out because the store holds no palette for them.
    """

    queries: tuple
    events: int
    products_seen: int
    query_products: int
    no_palette: tuple = ()

    @property
    def coverage(self):
        """Share of the log's products that had a query; NaN for an empty log."""
        return self.query_products / self.products_seen if self.products_seen else math.nan


def build_queries(log, products, palettes=None):
    """Turn a log into queries over a catalogue.

    Parameters
    ----------
    log : harmony.shop.events.EventLog
    products : iterable of harmony.shop.catalogue.Product
        The catalogue (a store's ``products()``).
    palettes : mapping of str to Palette, optional
        When given, products without a palette take no part (neither as query product nor candidate),
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

    positives = defaultdict(lambda: defaultdict(dict))  # query product -> partner category -> {partner: gain}
    seen, no_palette = set(), set()
    for weights in log.sessions().values():
        items = []
        for pid, w in weights.items():
            if pid not in by_id:
                continue
            if pid not in usable:
                no_palette.add(pid)
                continue
            items.append((pid, w, category[pid]))
            seen.add(pid)
        for i, (a, wa, ca) in enumerate(items):
            for b, wb, cb in items[i + 1 :]:
                if ca == cb:
                    continue
                g = min(wa, wb)
                to_b, to_a = positives[a][cb], positives[b][ca]
                to_b[b] = to_b.get(b, 0.0) + g
                to_a[a] = to_a.get(a, 0.0) + g
    n_events = sum(1 for ev in log.events if ev.product in usable)

    queries, queried = [], set()
    for a in sorted(positives):
        for cat in sorted(positives[a]):
            pos = positives[a][cat]
            negatives = [pid for pid in in_stock.get(cat, ()) if pid not in pos and pid != a]
            if not negatives:
                continue
            ids = tuple(sorted(pos)) + tuple(negatives)
            g = np.array([pos.get(pid, 0.0) for pid in ids])
            g.setflags(write=False)
            queries.append(Query(product=a, category=cat, candidates=ids, gains=g))
            queried.add(a)
    return QuerySet(
        queries=tuple(queries),
        events=n_events,
        products_seen=len(seen),
        query_products=len(queried),
        no_palette=tuple(sorted(no_palette)),
    )


