"""The rules of a whole file and of one pair of categories.

A rules file (see ``rules/README.md`` for the format) names *rules* -- hue relations, a neutral
anchor, a lightness step, the Ou & Luo (2006) model; see :mod:`harmony.rules.kinds` -- and
chooses, per pair of product categories, which rules apply with what weight.
:func:`harmony.rules.load_rules` reads and validates a file into a :class:`RuleSet`;
:meth:`RuleSet.for_pair` gives the :class:`PairRules` of two categories, whose
:meth:`PairRules.kernel` is the signed harmony of every colour pair.

The bilinear contract that the pair score and the all-pairs screen rely on::

    raw(pa, pb) = pa.weights @ pair_rules.kernel(pa.jab, pb.jab) @ pb.weights
"""

import difflib
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import NamedTuple

import numpy as np

from harmony.colour import as_triplets
from harmony.rules.kinds import _as_colours, _broadcast_pair, _Geometry, _Side

try:  # one spelling of category names across the project
    from harmony.shop.catalogue import normalise_category as _normalise_category
except ImportError:  # pragma: no cover - only while the catalogue module is absent
    import unicodedata

    def _normalise_category(name):
        return " ".join(unicodedata.normalize("NFKC", str(name)).casefold().split())

__all__ = ["PairRules", "RuleSet", "UnmatchedPair", "unmatched_pair_warnings"]

# --------------------------------------------------------------------------------------------
# The rules of one pair of categories
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PairRules:
    """The rules that score one (oriented) pair of categories.

    Attributes
    ----------
    section : str
        Which section of the file chose them: ``"sofa / rug"`` or ``"default"``.
    categories : tuple of (str, str)
        The two categories as asked for (normalised); ``a`` of :meth:`kernel` is the first.
    terms : tuple of (rule, float)
        Each rule with its effective signed weight (the rule's weight times the pair's weight).
    neutral_threshold, neutral_fade : float
        Colourfulness M' threshold and fade width of :func:`harmony.colour.neutral.neutrality`.
    midpoint, scale : float
        ``to_unit(raw) = 1 / (1 + exp(-(raw - midpoint) / scale))``.
    scored : bool
        Whether the two categories are scored together at all.
    """

    section: str
    categories: tuple
    terms: tuple
    neutral_threshold: float
    neutral_fade: float
    midpoint: float
    scale: float
    scored: bool = True

    @property
    def rule_names(self):
        return tuple(rule.name for rule, _ in self.terms)

    @property
    def symmetric(self):
        """True when swapping the two colours leaves every rule's kernel unchanged."""
        return all(rule.symmetric for rule, _ in self.terms)

    @property
    def hue_rules(self):
        """The hue rules with their effective weights, for drawings."""
        return tuple((rule, w) for rule, w in self.terms if rule.kind == "hue")

    def _geometry(self, jab_a, jab_b):
        a = _Side(jab_a, self.neutral_threshold, self.neutral_fade)
        b = _Side(jab_b, self.neutral_threshold, self.neutral_fade)
        return _Geometry(a, b)

    def _evaluate(self, g, shape):
        """Sum of the weighted terms on a geometry; the hue rules' bumps are summed first and
        scaled by the chromaticity product once."""
        total = np.zeros(shape)
        hue = None
        for rule, w in self.terms:
            if w == 0.0:
                continue
            if rule.kind == "hue":
                part = rule.bumps(*g.hue_difference)
                part *= w
                if hue is None:
                    hue = part
                else:
                    hue += part
            else:
                total += w * rule.term(g)
        if hue is not None:
            total += hue * g.chroma
        return total

    def pairwise(self, jab_a, jab_b):
        """Signed harmony of colour pairs, element by element with numpy broadcasting.

        Parameters
        ----------
        jab_a : array_like, shape (..., 3)
            CAM02-UCS colours of the first category's product.
        jab_b : array_like, shape (..., 3)
            CAM02-UCS colours of the second category's product; its leading shape must
            broadcast against that of ``jab_a``.

        Returns
        -------
        ndarray, shape = broadcast of the two leading shapes
            Sum over the pair's rules of effective weight times the rule's term, for each pair
            ``(jab_a[i], jab_b[i])`` after broadcasting.

        Raises
        ------
        ValueError
            If a trailing axis is not 3 or the leading shapes do not broadcast.

        Notes
        -----
        Per-colour quantities (hue direction, neutrality, CIELAB for the Ou & Luo rule) are
        computed on each side's own shape before broadcasting, so ``pairwise(a[:, None],
        b[None, :])`` costs the same per pair as an outer product; :meth:`kernel` is exactly that.
        """
        jab_a, jab_b, shape = _broadcast_pair(jab_a, jab_b)
        return self._evaluate(self._geometry(jab_a, jab_b), shape)

    def side(self, jab):
        """Per-colour quantities of ``jab`` (shape (..., 3)) for :meth:`pairwise_sides`.

        Compute them once per palette colour, then gather them per pair with ``side.take(key)``.
        """
        return _Side(as_triplets(jab, "jab"), self.neutral_threshold, self.neutral_fade)

    def pairwise_sides(self, side_a, side_b):
        """:meth:`pairwise` on colours whose per-colour quantities come from :meth:`side`.

        Gives the same bits as ``pairwise(side_a.jab, side_b.jab)``.
        """
        shape = np.broadcast_shapes(side_a.j.shape, side_b.j.shape)
        return self._evaluate(_Geometry(side_a, side_b), shape)

    def kernel(self, jab_a, jab_b):
        """Signed harmony of every colour pair, shape (n, m): ``pairwise(a[:, None], b[None, :])``.

        Parameters
        ----------
        jab_a : array_like, shape (n, 3)
            CAM02-UCS colours of the first category's product.
        jab_b : array_like, shape (m, 3)
            CAM02-UCS colours of the second category's product.

        Returns
        -------
        ndarray, shape (n, m)
            Sum over the pair's rules of effective weight times the rule's term.
        """
        a = _as_colours(jab_a, "jab_a")
        b = _as_colours(jab_b, "jab_b")
        return self.pairwise(a[:, None, :], b[None, :, :])

    def pairwise_terms(self, jab_a, jab_b):
        """Each rule's weighted term, broadcast like :meth:`pairwise`: tuple of (rule name, ndarray).

        The arrays have the broadcast leading shape and sum to :meth:`pairwise`.
        """
        jab_a, jab_b, shape = _broadcast_pair(jab_a, jab_b)
        g = self._geometry(jab_a, jab_b)
        out = []
        for rule, w in self.terms:
            term = np.asarray(w * rule.term(g))
            out.append((rule.name, term if term.shape == shape else np.broadcast_to(term, shape)))
        return tuple(out)

    def kernel_terms(self, jab_a, jab_b):
        """Each rule's weighted kernel: tuple of (rule name, ndarray (n, m)); they sum to :meth:`kernel`."""
        a = _as_colours(jab_a, "jab_a")
        b = _as_colours(jab_b, "jab_b")
        return self.pairwise_terms(a[:, None, :], b[None, :, :])

    def rule(self, name):
        for rule, _ in self.terms:
            if rule.name == name:
                return rule
        raise KeyError(name)


