"""Simulated shoppers of the invented demo shop, and the interaction log they leave.

Everything here is invented for the demo: the shoppers, their tastes and their sessions are made
up, so that ``harmony evaluate`` has something to show. It is never a check value, and it says
nothing about how real shoppers behave.

The shoppers
------------
Each session furnishes one room of ``demo_room_sets/*.toml`` (drawn with equal chances). The
shopper first looks at a product of the room's leading category (its first slot), then visits two
to four of the room's other categories. In each visited category they view one to four products, more
likely the ones they find appealing (their thumbnails show the colours); they put the most
appealing of those in the cart with probability :data:`CART_CHANCE` and buy it with probability
:data:`BUY_CHANCE` once in the cart; the anchor is carted and bought the same way.

Appeal of a partner ``b`` to a shopper who holds ``a`` comes from one of three tastes, drawn per
session. None of them uses the rules of ``rules/*.toml`` (no hue-angle bumps, no clash zone, no
neutral anchor), so an evaluation on this log does not grade the rules against their own
assumptions:

``harmony`` (:data:`TASTE_SHARES` 60 %)
    the Ou & Luo (2006) two-colour harmony model (:mod:`harmony.colour.ou_luo`), a model fitted
    to people's ratings of colour pairs, applied to every colour pair of the two palettes and
    weighted by the colours' shares: ``sum_ij share_a[i] share_b[j] CH(a_i, b_j)``;
``contrast`` (20 %)
    seeks one bold contrast: the largest CAM02-UCS colour difference between a colour of ``a``
    and a colour of ``b`` that both hold at least :data:`BOLD_MIN_SHARE` of their palettes,
    divided by 100;
``price``  (20 %)
    ignores colour and prefers cheaper products.

Each session also draws how strongly its taste steers it (a factor from 0.5 to 1.5), and every
choice carries Gumbel noise, so shoppers of one taste do not all pick alike.

The log has the columns ``session,product,event,timestamp``, sorted by time; sessions fall on
invented dates in February 2026. A few rows name products that are no longer in the catalogue
(:data:`RETIRED_IDS`), as real logs do; the evaluation counts and reports them.

Regenerate the committed log with ``python -m harmony.demo.shoppers``; the same seed and shop give
a byte-identical file.
"""

import argparse
import csv
import io
import sys
import tempfile
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from harmony.colour.ou_luo import jab_to_lab, two_colour_harmony
from harmony.fileio import write_text_whole
from harmony.resources import DEMO_DIR
from harmony.shop.catalogue import normalise_category

__all__ = [
    "DEFAULT_SEED",
    "SESSIONS",
    "TASTE_SHARES",
    "CART_CHANCE",
    "BUY_CHANCE",
    "RETIRED_IDS",
    "DEFAULT_EVENTS_PATH",
    "BOLD_MIN_SHARE",
    "appeal",
    "expected_appeal",
    "TasteMethod",
    "simulate_sessions",
    "events_csv",
    "write_demo_events",
    "main",
]

DEFAULT_SEED = 2026_02
#: Sessions in the demo log (a few thousand rows, well under 1 MB). The demo's categories are small
#: (9 to 22 products), so a product ends up combined with about 60 % of a partner category's
#: products, and nearly every order puts one of them in the first ten: hit@10 is close to 1 for
#: every method here, and AUC and NDCG@10 are the columns that tell the methods apart.
SESSIONS = 400
#: Share of sessions with each taste (invented).
TASTE_SHARES = {"harmony": 0.60, "contrast": 0.20, "price": 0.20}
#: A colour must hold at least this share of its palette to count as a bold contrast (invented).
BOLD_MIN_SHARE = 0.15
#: Chance that the most appealing viewed product of a category goes in the cart, and that a
#: carted product is bought (invented).
CART_CHANCE = 0.45
BUY_CHANCE = 0.5
#: How strongly appeal steers which products are viewed and carted (softmax inverse temperature).
SHARPNESS = 6.0
#: Products no longer in the catalogue, named by a few rows (invented ids).
RETIRED_IDS = ("SOF-090", "RUG-091", "CUS-092")
DEFAULT_EVENTS_PATH = DEMO_DIR / "shop" / "events.csv"
#: First day of the invented log.
_START = datetime(2026, 2, 1, 7, 0, tzinfo=timezone.utc)


def _lab(pal):
    return jab_to_lab(np.asarray(pal.jab, dtype=float))


