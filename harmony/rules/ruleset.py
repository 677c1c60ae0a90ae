"""Harmony rules a stylist edits in TOML, validated on loading, and their colour-pair kernels.

A rules file (see ``rules/README.md`` for the format) names *rules* -- hue relations, a neutral
anchor, a lightness step, the Ou & Luo (2006) model -- and chooses, per pair of product
categories, which rules apply with what weight. :func:`load_rules` reads and validates a file
into a :class:`RuleSet`; :meth:`RuleSet.for_pair` gives the :class:`PairRules` of two
categories, whose :meth:`PairRules.kernel` is the signed harmony of every colour pair.

The bilinear contract that the pair score and the all-pairs screen rely on::

    raw(pa, pb) = pa.weights @ pair_rules.kernel(pa.jab, pb.jab) @ pb.weights

References
----------
P. Moon, D. E. Spencer (1944). Geometric formulation of classical color harmony.
    J. Opt. Soc. Am. 34(1):46-59 -- similarity at about 7-12 and contrast at 28-50 steps of the
    100-step Munsell hue circle, an "ambiguity" zone between (intervals as commonly cited;
    volume, issue and pages from memory -- the paper itself was not read).
L.-C. Ou, M. R. Luo (2006). A colour harmony model for two-colour combinations.
    Color Research & Application 31(3):191-204.
"""

import difflib
import math
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import MappingProxyType
from typing import NamedTuple

import numpy as np

from .colour import as_triplets
from .errors import RulesError
from .palette import neutrality
from .paths import DEFAULT_RULES

try:  # one spelling of category names across the project
    from .catalogue import normalise_category as _normalise_category
except ImportError:  # pragma: no cover - only while the catalogue module is absent
    import unicodedata

    def _normalise_category(name):
        return " ".join(unicodedata.normalize("NFKC", str(name)).casefold().split())


__all__ = [
    "FORMAT_VERSION",
    "RULE_KINDS",
    "HueRule",
    "NeutralRule",
    "LightnessRule",
    "OuLuoRule",
    "PairRules",
    "RuleSet",
    "UnmatchedPair",
    "load_rules",
    "parse_rules",
    "unmatched_pair_warnings",
]

#: Version of the rules format this module reads (the file's ``format`` key).
FORMAT_VERSION = 1

#: Rule kinds a ``[rule.NAME]`` table may declare with ``kind = "..."``.
RULE_KINDS = ("hue", "neutral", "lightness", "ou_luo")

_LIGHTNESS_DIRECTIONS = ("either", "lighter", "darker")
_FLIP_DIRECTION = {"either": "either", "lighter": "darker", "darker": "lighter"}


# --------------------------------------------------------------------------------------------
# Colour features shared by all rules of one kernel evaluation
# --------------------------------------------------------------------------------------------


class _Side:
    """Per-colour quantities of one side of a kernel, computed once per call.

    Every attribute keeps the leading shape of ``jab`` (``(...)``; ``lab`` is ``(..., 3)``), so the
    two sides of a kernel call combine by numpy broadcasting.
    """

    __slots__ = ("jab", "j", "cos_h", "sin_h", "chroma", "neutral", "_lab")

    def __init__(self, jab, threshold, fade):
        self.jab = jab
        self.j = jab[..., 0]
        m = np.hypot(jab[..., 1], jab[..., 2])
        safe = np.where(m > 0.0, m, 1.0)
        # A colour with M' = 0 has no hue; it is fully neutral, so its hue terms vanish anyway.
        self.cos_h = np.where(m > 0.0, jab[..., 1] / safe, 1.0)
        self.sin_h = np.where(m > 0.0, jab[..., 2] / safe, 0.0)
        self.neutral = neutrality(jab, threshold=threshold, fade=fade)
        self.chroma = 1.0 - self.neutral
        self._lab = None

    @property
    def lab(self):
        if self._lab is None:
            from .ou_luo import jab_to_lab

            self._lab = jab_to_lab(self.jab)
        return self._lab


