"""The rule kinds: colour-pair kernels of hue relations, neutrals, lightness steps and Ou & Luo (2006).

Each rule maps every pair of colours (CAM02-UCS J'a'b') to a signed term; a :class:`PairRules`
(:mod:`harmony.rules.ruleset`) sums them with the weights of one pair of categories.

References
----------
P. Moon, D. E. Spencer (1944). Geometric formulation of classical color harmony.
    J. Opt. Soc. Am. 34(1):46-59 -- similarity at about 7-12 and contrast at 28-50 steps of the
    100-step Munsell hue circle, an "ambiguity" zone between (intervals as commonly cited;
    volume, issue and pages from memory -- the paper itself was not read).
L.-C. Ou, M. R. Luo (2006). A colour harmony model for two-colour combinations.
    Color Research & Application 31(3):191-204.
"""

import math
from dataclasses import dataclass, replace

import numpy as np

from harmony.colour import as_triplets
from harmony.colour.neutral import neutrality

__all__ = ["RULE_KINDS", "HueRule", "NeutralRule", "LightnessRule", "OuLuoRule"]

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

    __slots__ = ("_jab", "_key", "j", "cos_h", "sin_h", "chroma", "neutral", "_lab")

    def __init__(self, jab, threshold, fade):
        self._jab, self._key = jab, None
        self.j = jab[..., 0]
        m = np.hypot(jab[..., 1], jab[..., 2])
        safe = np.where(m > 0.0, m, 1.0)
        # A colour with M' = 0 has no hue; it is fully neutral, so its hue terms vanish anyway.
        self.cos_h = np.where(m > 0.0, jab[..., 1] / safe, 1.0)
        self.sin_h = np.where(m > 0.0, jab[..., 2] / safe, 0.0)
        self.neutral = neutrality(jab, threshold=threshold, fade=fade)
        self.chroma = 1.0 - self.neutral
        self._lab = None

    def take(self, key):
        """These quantities indexed by ``key`` (on the leading axes only), without recomputing them.

        Every quantity is computed colour by colour, so ``side.take(key)`` holds the same bits as
        ``_Side(side.jab[key], ...)``; the re-rank gathers per-candidate colours this way. The
        colours themselves are gathered only if a rule asks for them (:attr:`jab`, :attr:`lab`).
        """
        out = object.__new__(_Side)
        for name in ("j", "cos_h", "sin_h", "chroma", "neutral"):
            setattr(out, name, getattr(self, name)[key])
        out._jab, out._key = self.jab, key
        out._lab = None if self._lab is None else self._lab[key]
        return out

    @property
    def jab(self):
        if self._key is not None:
            self._jab, self._key = self._jab[self._key], None
        return self._jab

    @property
    def lab(self):
        if self._lab is None:
            from harmony.colour.ou_luo import jab_to_lab

            self._lab = jab_to_lab(self.jab)
        return self._lab


class _Geometry:
    """What the rules need of a pair of colours, each quantity computed at most once per call.

    ``a`` and ``b`` are :class:`_Side` objects whose leading shapes broadcast against each other;
    every quantity has the broadcast shape. The hue rules share :attr:`hue_difference` (cosine and
    unsigned sine of the hue difference) and :attr:`chroma` (the product of the two colours'
    chromaticity ``1 - neutrality``).
    """

    __slots__ = ("a", "b", "_hue", "_chroma", "_lightness")

    def __init__(self, a, b):
        self.a, self.b = a, b
        self._hue = None
        self._chroma = None
        self._lightness = None

    @property
    def lightness_difference(self):
        """``J'_b - J'_a`` and its magnitude, shared by the lightness rules."""
        if self._lightness is None:
            d = self.b.j - self.a.j
            self._lightness = (d, np.abs(d))
        return self._lightness

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