def appeal(pal_a, pal_b, taste, lab_a=None, lab_b=None):
    """How much a shopper with ``taste`` likes ``pal_b`` beside ``pal_a`` (colour tastes only).

    Parameters
    ----------
    pal_a, pal_b : Palette
    taste : {"harmony", "contrast", "price"}
    lab_a, lab_b : ndarray, optional
        CIELAB (D65) of the palettes' colours, when the caller has them already.

    Returns
    -------
    float
        ``harmony``: the share-weighted mean of Ou & Luo's CH over colour pairs; ``contrast``:
        the largest CAM02-UCS difference between two colours of at least :data:`BOLD_MIN_SHARE`,
        over 100; ``price``: 0 (no colour preference).
    """
    if taste == "price":
        return 0.0
    if taste == "harmony":
        lab_a = _lab(pal_a) if lab_a is None else lab_a
        lab_b = _lab(pal_b) if lab_b is None else lab_b
        ch = two_colour_harmony(lab_a[:, None, :], lab_b[None, :, :])
        return float(np.asarray(pal_a.weights) @ ch @ np.asarray(pal_b.weights))
    if taste == "contrast":
        ja, jb = np.asarray(pal_a.jab, dtype=float), np.asarray(pal_b.jab, dtype=float)
        keep_a = np.asarray(pal_a.weights) >= BOLD_MIN_SHARE
        keep_b = np.asarray(pal_b.weights) >= BOLD_MIN_SHARE
        if not keep_a.any() or not keep_b.any():
            return 0.0
        diff = np.linalg.norm(ja[keep_a][:, None, :] - jb[keep_b][None, :, :], axis=-1)
        return float(diff.max()) / 100.0
    raise ValueError(f"unknown taste {taste!r}")


def expected_appeal(pal_a, pal_b, price_b, cheapest, lab_a=None, lab_b=None):
    """The simulator's own ranking value: each taste's appeal weighted by its share of sessions.

    The price taste's value is the one :func:`simulate_sessions` uses, ``-log(price / cheapest) / 2``.
    """
    total = 0.0
    for taste, share in TASTE_SHARES.items():
        if taste == "price":
            total += share * (-np.log(price_b / cheapest + 1e-9) / 2.0)
        else:
            total += share * appeal(pal_a, pal_b, taste, lab_a, lab_b)
    return total


class TasteMethod:
    """An evaluation method that ranks by :func:`expected_appeal`: the ceiling of the demo log.

    Called like the methods of :mod:`harmony.evaluation` (``method(product, candidates)``).
    """

    kind = "ceiling"

    def __init__(self, palettes, products, name="simulated shoppers' own taste (ceiling)"):
        self.palettes, self.name = palettes, name
        self._lab = {}
        self._cheapest = {}
        for p in products:
            if p.id in palettes and p.in_stock():
                key = normalise_category(p.category)
                self._cheapest[key] = min(self._cheapest.get(key, np.inf), p.price)

    def _labs(self, pid):
        if pid not in self._lab:
            self._lab[pid] = _lab(self.palettes[pid])
        return self._lab[pid]

    def __call__(self, anchor, candidates):
        pa = self.palettes[anchor.id]
        out = np.empty(len(candidates))
        for k, c in enumerate(candidates):
            cheapest = self._cheapest.get(normalise_category(c.category), c.price)
            out[k] = expected_appeal(pa, self.palettes[c.id], c.price, cheapest, self._labs(anchor.id), self._labs(c.id))
        return out


def _choose(rng, values, count):
    """``count`` distinct indices drawn with chances proportional to exp(SHARPNESS * value)."""
    v = SHARPNESS * (np.asarray(values, dtype=float) - np.max(values))
    p = np.exp(v)
    p /= p.sum()
    count = min(count, int(np.count_nonzero(p)))
    return rng.choice(len(values), size=count, replace=False, p=p)


