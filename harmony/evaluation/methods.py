"""Ranking methods: each scores the candidates of a query, higher is ranked earlier."""

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from harmony.evaluation.distance import emd_one_to_many
from harmony.shop.catalogue import normalise_category

__all__ = ["RulesMethod", "SameColoursMethod", "ColourAttributeMethod", "RandomMethod", "standard_methods"]

# --------------------------------------------------------------------------------------------
# Methods: each scores the candidates of a query, higher = ranked earlier
# --------------------------------------------------------------------------------------------


def _stack(palettes, ids):
    jab = np.concatenate([palettes[i].jab for i in ids])
    w = np.concatenate([palettes[i].weights for i in ids])
    sizes = np.array([len(palettes[i]) for i in ids])
    starts = np.r_[0, np.cumsum(sizes)[:-1]]
    return jab, w, starts


@dataclass(frozen=True, eq=False)
class RulesMethod:
    """Rank by the raw pair score of a rules file, the query product's category first.

    The raw score ``w_a @ kernel(jab_a, jab_b) @ w_b`` ranks exactly as the score in [0, 1], which
    is strictly increasing in it. Pairs the file does not score tie.
    """

    rules: object  # harmony.rules.RuleSet
    palettes: dict
    name: str = ""
    kind: str = field(default="rules", init=False)

    def __call__(self, product, candidates):
        cat_a, cat_b = product.category, candidates[0].category
        if not self.rules.pairs_with(cat_a, cat_b):
            return np.zeros(len(candidates))
        pair = self.rules.for_pair(cat_a, cat_b)
        pa = self.palettes[product.id]
        jab, w, starts = _stack(self.palettes, [c.id for c in candidates])
        per_colour = (pa.weights @ pair.kernel(pa.jab, jab)) * w
        return np.add.reduceat(per_colour, starts)


@dataclass(frozen=True, eq=False)
class SameColoursMethod:
    """Rank by palette likeness: minus the earth mover's distance (Rubner et al. 2000).

    The distance is symmetric, and a pair usually comes back with its roles swapped (when the
    partner is a query product too), so each unordered pair is solved once and remembered.
    """

    palettes: dict
    name: str = "same colours (EMD)"
    kind: str = field(default="baseline", init=False)
    _known: dict = field(default_factory=dict, init=False, repr=False)

    def __call__(self, product, candidates):
        keys = [(min(product.id, c.id), max(product.id, c.id)) for c in candidates]
        todo = [(key, c.id) for key, c in zip(keys, candidates) if key not in self._known]
        if todo:
            pa = self.palettes[product.id]
            others = [(self.palettes[cid].jab, self.palettes[cid].weights) for _, cid in todo]
            self._known.update(zip([key for key, _ in todo], emd_one_to_many(pa.jab, pa.weights, others).tolist()))
        return -np.array([self._known[key] for key in keys])


def _colour_words(product, attribute):
    text = product.attributes.get(attribute, "") if product.attributes else ""
    return frozenset(normalise_category(text).replace("/", " ").replace(",", " ").replace("-", " ").split())


@dataclass(frozen=True, eq=False)
class ColourAttributeMethod:
    """Rank by the overlap of the catalogue's colour words (Jaccard index; no words scores 0)."""

    attribute: str = "colour"
    name: str = "colour attribute"
    kind: str = field(default="baseline", init=False)

    def __call__(self, product, candidates):
        mine = _colour_words(product, self.attribute)
        out = np.zeros(len(candidates))
        if not mine:
            return out
        for i, c in enumerate(candidates):
            theirs = _colour_words(c, self.attribute)
            if theirs:
                out[i] = len(mine & theirs) / len(mine | theirs)
        return out


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


