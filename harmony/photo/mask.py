"""Which pixels of a product photo belong to the product.

Studio shots have a uniform backdrop: the background is whatever is *connected to the image edge*
and within a ΔE tolerance of the border colour, so a near-white part inside the product stays.
Soft shadows (connected to the background, darker, about as neutral, and without sharp edges)
go too. A border that is not uniform marks a room (lifestyle) scene: then every pixel counts,
weighted by a centre prior, and the result is flagged with a low confidence.

A full-bleed photo (a close-up of a rug, a fabric swatch, a flat colour fill) also has a uniform
border, but there the border colour is the product itself. Backdrop removal would take away the
whole frame, except perhaps threads of the weave that lie beyond the tolerance. The rule that
tells such a frame from a studio shot, applied once the border is found uniform:

* What backdrop removal leaves is spread *evenly*: its share of the inner pixels is at most
  ``1.5 x`` its share of the border ring plus 0.02 (:data:`EVEN_LEFTOVER_RATIO`,
  :data:`EVEN_LEFTOVER_SLACK`). A product stands inside the frame, so in a studio shot the inner
  share is far higher than the ring's; the stray threads of a weave fall equally everywhere.
* The border colour is **not** a studio backdrop. A studio backdrop is light and near-neutral:
  J' at least :data:`BACKDROP_MIN_LIGHTNESS` (75, sRGB grey 0.7 or lighter) and M' below
  :data:`harmony.colour.neutral.NEUTRAL_COLOURFULNESS` (white to light-grey seamless paper and sweeps,
  common practice).

When both hold the frame is one material: nothing is removed, every opaque pixel counts with
weight 1, ``background_jab`` is None, ``scene`` is False and the confidence is
:data:`FULL_FRAME_CONFIDENCE`. When the leftover is even but the border *is* a backdrop colour,
the photo is an empty backdrop (a flat off-white frame): everything is background and the
palette step reports "nothing left after removing the background".

A flat mid-grey frame (J' about 56) is darker than any backdrop, so it counts as one material (a
grey felt, concrete or linen swatch): an empty studio shot is nearly always lit white or light
grey, and refusing a real grey product costs more than a grey palette flagged as less certain.
The flip side: a white or light-grey full-frame material cannot be told from an empty backdrop
by colour and is treated as a backdrop (error when nothing else is left).
"""

from dataclasses import dataclass

import numpy as np
from skimage.measure import label

__all__ = [
    "Mask",
    "SCENE_CONFIDENCE",
    "FULL_FRAME_CONFIDENCE",
    "BACKDROP_MIN_LIGHTNESS",
    "EVEN_LEFTOVER_RATIO",
    "EVEN_LEFTOVER_SLACK",
    "is_backdrop_colour",
    "CENTRE_PRIOR_SIGMA",
    "border_ring",
    "foreground_mask",
]

#: Confidence given to palettes of room scenes: the product was only guessed (convention of
#: this project; consumers treat anything below 0.5 as "prefer another photo").
SCENE_CONFIDENCE = 0.25

#: Confidence given to palettes of one-material (full-bleed) frames. Nothing was guessed about the
#: background, so it stays above the 0.5 "prefer another photo" line; it is below any studio shot
#: (>= 0.8) because a close-up may show only part of the product (a sofa's fabric without its legs)
#: and because telling the material from an empty coloured backdrop rests on the colour rule of
#: this module (convention of this project).
FULL_FRAME_CONFIDENCE = 0.6

#: Smallest J' of a studio backdrop: sRGB grey 0.7 (178 of 255) has J' 75.4. Studio backdrops for
#: furniture and home goods are white to light grey (common practice).
BACKDROP_MIN_LIGHTNESS = 75.0

#: What backdrop removal leaves is "even" (the texture of one material, not a product) when its
#: share of the inner pixels is at most ``EVEN_LEFTOVER_RATIO`` times its share of the border ring
#: plus ``EVEN_LEFTOVER_SLACK``. For a texture both shares estimate the same density, so 1.5x and
#: two points leave room for sampling noise; a product standing inside the frame gives an inner
#: share many times the ring's (convention of this project).
EVEN_LEFTOVER_RATIO = 1.5
EVEN_LEFTOVER_SLACK = 0.02