def simulate_sessions(products, palettes, rooms, rng, sessions=SESSIONS):
    """Simulate shopping sessions.

    Parameters
    ----------
    products : sequence of harmony.shop.catalogue.Product
    palettes : mapping of str to Palette
        Products without a palette are never shown.
    rooms : sequence of sequences of str
        The categories of each room, leading category first.
    rng : numpy.random.Generator
    sessions : int

    Returns
    -------
    list of (session, product, event, seconds after the log's start)
        In session order, events of a session in time order.
    """
    by_cat = {}
    for p in products:
        if p.id in palettes and p.in_stock():
            by_cat.setdefault(normalise_category(p.category), []).append(p)
    rooms = [[normalise_category(c) for c in room if normalise_category(c) in by_cat] for room in rooms]
    rooms = [room for room in rooms if len(room) >= 2]
    if not rooms:
        raise ValueError("no room has two categories with products in stock and palettes")
    tastes, shares = list(TASTE_SHARES), np.array(list(TASTE_SHARES.values()))
    labs = {pid: _lab(pal) for pid, pal in palettes.items()}
    rows = []
    width = len(str(sessions))
    span = 28 * 24 * 3600
    for s in range(sessions):
        sid = f"s{s + 1:0{width}d}"
        room = rooms[int(rng.integers(len(rooms)))]
        taste = tastes[int(rng.choice(len(tastes), p=shares / shares.sum()))]
        strength = float(rng.uniform(0.5, 1.5))
        clock = float(rng.uniform(0, span))
        anchor = by_cat[room[0]][int(rng.integers(len(by_cat[room[0]])))]

        def emit(product, event):
            nonlocal clock
            clock += float(rng.uniform(15, 120))
            rows.append((sid, product.id, event, int(clock)))

        emit(anchor, "view")
        others = room[1:]
        visits = int(rng.integers(2, 5))
        order = rng.permutation(len(others))[: min(visits, len(others))]
        for idx in order:
            shelf = by_cat[others[int(idx)]]
            if taste == "price":
                prices = np.array([p.price for p in shelf])
                values = -np.log(prices / prices.min() + 1e-9) / 2.0
            else:
                values = np.array([appeal(palettes[anchor.id], palettes[p.id], taste, labs[anchor.id], labs[p.id])
                                   for p in shelf])
            values = strength * values
            viewed = _choose(rng, values, int(rng.integers(1, 5)))
            for i in viewed:
                emit(shelf[int(i)], "view")
            noisy = values[viewed] + rng.gumbel(0.0, 1.0 / SHARPNESS, size=len(viewed))
            best = shelf[int(viewed[int(np.argmax(noisy))])]
            if rng.random() < CART_CHANCE:
                emit(best, "cart")
                if rng.random() < BUY_CHANCE:
                    emit(best, "purchase")
        if rng.random() < CART_CHANCE:
            emit(anchor, "cart")
            if rng.random() < BUY_CHANCE:
                emit(anchor, "purchase")
    for k, pid in enumerate(RETIRED_IDS):
        rows.append((f"r{k + 1}", pid, "view", int(rng.uniform(0, span))))
    return rows


def events_csv(rows, start=_START):
    """The log as CSV text, sorted by time (then session), ISO 8601 UTC timestamps."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(("session", "product", "event", "timestamp"))
    for sid, pid, event, seconds in sorted(rows, key=lambda r: (r[3], r[0])):
        stamp = (start + timedelta(seconds=seconds)).strftime("%Y-%m-%dT%H:%M:%SZ")
        writer.writerow((sid, pid, event, stamp))
    return out.getvalue()


def _rooms(directory):
    from harmony.suggest.room import load_room

    rooms = []
    for path in sorted(Path(directory).glob("*.toml")):
        template = load_room(path)
        seen = []
        for slot in template.slots:
            if slot.category not in seen:
                seen.append(slot.category)
        rooms.append(seen)
    return rooms


def write_demo_events(out=DEFAULT_EVENTS_PATH, shop=DEMO_DIR / "shop", rooms_dir=DEMO_DIR, seed=DEFAULT_SEED,
                      sessions=SESSIONS, db_path=None):
    """Extract the demo shop into a temporary store, simulate the shoppers, write the log.

    Parameters
    ----------
    out : path
        The CSV file to write (whole, through a temporary file).
    shop : path
        Folder of the demo shop's ``catalogue.csv``.
    rooms_dir : path
        Folder of the room templates.
    seed : int
        Seed of the one :class:`numpy.random.Generator` the sessions come from.
    db_path : path, optional
        An existing or new store to use instead of a temporary one.

    Returns
    -------
    (Path, int)
        The file written and its number of data rows.
    """
    from harmony.shop.engine import run_extraction
    from harmony.shop.store import Store

    with tempfile.TemporaryDirectory() as tmp:
        db = Path(db_path) if db_path is not None else Path(tmp) / "shop.db"
        run_extraction(Path(shop) / "catalogue.csv", db, progress=False)
        with Store(db) as store:
            products = store.products()
            palettes = store.palettes()
    rows = simulate_sessions(products, palettes, _rooms(rooms_dir), np.random.default_rng(seed), sessions)
    return write_text_whole(out, events_csv(rows), what="interaction log"), len(rows)


def main(argv=None):
    """``python -m harmony.demo.shoppers [--out FILE] [--seed N]``: regenerate the demo log."""
    parser = argparse.ArgumentParser(prog="python -m harmony.demo.shoppers",
                                     description="Regenerate the invented demo shop's interaction log.")
    parser.add_argument("--out", default=str(DEFAULT_EVENTS_PATH), help="output file (default: %(default)s)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="generator seed (default: %(default)s)")
    parser.add_argument("--sessions", type=int, default=SESSIONS, help="sessions (default: %(default)s)")
    args = parser.parse_args(argv)
    path, n = write_demo_events(args.out, seed=args.seed, sessions=args.sessions)
    print(f"{n} interactions in {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