class _Geometry:
    """What the rules need of a pair of colours, each quantity computed at most once per call.

    ``a`` and ``b`` are :class:`_Side` objects whose leading shapes broadcast against each other;
    every quantity has the broadcast shape. The hue rules share :attr:`hue_difference` (cosine and
    unsigned sine of the hue difference) and :attr:`chroma` (the product of the two colours'
    chromaticity ``1 - neutrality``).
    """

    __slots__ = ("a", "b", "_hue", "_chroma")

    def __init__(self, a, b):
        self.a, self.b = a, b
        self._hue = None
        self._chroma = None

    @property
    def hue_difference(self):
        if self._hue is None:
            a, b = self.a, self.b
            cos_d = a.cos_h * b.cos_h + a.sin_h * b.sin_h
            sin_d = np.abs(a.cos_h * b.sin_h - a.sin_h * b.cos_h)
            self._hue = (cos_d, sin_d)
        return self._hue

    @property
    def chroma(self):
        if self._chroma is None:
            self._chroma = self.a.chroma * self.b.chroma
        return self._chroma


def _as_colours(jab, name):
    arr = np.asarray(jab, dtype=float)
    if arr.ndim == 1 and arr.shape == (3,):
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != 3:
        raise ValueError(f"{name} must have shape (n, 3), got {arr.shape}")
    return arr


def _broadcast_pair(jab_a, jab_b):
    """Both sides as float arrays with a trailing axis of 3, and their broadcast leading shape."""
    jab_a, jab_b = as_triplets(jab_a, "jab_a"), as_triplets(jab_b, "jab_b")
    try:
        shape = np.broadcast_shapes(jab_a.shape[:-1], jab_b.shape[:-1])
    except ValueError:
        raise ValueError(f"jab_a and jab_b must broadcast, got shapes {jab_a.shape} and {jab_b.shape}") from None
    return jab_a, jab_b, shape


# --------------------------------------------------------------------------------------------
# Rule kinds
# --------------------------------------------------------------------------------------------


class _Symmetric:
    """A rule whose term does not change when the two colours swap sides."""

    symmetric = True

    def flipped(self):
        return self


@dataclass(frozen=True)
class HueRule(_Symmetric):
    """A kernel over the hue difference of two chromatic colours.

    The unsigned hue difference ``d`` in [0, 180] degrees is scored by a von Mises bump
    ``exp((cos(d - c) - 1) / s^2)`` around each centre ``c`` (``s`` the spread in radians;
    for small spreads this is a Gaussian of standard deviation ``spread`` degrees), summed over
    the centres, and scaled by both colours' chromaticity ``1 - neutrality`` so that the rule
    fades out smoothly as either colour becomes neutral.

    Attributes
    ----------
    name : str
    centres : tuple of float
        Hue differences in degrees, each in [0, 180].
    spread : float
        Degrees, > 0.
    weight : float
        Signed weight; negative for a clash zone.
    phrase : str
        How the explanation sentence links two colours under this rule ("sits opposite").
    """

    name: str
    centres: tuple
    spread: float
    weight: float
    phrase: str = ""
    kind = "hue"

    def bumps(self, cos_d, sin_d):
        """Sum of the rule's von Mises bumps at hue differences given by their cosine and
        unsigned sine, without the chromaticity factor (same shape as ``cos_d``)."""
        kappa = 1.0 / math.radians(self.spread) ** 2
        total = None
        for c in self.centres:
            rc = math.radians(c)
            cos_c, sin_c = math.cos(rc), math.sin(rc)
            # cos(d - c) - 1; the sine term is skipped at c = 0 and c = 180 (sin c = 0 there).
            if c in (0.0, 180.0):
                x = np.asarray(cos_d * (cos_c * kappa) - kappa)
            else:
                x = np.asarray(cos_d * (cos_c * kappa) + sin_d * (sin_c * kappa) - kappa)
            np.exp(x, out=x)
            total = x if total is None else total + x
        return total

    def term(self, geometry):
        return self.bumps(*geometry.hue_difference) * geometry.chroma

    def profile(self, hue_difference_deg):
        """The rule's value for two fully chromatic colours ``hue_difference_deg`` apart."""
        d = np.radians(np.asarray(hue_difference_deg, dtype=float))
        return self.bumps(np.cos(d), np.abs(np.sin(d)))


    def default_phrase(self, ja, jb, na, nb, value):
        if value < 0:
            return "clashes with"
        c = self.centres[0]
        if c <= 30.0:
            return "sits close in hue to"
        if c >= 165.0:
            return "sits opposite"
        return f"sits about {c:.0f} degrees round the wheel from"


