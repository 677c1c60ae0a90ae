"""Simulated slider impressions of the invented demo shop, with a known examination curve.

Everything here is invented for the demo and for checking the click model's estimator: recovering
a planted parameter of a simulation is a fair check of an estimator, but the numbers say nothing
about real shoppers.

The simulation
--------------
The shop fills its "complete the room" sliders from its own attribute-based recommender
(:mod:`harmony.demo.candidates`): a request shows, beside one product, the first :data:`SLOTS`
candidates of one partner category in that recommender's order. The log covers the sliders of
:data:`PRODUCTS` products (drawn once), one partner category each. To make position and appeal
separable, :data:`SHUFFLED_SHARE` of the requests show the slider in a random order, and every other
request swaps one random pair of neighbouring slots (the swap interventions of Joachims,
Swaminathan & Schnabel 2017). Products are requested with Zipf-like chances (a few best sellers
get most requests; the last get too few impressions to rate).

A shopper examines slot ``k`` with probability :data:`PLANTED_EXAMINATION` ``[k - 1]`` =
``(1 / k) ** ETA`` (the curve Joachims et al. 2017 simulate), and clicks an examined partner with
its attractiveness, which grows with the colour appeal of the pair (the ``harmony`` taste, Ou & Luo 2006, of
:func:`harmony.demo.shoppers.appeal`, computed on the extracted palettes):
``alpha = 0.02 + 0.25 / (1 + exp(-(appeal - 0.3) / 0.15))`` (0.3 is about the median appeal of demo
pairs, 0.15 about half their interquartile range).

Regenerate the committed files with ``python -m harmony.demo.impressions``: the same seed and
shop give byte-identical ``impressions.csv`` and ``candidates.csv``.
"""

import argparse
import csv
import io
import sys
import tempfile
from pathlib import Path

import numpy as np

from harmony.demo.candidates import attribute_candidates, candidates_csv
from harmony.demo.shoppers import _rooms, appeal
from harmony.fileio import write_text_whole
from harmony.resources import DEMO_DIR

__all__ = [
    "DEFAULT_SEED", "REQUESTS", "SLOTS", "ETA", "PLANTED_EXAMINATION", "SHUFFLED_SHARE", "PRODUCTS", "ZIPF",
    "DEFAULT_IMPRESSIONS_PATH", "DEFAULT_CANDIDATES_PATH", "attractiveness", "simulate_impressions",
    "impressions_csv", "write_demo_impressions", "main",
]

DEFAULT_SEED = 2026_03
#: Slider requests in the log (about 24,000 impressions, a few hundred kB).
REQUESTS = 4000
#: Slots of one slider.
SLOTS = 6
#: Exponent of the planted examination curve (Joachims et al. 2017 simulate (1/k)^eta, eta = 1).
ETA = 1.0
#: Examination probability of slots 1..SLOTS: the planted curve the click model must recover.
PLANTED_EXAMINATION = tuple((1.0 / k) ** ETA for k in range(1, SLOTS + 1))
#: Share of requests shown in a random order (invented).
SHUFFLED_SHARE = 0.3
#: Products whose sliders are logged, and the exponent of their Zipf-like request chances (invented).
PRODUCTS = 60
ZIPF = 1.0
DEFAULT_IMPRESSIONS_PATH = DEMO_DIR / "shop" / "impressions.csv"
DEFAULT_CANDIDATES_PATH = DEMO_DIR / "shop" / "candidates.csv"


def attractiveness(appeal_value):
    """Click chance of an examined partner from its colour appeal (see the module notes)."""
    return 0.02 + 0.25 / (1.0 + np.exp(-(np.asarray(appeal_value, dtype=float) - 0.3) / 0.15))


