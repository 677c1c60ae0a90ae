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

import csv
import difflib
import io
import itertools
import json
import warnings
import dataclasses
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from tqdm import tqdm

from harmony.errors import HarmonyError, StoreError
from harmony.fileio import spreadsheet_safe_row, write_text_whole, write_whole
from harmony.photo.palette import Palette
from harmony.rules.score import (
    PairScore,
    colour_labels,
    pair_score,
    pair_scores,
    to_unit,
)
from harmony.rules.screen import BinGrid, PaletteStack, exact_raw, screen_top_k
from harmony.shop.catalogue import normalise_category
from harmony.suggest.curation import category_pair_allowed, curate, curate_rows, limit_partner_categories

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
    "build_feed",
    "suggest",
    "write_feed",
]

#: Feed columns, in file order (the JSONL keys, CSV header and Parquet schema).
FEED_COLUMNS = ("product", "category", "partner", "partner_category", "rank", "score", "reason", "pinned")

#: Output formats of :func:`write_feed`, by file suffix.
FEED_FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".csv": "csv", ".parquet": "parquet"}

#: Length scale (CAM02-UCS Delta E) of the Gaussian colour kernel behind palette similarity.
#: Hand-set: about ten just-noticeable differences (a JND is about 1 Delta E in CAM02-UCS, Luo,
#: Cui & Li 2006), so two palettes of the same colours in a slightly different shade count as
#: near-identical and a clearly different shade does not.
SIMILARITY_DELTA_E = 10.0


#: Category pairs with at most this many product pairs are scored exactly pair by pair instead of
#: screened (``screen_top_k(..., exact_below=EXACT_PAIRS)``): below it the exact scores cost less
#: than factorising the screen's bin kernel (about 0.1 s for 20,000 pairs of 10-colour palettes).
EXACT_PAIRS = 20_000


@dataclass(frozen=True)
class FeedRow:
    """One line of the feed: ``partner`` is the ``rank``-th best partner of ``product``.

    Categories are normalised (:func:`harmony.shop.catalogue.normalise_category`); ``rank`` starts
    at 1; ``score`` is the exact pair score in [0, 1]; ``reason`` is its explanation sentence;
    ``pinned`` is true when a curation file placed this partner (see :mod:`harmony.suggest.curation`).
    """

    product: str
    category: str
    partner: str
    partner_category: str
    rank: int
    score: float
    reason: str
    pinned: bool = False

    def to_dict(self):
        return asdict(self)


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
    diff = jab_a.reshape(-1, 1, 3) - jab_b.reshape(1, -1, 3)
    g = np.exp(-np.einsum("ijc,ijc->ij", diff, diff) / (2.0 * sigma * sigma)).reshape(n, k, m, l)
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


def build_feed(store, rules, top=10, targets=None, diversity=0.0, *, pool=None, warn=None, progress=False,
               curation=None):
    """The feed: for each product, its top partners in each category the rules pair it with.

    Parameters
    ----------
    store : harmony.shop.store.Store
    rules : harmony.rules.RuleSet
    top : int
        Partners per product and target category.
    targets : iterable of str, optional
        Partner categories to list (default: every category of the store).
    diversity : float in [0, 1]
        Weight of the redundancy term of maximal marginal relevance; 0 lists the best scores.
    pool : int, optional
        With diversity, how many best-scoring partners MMR chooses from (default ``3 * top``).
    warn : callable, optional
        Called with a one-line message for each warning (default: :func:`warnings.warn`).
    progress : bool
        Show a progress bar over the category pairs on stderr.
    curation : harmony.suggest.curation.Curation, optional
        Pins, blocks, category pairs, score floors and the partner-category limit to apply.

    Returns
    -------
    list of FeedRow
        Sorted by product id, partner category, rank.

    Raises
    ------
    StoreError
        Empty store, no palettes, or an unknown target category.
    """
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

    partners = {}
    for cat in target_keys:
        ids = [p.id for p in by_cat[cat] if p.in_stock() and p.id in palettes]
        if not ids:
            _warn(warn, f"target category '{cat}' has no in-stock product with a palette; it gets no rows")
        partners[cat] = ids
    missing = sum(1 for p in store.products() if p.id not in palettes)
    if missing:
        _warn(warn, f"{missing} product(s) have no palette and are left out (see 'harmony extract' failures)")

    labels = {}

    def labels_of(pid, threshold):
        key = (pid, threshold)
        if key not in labels:
            labels[key] = colour_labels(palettes[pid].jab, threshold)
        return labels[key]

    work = [(a, b) for a in known for b in target_keys if b != a and rules.pairs_with(a, b)
            and category_pair_allowed(curation, a, b)]  # curation: category pairs
    extra = 0 if curation is None else len(curation.blocks)  # curation: room for blocked partners
    if targets is not None:
        for cat in sorted(set(target_keys) - {b for _, b in work}):
            _warn(warn, f"{rules.path}: the rules pair target category '{cat}' with no other category; it gets no rows")
    rows = []
    for cat_a, cat_b in tqdm(work, desc="feed", unit="category pair", disable=not progress, leave=False):
        ids_a = [p.id for p in by_cat[cat_a] if p.id in palettes]
        ids_b = partners[cat_b]
        if not ids_a or not ids_b:
            continue
        pr = rules.for_pair(cat_a, cat_b)
        pals_a = [palettes[i] for i in ids_a]
        pals_b = [palettes[i] for i in ids_b]
        grid = BinGrid(neutral_threshold=pr.neutral_threshold, neutral_fade=pr.neutral_fade)
        res = screen_top_k(pals_a, pals_b, pr, k=pool_size, grid=grid, exact_below=EXACT_PAIRS)
        t = pr.neutral_threshold
        emitted = []  # (i, j, rank): explained below, all rows of this pair in one batch
        for i, pid in enumerate(ids_a):
            cand = res.indices[i]
            if diversity > 0 and len(cand) > 1:
                sim = similarity_matrix([pals_b[j] for j in cand])
                chosen = [int(cand[c]) for c in mmr_select(to_unit(res.raw[i], pr), sim, top + extra, diversity)]
            else:
                chosen = [int(j) for j in cand[:top + extra]]
            emitted.extend((i, j, rank) for rank, j in enumerate(chosen, start=1))
        scored = pair_scores(
            [pals_a[i] for i, _, _ in emitted], [pals_b[j] for _, j, _ in emitted], pr,
            labels_a=[labels_of(ids_a[i], t) for i, _, _ in emitted],
            labels_b=[labels_of(ids_b[j], t) for _, j, _ in emitted],
        )
        new = [FeedRow(ids_a[i], cat_a, ids_b[j], cat_b, rank, float(ps.score), ps.reason)
               for (i, j, rank), ps in zip(emitted, scored)]
        if curation is not None:  # curation: blocks, floors, pins
            new = curate_rows(curation, new, cat_b, _pin_scorer(palettes, set(ids_b), cat_a, cat_b, pr), top)
        rows.extend(new)
    rows.sort(key=lambda r: (r.product, r.partner_category, r.rank))
    if curation is not None:  # curation: partner categories per product
        rows = [r for _pid, run in itertools.groupby(rows, key=lambda r: r.product)
                for r in limit_partner_categories(curation, run)]
    return rows