@dataclass(frozen=True)
class NeutralRule(_Symmetric):
    """A neutral colour sits well with anything.

    The term is the chance that at least one of the two colours is neutral,
    ``n_a + n_b - n_a n_b`` with ``n`` the smooth :func:`harmony.palette.neutrality`; in the
    bilinear sum a neutral that dominates a palette (large weight) counts for more.
    """

    name: str
    weight: float
    phrase: str = ""
    kind = "neutral"

    def term(self, geometry):
        na, nb = geometry.a.neutral, geometry.b.neutral
        return na + nb - na * nb


    def default_phrase(self, ja, jb, na, nb, value):
        if value < 0:
            return "sits too plainly with"
        if na >= 0.5 and nb >= 0.5:
            return "sits quietly with"
        return "anchors" if na >= nb else "is anchored by"


@dataclass(frozen=True)
class LightnessRule:
    """A clear lightness step between the two products.

    With ``dJ = J'_b - J'_a`` (b the pair's second category), the term is a smoothstep of
    ``|dJ|`` (``direction = "either"``), ``dJ`` (``"lighter"``: b lighter than a) or ``-dJ``
    (``"darker"``) rising from 0 at ``step - width/2`` to 1 at ``step + width/2``.
    """

    name: str
    step: float
    width: float
    direction: str
    weight: float
    phrase: str = ""
    kind = "lightness"

    def term(self, geometry):
        d = geometry.b.j - geometry.a.j
        if self.direction == "either":
            x = np.abs(d)
        elif self.direction == "lighter":
            x = d
        else:
            x = -d
        if self.width <= 0.0:
            return (x >= self.step).astype(float)
        t = np.clip((x - (self.step - self.width / 2.0)) / self.width, 0.0, 1.0)
        return t * t * (3.0 - 2.0 * t)

    @property
    def symmetric(self):
        return self.direction == "either"

    def flipped(self):
        return replace(self, direction=_FLIP_DIRECTION[self.direction])

    def default_phrase(self, ja, jb, na, nb, value):
        return "is a clear step lighter than" if ja[0] > jb[0] else "is a clear step darker than"


@dataclass(frozen=True)
class OuLuoRule(_Symmetric):
    """The Ou & Luo (2006) two-colour harmony ``CH`` in CIELAB (D65), see :mod:`harmony.ou_luo`."""

    name: str
    weight: float
    phrase: str = ""
    kind = "ou_luo"

    def term(self, geometry):
        from .ou_luo import two_colour_harmony

        return two_colour_harmony(geometry.a.lab, geometry.b.lab)


    def default_phrase(self, ja, jb, na, nb, value):
        # The model's own sign says harmonious (CH > 0) or not, whatever the rule's weight.
        return "goes with" if value > 0 else "sits uneasily with"


_RULE_CLASSES = {"hue": HueRule, "neutral": NeutralRule, "lightness": LightnessRule, "ou_luo": OuLuoRule}


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
        Colourfulness M' threshold and fade width of :func:`harmony.palette.neutrality`.
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
                hue = part if hue is None else hue + part
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


# --------------------------------------------------------------------------------------------
# Reading and validation
# --------------------------------------------------------------------------------------------


def _strip_comment(line):
    quote = None
    for i, ch in enumerate(line):
        if quote:
            if ch == quote:
                quote = None
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            return line[:i]
    return line


def _split_dotted(text):
    parts, buf, quote = [], "", None
    for ch in text:
        if quote:
            if ch == quote:
                quote = None
            else:
                buf += ch
        elif ch in "\"'":
            quote = ch
        elif ch == ".":
            parts.append(buf.strip())
            buf = ""
        else:
            buf += ch
    parts.append(buf.strip())
    return tuple(parts)


_KEY_RE = re.compile(r"""^\s*((?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'))*)\s*=""")
_INLINE_KEY_RE = re.compile(r"""[{,]\s*([A-Za-z0-9_\-]+|"[^"]*"|'[^']*')\s*=""")


def _in_last_element(path, counts):
    """A header path with the index of the latest element of each array of tables it passes
    through: after ``[[pair]]`` twice, ``[pair.rules]`` is ``("pair", 1, "rules")``, as parsed."""
    out = ()
    for k, part in enumerate(path):
        out += (part,)
        if k < len(path) - 1 and out in counts:
            out += (counts[out] - 1,)
    return out