# --------------------------------------------------------------------------------------------
# The whole file
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Section:
    label: str
    weights: MappingProxyType  # rule name -> multiplier
    scored: bool


@dataclass(frozen=True, eq=False)
class RuleSet:
    """A validated rules file.

    Attributes
    ----------
    path : str
        The file it was read from (``"<string>"`` for :func:`parse_rules` without a name).
    description : str
    neutral_threshold, neutral_fade : float
        Colourfulness M' of the neutral threshold and the full width of its smooth fade.
    midpoint, scale : float
        Parameters of the map from raw score to [0, 1].
    rules : mapping of str to rule
        Every named rule of the file.
    default : _Section
        The choice of rules for pairs not listed.
    pairs : mapping of (str, str) to _Section
        Listed pairs, by normalised category names in the order written.
    pair_lines : mapping of (str, str) to int
        The line of each listed pair's ``categories`` key (1-based; absent for a rule set built
        without a text).
    """

    path: str
    description: str
    neutral_threshold: float
    neutral_fade: float
    midpoint: float
    scale: float
    rules: MappingProxyType
    default: _Section
    pairs: MappingProxyType
    _cache: dict = field(default_factory=dict, repr=False, compare=False)
    pair_lines: MappingProxyType = field(default_factory=lambda: MappingProxyType({}), repr=False, compare=False)

    @property
    def categories(self):
        """Every category named by a pair section, normalised, sorted."""
        return tuple(sorted({c for key in self.pairs for c in key}))

    def _build(self, section, cat_a, cat_b, flip):
        terms = []
        for name, mult in section.weights.items():
            rule = self.rules[name]
            if flip:
                rule = rule.flipped()
            terms.append((rule, float(rule.weight) * float(mult)))
        return PairRules(
            section=section.label,
            categories=(cat_a, cat_b),
            terms=tuple(terms),
            neutral_threshold=self.neutral_threshold,
            neutral_fade=self.neutral_fade,
            midpoint=self.midpoint,
            scale=self.scale,
            scored=section.scored,
        )

    def for_pair(self, cat_a, cat_b):
        """The :class:`PairRules` for products of ``cat_a`` (first) and ``cat_b`` (second).

        Category names match case-insensitively (and with runs of spaces collapsed). A pair listed
        as ``[b, a]`` in the file is returned oriented as asked, with oriented rules flipped.
        Pairs not listed get the ``[default]`` section.
        """
        a, b = _normalise_category(cat_a), _normalise_category(cat_b)
        key = (a, b)
        cached = self._cache.get(key)
        if cached is not None:
            return cached
        if (a, b) in self.pairs:
            out = self._build(self.pairs[(a, b)], a, b, flip=False)
        elif (b, a) in self.pairs:
            out = self._build(self.pairs[(b, a)], a, b, flip=True)
        else:
            out = self._build(self.default, a, b, flip=False)
        self._cache[key] = out
        return out

    def default_rules(self):
        """The :class:`PairRules` of the ``[default]`` section, with empty category names."""
        return self._build(self.default, "", "", flip=False)

    def pairs_with(self, cat_a, cat_b):
        """Whether products of these two categories are scored together (never the same category)."""
        a, b = _normalise_category(cat_a), _normalise_category(cat_b)
        if a == b:
            return False
        return self.for_pair(a, b).scored

    def unmatched_pairs(self, categories):
        """The pair sections that name a category absent from ``categories``.

        Such a section matches no product, so its products fall to ``[default]``: usually a typo
        in the file (``"rugs"`` for a shop's ``"rug"``).

        Parameters
        ----------
        categories : iterable of str
            The categories present (a store's), compared normalised like :meth:`for_pair`.

        Returns
        -------
        list of UnmatchedPair
            ``(line, pair, category, suggestion)`` for each absent category of each pair section,
            in file order: the line of the section's ``categories`` key (0 when unknown), the
            pair as normalised ``(a, b)``, the absent category, and the closest present category
            by :func:`difflib.get_close_matches` (cutoff :data:`_TYPO_CUTOFF`) or None.
        """
        present = sorted({_normalise_category(c) for c in categories})
        known = set(present)
        out = []
        for pair in self.pairs:
            for category in pair:
                if category in known:
                    continue
                close = difflib.get_close_matches(category, present, n=1, cutoff=_TYPO_CUTOFF)
                out.append(UnmatchedPair(self.pair_lines.get(pair, 0), pair, category, close[0] if close else None))
        out.sort(key=lambda u: u.line)
        return out