def _default_phrase(self, ja, jb, na, nb, value):
    """The words linking two colours under a rule without a phrase of its own.

    ``ja``, ``jb`` are the colours (J'a'b'), ``na``, ``nb`` their neutrality and ``value`` the
    colour pair's net contribution. Every rule kind lists the words it may use
    (``phrases()``) and picks one per colour pair with ``phrase_index(ja, jb, na, nb, value)``,
    which works element-wise on arrays (the feed phrases many colour pairs at once); this scalar
    form goes through the same choice.
    """
    return self.phrases()[int(self.phrase_index(ja, jb, na, nb, value))]


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
            # In place where numpy allows (same operations in the same order, fewer temporaries).
            x = np.asarray(cos_d * (cos_c * kappa))
            if c not in (0.0, 180.0):
                x = np.add(x, sin_d * (sin_c * kappa), out=x)
            x = np.subtract(x, kappa, out=x)
            np.exp(x, out=x)
            if total is None:
                total = x
            else:
                total += x
        return total

    def term(self, geometry):
        return self.bumps(*geometry.hue_difference) * geometry.chroma

    def profile(self, hue_difference_deg):
        """The rule's value for two fully chromatic colours ``hue_difference_deg`` apart."""
        d = np.radians(np.asarray(hue_difference_deg, dtype=float))
        return self.bumps(np.cos(d), np.abs(np.sin(d)))


    def phrases(self):
        c = self.centres[0]
        if c <= 30.0:
            kept = "sits close in hue to"
        elif c >= 165.0:
            kept = "sits opposite"
        else:
            kept = f"sits about {c:.0f} degrees round the wheel from"
        return ("clashes with", kept)

    def phrase_index(self, ja, jb, na, nb, value):
        return np.where(np.asarray(value) < 0, 0, 1)

    default_phrase = _default_phrase


@dataclass(frozen=True)
class NeutralRule(_Symmetric):
    """A neutral colour sits well with anything.

    The term is the chance that at least one of the two colours is neutral,
    ``n_a + n_b - n_a n_b`` with ``n`` the smooth :func:`harmony.colour.neutral.neutrality`; in the
    bilinear sum a neutral that dominates a palette (large weight) counts for more.
    """

    name: str
    weight: float
    phrase: str = ""
    kind = "neutral"

    def term(self, geometry):
        na, nb = geometry.a.neutral, geometry.b.neutral
        return na + nb - na * nb


    def phrases(self):
        return ("sits too plainly with", "sits quietly with", "anchors", "is anchored by")

    def phrase_index(self, ja, jb, na, nb, value):
        na, nb = np.asarray(na), np.asarray(nb)
        return np.where(np.asarray(value) < 0, 0,
                        np.where((na >= 0.5) & (nb >= 0.5), 1, np.where(na >= nb, 2, 3)))

    default_phrase = _default_phrase


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
        d, size = geometry.lightness_difference
        if self.direction == "either":
            x = size
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

    def phrases(self):
        return ("is a clear step lighter than", "is a clear step darker than")

    def phrase_index(self, ja, jb, na, nb, value):
        return np.where(np.asarray(ja)[..., 0] > np.asarray(jb)[..., 0], 0, 1)

    default_phrase = _default_phrase


@dataclass(frozen=True)
class OuLuoRule(_Symmetric):
    """The Ou & Luo (2006) two-colour harmony ``CH`` in CIELAB (D65), see :mod:`harmony.colour.ou_luo`."""

    name: str
    weight: float
    phrase: str = ""
    kind = "ou_luo"

    def term(self, geometry):
        from harmony.colour.ou_luo import two_colour_harmony

        return two_colour_harmony(geometry.a.lab, geometry.b.lab)


    def phrases(self):
        return ("goes with", "sits uneasily with")

    def phrase_index(self, ja, jb, na, nb, value):
        # The model's own sign says harmonious (CH > 0) or not, whatever the rule's weight.
        return np.where(np.asarray(value) > 0, 0, 1)

    default_phrase = _default_phrase


_RULE_CLASSES = {"hue": HueRule, "neutral": NeutralRule, "lightness": LightnessRule, "ou_luo": OuLuoRule}