def simulate_impressions(candidates, palettes, rng, requests=REQUESTS, examination=PLANTED_EXAMINATION):
    """Simulate slider requests.

    Parameters
    ----------
    candidates : sequence of (product, partner, partner_category, score)
        The shop's own order (see :func:`harmony.demo.candidates.attribute_candidates`); partners
        without a palette are never shown.
    palettes : mapping of str to Palette
    rng : numpy.random.Generator
    requests : int
    examination : sequence of float
        Examination chance of each slot.

    Returns
    -------
    list of (request, product, partner, position, clicked)
    """
    sliders = {}
    for product, partner, cat, _score in candidates:
        if product in palettes and partner in palettes:
            sliders.setdefault(product, {}).setdefault(cat, []).append(partner)
    slots = len(examination)
    eligible = sorted(p for p, cats in sliders.items() if any(len(v) >= slots for v in cats.values()))
    products = [eligible[int(i)] for i in rng.permutation(len(eligible))[:PRODUCTS]]
    category = {}
    for product in products:
        cats = sorted(c for c, v in sliders[product].items() if len(v) >= slots)
        category[product] = cats[int(rng.integers(len(cats)))]
    chance = 1.0 / (np.arange(1, len(products) + 1) ** ZIPF)
    chance /= chance.sum()
    theta = np.asarray(examination, dtype=float)
    width = len(str(requests))
    known = {}
    rows = []
    for r in range(requests):
        product = products[int(rng.choice(len(products), p=chance))]
        cat = category[product]
        shown = list(sliders[product][cat][:slots])
        if rng.random() < SHUFFLED_SHARE:
            shown = [shown[int(i)] for i in rng.permutation(slots)]
        else:
            k = int(rng.integers(slots - 1))
            shown[k], shown[k + 1] = shown[k + 1], shown[k]
        rid = f"q{r + 1:0{width}d}"
        for k, partner in enumerate(shown):
            key = (product, partner)
            if key not in known:
                known[key] = float(attractiveness(appeal(palettes[product], palettes[partner], "harmony")))
            clicked = int(rng.random() < theta[k] * known[key])
            rows.append((rid, product, partner, k + 1, clicked))
    return rows


def impressions_csv(rows):
    """The log as CSV text: ``request,product,partner,position,clicked``."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(("request", "product", "partner", "position", "clicked"))
    writer.writerows(rows)
    return out.getvalue()


def write_demo_impressions(out=DEFAULT_IMPRESSIONS_PATH, candidates_out=DEFAULT_CANDIDATES_PATH,
                           shop=DEMO_DIR / "shop", rooms_dir=DEMO_DIR, seed=DEFAULT_SEED, requests=REQUESTS,
                           db_path=None):
    """Extract the demo shop into a temporary store, write the candidate list and the impressions.

    Returns
    -------
    (Path, int, Path, int)
        The impression log and its rows, the candidate list and its rows.
    """
    from harmony.shop.engine import run_extraction
    from harmony.shop.store import Store

    with tempfile.TemporaryDirectory() as tmp:
        db = Path(db_path) if db_path is not None else Path(tmp) / "shop.db"
        run_extraction(Path(shop) / "catalogue.csv", db, progress=False)
        with Store(db) as store:
            products = store.products()
            palettes = store.palettes()
    cands = attribute_candidates(products, _rooms(rooms_dir))
    rows = simulate_impressions(cands, palettes, np.random.default_rng(seed), requests)
    c_path = write_text_whole(candidates_out, candidates_csv(cands), what="candidate list")
    i_path = write_text_whole(out, impressions_csv(rows), what="impression log")
    return i_path, len(rows), c_path, len(cands)


def main(argv=None):
    """``python -m harmony.demo.impressions``: regenerate the demo's impression log and candidate list."""
    parser = argparse.ArgumentParser(prog="python -m harmony.demo.impressions",
                                     description="Regenerate the demo shop's impression log and candidate list.")
    parser.add_argument("--out", default=str(DEFAULT_IMPRESSIONS_PATH), help="impression log (default: %(default)s)")
    parser.add_argument("--candidates-out", default=str(DEFAULT_CANDIDATES_PATH),
                        help="candidate list (default: %(default)s)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="generator seed (default: %(default)s)")
    parser.add_argument("--requests", type=int, default=REQUESTS, help="slider requests (default: %(default)s)")
    parser.add_argument("--db", default=None, help="reuse this store instead of extracting into a temporary one")
    args = parser.parse_args(argv)
    i_path, n, c_path, m = write_demo_impressions(args.out, args.candidates_out, seed=args.seed,
                                                  requests=args.requests, db_path=args.db)
    print(f"{n} impressions in {i_path}; {m} candidates in {c_path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