#: Similarity above which an absent category reads as a typo of a present one: "rugs" / "rug" is
#: 0.86, "dinning table" / "dining table" 0.96, while "desk chair" / "dining chair" (a shop that
#: sells no desks) is 0.64. Ratios from :class:`difflib.SequenceMatcher`.
_TYPO_CUTOFF = 0.75


class UnmatchedPair(NamedTuple):
    """A category of a pair section that no product has, see :meth:`RuleSet.unmatched_pairs`."""

    line: int
    pair: tuple
    category: str
    suggestion: object  # str or None


def unmatched_pair_warnings(rule_sets, categories):
    """One message per pair section of ``rule_sets`` that names a category absent from ``categories``.

    Parameters
    ----------
    rule_sets : RuleSet or iterable of RuleSet
    categories : iterable of str
        The categories present in the store. When there are none, there are no messages (an
        empty store is an error of its own).

    Returns
    -------
    list of str
        ``FILE:LINE: pair A / B: no products of category 'B' in the store (did you mean 'C'?)``;
        a pair with both categories absent names both in its one message. Only sections with a
        likely typo (an absent category close to a present one) are reported: a shop that sells
        no desks is not told every night that its rules also know desks.
    """
    if isinstance(rule_sets, RuleSet):
        rule_sets = (rule_sets,)
    categories = list(categories)
    if not categories:
        return []
    messages = []
    for rule_set in rule_sets:
        by_pair = {}
        for item in rule_set.unmatched_pairs(categories):
            by_pair.setdefault((item.line, item.pair), []).append(item)
        for (line, (a, b)), items in by_pair.items():
            where = f"{rule_set.path}:{line}" if line else rule_set.path
            names = " and ".join(f"'{u.category}'" for u in items)
            noun = "category" if len(items) == 1 else "categories"
            hints = [u for u in items if u.suggestion]
            if not hints:
                continue
            if len(items) == 1:
                hint = f" (did you mean '{hints[0].suggestion}'?)"
            else:
                hint = " (did you mean " + ", ".join(f"'{u.suggestion}' for '{u.category}'" for u in hints) + "?)"
            messages.append(f"{where}: pair {a} / {b}: no products of {noun} {names} in the store{hint}")
    return messages


