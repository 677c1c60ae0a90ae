"""Luminance-contrast cautions for surfaces that meet, such as a rug and the furniture on it.

People with low vision find edges by the difference in light reflectance between adjacent
surfaces. BS 8300-2:2018, Annex B, recommends a difference of at least 30 points of light
reflectance value (LRV) between adjacent surfaces, and notes that 20 points may be enough for
large areas (such as a floor and a wall) when the illuminance on them exceeds 200 lux. LRV is CIE Y
on a 0-100 scale (0 a perfect black, 100 a perfect white), measured to BS 8493.

A product photo only approximates the LRV of the product: exposure, lighting and the camera's
rendering move it by several points. These checks are cautions for a merchandiser, not a
compliance test: local building codes and a measured sample decide.

References
----------
BS 8300-2:2018. Design of an accessible and inclusive built environment. Part 2: Buildings - Code
    of practice. Annex B (informative): Visual contrast. British Standards Institution.
BS 8493:2008+A1:2010. Light reflectance value (LRV) of a surface - Method of test. British
    Standards Institution.
IEC 61966-2-1:1999. Default RGB colour space - sRGB (the decoding from photo pixels to CIE Y).
"""

import math
from dataclasses import dataclass

import numpy as np

from harmony import colour

__all__ = [
    "MIN_LRV_DIFFERENCE",
    "LARGE_AREA_MIN_LRV_DIFFERENCE",
    "LARGE_AREA_MIN_LUX",
    "CAUTION_NOTE",
    "ContrastCaution",
    "close_band",
    "surface_lrv",
    "surface_lrvs",
    "required_difference",
    "contrast_caution",
    "is_floor_covering",
    "stands_on_floor",
]

#: BS 8300-2:2018 Annex B: at least 30 points of LRV difference between adjacent surfaces.
MIN_LRV_DIFFERENCE = 30.0
#: BS 8300-2:2018 Annex B: 20 points may suffice for large areas lit above 200 lux.
LARGE_AREA_MIN_LRV_DIFFERENCE = 20.0
#: The illuminance (lux) above which the large-area allowance of BS 8300-2:2018 Annex B applies.
LARGE_AREA_MIN_LUX = 200.0

#: The paragraph the report prints above its cautions.
CAUTION_NOTE = (
    "A rug needs to stand out in luminance from the floor it lies on and from the furniture that "
    "stands on it, so that people with low vision can see its edges and the legs and bases on it. "
    "BS 8300-2:2018 (Annex B) asks for at least 30 points of light reflectance value (LRV) "
    "difference between adjacent surfaces; 20 points may do for large areas lit above 200 lux. "
    "LRV is CIE Y on a 0-100 scale, measured to BS 8493. The LRVs here are estimated from product "
    "photos and are only approximate: local codes and a measured sample of the rug and the floor decide."
)

# Category words (common retail usage) for what lies on the floor and what stands on it.
_FLOOR_COVERING_WORDS = ("rug", "rugs", "carpet", "carpets", "runner", "runners", "mat", "mats")
_NOT_ON_FLOOR_WORDS = (
    "cushion", "cushions", "pillow", "pillows", "throw", "throws", "art", "print", "prints",
    "mirror", "mirrors", "curtain", "curtains", "pendant", "pendants", "wall", "shelf", "shelves",
    "vase", "vases", "candle", "candles",
)


def _words(category):
    return str(category).casefold().replace("-", " ").replace("_", " ").split()


def is_floor_covering(category):
    """True for categories such as "rug", "runner rugs" or "door mat"."""
    return any(w in _FLOOR_COVERING_WORDS for w in _words(category))


def stands_on_floor(category):
    """True for furniture that stands on a rug (sofas, tables, chairs, beds, floor lamps ...).

    Floor coverings themselves, and small or wall-mounted things (cushions, throws, art, mirrors,
    curtains, pendants), are not.
    """
    words = _words(category)
    return bool(words) and not is_floor_covering(category) and not any(w in _NOT_ON_FLOOR_WORDS for w in words)


def surface_lrv(palette):
    """Estimated LRV (0-100) of the surface a palette describes: the weight-averaged CIE Y.

    Reflectance adds linearly over area, so the area-weighted mean of Y (not of lightness J')
    estimates the reflectance the surface shows from a distance.

    Parameters
    ----------
    palette : harmony.photo.palette.Palette

    Returns
    -------
    float
    """
    return surface_lrvs([palette])[0]


