"""The one adapter between the live API and the suggestion stages below it.

Everything the server computes goes through the functions here: one product's partners in one
category (one row of the screen plus an exact re-rank, chosen as the feed chooses them), the
exact score of two products, and room sets under a time limit. When the feed, the screen or the
set search change shape, only this module follows.

One row of the screen
---------------------
The feed screens two whole categories at once, ``H_a K H_b^T`` (:mod:`harmony.rules.screen`).
For a single product ``p`` that is one row, ``h_p K H_b^T``. The server keeps, per pair of
categories, ``K`` factorised on every bin of side a against the bins side b uses
(``K ~ L R^T``, :func:`harmony.rules.screen.low_rank`) and ``R^T H_b^T``; a product's row is
then ``(h_p L)(R^T H_b^T)``, a vector-matrix product, whether or not ``p`` was in the store when
the factors were made (any bin of side a has its row of ``L``). The best candidates of that row
are re-scored with the exact kernel. Categories of at most :data:`EXACT_ROW` partners are scored
exactly in full, as the feed does for small category pairs, so the order is the exact order.
"""

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from harmony.rules.score import pair_score, pair_scores, to_unit
from harmony.rules.screen import (
    BinGrid,
    PaletteStack,
    bin_centres,
    bin_kernel,
    exact_raw_candidates,
    histograms,
    low_rank,
)
from harmony.suggest.curation import category_pair_allowed, curate, limit_partner_categories
from harmony.suggest.feed import EXACT_PAIRS, FeedRow, mmr_select, similarity_matrix

__all__ = [
    "EXACT_ROW",
    "HISTOGRAM_BLOCK",
    "MIN_CANDIDATES",
    "CategoryHistograms",
    "PairScreen",
    "Partner",
    "grid_for",
    "pool_size",
    "category_histograms",
    "pair_screen",
    "partners_of",
    "product_partners",
    "score_pair",
    "room_sets",
]

#: A partner category with at most this many products is scored exactly in full for one product
#: (the feed's own cut-off, :data:`harmony.suggest.feed.EXACT_PAIRS`, is per pair of categories:
#: a category pair of 20,000 product pairs; for one product against a category this keeps the
#: exact path up to 2,000 partners, about 2 ms of kernel work).
EXACT_ROW = min(2000, EXACT_PAIRS)

#: Palettes per block when screen histograms are made (bounds the dense temporary to
#: HISTOGRAM_BLOCK x grid.size floats, 2,000 x 1,029 x 8 bytes = 16 MB).
HISTOGRAM_BLOCK = 2000

#: Screened candidates re-scored exactly for one product: at least this many, or 3 x the pool.
#: The feed re-scores 1.5 x its pool per product; one row is cheap, so the server takes more.
MIN_CANDIDATES = 60


def grid_for(pair_rules):
    """The screen's bin grid for a pair of categories (the neutral fade of its rules)."""
    return BinGrid(neutral_threshold=pair_rules.neutral_threshold, neutral_fade=pair_rules.neutral_fade)


def pool_size(top, diversity):
    """How many best-scoring partners maximal marginal relevance chooses from, as the feed does."""
    return top if diversity == 0 else max(top, 3 * top)


@dataclass(frozen=True, eq=False)
class CategoryHistograms:
    """Screen histograms of one category's palettes under one grid.

    Attributes
    ----------
    hist : scipy.sparse.csr_matrix, shape (n, grid.size)
        Row i is palette i's soft-binned histogram (:func:`harmony.rules.screen.histograms`).
    bin_colourfulness : ndarray, shape (grid.n_chromatic,)
        Mean M' of each chromatic bin over the whole category (NaN where empty).
    """

    hist: object
    bin_colourfulness: np.ndarray


