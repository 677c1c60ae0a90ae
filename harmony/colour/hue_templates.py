"""Matsuda's hue templates, as used by Cohen-Or et al. (2006), fitted to a weighted set of hues.

A template is a set of sectors on the hue circle that may be rotated as a whole. A set of colours
fits a template when its hues fall inside the sectors; the distance of a colour outside is the arc
to the nearest sector border. Cohen-Or et al. weight each pixel's arc by its saturation; here a
palette colour is weighted by its share times its CAM02-UCS colourfulness M' (times how chromatic
it is, so neutrals fade out), and hues are CAM02-UCS hue angles rather than HSV hues.

References
----------
Y. Matsuda (1995). Color design. Asakura Shoten (in Japanese).
D. Cohen-Or, O. Sorkine, R. Gal, T. Leyvand, Y.-Q. Xu (2006). Color harmonization.
    ACM Transactions on Graphics 25(3):624-630 (Proc. SIGGRAPH 2006), Section 2 and Figure 2.
"""

from dataclasses import dataclass

import numpy as np

from harmony.colour import space as colour
from harmony.colour.neutral import neutrality

__all__ = ["HueTemplate", "TEMPLATES", "TemplateFit", "arc_outside", "fit_template", "best_template",
           "GREY_SHARE"]


@dataclass(frozen=True)
class HueTemplate:
    """Sectors ``(centre_deg, width_deg)`` at rotation 0; an empty tuple means greys only (N)."""

    name: str
    sectors: tuple

    @property
    def coverage_deg(self):
        """Total angular width of the sectors."""
        return float(sum(w for _, w in self.sectors))


#: The eight templates. Widths as described by Cohen-Or et al. (2006, Fig. 2) and carried by open
#: implementations of the paper as fractions of the circle (0.05 = 18 deg, 0.26 = 93.6 deg,
#: 0.22 = 79.2 deg; checked against the ``HueTemplates`` table of the ColorHarmonization Python
#: code on GitHub, tartarskunk/ColorHarmonization, where T is centred a quarter-turn on, which a
#: rotation absorbs). L's two sectors are a quarter-turn apart;
#: I, Y and X have their two sectors opposite each other; T is a half circle; N holds greys only.
TEMPLATES = {
    "i": HueTemplate("i", ((0.0, 18.0),)),
    "V": HueTemplate("V", ((0.0, 93.6),)),
    "L": HueTemplate("L", ((0.0, 18.0), (90.0, 79.2))),
    "I": HueTemplate("I", ((0.0, 18.0), (180.0, 18.0))),
    "T": HueTemplate("T", ((0.0, 180.0),)),
    "Y": HueTemplate("Y", ((0.0, 93.6), (180.0, 18.0))),
    "X": HueTemplate("X", ((0.0, 93.6), (180.0, 93.6))),
    "N": HueTemplate("N", ()),
}

#: Below this share of chromatic weight a palette is reported as template N (greys only).
#: A project choice: a few percent of colour in a grey room does not make a hue scheme.
GREY_SHARE = 0.05


@dataclass(frozen=True)
class TemplateFit:
    """Best rotation of one template: ``distance`` is the weighted mean arc (degrees) outside."""

    name: str
    rotation_deg: float
    distance: float


def _wrap180(x):
    return (np.asarray(x, dtype=float) + 180.0) % 360.0 - 180.0


def arc_outside(hue_deg, template, rotation_deg=0.0):
    """Arc in degrees from each hue to the nearest sector of ``template`` rotated by ``rotation_deg``.

    Zero inside a sector. Shape of ``hue_deg``. Template N (no sectors) gives NaN.
    """
    h = np.asarray(hue_deg, dtype=float)
    if not template.sectors:
        return np.full(h.shape, np.nan)
    out = np.full(h.shape, np.inf)
    for centre, width in template.sectors:
        gap = np.abs(_wrap180(h - rotation_deg - centre)) - width / 2.0
        out = np.minimum(out, np.maximum(gap, 0.0))
    return out


def fit_template(hue_deg, weights, template):
    """The rotation of ``template`` that minimises the weighted arc outside its sectors.

    Parameters
    ----------
    hue_deg : array_like, shape (n,)
    weights : array_like, shape (n,)
        Non-negative; at least one positive.
    template : HueTemplate
        Not N.

    Returns
    -------
    TemplateFit

    Notes
    -----
    The cost ``F(a) = sum_i w_i * arc(h_i - a)`` is piecewise linear in the rotation ``a``; each
    term bends upward (convex kink) only where a hue meets a sector border, and downward only
    at the middle of a gap between sectors. A minimum of a piecewise linear function sits where
    the slope turns from negative to positive, hence at a convex kink of some term: the exact
    optimum is among the rotations that put some hue on some sector border, all of which are tried.
    """
    h = np.asarray(hue_deg, dtype=float).ravel()
    w = np.asarray(weights, dtype=float).ravel()
    if h.shape != w.shape:
        raise ValueError(f"hue_deg and weights must have the same shape, got {h.shape} and {w.shape}")
    if not template.sectors:
        raise ValueError("template N has no sectors to rotate")
    if h.size == 0 or not np.any(w > 0):
        return TemplateFit(template.name, 0.0, 0.0)
    edges = np.array([c + sgn * width / 2.0 for c, width in template.sectors for sgn in (-1.0, 1.0)])
    rotations = ((h[:, None] - edges[None, :]).ravel()) % 360.0
    costs = np.array([np.dot(w, arc_outside(h, template, a)) for a in rotations])
    k = int(np.argmin(costs))
    return TemplateFit(template.name, float(rotations[k]), float(costs[k] / w.sum()))


def best_template(jab, weights, tolerance_deg=1.0):
    """Fit every template to a weighted palette and pick the narrowest one that fits best.

    Parameters
    ----------
    jab : array_like, shape (n, 3)
        CAM02-UCS colours.
    weights : array_like, shape (n,)
        Their shares.
    tolerance_deg : float
        Templates within this mean arc of the best distance count as fitting equally well;
        the one with the narrowest total sector width wins (wide templates such as T and X
        cover so much of the circle that the plain minimum would nearly always pick them).

    Returns
    -------
    best : TemplateFit
        Template N (rotation 0, distance 0) when less than :data:`GREY_SHARE` of the weight is
        chromatic.
    fits : dict name -> TemplateFit
        Every template except N.
    """
    jab = np.asarray(jab, dtype=float).reshape(-1, 3)
    w = np.asarray(weights, dtype=float).ravel()
    chroma = 1.0 - neutrality(jab)
    hue_w = w * chroma * colour.colourfulness(jab)
    hue = colour.hue_deg(jab)
    fits = {name: fit_template(hue, hue_w, t) for name, t in TEMPLATES.items() if t.sectors}
    total = float(w.sum())
    if total <= 0 or float(np.dot(w, chroma)) / total < GREY_SHARE:
        return TemplateFit("N", 0.0, 0.0), fits
    least = min(f.distance for f in fits.values())
    near = [f for f in fits.values() if f.distance <= least + tolerance_deg]
    best = min(near, key=lambda f: (TEMPLATES[f.name].coverage_deg, f.distance))
    return best, fits
