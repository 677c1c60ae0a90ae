"""A stylist's curation on top of the scores: pins, blocks, category pairs, score floors.

A curation file is TOML a merchandiser edits; :func:`load_curation` validates it and reports every
problem as ``FILE:LINE: key: reason`` (the same line finding as rules files). Example::

    format = 1
    max_partner_categories = 3      # per product, best categories kept
    min_score = 0.30                # default floor under which a suggestion is not shown
    only_listed_category_pairs = false

    [[pin]]                         # always show this partner, at this rank
    product = "SOF-001"
    partner = "RUG-004"
    rank = 1

    [[block]]                       # never suggest these two together (both directions)
    product = "SOF-002"
    partner = "RUG-001"

    [[block]]                       # never suggest any product of a category with this product
    product = "DSK-001"
    category = "cushion"

    [[category_pair]]               # never suggest these categories together
    categories = ["desk", "armchair"]
    blocked = true

    [[category_pair]]               # a floor of its own for one pair of categories
    categories = ["sofa", "rug"]
    min_score = 0.45

Category pairs are unordered. With ``only_listed_category_pairs = true`` only the listed pairs
that are not blocked are suggested. A pin or block naming a product the store does not hold is a
warning naming its line (:func:`unknown_product_warnings`); the same rule given twice is an error.

Everything that applies curation is a pure function over plain rows, so any feed builder can use
it: :func:`category_pair_allowed`, :func:`curate` (one product's ranked partner rows of one
partner category) and :func:`limit_partner_categories` (one product's rows of every category).
Rows are objects with the fields of :class:`harmony.suggest.feed.FeedRow` and are returned as
copies (:func:`dataclasses.replace`) with ``pinned`` set and ``rank`` renumbered.
"""

import dataclasses
import difflib
import hashlib
import math
import tomllib
from collections.abc import Mapping
from pathlib import Path

from harmony.errors import HarmonyError
from harmony.rules.fileformat import _Problems
from harmony.shop.catalogue import normalise_category

__all__ = [
    "CurationError",
    "Pin",
    "Block",
    "CategoryPair",
    "Curation",
    "FORMAT_VERSION",
    "parse_curation",
    "load_curation",
    "unknown_product_warnings",
    "category_pair_allowed",
    "min_score_for",
    "curate",
    "curate_rows",
    "limit_partner_categories",
    "set_allowed",
    "removal_reason",
]

#: Version of the curation format (the file's ``format`` key).
FORMAT_VERSION = 1


class CurationError(HarmonyError):
    """A curation file is not valid; the message lists every problem as ``FILE:LINE: key: reason``."""


@dataclasses.dataclass(frozen=True)
class Pin:
    product: str
    partner: str
    rank: int
    line: int


@dataclasses.dataclass(frozen=True)
class Block:
    """``partner`` (a product id) or ``category`` (normalised): exactly one is set."""

    product: str
    partner: str | None
    category: str | None
    line: int


@dataclasses.dataclass(frozen=True)
class CategoryPair:
    categories: tuple  # two normalised names, sorted
    blocked: bool
    min_score: float | None
    line: int


@dataclasses.dataclass(frozen=True)
class Curation:
    """A validated curation file. ``sha256`` is the hash of the file's bytes."""

    path: str = "<none>"
    sha256: str = ""
    pins: tuple = ()
    blocks: tuple = ()
    category_pairs: tuple = ()
    min_score: float = 0.0
    max_partner_categories: int | None = None
    only_listed_category_pairs: bool = False

    @property
    def empty(self):
        """True when the file changes nothing: no pin, block, category pair, floor or limit."""
        return (not (self.pins or self.blocks or self.category_pairs or self.only_listed_category_pairs)
                and self.min_score == 0.0 and self.max_partner_categories is None)

    def pins_of(self, product):
        return [p for p in self.pins if p.product == product]

    def pair_rule(self, cat_a, cat_b):
        key = tuple(sorted((normalise_category(cat_a), normalise_category(cat_b))))
        for rule in self.category_pairs:
            if rule.categories == key:
                return rule
        return None

    def block_of(self, product, partner, partner_category):
        """The block that forbids ``partner`` (of ``partner_category``) beside ``product``, or None."""
        cat = normalise_category(partner_category)
        for b in self.blocks:
            if b.partner is not None and {b.product, b.partner} == {product, partner}:
                return b
            if b.category is not None and b.product == product and b.category == cat:
                return b
        return None


