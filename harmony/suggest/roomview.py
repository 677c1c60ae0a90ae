"""The room-level view of a bundle: its combined palette, 60-30-10 proportions, hue template.

Each item's palette counts in proportion to its visible share in the room, ``quantity x size``
(``size`` is the per-slot factor of the room template). Colours closer than
:data:`GROUP_DELTA_E` are grouped; the heaviest group is the dominant colour, the next the
secondary, everything else the accent. The 60-30-10 proportion rule of thumb (common practice in
interior design, no formal source) asks for about 60 % dominant, 30 % secondary, 10 % accent.
"""

from dataclasses import dataclass

import numpy as np

from harmony import colour
from harmony.colour.hue_templates import TemplateFit, best_template

__all__ = [
    "RoomView",
    "GROUP_DELTA_E",
    "PROPORTION_TARGET",
    "combine_palettes",
    "colour_groups",
    "proportion_distance",
    "room_view",
]

#: Colours within this CAM02-UCS Delta E of a group's leading colour join it. A project choice:
#: several times the just-noticeable difference (about 1), so shades of one fabric read as one.
GROUP_DELTA_E = 10.0

#: Dominant, secondary, accent shares of the 60-30-10 rule of thumb (common practice).
PROPORTION_TARGET = (0.6, 0.3, 0.1)


@dataclass(frozen=True, eq=False)
class RoomView:
    """The combined palette of a bundle and how it reads as a room.

    Attributes
    ----------
    jab : ndarray, shape (k, 3)
        Leading colour of each colour group, heaviest first.
    weights : ndarray, shape (k,)
        Share of the room's visible colour held by each group; sums to 1.
    shares : tuple of 3 floats
        Dominant, secondary and accent (all the rest) shares.
    distance : float
        Total variation distance of ``shares`` from 60-30-10, in [0, 0.9]; 0 is an exact match.
    template : TemplateFit
        Best-fitting hue template of the combined palette.
    """

    jab: np.ndarray
    weights: np.ndarray
    shares: tuple
    distance: float
    template: TemplateFit

    def to_dict(self):
        """JSON-ready: shares, distance, the grouped palette as {hex: weight}, the hue template."""
        return {
            "dominant": float(self.shares[0]),
            "secondary": float(self.shares[1]),
            "accent": float(self.shares[2]),
            "distance_60_30_10": float(self.distance),
            "palette": {h: round(float(w), 4) for h, w in zip(colour.jab_to_hex(self.jab), self.weights)},
            "hue_template": {"name": self.template.name,
                             "rotation_deg": round(float(self.template.rotation_deg), 3),
                             "distance_deg": float(self.template.distance)},
        }


def combine_palettes(palettes, visible):
    """All colours of several palettes, weighted by each palette's visible share.

    Parameters
    ----------
    palettes : sequence of Palette
    visible : sequence of float
        ``quantity x size`` of each item; non-negative, not all zero.

    Returns
    -------
    jab : ndarray, shape (k, 3)
    weights : ndarray, shape (k,), summing to 1
    """
    visible = np.asarray(visible, dtype=float)
    if len(palettes) == 0 or visible.shape != (len(palettes),):
        raise ValueError(f"need one visible share per palette, got {visible.shape} for {len(palettes)}")
    if np.any(visible < 0) or not visible.sum() > 0:
        raise ValueError("visible shares must be non-negative and not all zero")
    jab = np.concatenate([p.jab for p in palettes])
    weights = np.concatenate([p.weights * v for p, v in zip(palettes, visible)])
    return jab, weights / weights.sum()


def colour_groups(jab, weights, merge_delta_e=GROUP_DELTA_E):
    """Group colours greedily, heaviest first: each joins the group with the nearest lead, when
    that lead is within ``merge_delta_e`` (CAM02-UCS), or else leads a new group.

    Returns the leading colours, shape (g, 3), and group shares, shape (g,), heaviest first.
    """
    jab = np.asarray(jab, dtype=float).reshape(-1, 3)
    weights = np.asarray(weights, dtype=float).ravel()
    order = np.argsort(-weights, kind="stable")
    leads, shares = [], []
    for i in order:
        if leads:
            d = colour.delta_e(np.array(leads), jab[i])
            j = int(np.argmin(d))
            if d[j] <= merge_delta_e:
                shares[j] += weights[i]
                continue
        leads.append(jab[i])
        shares.append(float(weights[i]))
    shares = np.array(shares)
    order = np.argsort(-shares, kind="stable")
    return np.array(leads)[order], shares[order] / shares.sum()


def proportion_distance(shares, target=PROPORTION_TARGET):
    """Total variation distance between (dominant, secondary, accent) shares and ``target``."""
    s = np.asarray(shares, dtype=float)
    return float(0.5 * np.abs(s - np.asarray(target, dtype=float)).sum())


def room_view(palettes, visible, merge_delta_e=GROUP_DELTA_E):
    """The :class:`RoomView` of a bundle's item palettes and their visible shares."""
    jab, weights = combine_palettes(palettes, visible)
    leads, shares = colour_groups(jab, weights, merge_delta_e)
    dominant = float(shares[0])
    secondary = float(shares[1]) if shares.size > 1 else 0.0
    trio = (dominant, secondary, max(0.0, 1.0 - dominant - secondary))
    fit, _ = best_template(jab, weights)
    return RoomView(jab=leads, weights=shares, shares=trio, distance=proportion_distance(trio), template=fit)