def category_histograms(palettes, grid):
    """:class:`CategoryHistograms` of ``palettes`` (a sequence of Palette), built block by block."""
    palettes = list(palettes)
    blocks, mass, m_sum = [], np.zeros(grid.n_chromatic), np.zeros(grid.n_chromatic)
    for r0 in range(0, len(palettes), HISTOGRAM_BLOCK):
        part = palettes[r0 : r0 + HISTOGRAM_BLOCK]
        hist, colourfulness = histograms(part, grid)
        blocks.append(sparse.csr_matrix(hist.astype(np.float32)))
        # Recombine the block means into the category mean, weighted by each block's chromatic mass.
        w = np.abs(hist[:, : grid.n_chromatic]).sum(axis=0)
        ok = np.isfinite(colourfulness)
        mass[ok] += w[ok]
        m_sum[ok] += w[ok] * colourfulness[ok]
    hist = sparse.vstack(blocks, format="csr") if blocks else sparse.csr_matrix((0, grid.size), dtype=np.float32)
    with np.errstate(invalid="ignore", divide="ignore"):
        colourfulness = np.where(mass > 0, m_sum / np.where(mass > 0, mass, 1.0), np.nan)
    return CategoryHistograms(hist=hist, bin_colourfulness=colourfulness)


@dataclass(frozen=True, eq=False)
class PairScreen:
    """The factors of one category pair's screen: ``row(h_p) = (h_p @ left) @ hb``.

    Attributes
    ----------
    grid : BinGrid
    left : ndarray, shape (grid.size, r), float32
        ``K R`` for every bin of side a.
    hb : ndarray, shape (r, n_b), float32
        ``R^T H_b^T`` for the partner side.
    """

    grid: BinGrid
    left: np.ndarray
    hb: np.ndarray


def pair_screen(pair_rules, own, partners, partner_rows):
    """Factor the screen of one category pair.

    Parameters
    ----------
    pair_rules : harmony.rules.PairRules
    own, partners : CategoryHistograms
        Side a (the asking product's category) and side b (the partner category).
    partner_rows : ndarray of int
        Rows of ``partners.hist`` that are candidate partners (in stock), in partner order.
    """
    grid = grid_for(pair_rules)
    hb_hist = partners.hist[partner_rows]
    used_b = np.flatnonzero(np.asarray(abs(hb_hist).sum(axis=0)).ravel() > 0)
    if used_b.size == 0:
        used_b = np.array([0])
    centres_a = bin_centres(grid, own.bin_colourfulness)
    centres_b = bin_centres(grid, partners.bin_colourfulness)[used_b]
    k = bin_kernel(pair_rules, centres_a, centres_b)
    left, right, _rank, _residual = low_rank(k)
    hb = np.asarray(hb_hist[:, used_b] @ right, dtype=np.float32).T
    return PairScreen(grid=grid, left=np.ascontiguousarray(left, dtype=np.float32), hb=np.ascontiguousarray(hb))


@dataclass(frozen=True, eq=False)
class Partner:
    """One chosen partner: its index in the partner list, its rank and its exact scored explanation."""

    index: int
    rank: int
    pair: object  # harmony.rules.score.PairScore


def _order(indices, raw, k):
    """Best raw first, ties to the lower index (the feed's order); the first k."""
    perm = np.lexsort((indices, -raw))[:k]
    return indices[perm], raw[perm]


def partners_of(palette, pair_rules, partner_stack, partner_palettes, top, diversity, screen=None, pool=None):
    """The ``top`` partners of one product in one category, chosen as the feed chooses them.

    Parameters
    ----------
    palette : Palette
        The product's palette (side a of ``pair_rules``).
    pair_rules : harmony.rules.PairRules
    partner_stack : PaletteStack
        The in-stock partners with a palette, in the feed's order (by product id).
    partner_palettes : sequence of Palette
        The same partners as Palette objects.
    top : int
    diversity : float in [0, 1]
    screen : PairScreen, optional
        Needed when there are more than :data:`EXACT_ROW` partners; otherwise every partner is
        scored exactly.
    pool : int, optional
        How many best-scoring partners to choose from (default :func:`pool_size`).

    Returns
    -------
    list of Partner
        In rank order.
    """
    n_b = len(partner_stack)
    if n_b == 0:
        return []
    pool = pool_size(top, diversity) if pool is None else int(pool)
    mine = PaletteStack.from_palettes([palette])
    if n_b <= EXACT_ROW or screen is None:
        cand = np.arange(n_b)
    else:
        h, _ = histograms([palette], screen.grid)
        row = (h.astype(np.float32) @ screen.left) @ screen.hb
        c = min(n_b, max(MIN_CANDIDATES, 3 * pool))
        cand = np.argpartition(row[0], n_b - c)[n_b - c :] if c < n_b else np.arange(n_b)
    raw = exact_raw_candidates(mine, partner_stack, cand[None, :], pair_rules)[0]
    idx, raw = _order(np.asarray(cand, dtype=np.int64), raw, min(pool, n_b))
    if diversity > 0 and len(idx) > 1:
        sim = similarity_matrix([partner_palettes[j] for j in idx])
        chosen = [int(idx[c]) for c in mmr_select(to_unit(raw, pair_rules), sim, top, diversity)]
    else:
        chosen = [int(j) for j in idx[:top]]
    scored = pair_scores([palette] * len(chosen), [partner_palettes[j] for j in chosen], pair_rules)
    return [Partner(j, rank, ps) for rank, (j, ps) in enumerate(zip(chosen, scored), start=1)]