_TOP_KEYS = {"format", "min_score", "max_partner_categories", "only_listed_category_pairs",
             "pin", "block", "category_pair"}


def _id(problems, table, key, path):
    value = table.get(key)
    if not isinstance(value, str) or not value.strip():
        problems.add(path + (key,), "must be a product id (a non-empty string)")
        return None
    return value.strip()


def _score(problems, value, path):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
            or not 0.0 <= value <= 1.0:
        problems.add(path, "must be a number from 0 to 1 (a pair score)")
        return None
    return float(value)


def _list_of_tables(problems, data, key):
    value = data.get(key, [])
    if not isinstance(value, list) or not all(isinstance(t, dict) for t in value):
        problems.add((key,), f"must be an array of tables ([[{key}]])")
        return []
    return value


def parse_curation(text, where="<string>", sha256=""):
    """Validate the text of a curation file; see the module docstring for the format.

    Raises
    ------
    CurationError
        Not TOML, an unknown key, a wrong type or range, a block naming both or neither of
        ``partner`` and ``category``, a pin that a block forbids, or a rule given twice.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CurationError(f"{where}: not valid TOML: {exc}") from None
    problems = _Problems(where, text)
    problems.unknown_keys(data, _TOP_KEYS, ())
    fmt = data.get("format", FORMAT_VERSION)
    if fmt != FORMAT_VERSION:
        problems.add(("format",), f"format {fmt!r} is not known; this harmony reads format {FORMAT_VERSION}")
    default = _score(problems, data.get("min_score", 0.0), ("min_score",))
    limit = data.get("max_partner_categories")
    if limit is not None and (isinstance(limit, bool) or not isinstance(limit, int) or limit < 1):
        problems.add(("max_partner_categories",), "must be a whole number of at least 1")
        limit = None
    only = data.get("only_listed_category_pairs", False)
    if not isinstance(only, bool):
        problems.add(("only_listed_category_pairs",), "must be true or false")
        only = False

    pins, seen = [], {}
    for i, table in enumerate(_list_of_tables(problems, data, "pin")):
        path = ("pin", i)
        problems.unknown_keys(table, {"product", "partner", "rank"}, path)
        product, partner = _id(problems, table, "product", path), _id(problems, table, "partner", path)
        rank = table.get("rank", 1)
        if isinstance(rank, bool) or not isinstance(rank, int) or rank < 1:
            problems.add(path + ("rank",), "must be a whole number of at least 1")
            continue
        if product is None or partner is None:
            continue
        if product == partner:
            problems.add(path + ("partner",), "a product cannot be its own partner")
            continue
        line = problems.line_of(path)
        for key, what in (((product, partner), f"pin {product} -> {partner}"),
                          ((product, "#rank", rank), f"a second pin of {product} at rank {rank}")):
            if key in seen:
                problems.add(path, f"{what} is given twice (first on line {seen[key]})")
            seen.setdefault(key, line)
        pins.append(Pin(product, partner, rank, line))

    blocks, seen = [], {}
    for i, table in enumerate(_list_of_tables(problems, data, "block")):
        path = ("block", i)
        problems.unknown_keys(table, {"product", "partner", "category"}, path)
        product = _id(problems, table, "product", path)
        has_partner, has_category = "partner" in table, "category" in table
        if has_partner == has_category:
            problems.add(path, "give either partner (a product id) or category, not both or neither")
            continue
        partner = _id(problems, table, "partner", path) if has_partner else None
        category = None
        if has_category:
            raw = table["category"]
            if not isinstance(raw, str) or not normalise_category(raw):
                problems.add(path + ("category",), "must be a category name")
                continue
            category = normalise_category(raw)
        if product is None or (has_partner and partner is None):
            continue
        key = ("pair", frozenset((product, partner))) if partner else ("category", product, category)
        line = problems.line_of(path)
        if key in seen:
            problems.add(path, f"this block is given twice (first on line {seen[key]})")
            continue
        seen[key] = line
        blocks.append(Block(product, partner, category, line))

    pairs, seen = [], {}
    for i, table in enumerate(_list_of_tables(problems, data, "category_pair")):
        path = ("category_pair", i)
        problems.unknown_keys(table, {"categories", "blocked", "min_score"}, path)
        cats = table.get("categories")
        if not (isinstance(cats, list) and len(cats) == 2 and all(isinstance(c, str) and normalise_category(c)
                                                                    for c in cats)):
            problems.add(path + ("categories",), "must be two category names")
            continue
        key = tuple(sorted(normalise_category(c) for c in cats))
        if key[0] == key[1]:
            problems.add(path + ("categories",), "must name two different categories")
            continue
        blocked = table.get("blocked", False)
        if not isinstance(blocked, bool):
            problems.add(path + ("blocked",), "must be true or false")
            continue
        floor = None
        if "min_score" in table:
            floor = _score(problems, table["min_score"], path + ("min_score",))
        line = problems.line_of(path)
        if key in seen:
            problems.add(path, f"category pair {key[0]} + {key[1]} is given twice (first on line {seen[key]})")
            continue
        seen[key] = line
        pairs.append(CategoryPair(key, blocked, floor, line))

    curation = Curation(where, sha256, tuple(pins), tuple(blocks), tuple(pairs),
                        0.0 if default is None else default, limit, only)
    for pin in curation.pins:
        block = next((b for b in curation.blocks if b.partner is not None
                      and {b.product, b.partner} == {pin.product, pin.partner}), None)
        if block is not None:
            problems.add(("pin", curation.pins.index(pin)),
                         f"pins {pin.product} -> {pin.partner}, which the block on line {block.line} forbids")
    if problems.items:
        err = problems.error()
        raise CurationError(str(err)) from None
    return curation


def load_curation(path):
    """Read and validate a curation file (see :func:`parse_curation`)."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise CurationError(f"{path}: cannot read the curation file: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8-sig")  # a byte order mark (some editors write one) is dropped
    except UnicodeDecodeError as exc:
        raise CurationError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    return parse_curation(text, where=str(path), sha256=hashlib.sha256(raw).hexdigest())


