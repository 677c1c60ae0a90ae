"""Ranking methods: each scores the candidates of a query, higher is ranked earlier."""

from dataclasses import dataclass, field
from operator import attrgetter
from pathlib import Path

import numpy as np

from harmony.colour.emd import emd_pairs, signature
from harmony.shop.catalogue import normalise_category

__all__ = ["RulesMethod", "SameColoursMethod", "ColourAttributeMethod", "RandomMethod", "standard_methods"]

# --------------------------------------------------------------------------------------------
# Methods: each scores the candidates of a query, higher = ranked earlier
# --------------------------------------------------------------------------------------------


#: Kernel entries (query products' colours x candidates' colours) evaluated in one block.
KERNEL_BLOCK = 250_000

_ID = attrgetter("id")


def _stack(palettes, ids):
    jab = np.concatenate([palettes[i].jab for i in ids])
    w = np.concatenate([palettes[i].weights for i in ids])
    sizes = np.array([len(palettes[i]) for i in ids])
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    return jab, w, starts


def _columns(starts, sizes, picked):
    """Indices of the colours of palettes ``picked`` (each palette's run, in order) in a stack."""
    n = sizes[picked]
    return np.repeat(starts[picked] - (np.cumsum(n) - n), n) + np.arange(int(n.sum()))


@dataclass(frozen=True, eq=False)
class RulesMethod:
    """Rank by the raw pair score of a rules file, the query product's category first.

    The raw score ``w_a @ kernel(jab_a, jab_b) @ w_b`` ranks exactly as the score in [0, 1], which
    is strictly increasing in it. Pairs the file does not score tie. The scores of the queries of
    the latest call are remembered (read-only), so methods built on this one (blends) asking for
    the same queries next get them at no cost.
    """

    rules: object  # harmony.rules.RuleSet
    palettes: dict
    name: str = ""
    kind: str = field(default="rules", init=False)
    _known: dict = field(default_factory=dict, init=False, repr=False)

    def __call__(self, product, candidates):
        return self.score_queries([(product, candidates)])[0]

    def score_queries(self, asked):
        """Scores of many ``(product, candidates)`` queries (a list of arrays), the kernel of each
        pair of categories evaluated in blocks over all its queries."""
        keys = [(p.id, tuple(map(_ID, cands))) for p, cands in asked]
        groups = {}  # (category, partner category) -> {key: query}, the queries not known yet
        for (product, cands), key in zip(asked, keys):
            if key not in self._known:
                groups.setdefault((product.category, cands[0].category), {}).setdefault(key, (product, cands))
        latest = {key: self._known[key] for key in keys if key in self._known}
        for (cat_a, cat_b), todo in groups.items():
            for key, scores in zip(todo, self._score_pair(cat_a, cat_b, list(todo.values()))):
                scores.flags.writeable = False
                latest[key] = scores
        self._known.clear()
        self._known.update(latest)
        return [latest[key] for key in keys]

    def _score_pair(self, cat_a, cat_b, queries):
        if not self.rules.pairs_with(cat_a, cat_b):
            return [np.zeros(len(cands)) for _, cands in queries]
        pair = self.rules.for_pair(cat_a, cat_b)
        partners = list(dict.fromkeys(c.id for _, cands in queries for c in cands))
        jab_b, w_b, starts_b = _stack(self.palettes, partners)
        sizes_b = np.diff(np.append(starts_b, len(w_b)))
        column = {pid: i for i, pid in enumerate(partners)}
        blocks, rows = [[]], 0  # queries in blocks of at most KERNEL_BLOCK kernel entries (one query at least)
        for j, (product, _) in enumerate(queries):
            n = len(self.palettes[product.id])
            if blocks[-1] and (rows + n) * len(w_b) > KERNEL_BLOCK:
                blocks.append([])
                rows = 0
            blocks[-1].append(j)
            rows += n
        out = [None] * len(queries)
        for block in blocks:
            anchors = [self.palettes[queries[j][0].id] for j in block]
            # The kernel is colour by colour: each query's rows and columns of the block hold the
            # bits of that query's own kernel.
            kernel = pair.kernel(np.concatenate([pa.jab for pa in anchors]), jab_b)
            # The block's queries' partners laid end to end, then their colours.
            picked = np.array([column[pid] for j in block for pid in map(_ID, queries[j][1])])
            colours = sizes_b[picked]
            cols = _columns(starts_b, sizes_b, picked)
            counts = np.array([len(queries[j][1]) for j in block])
            widths = np.add.reduceat(colours, np.cumsum(counts) - counts).tolist()  # colours per query
            per_colour = np.empty(cols.size)
            at = lo = 0
            for pa, width in zip(anchors, widths):
                # C order, as a query's own kernel is: the product then sums in the same order.
                own = np.ascontiguousarray(kernel[at : at + len(pa), cols[lo : lo + width]])
                per_colour[lo : lo + width] = pa.weights @ own
                at += len(pa)
                lo += width
            per_colour *= w_b[cols]
            sums = np.add.reduceat(per_colour, np.cumsum(colours) - colours)  # per partner
            bounds = np.append(0, np.cumsum(counts)).tolist()
            for j, lo, hi in zip(block, bounds[:-1], bounds[1:]):
                out[j] = sums[lo:hi]
        return out