#: Standard deviation of the Gaussian centre prior for scenes, as a fraction of each image side
#: (common practice: product photos centre the product).
CENTRE_PRIOR_SIGMA = 0.25


@dataclass(frozen=True, eq=False)
class Mask:
    """Result of background analysis.

    Attributes
    ----------
    weights : ndarray, shape (h, w), float
        How much each pixel counts for the palette: 0 for background and shadow, 1 for the
        product of a studio shot, the centre prior for a scene.
    background_jab : ndarray, shape (3,) or None
        Border colour of a studio shot; None for transparent backgrounds and scenes.
    background_share : float
        Share of pixels that are background (backdrop, shadow or transparent).
    scene : bool
        True when the border was not uniform.
    confidence : float
        In [0, 1]: the share of border pixels matching the backdrop for studio shots, 1 for
        transparent backgrounds, :data:`SCENE_CONFIDENCE` for scenes.
    """

    weights: np.ndarray
    background_jab: np.ndarray | None
    background_share: float
    scene: bool
    confidence: float


def border_ring(shape, width):
    """Boolean mask of the pixels within ``width`` of the image edge, shape ``shape`` (h, w)."""
    h, w = shape
    ring = np.zeros((h, w), dtype=bool)
    ring[:width, :] = ring[-width:, :] = True
    ring[:, :width] = ring[:, -width:] = True
    return ring


def _edge_strength(lightness):
    """Largest absolute J' difference from the four neighbours, shape (h, w)."""
    step = np.zeros_like(lightness)
    dx = np.abs(np.diff(lightness, axis=1))
    dy = np.abs(np.diff(lightness, axis=0))
    np.maximum(step[:, :-1], dx, out=step[:, :-1])
    np.maximum(step[:, 1:], dx, out=step[:, 1:])
    np.maximum(step[:-1, :], dy, out=step[:-1, :])
    np.maximum(step[1:, :], dy, out=step[1:, :])
    return step


def _connected_to_edge(candidates):
    labels = label(candidates, connectivity=1)
    edge = np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]])
    keep = np.zeros(labels.max() + 1, dtype=bool)
    keep[edge] = True
    keep[0] = False
    return keep[labels]


def _side_spread(jab, transparent, width):
    """Largest ΔE between the median colours of the four border strips of ``width`` pixels."""
    medians = []
    for rows, cols in ((slice(0, width), slice(None)), (slice(-width, None), slice(None)),
                       (slice(None), slice(0, width)), (slice(None), slice(-width, None))):
        strip = jab[rows, cols][~transparent[rows, cols]]
        if len(strip):
            medians.append(np.median(strip, axis=0))
    if len(medians) < 2:
        return 0.0
    m = np.array(medians)
    return float(np.max(np.sqrt(((m[:, None, :] - m[None, :, :]) ** 2).sum(axis=-1))))


def is_backdrop_colour(jab):
    """True where a colour could be a studio backdrop: light (J' >= :data:`BACKDROP_MIN_LIGHTNESS`)
    and near-neutral (M' below :data:`harmony.colour.neutral.NEUTRAL_COLOURFULNESS`). Shape (...)."""
    from harmony.colour import colourfulness
    from harmony.colour.neutral import NEUTRAL_COLOURFULNESS

    jab = np.asarray(jab, dtype=float)
    return (jab[..., 0] >= BACKDROP_MIN_LIGHTNESS) & (colourfulness(jab) < NEUTRAL_COLOURFULNESS)


def _centre_prior(shape):
    h, w = shape
    y = (np.arange(h) + 0.5) / h - 0.5
    x = (np.arange(w) + 0.5) / w - 0.5
    s2 = 2.0 * CENTRE_PRIOR_SIGMA**2
    return np.exp(-(y[:, None] ** 2) / s2) * np.exp(-(x[None, :] ** 2) / s2)