def surface_lrvs(palettes):
    """:func:`surface_lrv` of each of ``palettes`` (a list), their colours converted in one call."""
    sizes = [len(p.jab) for p in palettes]
    y = np.split(colour.lrv(np.concatenate([p.jab for p in palettes]), space="jab"), np.cumsum(sizes)[:-1])
    out = []
    for palette, yi in zip(palettes, y):
        w = np.asarray(palette.weights, dtype=float)
        out.append(float(np.clip(np.dot(w, yi) / w.sum(), 0.0, 100.0)))
    return out


def required_difference(large_area=False, illuminance_lux=None):
    """The LRV difference BS 8300-2:2018 Annex B asks for.

    Parameters
    ----------
    large_area : bool
        Whether both surfaces are large areas (a floor and a wall, a large rug and the floor).
    illuminance_lux : float, optional
        Illuminance on the surfaces; the 20-point allowance needs more than 200 lux.

    Returns
    -------
    float
        30, or 20 for large areas above 200 lux.
    """
    if illuminance_lux is not None:
        lux = float(illuminance_lux)
        if not math.isfinite(lux) or lux < 0:
            raise ValueError(f"illuminance_lux must be a non-negative number, got {illuminance_lux!r}")
        if large_area and lux > LARGE_AREA_MIN_LUX:
            return LARGE_AREA_MIN_LRV_DIFFERENCE
    return MIN_LRV_DIFFERENCE


def close_band(lrv, required=MIN_LRV_DIFFERENCE):
    """The LRVs an adjacent surface must avoid: those within ``required`` points of ``lrv``.

    A floor whose LRV lies strictly inside the returned interval (clipped to 0-100) is closer to
    the rug than BS 8300-2:2018 Annex B recommends.

    Parameters
    ----------
    lrv : float
        LRV of the surface (0-100), e.g. a rug's :func:`surface_lrv`.
    required : float
        The difference asked for (see :func:`required_difference`).

    Returns
    -------
    (float, float)
        ``(max(0, lrv - required), min(100, lrv + required))``.

    Raises
    ------
    ValueError
        If ``lrv`` is not a number in [0, 100] or ``required`` is not positive.
    """
    v, need = float(lrv), float(required)
    if not (math.isfinite(v) and 0.0 <= v <= 100.0):
        raise ValueError(f"LRV must lie in [0, 100], got {lrv!r}")
    if not (math.isfinite(need) and need > 0):
        raise ValueError(f"required difference must be positive, got {required!r}")
    return max(0.0, v - need), min(100.0, v + need)


@dataclass(frozen=True)
class ContrastCaution:
    """Two adjacent surfaces whose estimated LRVs differ by less than the recommendation.

    Attributes
    ----------
    a, b : str
        Labels of the two surfaces (product ids, or "floor").
    lrv_a, lrv_b : float
        Estimated LRVs, 0-100.
    difference : float
        ``abs(lrv_a - lrv_b)``.
    required : float
        The difference asked for (30 or 20 points).
    """

    a: str
    b: str
    lrv_a: float
    lrv_b: float
    difference: float
    required: float

    @property
    def message(self):
        """One sentence for people."""
        # One decimal where rounding would show the difference as already meeting the figure.
        diff = f"{self.difference:.0f}"
        if float(diff) >= self.required:
            diff = f"{math.floor(self.difference * 10) / 10:.1f}"
        return (
            f"{self.a} (LRV about {self.lrv_a:.0f}) and {self.b} (LRV about {self.lrv_b:.0f}) differ by "
            f"{diff} points; BS 8300-2 Annex B asks for at least {self.required:.0f}."
        )


def contrast_caution(a, lrv_a, b, lrv_b, large_area=False, illuminance_lux=None):
    """A :class:`ContrastCaution` when two adjacent surfaces are too close in LRV, else None.

    Parameters
    ----------
    a, b : str
        Labels of the surfaces.
    lrv_a, lrv_b : float
        Their LRVs on the 0-100 scale (see :func:`surface_lrv`).
    large_area, illuminance_lux
        See :func:`required_difference`.

    Raises
    ------
    ValueError
        If an LRV is not a number in [0, 100].
    """
    for name, value in ((a, lrv_a), (b, lrv_b)):
        v = float(value)
        if not (math.isfinite(v) and 0.0 <= v <= 100.0):
            raise ValueError(f"LRV of {name} must lie in [0, 100], got {value!r}")
    need = required_difference(large_area, illuminance_lux)
    diff = abs(float(lrv_a) - float(lrv_b))
    if diff >= need:
        return None
    return ContrastCaution(str(a), str(b), float(lrv_a), float(lrv_b), diff, need)