def _key_lines(text):
    """Map each key path of a TOML text to the line that defines it (1-based).

    A small line scanner, enough for the files this format describes: table and array-of-table
    headers, ``key = value`` lines, one level of inline table on one line. Paths of array tables
    hold the index of the element, as the parsed data does.
    """
    lines = {}
    counts = {}
    current = ()
    depth = 0
    for number, raw in enumerate(text.splitlines(), start=1):
        line = _strip_comment(raw)
        stripped = line.strip()
        if depth > 0:  # inside a multi-line array
            depth += stripped.count("[") - stripped.count("]")
            continue
        if not stripped:
            continue
        if stripped.startswith("[["):
            path = _in_last_element(_split_dotted(stripped[2 : stripped.find("]]")]), counts)
            index = counts.get(path, 0)
            counts[path] = index + 1
            current = path + (index,)
            lines.setdefault(current, number)
            lines.setdefault(path, number)
            continue
        if stripped.startswith("["):
            current = _in_last_element(_split_dotted(stripped[1 : stripped.find("]")]), counts)
            lines.setdefault(current, number)
            continue
        match = _KEY_RE.match(line)
        if not match:
            continue
        path = current + _split_dotted(match.group(1))
        lines.setdefault(path, number)
        value = line[match.end() :].strip()
        if value.startswith("{"):
            for inner in _INLINE_KEY_RE.finditer(value):
                lines.setdefault(path + (inner.group(1).strip("\"'"),), number)
        elif value.startswith("["):
            depth = value.count("[") - value.count("]")
    return lines


def _show_path(path):
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + (part if re.fullmatch(r"[A-Za-z0-9_\-]+", part) else f'"{part}"')
    return out or "(file)"


class _Problems:
    def __init__(self, where, text):
        self.where = where
        self.lines = _key_lines(text)
        self.items = []

    def line_of(self, path):
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return 1

    def add(self, path, reason):
        self.items.append((self.line_of(path), _show_path(path), reason))

    def unknown_keys(self, table, allowed, path):
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                known = ", ".join(sorted(allowed))
                self.add(path + (key,), f"unknown key{hint}; expected one of: {known}")

    def error(self):
        self.items.sort(key=lambda item: item[0])
        messages = [f"{self.where}:{line}: {key}: {reason}" for line, key, reason in self.items]
        err = RulesError("; ".join(messages))
        err.problems = tuple(messages)
        return err


_MISSING = object()


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _get(problems, table, key, path, check, required=True, default=_MISSING):
    """Fetch ``table[key]`` and validate it with ``check(value) -> reason or None``."""
    if key not in table:
        if required:
            problems.add(path, f"missing key '{key}'")
        return default
    value = table[key]
    reason = check(value)
    if reason:
        problems.add(path + (key,), reason)
        return default
    return value


def _number(lo=None, hi=None, lo_open=False, hi_open=False):
    def check(value):
        if not _is_number(value):
            return f"must be a number, got {_type_name(value)}"
        if lo is not None and (value < lo or (lo_open and value == lo)):
            return f"must be {'>' if lo_open else '>='} {lo:g}, got {value:g}"
        if hi is not None and (value > hi or (hi_open and value == hi)):
            return f"must be {'<' if hi_open else '<='} {hi:g}, got {value:g}"
        return None

    return check


def _string(choices=None):
    def check(value):
        if not isinstance(value, str):
            return f"must be a string, got {_type_name(value)}"
        if choices is not None and value not in choices:
            close = difflib.get_close_matches(value, list(choices), n=1, cutoff=0.6)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            return f"must be one of {', '.join(choices)}, got '{value}'{hint}"
        return None

    return check


def _boolean(value):
    return None if isinstance(value, bool) else f"must be true or false, got {_type_name(value)}"


def _table(value):
    return None if isinstance(value, dict) else f"must be a table, got {_type_name(value)}"


def _type_name(value):
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number" if math.isfinite(value) else "a non-finite number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