def product_partners(product, palette, cats, rules, category_data, top, diversity, screen_of, curation=None):
    """One product's partner rows in ``cats``, chosen and curated exactly as the feed does.

    Parameters
    ----------
    product : Product
        The asking product (its ``id`` and ``category_key`` are used).
    palette : Palette
    cats : sequence of str
        Partner categories (normalised, each paired with the product's by the rules), in order.
    rules : harmony.rules.RuleSet
    category_data : mapping of str to CategoryData-like
        ``partner_ids``, ``partner_stack`` and ``partner_palettes`` of each category.
    top : int
    diversity : float
    screen_of : callable (own, target, pair_rules) -> PairScreen
        Called only for partner categories larger than :data:`EXACT_ROW`.
    curation : harmony.suggest.curation.Curation, optional
        As ``harmony feed --curation``: blocked category pairs are skipped, every block adds one
        candidate to the pool (the feed's room for removed rows), then
        :func:`harmony.suggest.curation.curate` and
        :func:`harmony.suggest.curation.limit_partner_categories` apply.

    Returns
    -------
    list of FeedRow
        By partner category (in ``cats`` order), then rank.
    """
    own = product.category_key
    extra = 0 if curation is None else len(curation.blocks)
    rows = []
    for cat in cats:
        if not category_pair_allowed(curation, own, cat):
            continue
        data = category_data[cat]
        pr = rules.for_pair(own, cat)
        screen = screen_of(own, cat, pr) if len(data.partner_ids) > EXACT_ROW else None
        found = partners_of(palette, pr, data.partner_stack, data.partner_palettes, top + extra, diversity, screen,
                            pool=pool_size(top, diversity) + extra)
        new = [FeedRow(product.id, own, data.partner_ids[p.index], cat, p.rank, float(p.pair.score), p.pair.reason)
               for p in found]
        if curation is not None:
            new = curate(curation, product.id, cat, new, _pin_scorer(product, palette, data, cat, pr), top)
        rows.extend(new)
    return limit_partner_categories(curation, rows)


def _pin_scorer(product, palette, data, cat, pair_rules):
    """The scored row of a pinned partner of category ``cat``, or None when it is not a partner."""
    index = {pid: j for j, pid in enumerate(data.partner_ids)}

    def score_of(partner):
        j = index.get(partner)
        if j is None:
            return None
        ps = pair_score(palette, data.partner_palettes[j], pair_rules)
        return FeedRow(product.id, product.category_key, partner, cat, 0, float(ps.score), ps.reason)

    return score_of


def score_pair(palette_a, palette_b, pair_rules):
    """The exact :class:`harmony.rules.score.PairScore` of two palettes, with its explanation."""
    return pair_score(palette_a, palette_b, pair_rules)


def room_sets(store, template_path, rules, budget, anchor, top, time_limit, pool_limit=60, curation=None):
    """Room sets of a template over a store-like reader, the search stopped after ``time_limit`` s.

    ``curation`` blocks are honoured as ``harmony bundle --curation`` honours them.

    Returns the JSON object of ``harmony bundle --json``; ``exact`` is False when the time limit
    stopped the search (the sets are then the best found so far).
    """
    from harmony.suggest.bundle import result_to_dict, search_bundles
    from harmony.suggest.room import load_room

    room = load_room(template_path)
    result = search_bundles(store, room, rules, budget=budget, anchor=anchor, top=top, pool_limit=pool_limit,
                            time_limit=time_limit, curation=curation)
    return result_to_dict(result)

