"""The cross-sell feed and stylist suggestions: best partners of each product in other categories.

For every product and every category the rules pair its category with, the feed lists the top-N
partners by exact pair score (found by :mod:`harmony.rules.screen`), out-of-stock partners excluded.
With ``diversity > 0`` the list is chosen by maximal marginal relevance, so that near-identical
partners (the same rug in three sizes) do not fill it.

References
----------
J. Carbonell, J. Goldstein (1998). The use of MMR, diversity-based reranking for reordering
    documents and producing summaries. Proc. 21st ACM SIGIR, 335-336.
A. Gretton, K. M. Borgwardt, M. J. Rasch, B. Schoelkopf, A. Smola (2012). A kernel two-sample test.
    Journal of Machine Learning Research 13:723-773 (kernel mean embeddings of distributions).
"""

import dataclasses
import difflib
import warnings
from dataclasses import dataclass, field

import numpy as np

from harmony import colour
from harmony.errors import HarmonyError, StoreError
from harmony.photo.palette import Palette

from harmony.rules.score import (
    ColourLabels,
    PairScore,
    colour_name,
    pair_score,
    scores_and_reasons,
    to_unit,
)
from harmony.rules.screen import BinGrid, PaletteStack, exact_raw, screen_top_k
from harmony.rules.screen_pairs import screen_both_ways
from harmony.suggest.feedwriter import FEED_COLUMNS, FEED_FORMATS, FeedChunk, write_chunks
from harmony.shop.catalogue import normalise_category
from harmony.suggest.curation import category_pair_allowed, curate, curate_rows, limit_partner_categories
from harmony.suggest.rows import PartnerRow

__all__ = [
    "FeedRow",
    "Suggestion",
    "FEED_COLUMNS",
    "FEED_FORMATS",
    "SIMILARITY_DELTA_E",
    "EXACT_PAIRS",
    "palette_similarity",
    "similarity_matrix",
    "mmr_select",
    "FeedPlan",
    "plan_feed",
    "category_entry",
    "finalise_partners",
    "FEED_BLOCK",
    "task_parts",
    "task_chunks",
    "suggest",
    "write_feed",
]

#: Length scale (CAM02-UCS Delta E) of the Gaussian colour kernel behind palette similarity.
#: Hand-set: about ten just-noticeable differences (a JND is about 1 Delta E in CAM02-UCS, Luo,
#: Cui & Li 2006), so two palettes of the same colours in a slightly different shade count as
#: near-identical and a clearly different shade does not.
SIMILARITY_DELTA_E = 10.0


#: Category pairs with at most this many product pairs are scored exactly pair by pair instead of
#: screened (``screen_top_k(..., exact_below=EXACT_PAIRS)``): below it the exact scores cost less
#: than factorising the screen's bin kernel (about 0.1 s for 20,000 pairs of 10-colour palettes).
EXACT_PAIRS = 20_000

#: Products of one side per feed task: a direction of a category pair with more products is split
#: into blocks of this many rows (each a Dask task of its own; the local engine runs the same
#: blocks, so both write the same bytes). Each block screens against every partner, so its
#: memory is bounded by the block, not by the category.
FEED_BLOCK = 10_000


@dataclass(frozen=True)
class FeedRow(PartnerRow):
    """One line of the feed: ``partner`` is the ``rank``-th best partner of ``product``.

    Categories are normalised (:func:`harmony.shop.catalogue.normalise_category`); ``rank`` starts
    at 1; ``score`` is the exact pair score in [0, 1]; ``reason`` is its explanation sentence;
    ``pinned`` is true when a curation file placed this partner (see :mod:`harmony.suggest.curation`).
    """

    pinned: bool = False


@dataclass(frozen=True, eq=False)
class Suggestion:
    """A partner for a stylist: the feed row, the full scored explanation, the partner's palette."""

    row: FeedRow
    pair: PairScore
    palette: Palette


