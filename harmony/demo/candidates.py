"""An invented attribute-based recommender for the demo shop: the "other system" harmony blends with.

Real shops already run a recommender built on catalogue attributes or on behaviour. The demo has
none, so this module makes a plain one from the catalogue's own columns, for the demo only: for
each product and each other category of a room it shares (``demo_room_sets/*.toml``), the partners
are scored by

- 0.5 when the ``colour`` words match (the catalogue's coarse colour family),
- 0.3 when the ``material`` words share a word,
- 0.2 times the closeness of the prices within each category (1 for the same price percentile,
  0 for opposite ends),

and the best :data:`TOP` are kept. Ties are broken by partner id, so the list is deterministic. A
few rows name retired partners (:data:`RETIRED_PARTNERS`, not in the catalogue), as lists from
another system do; blending keeps their own score and says so.

``python -m harmony.demo.impressions`` writes it to ``demo_room_sets/shop/candidates.csv``
together with the impression log.
"""

import csv
import io

import numpy as np

from harmony.shop.catalogue import normalise_category

__all__ = ["TOP", "WEIGHTS", "RETIRED_PARTNERS", "attribute_candidates", "candidates_csv"]

#: Partners kept per product and category.
TOP = 8
#: Weights of the colour-word match, the material-word overlap and the price closeness (invented).
WEIGHTS = (0.5, 0.3, 0.2)
#: (product, partner, partner category, score) rows naming partners not in the catalogue (invented).
RETIRED_PARTNERS = (
    ("SOF-001", "RUG-091", "rug", 0.97),
    ("SOF-002", "CSH-092", "cushion", 0.95),
    ("DTB-001", "DCH-093", "dining chair", 0.99),
)


def _words(text):
    return frozenset(str(text or "").lower().replace("-", " ").split())


def attribute_candidates(products, rooms, top=TOP):
    """Scored partners from catalogue attributes.

    Parameters
    ----------
    products : sequence of harmony.shop.catalogue.Product
    rooms : sequence of sequences of str
        Categories of each room; two categories are paired when a room holds both.
    top : int

    Returns
    -------
    list of (product, partner, partner_category, score)
        Sorted by product, partner category, score descending, partner id.
    """
    by_cat = {}
    for p in products:
        by_cat.setdefault(normalise_category(p.category), []).append(p)
    pct = {}
    for cat, group in by_cat.items():
        prices = np.array([p.price for p in group])
        ranks = prices.argsort().argsort()
        for p, r in zip(group, ranks):
            pct[p.id] = r / max(len(group) - 1, 1)
    paired = {}
    for room in rooms:
        cats = [normalise_category(c) for c in room]
        for a in cats:
            for b in cats:
                if a != b and a in by_cat and b in by_cat:
                    paired.setdefault(a, set()).add(b)
    w_colour, w_material, w_price = WEIGHTS
    rows = []
    for a in sorted(paired):
        for p in sorted(by_cat[a], key=lambda x: x.id):
            colour, material = _words(p.attributes.get("colour")), _words(p.attributes.get("material"))
            for b in sorted(paired[a]):
                scored = []
                for q in by_cat[b]:
                    s = (w_colour * float(bool(colour & _words(q.attributes.get("colour"))))
                         + w_material * float(bool(material & _words(q.attributes.get("material"))))
                         + w_price * (1.0 - abs(pct[p.id] - pct[q.id])))
                    scored.append((-round(s, 6), q.id))
                scored.sort()
                rows += [(p.id, qid, b, -neg) for neg, qid in scored[:top]]
    rows += list(RETIRED_PARTNERS)
    rows.sort(key=lambda r: (r[0], r[2], -r[3], r[1]))
    return rows


def candidates_csv(rows):
    """The candidate rows as CSV text with the columns ``product,partner,partner_category,score``."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(("product", "partner", "partner_category", "score"))
    for product, partner, cat, score in rows:
        writer.writerow((product, partner, cat, f"{score:.4f}"))
    return out.getvalue()