def foreground_mask(
    jab,
    opaque=None,
    *,
    ring_fraction=0.03,
    tolerance=6.0,
    uniform_share=0.8,
    shadow_ab=6.0,
    shadow_depth=45.0,
    shadow_edge=6.0,
):
    """Separate product from backdrop and shadow.

    Parameters
    ----------
    jab : ndarray, shape (h, w, 3)
        CAM02-UCS J'a'b' of every pixel.
    opaque : ndarray, shape (h, w), bool, optional
        False where the pixel is transparent.
    ring_fraction : float
        Width of the border ring sampled for the backdrop, as a fraction of the short side.
    tolerance : float
        ΔE (CAM02-UCS) from the border colour within which an edge-connected pixel is backdrop.
    uniform_share : float
        The border is uniform (a studio shot) when at least this share of its pixels lies within
        ``tolerance`` of its median colour.
        The median colours of the four sides must also lie within ``tolerance`` of each other:
        a room with a plain wall has a mostly uniform ring, but its floor fills the bottom side.
    shadow_ab : float
        Largest a'b' distance from the backdrop's a'b' of a shadow pixel (shadows are as neutral
        as the backdrop they fall on).
    shadow_depth : float
        Largest drop in J' below the backdrop of a shadow pixel.
    shadow_edge : float
        A shadow pixel differs by less than this in J' from each of its neighbours (soft shadows
        have no sharp edges, product outlines do).

    Returns
    -------
    Mask

    Notes
    -----
    A uniform border whose colour is not a backdrop, with backdrop removal leaving only an even
    scatter, is a one-material frame: nothing is removed (see the module docstring for the rule).
    The backdrop colour is the per-channel median of the ring, robust to a product that touches
    the border. A light grey product standing in the shadow is kept as long as its outline is
    sharper than ``shadow_edge``.
    """
    jab = np.asarray(jab)
    if jab.dtype.kind != "f":
        jab = jab.astype(float)
    if jab.ndim != 3 or jab.shape[2] != 3:
        raise ValueError(f"jab must have shape (h, w, 3), got {jab.shape}")
    h, w = jab.shape[:2]
    transparent = np.zeros((h, w), dtype=bool) if opaque is None else ~np.asarray(opaque, bool)
    width = max(1, int(round(ring_fraction * min(h, w))))
    ring = border_ring((h, w), width)

    if transparent[ring].mean() >= 0.5:
        weights = (~transparent).astype(float)
        return Mask(weights, None, float(transparent.mean()), False, 1.0)

    ring_jab = jab[ring & ~transparent]
    background = np.median(ring_jab, axis=0)
    da, db = jab[..., 1] - background[1], jab[..., 2] - background[2]
    dj = jab[..., 0] - background[0]
    chroma_sq = da * da + db * db
    near = chroma_sq + dj * dj <= tolerance**2
    share = float(near[ring & ~transparent].mean())
    if share < uniform_share or _side_spread(jab, transparent, width) > tolerance:
        weights = _centre_prior((h, w)) * ~transparent
        return Mask(weights, None, float(transparent.mean()), True, SCENE_CONFIDENCE)

    shadow = (
        (dj < 0.0)
        & (dj >= -shadow_depth)
        & (chroma_sq <= shadow_ab**2)
        & (_edge_strength(jab[..., 0]) < shadow_edge)
    )
    back = _connected_to_edge(near | shadow) | transparent
    left = ~back
    inner = ~ring & ~transparent
    ring_left = float(left[ring & ~transparent].mean())
    inner_left = float(left[inner].mean()) if inner.any() else ring_left
    even = inner_left <= EVEN_LEFTOVER_RATIO * ring_left + EVEN_LEFTOVER_SLACK
    if even and not is_backdrop_colour(background):
        weights = (~transparent).astype(float)
        return Mask(weights, None, float(transparent.mean()), False, FULL_FRAME_CONFIDENCE)
    weights = (~back).astype(float)
    return Mask(weights, background, float(back.mean()), False, share)