@dataclass(frozen=True, eq=False)
class SameColoursMethod:
    """Rank by palette likeness: minus the earth mover's distance (Rubner et al. 2000).

    The distance is symmetric, and a pair usually comes back with its roles swapped (when the
    partner is a query product too), so each unordered pair is solved once and remembered.
    :meth:`score_queries` solves the new pairs of many queries together, with the query product
    of the first query that asks for a pair as its first palette, as query by query calls would.
    """

    palettes: dict
    name: str = "same colours (EMD)"
    kind: str = field(default="baseline", init=False)
    _known: dict = field(default_factory=dict, init=False, repr=False)
    _signatures: dict = field(default_factory=dict, init=False, repr=False)

    def __call__(self, product, candidates):
        return self.score_queries([(product, candidates)])[0]

    def score_queries(self, asked):
        """Scores of many ``(product, candidates)`` queries: a list of arrays."""
        known = self._known  # product id -> {partner id: distance}, each pair under both ids
        ids = [(p.id, list(map(_ID, cands))) for p, cands in asked]
        todo = {}  # first palette -> {partner: None} whose pair is new, in the order asked
        for a, partners in ids:
            mine = known.get(a, {})
            fresh = [b for b in partners if b not in mine and a not in todo.get(b, ())]
            if fresh:
                todo.setdefault(a, {}).update(dict.fromkeys(fresh))
        pairs = [(a, b) for a, partners in todo.items() for b in partners]
        distances = emd_pairs([self._signature(a) for a, _ in pairs], [self._signature(b) for _, b in pairs])
        for (a, b), d in zip(pairs, distances.tolist()):
            known.setdefault(a, {})[b] = known.setdefault(b, {})[a] = d
        return [-np.array(list(map(known[a].__getitem__, partners))) if partners else -np.array([])
                for a, partners in ids]

    def _signature(self, pid):
        sig = self._signatures.get(pid)
        if sig is None:
            pal = self.palettes[pid]
            sig = self._signatures[pid] = signature(pal.jab, pal.weights, pid)
        return sig


def _colour_words(product, attribute):
    text = product.attributes.get(attribute, "") if product.attributes else ""
    return frozenset(normalise_category(text).replace("/", " ").replace(",", " ").replace("-", " ").split())


@dataclass(frozen=True, eq=False)
class ColourAttributeMethod:
    """Rank by the overlap of the catalogue's colour words (Jaccard index; no words scores 0).

    Products with the same words share a word set, and the index of two word sets is worked out
    the first time a query needs it: the work grows with the pairs the queries ask for, not with
    the number of word sets squared.
    """

    attribute: str = "colour"
    name: str = "colour attribute"
    kind: str = field(default="baseline", init=False)
    _set_of: dict = field(default_factory=dict, init=False, repr=False)  # product id -> word set number
    _sets: dict = field(default_factory=dict, init=False, repr=False)  # word set -> its number
    _words: list = field(default_factory=list, init=False, repr=False)  # word set number -> word set
    _pairs: dict = field(default_factory=dict, init=False, repr=False)  # (number, number) -> index

    def __call__(self, product, candidates):
        return self.score_queries([(product, candidates)])[0]

    def score_queries(self, asked):
        """Scores of many ``(product, candidates)`` queries: a list of arrays."""
        out = []
        for product, candidates in asked:
            mine = self._set_number(product)
            out.append(np.array([self._index(mine, self._set_number(c)) for c in candidates], dtype=float))
        return out

    def _set_number(self, product):
        number = self._set_of.get(product.id)
        if number is None:
            words = _colour_words(product, self.attribute)
            number = self._sets.get(words)
            if number is None:
                number = self._sets[words] = len(self._words)
                self._words.append(words)
            self._set_of[product.id] = number
        return number

    def _index(self, a, b):
        key = (a, b) if a <= b else (b, a)
        value = self._pairs.get(key)
        if value is None:
            s, t = self._words[a], self._words[b]
            value = self._pairs[key] = len(s & t) / len(s | t) if s and t else 0.0
        return value


@dataclass(frozen=True, eq=False)
class RandomMethod:
    """Random order: every candidate tied, so the metrics give their exact expectation."""

    name: str = "random order"
    kind: str = field(default="baseline", init=False)

    def __call__(self, product, candidates):
        return np.zeros(len(candidates))


def standard_methods(rulesets, palettes, products, attribute="colour"):
    """One method per rules file, then the baselines (the attribute one only when it applies).

    Parameters
    ----------
    rulesets : sequence of harmony.rules.RuleSet
        Named by file stem (by the full path when two stems are equal).
    palettes : mapping of str to Palette
    products : iterable of Product
        The attribute baseline is added when at least one product has ``attribute``.
    """
    stems = [Path(r.path).stem for r in rulesets]
    methods = []
    for rules, stem in zip(rulesets, stems):
        name = stem if stems.count(stem) == 1 else str(rules.path)
        methods.append(RulesMethod(rules, palettes, name=name))
    methods.append(SameColoursMethod(palettes))
    if any(str(p.attributes.get(attribute, "")).strip() for p in products if p.attributes):
        methods.append(ColourAttributeMethod(attribute))
    methods.append(RandomMethod())
    return methods