_TOP_KEYS = ("format", "description", "neutral", "score", "rule", "default", "pair")
_RULE_KEYS = {
    "hue": ("kind", "centre", "spread", "weight", "phrase"),
    "neutral": ("kind", "weight", "phrase"),
    "lightness": ("kind", "step", "width", "direction", "weight", "phrase"),
    "ou_luo": ("kind", "weight", "phrase"),
}


def _read_rule(problems, name, table, path):
    kind = _get(problems, table, "kind", path, _string(RULE_KINDS))
    if kind is _MISSING:
        return None
    problems.unknown_keys(table, _RULE_KEYS[kind], path)
    weight = _get(problems, table, "weight", path, _number())
    phrase = _get(problems, table, "phrase", path, _string(), required=False, default="")
    ok = weight is not _MISSING
    if kind == "hue":
        centre = table.get("centre", _MISSING)
        centres = None
        if centre is _MISSING:
            problems.add(path, "missing key 'centre'")
        else:
            values = centre if isinstance(centre, list) else [centre]
            check = _number(0.0, 180.0)
            reasons = [check(v) for v in values]
            if not values:
                problems.add(path + ("centre",), "must name at least one angle")
            elif any(reasons):
                problems.add(path + ("centre",), "each angle " + next(r for r in reasons if r) + " (degrees of hue difference)")
            else:
                centres = tuple(float(v) for v in values)
        spread = _get(problems, table, "spread", path, _number(0.0, 90.0, lo_open=True))
        if ok and centres is not None and spread is not _MISSING:
            return HueRule(name, centres, float(spread), float(weight), phrase)
    elif kind == "neutral":
        if ok:
            return NeutralRule(name, float(weight), phrase)
    elif kind == "lightness":
        step = _get(problems, table, "step", path, _number(0.0, 100.0, lo_open=True))
        width = _get(problems, table, "width", path, _number(0.0, 100.0))
        direction = _get(problems, table, "direction", path, _string(_LIGHTNESS_DIRECTIONS), required=False, default="either")
        if step is not _MISSING and width is not _MISSING and width > 2.0 * step:
            problems.add(path + ("width",), f"must be at most twice the step ({2.0 * step:g}), got {width:g}")
            return None
        if ok and step is not _MISSING and width is not _MISSING and direction is not _MISSING:
            return LightnessRule(name, float(step), float(width), direction, float(weight), phrase)
    elif kind == "ou_luo":
        if ok:
            return OuLuoRule(name, float(weight), phrase)
    return None


def _read_section(problems, table, path, rule_names, label):
    problems.unknown_keys(table, ("categories", "rules", "scored") if path[0] == "pair" else ("rules", "scored"), path)
    weights = {}
    chosen = _get(problems, table, "rules", path, _table)
    if chosen is not _MISSING:
        if not chosen:
            problems.add(path + ("rules",), "must choose at least one rule")
        for name, mult in chosen.items():
            if name not in rule_names:
                close = difflib.get_close_matches(name, list(rule_names), n=1, cutoff=0.6)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                problems.add(path + ("rules", name), f"unknown rule{hint}; the file defines: {', '.join(sorted(rule_names)) or 'none'}")
                continue
            reason = _number(0.0)(mult)
            if reason:
                problems.add(path + ("rules", name), "pair weight " + reason)
                continue
            weights[name] = float(mult)
    scored = _get(problems, table, "scored", path, _boolean, required=False, default=True)
    return _Section(label, MappingProxyType(weights), bool(scored) if scored is not _MISSING else True)