def _embedding_gram(jab_a, w_a, jab_b, w_b, sigma):
    """<mu_a, mu_b> for stacks: jab (n, k, 3), w (n, k) against (m, l, 3), (m, l) -> (n, m)."""
    n, k = w_a.shape
    m, l = w_b.shape
    a, b = jab_a.reshape(-1, 3), jab_b.reshape(-1, 3)
    # Squared distances a channel at a time: long loops instead of a trailing axis of 3.
    d2 = None
    for c in range(3):
        d = np.subtract.outer(a[:, c], b[:, c])
        d2 = d * d if d2 is None else np.add(d2, np.multiply(d, d, out=d), out=d2)
    g = np.exp(d2 * (-0.5 / (sigma * sigma)), out=d2).reshape(n, k, m, l)
    return np.einsum("ik,ikjl,jl->ij", w_a, g, w_b)


def similarity_matrix(palettes, sigma=SIMILARITY_DELTA_E):
    """Pairwise palette similarity in [0, 1], shape (n, n), 1 on the diagonal.

    The cosine of the palettes' kernel mean embeddings (Gretton et al. 2012) under the Gaussian
    colour kernel ``exp(-dE^2 / (2 sigma^2))`` in CAM02-UCS: 1 for the same colours in the same
    shares, near 0 for palettes whose colours are all far apart.
    """
    stack = PaletteStack.from_palettes(palettes)
    if len(stack) == 0:
        return np.zeros((0, 0))
    gram = _embedding_gram(stack.jab, stack.weights, stack.jab, stack.weights, float(sigma))
    d = np.sqrt(np.clip(np.diag(gram), 1e-300, None))
    return np.clip(gram / np.outer(d, d), 0.0, 1.0)


def palette_similarity(pal_a, pal_b, sigma=SIMILARITY_DELTA_E):
    """Similarity of two palettes in [0, 1] (see :func:`similarity_matrix`)."""
    return float(similarity_matrix([pal_a, pal_b], sigma)[0, 1])


def mmr_select(relevance, similarity, n, diversity):
    """Choose ``n`` items by maximal marginal relevance (Carbonell & Goldstein 1998).

    Repeatedly takes the item maximising
    ``(1 - diversity) * relevance[i] - diversity * max_{j chosen} similarity[i, j]``;
    the first pick is the most relevant item. Ties go to the lower index.

    Parameters
    ----------
    relevance : array_like, shape (m,)
    similarity : array_like, shape (m, m)
    n : int
    diversity : float in [0, 1]
        0 is the plain relevance order; Carbonell & Goldstein's lambda is ``1 - diversity``.

    Returns
    -------
    list of int
        Indices in the order chosen, ``min(n, m)`` of them.
    """
    rel = np.asarray(relevance, dtype=float)
    sim = np.asarray(similarity, dtype=float)
    m = rel.shape[0]
    if sim.shape != (m, m):
        raise ValueError(f"similarity must have shape ({m}, {m}), got {sim.shape}")
    if not 0.0 <= float(diversity) <= 1.0:
        raise ValueError(f"diversity must lie in [0, 1], got {diversity!r}")
    lam = 1.0 - float(diversity)
    chosen = []
    left = np.ones(m, dtype=bool)
    redundancy = np.zeros(m)
    for step in range(min(int(n), m)):
        # The first pick is the most relevant item, also at diversity 1 (where the rule alone
        # would score every item 0 before anything is chosen).
        value = rel if step == 0 else np.where(left, lam * rel - (1.0 - lam) * redundancy, -np.inf)
        i = int(np.argmax(value))
        chosen.append(i)
        left[i] = False
        redundancy = np.maximum(redundancy, sim[:, i])
    return chosen


def _warn(warn, message):
    if warn is None:
        warnings.warn(message, UserWarning, stacklevel=3)
    else:
        warn(message)