def unknown_product_warnings(curation, product_ids, categories=()):
    """One message per pin, block or category pair naming a product (or category) the store does
    not hold, and one for a file that changes nothing; with ``product_ids`` a mapping of id to normalised category, also per pin joining
    two products of one category (the feed pairs different categories, so it never shows)."""
    ids = set(product_ids)
    category_of = product_ids if isinstance(product_ids, Mapping) else {}
    cats = set(categories)
    out = []
    if curation.empty:  # an empty or all-comment file, most likely not the one meant
        out.append(f"{curation.path}: no pin, block, category pair, min_score or limit; the feed is as it would "
                   "be without this file")

    def hint(name, known):
        close = difflib.get_close_matches(name, sorted(known), n=1)
        return f" (did you mean '{close[0]}'?)" if close else ""

    def check(pid, line, what):
        if pid not in ids:
            out.append(f"{curation.path}:{line}: {what} names unknown product '{pid}'{hint(pid, ids)}; ignored")

    def check_category(cat, line, what):
        if cats and cat not in cats:
            out.append(f"{curation.path}:{line}: {what} names category '{cat}', which the store has none of"
                       f"{hint(cat, cats)}")

    for p in curation.pins:
        check(p.product, p.line, "pin")
        check(p.partner, p.line, "pin")
        cat = category_of.get(p.product)
        if cat is not None and cat == category_of.get(p.partner):
            out.append(f"{curation.path}:{p.line}: pin {p.product} -> {p.partner}: both are {cat}; the feed pairs "
                       "products of different categories, so the pin is ignored")
    for b in curation.blocks:
        check(b.product, b.line, "block")
        if b.partner is not None:
            check(b.partner, b.line, "block")
        else:
            check_category(b.category, b.line, "block")
    for rule in curation.category_pairs:
        for cat in dict.fromkeys(rule.categories):
            check_category(cat, rule.line, "category_pair")
    return out


def category_pair_allowed(curation, cat_a, cat_b):
    """Whether products of ``cat_a`` may get partners of ``cat_b`` at all."""
    if curation is None:
        return True
    rule = curation.pair_rule(cat_a, cat_b)
    if rule is not None and rule.blocked:
        return False
    return rule is not None or not curation.only_listed_category_pairs


def min_score_for(curation, cat_a, cat_b):
    """The score floor of a category pair: its own, else the file's default."""
    rule = curation.pair_rule(cat_a, cat_b)
    return rule.min_score if rule is not None and rule.min_score is not None else curation.min_score