def _pin_scorer(palettes, available, cat_a, cat_b, pair_rules):
    """``score_of(product, partner)`` for curation pins: the scored row, or None when unavailable."""
    def score_of(pid, partner):
        if partner not in available:
            return None
        ps = pair_score(palettes[pid], palettes[partner], pair_rules)
        return FeedRow(pid, cat_a, partner, cat_b, 0, float(ps.score), ps.reason)

    return score_of


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


def _format_of(path, fmt):
    if fmt is not None:
        if fmt not in ("jsonl", "csv", "parquet"):
            raise HarmonyError(f"unknown feed format '{fmt}' (use jsonl, csv or parquet)")
        return fmt
    suffix = Path(path).suffix.lower()
    if suffix not in FEED_FORMATS:
        raise HarmonyError(f"{path}: cannot tell the feed format from the suffix (use .jsonl, .csv or .parquet, or --format)")
    return FEED_FORMATS[suffix]


def _parquet_table(records):
    try:
        import pyarrow as pa
    except ImportError:
        raise HarmonyError("Parquet output needs pyarrow: pip install 'harmony[parquet]'") from None
    schema = pa.schema(
        [
            ("product", pa.string()),
            ("category", pa.string()),
            ("partner", pa.string()),
            ("partner_category", pa.string()),
            ("rank", pa.int32()),
            ("score", pa.float64()),
            ("reason", pa.string()),
            ("pinned", pa.bool_()),
        ]
    )
    return pa.table({c: [rec[c] for rec in records] for c in FEED_COLUMNS}, schema=schema)


def _write_parquet_whole(table, path):
    """Write a pyarrow table to ``path`` whole (see :func:`harmony.fileio.write_whole`)."""
    import pyarrow.parquet as pq

    write_whole(path, lambda tmp: pq.write_table(table, tmp), what="feed")


def write_feed(rows, path, fmt=None):
    """Write feed rows as JSON lines, CSV or Parquet (format from ``fmt`` or the file suffix).

    The file is written whole: through a temporary file in the same folder and a rename, so a
    reader never sees half a feed and a failed write leaves an older feed as it was. Missing
    parent folders are created. Parquet needs pyarrow (the ``parquet`` extra). Returns the path.

    Raises
    ------
    HarmonyError
        Unknown format, pyarrow missing for Parquet, or a file or folder that cannot be written.
    """
    path = Path(path)
    fmt = _format_of(path, fmt)
    records = [r.to_dict() for r in rows]
    if fmt == "jsonl":
        text = "".join(json.dumps(rec, ensure_ascii=False) + "\n" for rec in records)
        write_text_whole(path, text, "feed")
    elif fmt == "csv":
        buf = io.StringIO()
        writer = csv.DictWriter(buf, fieldnames=FEED_COLUMNS)
        writer.writeheader()
        writer.writerows(spreadsheet_safe_row(rec) for rec in records)
        write_text_whole(path, buf.getvalue(), "feed")
    else:
        _write_parquet_whole(_parquet_table(records), path)
    return path