def _resolve_category(name, known, where):
    key = normalise_category(name)
    if key in known:
        return key
    close = difflib.get_close_matches(key, list(known), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else f" (known: {', '.join(known) or 'none'})"
    raise StoreError(f"{where}: unknown category '{name}'{hint}")


def _sides(store):
    """Per normalised category: ([ids with a palette], {id: palette}, {id: product})."""
    products = store.products()
    if not products:
        raise StoreError(f"{store.path}: the store holds no products (run 'harmony extract' first)")
    palettes = store.palettes()
    if not palettes:
        raise StoreError(f"{store.path}: no product has a palette yet (run 'harmony extract' first)")
    by_cat = {}
    for p in products:
        by_cat.setdefault(p.category_key, []).append(p)
    return by_cat, palettes


@dataclass(frozen=True, eq=False)
class FeedPlan:
    """What a feed run scores: checked options and, per category, its products and palettes.

    Attributes
    ----------
    top, pool_size : int
        Partners listed, and candidates MMR chooses from (``top`` without diversity).
    diversity : float
    categories : dict of str to (list of str, PaletteStack, ndarray of int, ndarray of int)
        Per normalised category: the ids of its products with a palette (sorted by id), their
        palettes, the positions of the in-stock ones (the partners it offers) and the number of
        colours of each palette.
    tasks : list of (str, str, bool, bool)
        ``(a, b, a_to_b, b_to_a)`` per unordered category pair (a < b), in file order: which
        directions are listed.
    labels : dict
        ColourLabels per category, made on first use.
    curation : harmony.suggest.curation.Curation or None
        Pins, blocks, floors and category pairs applied to each (product, partner category) list.
    block : int
        Products of one side per task part (see :func:`task_parts`).
    """

    top: int
    pool_size: int
    diversity: float
    categories: dict
    tasks: list
    labels: dict = field(default_factory=dict, repr=False)
    curation: object = None
    block: int = FEED_BLOCK


def plan_feed(store, rules, top=10, targets=None, diversity=0.0, *, pool=None, warn=None, curation=None,
              block=None):
    """Check the options and gather the palettes of a feed run (see :func:`harmony.suggest.feed_run.feed_chunks`)."""
    top = int(top)
    if top < 1:
        raise HarmonyError(f"top must be at least 1, got {top}")
    if not 0.0 <= float(diversity) <= 1.0:
        raise HarmonyError(f"diversity must lie in [0, 1], got {diversity!r}")
    by_cat, palettes = _sides(store)
    known = sorted(by_cat)
    if targets is None:
        target_keys = known
    else:
        target_keys = sorted({_resolve_category(t, known, str(store.path)) for t in targets})
        if not target_keys:
            raise HarmonyError("no target categories given")
    pool_size = top if diversity == 0 else max(top, 3 * top if pool is None else int(pool))
    if curation is not None:  # curation: candidates for the rows that blocks and floors remove
        pool_size += len(curation.blocks)
    categories = {}
    for cat in known:
        categories[cat] = category_entry(by_cat[cat], palettes)
        instock = categories[cat][2]
        if cat in target_keys and not instock.size:
            _warn(warn, f"target category '{cat}' has no in-stock product with a palette; it gets no rows")
    missing = sum(1 for prods in by_cat.values() for p in prods if p.id not in palettes)
    if missing:
        _warn(warn, f"{missing} product(s) have no palette and are left out (see 'harmony extract' failures)")
    work = {(a, b) for a in known for b in target_keys if b != a and rules.pairs_with(a, b)
            and category_pair_allowed(curation, a, b)}  # curation: category pairs
    if targets is not None:
        for cat in sorted(set(target_keys) - {b for _, b in work}):
            _warn(warn, f"{rules.path}: the rules pair target category '{cat}' with no other category; it gets no rows")
    tasks = sorted({(min(a, b), max(a, b)) for a, b in work})
    tasks = [(a, b, (a, b) in work, (b, a) in work) for a, b in tasks]
    block = FEED_BLOCK if block is None else int(block)
    if block < 1:
        raise HarmonyError(f"block must be at least 1, got {block}")
    return FeedPlan(top, pool_size, float(diversity), categories, tasks, curation=curation, block=block)


def category_entry(products, palettes):
    """One entry of :attr:`FeedPlan.categories`: (ids, PaletteStack, in-stock positions, sizes)
    of the ``products`` that have a palette in ``palettes`` (a dict by id)."""
    prods = sorted((p for p in products if p.id in palettes), key=lambda p: p.id)
    ids = [p.id for p in prods]
    stack = PaletteStack.from_palettes([palettes[i] for i in ids])
    instock = np.array([n for n, p in enumerate(prods) if p.in_stock()], dtype=np.int64)
    sizes = np.array([len(palettes[i]) for i in ids], dtype=np.int64)
    return ids, stack, instock, sizes


def _transposes(rules, a, b):
    """Whether the rules of (b, a) are those of (a, b) with the colours swapped."""
    listed = ((a, b) in rules.pairs) + ((b, a) in rules.pairs)
    return listed == 1 or (listed == 0 and rules.for_pair(a, b).symmetric)


def finalise_partners(i, cand, raw, stack_b, pair_rules, top, diversity):
    """The ranked partners of product ``i`` of side a in one partner category: the one place
    where a (product, partner category) list is final.

    Parameters
    ----------
    i : int
    cand : ndarray of int
        Best candidates by exact score, best first (indices into the partner stack).
    raw : ndarray
        Their exact raw scores.
    stack_b : PaletteStack
        The partners' palettes.
    pair_rules : harmony.rules.PairRules
    top : int
    diversity : float

    Returns
    -------
    list of int
        Partner indices in rank order (at most ``top``). Later steps that reorder or filter a
        product's partners in one category (curation, blending, look-alikes) belong here.
    """
    if diversity > 0 and len(cand) > 1:
        sim = similarity_matrix(PaletteStack(stack_b.jab[cand], stack_b.weights[cand]))
        return [int(cand[c]) for c in mmr_select(to_unit(raw, pair_rules), sim, top, diversity)]
    return [int(j) for j in cand[:top]]


def _labels(plan, cat, threshold):
    """ColourLabels of every palette of a category, made once per run (one colour conversion)."""
    key = (cat, float(threshold))
    got = plan.labels.get(key)
    if got is None:
        _, stack, _, sizes = plan.categories[cat]
        mask = np.arange(stack.jab.shape[1])[None, :] < sizes[:, None]
        jab = stack.jab[mask]
        codes = colour.jab_to_hex(jab) if len(jab) else []
        names = [colour_name(c, threshold) for c in jab]
        got, at = [], 0
        for n in sizes.tolist():
            got.append(ColourLabels(tuple(codes[at : at + n]), tuple(names[at : at + n]), float(threshold)))
            at += n
        plan.labels[key] = got
    return got


def _direction_chunk(plan, x, y, res, pair_rules, lo=0):
    """The FeedChunk of products of ``x`` (from position ``lo``) with partners of ``y`` from
    their screen result."""
    ids_x, stack_x, _, sizes_x = plan.categories[x]
    ids_y, stack_y, in_y, sizes_y = plan.categories[y]
    sub = PaletteStack(stack_y.jab[in_y], stack_y.weights[in_y])
    prod_i, part_j, ranks = [], [], []
    extra = 0 if plan.curation is None else len(plan.curation.blocks)  # curation: room for blocked partners
    for r in range(res.indices.shape[0]):
        i = lo + r
        chosen = finalise_partners(i, res.indices[r], res.raw[r], sub, pair_rules, plan.top + extra, plan.diversity)
        prod_i.extend([i] * len(chosen))
        part_j.extend(int(in_y[j]) for j in chosen)
        ranks.extend(range(1, len(chosen) + 1))
    t = pair_rules.neutral_threshold
    scores, reasons = scores_and_reasons(
        stack_x, stack_y, np.array(prod_i, dtype=np.int64), np.array(part_j, dtype=np.int64), pair_rules,
        labels_a=_labels(plan, x, t), labels_b=_labels(plan, y, t),
    )
    chunk = FeedChunk(x, y, [ids_x[i] for i in prod_i], [ids_y[j] for j in part_j], ranks,
                      scores.tolist(), reasons, [False] * len(prod_i))
    if plan.curation is not None:  # curation: blocks, floors, pins
        rows = [FeedRow(**rec) for rec in chunk.records()]
        rows = curate_rows(plan.curation, rows, y, _pin_scorer(plan, x, y, pair_rules), plan.top)
        chunk = FeedChunk(x, y, [r.product for r in rows], [r.partner for r in rows], [r.rank for r in rows],
                          [r.score for r in rows], [r.reason for r in rows], [r.pinned for r in rows])
    return chunk


class _Colours:
    """A palette's colours and shares as :func:`pair_score` reads them."""

    def __init__(self, jab, weights):
        self.jab, self.weights = jab, weights


def _pin_scorer(plan, x, y, pair_rules):
    """``score_of(product, partner)`` for curation pins: the scored row, or None when unavailable."""
    ids_x, stack_x, _, sizes_x = plan.categories[x]
    ids_y, stack_y, in_y, sizes_y = plan.categories[y]
    pos_x = {pid: n for n, pid in enumerate(ids_x)}
    pos_y = {ids_y[j]: int(j) for j in in_y}

    def colours(stack, sizes, n):
        return _Colours(stack.jab[n, : sizes[n]], stack.weights[n, : sizes[n]])

    def score_of(pid, partner):
        j = pos_y.get(partner)
        if j is None:
            return None
        i = pos_x[pid]
        ps = pair_score(colours(stack_x, sizes_x, i), colours(stack_y, sizes_y, j), pair_rules)
        return FeedRow(pid, x, partner, y, 0, float(ps.score), ps.reason)

    return score_of


def task_parts(plan, task):
    """The parts of one unordered category pair ``task``: ``None`` for the whole pair, else
    ``(x, lo, hi)`` per block of :attr:`FeedPlan.block` products of side x, a to b first."""
    a, b, ab, ba = task
    sizes = {x: len(plan.categories[x][0]) for x in (a, b)}
    if max(sizes[a] if ab else 0, sizes[b] if ba else 0) <= plan.block:
        return [None]
    return [(x, lo, min(lo + plan.block, sizes[x]))
            for on, x in ((ab, a), (ba, b)) if on
            for lo in range(0, sizes[x], plan.block)]


def task_chunks(plan, rules, task, part=None):
    """The FeedChunks of one unordered category pair ``task`` (a to b first, then b to a), or of
    one ``part`` of it (see :func:`task_parts`): the products ``lo:hi`` of side x only."""
    a, b, ab, ba = task
    _, stack_a, in_a, _ = plan.categories[a]
    _, stack_b, in_b, _ = plan.categories[b]
    rows = {a: None, b: None}
    if part is not None:
        side, lo, hi = part
        rows = {x: slice(lo, hi) if x == side else slice(0, 0) for x in (a, b)}
    pr_ab, pr_ba = rules.for_pair(a, b), rules.for_pair(b, a)
    grid = BinGrid(neutral_threshold=pr_ab.neutral_threshold, neutral_fade=pr_ab.neutral_fade)
    if ab and ba and _transposes(rules, a, b):
        res_ab, res_ba = screen_both_ways(stack_a, stack_b, pr_ab, pr_ba, k=plan.pool_size,
                                          partners_a=in_a, partners_b=in_b, grid=grid,
                                          exact_below=EXACT_PAIRS, rows_a=rows[a], rows_b=rows[b])
        results = [(a, b, res_ab, pr_ab), (b, a, res_ba, pr_ba)]
    else:
        results = []
        for on, x, y, pr in ((ab, a, b, pr_ab), (ba, b, a, pr_ba)):
            _, stack_x, _, _ = plan.categories[x]
            _, stack_y, in_y, _ = plan.categories[y]
            if on and len(in_y) and len(stack_x) and (rows[x] is None or rows[x].stop > rows[x].start):
                sub = PaletteStack(stack_y.jab[in_y], stack_y.weights[in_y])
                res = screen_top_k(stack_x, sub, pr, k=plan.pool_size, grid=grid, exact_below=EXACT_PAIRS,
                                   rows=rows[x])
                results.append((x, y, res, pr))
    out = []
    for x, y, res, pr in results:
        skip = rows[x] is not None and rows[x].stop <= rows[x].start
        if not skip and len(plan.categories[x][0]) and len(plan.categories[y][2]):
            out.append(_direction_chunk(plan, x, y, res, pr, lo=0 if rows[x] is None else rows[x].start))
    return out


def suggest(store, rules, product_id, category=None, n=5, curation=None):
    """The best in-stock partners of one product, with their explanations.

    Parameters
    ----------
    store : harmony.shop.store.Store
    rules : harmony.rules.RuleSet
    product_id : str
    category : str, optional
        Only partners of this category (default: every category the rules pair it with).
    n : int
    curation : harmony.suggest.curation.Curation, optional
        Applied over the merged list (pins of every category, or of ``category``, at their rank).

    Returns
    -------
    list of Suggestion
        Best score first (exact scores; every in-stock candidate is scored).

    Raises
    ------
    StoreError
        Unknown product id or category, a product without a palette, or nothing to suggest.
    """
    n = int(n)
    if n < 1:
        raise HarmonyError(f"n must be at least 1, got {n}")
    product = store.product(product_id)
    pal = store.palette(product.id)
    if pal is None:
        raise StoreError(f"{store.path}: product '{product.id}' has no palette (its images gave none)")
    by_cat, palettes = _sides(store)
    known = sorted(by_cat)
    own = product.category_key
    if category is not None:
        cat = _resolve_category(category, known, str(store.path))
        if cat == own:
            raise StoreError(f"{store.path}: '{cat}' is the category of '{product.id}' itself")
        if not rules.pairs_with(own, cat):
            raise StoreError(f"{rules.path}: the rules do not score '{own}' with '{cat}'")
        cats = [cat]
    else:
        cats = [c for c in known if c != own and rules.pairs_with(own, c)
                and category_pair_allowed(curation, own, c)]  # curation: category pairs
        if not cats:
            raise StoreError(f"{rules.path}: the rules pair '{own}' with no other category of the store")
    found = []
    extra = 0 if curation is None else len(curation.blocks)  # curation: room for blocked partners
    scored = {}
    for cat in cats:
        ids = [p.id for p in by_cat[cat] if p.in_stock() and p.id in palettes]
        if not ids:
            continue
        pr = rules.for_pair(own, cat)
        raw = exact_raw(pal, [palettes[i] for i in ids], pr.kernel)
        order = np.lexsort((np.arange(len(ids)), -raw))[:n + extra]
        for j in order:
            ps = pair_score(pal, palettes[ids[j]], pr)
            found.append((-ps.score, cat, ids[j], ps))
        scored[cat] = (set(ids), pr)
    if not found:
        where = f"category '{cats[0]}'" if category is not None else "the paired categories"
        raise StoreError(f"{store.path}: no in-stock partner with a palette in {where}")
    found.sort(key=lambda t: t[:3])
    pairs = {pid: ps for _, _, pid, ps in found}
    rows = [FeedRow(product.id, own, pid, cat, rank, float(ps.score), ps.reason)
            for rank, (_, cat, pid, ps) in enumerate(found, start=1)]
    if curation is not None:  # curation: blocks, floors, pins, partner categories

        def score_of(partner):
            for cat, (ids, pr) in scored.items():
                if partner in ids:
                    pairs[partner] = pair_score(pal, palettes[partner], pr)
                    return FeedRow(product.id, own, partner, cat, 0, float(pairs[partner].score), pairs[partner].reason)
            return None

        rows = limit_partner_categories(curation, curate(curation, product.id, cats[0] if category else None,
                                                         rows, score_of, n))
    rows = [dataclasses.replace(r, rank=rank) for rank, r in enumerate(rows[:n], start=1)]
    if not rows:
        raise StoreError(f"{store.path}: every partner of '{product.id}' was removed by the curation file")
    return [Suggestion(row=r, pair=pairs[r.partner], palette=palettes[r.partner]) for r in rows]


def write_feed(rows, path, fmt=None):
    """Write feed rows (a list of :class:`FeedRow`) as JSON lines, CSV or Parquet, in their order.

    The file is written whole: through a temporary file in the same folder and a rename, so a
    reader never sees half a feed and a failed write leaves an older feed as it was. Missing
    parent folders are created. Parquet needs pyarrow (the ``parquet`` extra). Returns the path.

    Raises
    ------
    HarmonyError
        Unknown format, pyarrow missing for Parquet, or a file or folder that cannot be written.
    """
    rows = list(rows)

    def chunks():
        # Consecutive rows of one category pair go together (one Parquet row group each).
        lo = 0
        for hi in range(1, len(rows) + 1):
            if hi == len(rows) or (rows[hi].category, rows[hi].partner_category) != (rows[lo].category, rows[lo].partner_category):
                part = rows[lo:hi]
                yield FeedChunk(part[0].category, part[0].partner_category, [r.product for r in part],
                                [r.partner for r in part], [r.rank for r in part], [r.score for r in part],
                                [r.reason for r in part], [bool(r.pinned) for r in part])
                lo = hi

    return write_chunks(chunks(), path, fmt)[0]