def parse_rules(text, where="<string>"):
    """Validate the text of a rules file into a :class:`RuleSet`.

    Raises
    ------
    RulesError
        Listing every problem found, each as ``WHERE:LINE: key: reason`` (joined by ``"; "``;
        the list is also in the exception's ``problems`` attribute).
    """
    problems = _Problems(where, text)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        found = re.search(r"at line (\d+)", message)
        line = int(found.group(1)) if found else len(text.splitlines()) or 1
        reason = re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", message)
        err = RulesError(f"{where}:{line}: toml: syntax error: {reason}")
        err.problems = (str(err),)
        raise err from None

    problems.unknown_keys(data, _TOP_KEYS, ())
    fmt = _get(problems, data, "format", (), lambda v: None if v == FORMAT_VERSION and not isinstance(v, bool)
               else f"this version of harmony reads format {FORMAT_VERSION}, got {v!r}")
    description = _get(problems, data, "description", (), _string(), required=False, default="")
    if description is _MISSING:
        description = ""

    # [neutral]
    threshold = fade = _MISSING
    neutral = _get(problems, data, "neutral", (), _table)
    if neutral is not _MISSING:
        problems.unknown_keys(neutral, ("threshold", "fade"), ("neutral",))
        # Under the default viewing conditions sRGB white has M' of about 2.2, so a threshold
        # must sit above it; Munsell chroma 4 lands at M' 10.7-16.8 (see harmony.palette).
        threshold = _get(problems, neutral, "threshold", ("neutral",), _number(2.5, 30.0))
        fade = _get(problems, neutral, "fade", ("neutral",), _number(0.0, 20.0))
        if threshold is not _MISSING and fade is not _MISSING and fade > 2.0 * threshold:
            problems.add(("neutral", "fade"), f"must be at most twice the threshold ({2.0 * threshold:g}), got {fade:g}")
            fade = _MISSING

    # [score]
    midpoint, scale = 0.0, 0.25
    score = _get(problems, data, "score", (), _table, required=False, default={})
    if score is not _MISSING:
        problems.unknown_keys(score, ("midpoint", "scale"), ("score",))
        midpoint = _get(problems, score, "midpoint", ("score",), _number(-10.0, 10.0), required=False, default=0.0)
        scale = _get(problems, score, "scale", ("score",), _number(0.0, 10.0, lo_open=True), required=False, default=0.25)

    # [rule.NAME]
    rules = {}
    rule_tables = _get(problems, data, "rule", (), _table)
    declared = set()
    if rule_tables is not _MISSING:
        if not rule_tables:
            problems.add(("rule",), "must define at least one rule")
        for name, table in rule_tables.items():
            declared.add(name)
            reason = _table(table)
            if reason:
                problems.add(("rule", name), reason)
                continue
            rule = _read_rule(problems, name, table, ("rule", name))
            if rule is not None:
                rules[name] = rule

    # [default] and [[pair]]
    default = None
    default_table = _get(problems, data, "default", (), _table)
    if default_table is not _MISSING:
        default = _read_section(problems, default_table, ("default",), declared, "default")
    pairs = {}
    pair_lines = {}
    pair_list = data.get("pair", [])
    if not isinstance(pair_list, list):
        problems.add(("pair",), "must be an array of tables written as [[pair]]")
        pair_list = []
    for index, table in enumerate(pair_list):
        path = ("pair", index)
        if not isinstance(table, dict):
            problems.add(path, "must be a table written as [[pair]]")
            continue
        cats = _get(problems, table, "categories", path, lambda v: None if (
            isinstance(v, list) and len(v) == 2 and all(isinstance(c, str) and c.strip() for c in v))
            else "must be two category names, e.g. [\"sofa\", \"rug\"]")
        if cats is _MISSING:
            _read_section(problems, table, path, declared, "?")
            continue
        a, b = (_normalise_category(c) for c in cats)
        section = _read_section(problems, table, path, declared, f"{a} / {b}")
        if a == b:
            problems.add(path + ("categories",), f"a pair needs two different categories, got '{a}' twice")
            continue
        if (a, b) in pairs or (b, a) in pairs:
            problems.add(path + ("categories",), f"the pair '{a}' / '{b}' is listed twice")
            continue
        pairs[(a, b)] = section
        pair_lines[(a, b)] = problems.line_of(path + ("categories",))

    if problems.items:
        raise problems.error()
    return RuleSet(
        path=where,
        description=description,
        neutral_threshold=float(threshold),
        neutral_fade=float(fade),
        midpoint=float(midpoint),
        scale=float(scale),
        rules=MappingProxyType(rules),
        default=default,
        pairs=MappingProxyType(pairs),
        pair_lines=MappingProxyType(pair_lines),
    )


def load_rules(path=DEFAULT_RULES):
    """Read and validate a rules file (default: ``rules/default.toml``).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    RuleSet

    Raises
    ------
    RulesError
        If the file cannot be read, is not TOML, or breaks the format; every problem is listed
        as ``FILE:LINE: key: reason``.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise RulesError(f"{path}: cannot read the rules file: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise RulesError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    return parse_rules(text, where=str(path))