def curate(curation, product, partner_category, rows, score_of, top, floor_of=None):
    """One product's partner rows of one partner category, curated.

    Parameters
    ----------
    curation : Curation or None
        None returns the rows unchanged (with ``pinned`` false).
    product : str
    partner_category : str or None
        Normalised; None means the rows span every category (``harmony suggest``): every pin of
        the product applies.
    rows : sequence of FeedRow-like
        Best first, as ranked by the scores.
    score_of : callable (partner id) -> FeedRow-like or None
        The scored row of a pinned partner not among ``rows``; None when it cannot be shown
        (unknown, out of stock, no palette, or its category is not paired).
    top : int
        How many rows to return at most.
    floor_of : callable (row) -> float or None, optional
        The score a row's floor is checked on (default: its ``score``); None keeps the row (a
        blended row harmony could not score).

    Returns
    -------
    list
        Blocked partners and rows under the pair's score floor removed; pinned partners placed
        at their rank (pins are kept whatever their score); ranks renumbered from 1.
    """
    rows = list(rows)
    if curation is None:
        return [dataclasses.replace(r, pinned=False) for r in rows[:top]]
    kept = []
    for r in rows:
        if curation.block_of(product, r.partner, r.partner_category) is not None:
            continue
        judged = r.score if floor_of is None else floor_of(r)
        if judged is not None and judged < min_score_for(curation, r.category, r.partner_category):
            continue
        kept.append(r)
    pins = sorted(curation.pins_of(product), key=lambda p: (p.rank, p.line))
    pinned = []
    for pin in pins:
        row = next((r for r in rows if r.partner == pin.partner), None) or score_of(pin.partner)
        if row is None or (partner_category is not None and row.partner_category != partner_category):
            continue
        pinned.append((pin.rank, dataclasses.replace(row, pinned=True)))
    pinned_ids = {row.partner for _rank, row in pinned}
    out = [dataclasses.replace(r, pinned=False) for r in kept if r.partner not in pinned_ids]
    for rank, row in pinned:
        out.insert(min(rank - 1, len(out)), row)
    # Pins are never cut for the plain rows they push down.
    while len(out) > top and any(not r.pinned for r in out):
        last = max(i for i, r in enumerate(out) if not r.pinned)
        out.pop(last)
    return [dataclasses.replace(r, rank=i) for i, r in enumerate(out, start=1)]


def curate_rows(curation, rows, partner_category, score_of, top):
    """:func:`curate` applied to each product's run of ``rows`` (rows of one product are adjacent).

    ``score_of(product, partner)`` gives the scored row of a pinned partner, or None.
    """
    out, run = [], []
    for r in list(rows) + [None]:
        if run and (r is None or r.product != run[0].product):
            pid = run[0].product
            out.extend(curate(curation, pid, partner_category, run, lambda partner: score_of(pid, partner), top))
            run = []
        if r is not None:
            run.append(r)
    return out


def limit_partner_categories(curation, rows):
    """One product's curated rows of every partner category, cut to the allowed number of categories.

    Categories holding a pin come first, then those whose best row scores highest (ties by name).
    """
    rows = list(rows)
    if curation is None or curation.max_partner_categories is None:
        return rows
    best = {}
    for r in rows:
        pinned, score = best.get(r.partner_category, (False, -math.inf))
        best[r.partner_category] = (pinned or bool(r.pinned), max(score, r.score))
    order = sorted(best, key=lambda c: (not best[c][0], -best[c][1], c))
    keep = set(order[: curation.max_partner_categories])
    return [r for r in rows if r.partner_category in keep]


def set_allowed(curation, items):
    """Whether a room set may hold these products together: no block joins two of them.

    ``items`` are (product id, category) pairs. Room sets honour blocks only: the room template
    already chooses the categories, and a set is scored as a whole, not shown pair by pair.
    """
    if curation is None:
        return True
    items = list(items)
    return not any(curation.block_of(a, b, cat_b) is not None
                   for a, _cat_a in items for b, cat_b in items if a != b)


def removal_reason(curation, row):
    """Why curation would remove a scored row, as a short phrase naming the line, or None."""
    block = curation.block_of(row.product, row.partner, row.partner_category)
    if block is not None:
        return f"blocked ({curation.path}:{block.line})"
    rule = curation.pair_rule(row.category, row.partner_category)
    if not category_pair_allowed(curation, row.category, row.partner_category):
        where = f":{rule.line}" if rule is not None else " (only listed pairs)"
        return f"category pair not suggested ({curation.path}{where})"
    floor = min_score_for(curation, row.category, row.partner_category)
    if row.score < floor:
        line = rule.line if rule is not None and rule.min_score is not None else None
        return f"score {row.score:.2f} under the floor {floor:.2f}" + (f" ({curation.path}:{line})" if line else "")
    return None
