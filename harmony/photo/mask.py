"""Which pixels of a product photo belong to the product.

Studio shots have a backdrop that is uniform *up to a smooth light fall-off*: a seamless sweep
lit from above can lose 20 % or more of its brightness from top to bottom. The backdrop is
therefore modelled as a smooth surface, a quadratic in the pixel position fitted robustly to the
border ring, per channel of CAM02-UCS J'a'b' (:func:`backdrop_model`). Every later test compares a
pixel with the backdrop *at that pixel*, not with one border colour.

* **Studio shot or scene.** The border is uniform when at least ``uniform_share`` of the ring lies
  within ``tolerance`` of the fitted surface, the surface itself changes by no more than a sweep
  does (:data:`MAX_FALLOFF_J`, :data:`MAX_FALLOFF_AB`), and nothing along the ring *steps*: a
  room with a plain wall over a floor has a mostly uniform ring, but the wall meets the floor in a
  sharp step, while a sweep changes slowly (:data:`MAX_RING_STEP`).
* **Backdrop, wherever it shows.** A pixel *continues the backdrop* when it lies within the
  opening tolerance of the surface: the backdrop's own measured spread (95th percentile of the
  ring's ΔE from the surface) times :data:`OPENING_SPREAD_FACTOR`, kept between
  :data:`OPENING_MIN_DELTA_E` and :data:`OPENING_MAX_DELTA_E`. Such pixels connected to the image
  edge are background, and so is every *enclosed* region made mostly of them (the backdrop seen
  through a chair back, between shelves, inside a frame), however it is enclosed. A part that
  differs from the backdrop by more than the opening tolerance (at most 4.5 ΔE, so any light part
  5 ΔE or more away) is product wherever it is, touching the outline or not.
* **Shadows.** A shadow pixel is darker than the backdrop (by at most ``shadow_depth``), as
  neutral as the backdrop (a'b' within ``shadow_ab``) *and* smooth: it differs by less than
  ``shadow_edge`` from each neighbour and by less than :data:`SHADOW_CURVATURE` from the mean of
  its 3 x 3 neighbourhood. Soft shadows fade into the backdrop over several pixels and pass; the
  crisp outline of a flat light surface does not (a step of 6 ΔE leaves at least 1 ΔE of
  curvature beside it, whatever its sub-pixel position), so the flood from the backdrop stops
  there and the surface stays product, however close to neutral.
* **Confidence.** The share of the ring that matches the backdrop surface, lowered and flagged
  when the kept area is implausibly small for a studio shot (:data:`SMALL_AREA_SHARE`,
  flag ``"small-area"``) or when a clear part of the product sits within a few ΔE of the backdrop
  (:data:`NEAR_BACKDROP_DELTA_E`, :data:`NEAR_BACKDROP_SHARE`, flag ``"near-backdrop"``): such
  parts may have been lost, or may be backdrop that was kept.

A border that is not uniform marks a room (lifestyle) scene: then every pixel counts, weighted by
a centre prior, and the result is flagged with a low confidence.

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
from functools import lru_cache

import numpy as np
from scipy import ndimage

from harmony.photo.regions import connected_to_edge, dilate_cross, grow_along, grow_within, label_box, label_cross
from harmony.photo.surface import basis, border_ring, fit_surface, median_rows, ring_basis, ring_index

__all__ = [
    "Mask",
    "SCENE_CONFIDENCE",
    "FULL_FRAME_CONFIDENCE",
    "BACKDROP_MIN_LIGHTNESS",
    "EVEN_LEFTOVER_RATIO",
    "EVEN_LEFTOVER_SLACK",
    "MAX_FALLOFF_J",
    "MAX_FALLOFF_AB",
    "MAX_RING_STEP",
    "OPENING_SPREAD_FACTOR",
    "OPENING_MIN_DELTA_E",
    "OPENING_MAX_DELTA_E",
    "SHADOW_CURVATURE",
    "RINGING_EDGE_FACTOR",
    "SHADOW_GROW_STEP",
    "SHADOW_REACH",
    "SHADOW_RELATIVE_CURVATURE",
    "ENCLOSED_CLEAR_PIXELS",
    "ENCLOSED_BIAS_FACTOR",
    "ENCLOSED_MIN_DELTA_E",
    "SMALL_AREA_SHARE",
    "SMALL_AREA_CONFIDENCE",
    "NEAR_BACKDROP_DELTA_E",
    "NEAR_BACKDROP_SHARE",
    "NEAR_BACKDROP_CONFIDENCE",
    "FLAG_SMALL_AREA",
    "FLAG_NEAR_BACKDROP",
    "is_backdrop_colour",
    "CENTRE_PRIOR_SIGMA",
    "border_ring",
    "colour_step_sq",
    "backdrop_model",
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

#: Largest change of the fitted backdrop's J' across the frame. A sweep whose light falls off by
#: 35 % from top to bottom (sRGB 0.95 -> 0.62) changes J' by about 25; brighter fall-offs than that
#: are not studio lighting (convention of this project, measured with :func:`backdrop_model`).
MAX_FALLOFF_J = 30.0
#: Largest change of the fitted backdrop's a' or b' across the frame: a fall-off darkens a
#: backdrop without changing its hue much (convention of this project).
MAX_FALLOFF_AB = 6.0
#: Largest ΔE between two backdrop-like points of the ring 4 pixels apart. A 35 % sweep changes
#: by about 0.8 ΔE over 4 pixels at 128 px; a wall meeting a floor steps by the whole difference
#: at once (convention of this project; measured in ``tests/photo/test_mask.py``).
MAX_RING_STEP = 3.0

#: The opening tolerance is this many times the backdrop's measured spread (95th percentile of
#: the ring's ΔE from the fitted surface), kept between the two limits below. Three times the
#: 95th percentile of a Gaussian spread is beyond its 99.99th percentile (common practice).
OPENING_SPREAD_FACTOR = 3.0
#: Smallest opening tolerance (ΔE): JPEG's 4:2:0 chroma subsampling shifts a flat backdrop by
#: up to about 2.5 ΔE in whole blocks next to a coloured product, so below 3 ΔE bands of backdrop
#: would be kept (measured on generated shots at quality 90).
OPENING_MIN_DELTA_E = 3.0
#: Largest opening tolerance (ΔE), below the 5 ΔE at which a light part must stay product (the
#: trade-off is measured in ``tests/photo/test_openings.py``: an enclosed inlay 5 ΔE from the
#: backdrop keeps its share, enclosed backdrop with the spread of a JPEG'd sweep goes).
OPENING_MAX_DELTA_E = 4.5

#: An enclosed region is backdrop seen through an opening when its median colour lies within
#: this many times the backdrop's own patch-to-surface unevenness of the surface (the largest ΔE
#: of the median of one of eight border patches from the fitted surface), kept between
#: :data:`ENCLOSED_MIN_DELTA_E` and :data:`OPENING_MAX_DELTA_E`. A near-white part with its own
#: colour (a pillow 1.8 ΔE off) is then product, a window onto the backdrop is not (convention of
#: this project, measured in ``tests/photo/test_openings.py``).
ENCLOSED_BIAS_FACTOR = 3.0
#: Smallest tolerance for the median colour of an enclosed region (ΔE).
ENCLOSED_MIN_DELTA_E = 1.0

#: A step between neighbours larger than this many times ``tolerance`` (ΔE) is a strong edge;
#: beside it JPEG ringing is tolerated up to ``tolerance`` (measured: a 50 ΔE outline at quality
#: 90 rings by up to about 5 ΔE one pixel out at 128 px).
RINGING_EDGE_FACTOR = 2.0

#: Largest |J' - mean of its 3 x 3 neighbourhood| of a shadow pixel. A soft shadow 25 J' deep
#: blurred over 2.5 px (the contact shadows of studio shots at 128 px) curves by about 0.35; a
#: crisp step of 6 J' leaves at least 1.0 beside it; sensor and JPEG noise about 0.3 (measured).
SHADOW_CURVATURE = 0.7

#: A deeper shadow may curve more: up to this fraction of its depth below the backdrop. A
#: Gaussian shadow of depth D and width s (pixels) curves by about 2D / (3 s^2) at its core, so
#: shadows at least 2.6 px wide pass; beside a crisp outline of height H the first pixel inside
#: curves by at least H / 6, whatever H, so outlines stay closed (derivation; measured in tests).
SHADOW_RELATIVE_CURVATURE = 0.1

#: How far (a fraction of the short side, through shadow pixels) a shadow reaches from the
#: backdrop. Contact shadows of studio shots are a few percent of the frame high (measured on
#: the generated and demo shots: their cores lie up to about 8 % of the side from clean backdrop); a product as dark as its shadow where it
#: stands on it loses at most this much of its legs (convention of this project).
SHADOW_REACH = 0.12

#: An enclosed region judged by its own colour needs this many pixels away from strong edges;
#: narrower gaps (between slats) are all blur and ringing and are judged by their pixels within
#: the opening tolerance instead (convention of this project).
ENCLOSED_CLEAR_PIXELS = 12

#: Largest J' step from a background neighbour of a shadow-coloured pixel that the shadow
#: still takes after the flood (corners where a leg meets its shadow). Twice the shadow
#: curvature: the 3 J' half-step beside a crisp 6 J' outline stays out (measured).
SHADOW_GROW_STEP = 1.4

#: A studio shot whose product keeps less than this share of the image is implausible (products
#: are photographed to fill the frame; convention of this project, the smallest demo product, a
#: slim floor lamp, keeps about 6 %).
SMALL_AREA_SHARE = 0.03
#: Confidence of a palette flagged ``"small-area"`` (below the 0.5 "prefer another photo" line).
SMALL_AREA_CONFIDENCE = 0.4
#: A product pixel within this ΔE of the backdrop surface is "near the backdrop": a few JNDs
#: beyond the opening tolerance (convention of this project).
NEAR_BACKDROP_DELTA_E = 8.0
#: Share of the kept (non-outline) pixels near the backdrop that flags the palette.
NEAR_BACKDROP_SHARE = 0.15
#: Confidence of a palette flagged ``"near-backdrop"``.
NEAR_BACKDROP_CONFIDENCE = 0.6

FLAG_SMALL_AREA = "small-area"
FLAG_NEAR_BACKDROP = "near-backdrop"

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
        Backdrop colour of a studio shot (the fitted surface at the median ring position); None
        for transparent backgrounds and scenes.
    background_share : float
        Share of pixels that are background (backdrop, shadow or transparent).
    scene : bool
        True when the border was not uniform.
    confidence : float
        In [0, 1]: the share of border pixels matching the backdrop for studio shots, lowered by
        the flags; 1 for transparent backgrounds, :data:`SCENE_CONFIDENCE` for scenes.
    flags : tuple of str
        Doubts about the mask: :data:`FLAG_SMALL_AREA`, :data:`FLAG_NEAR_BACKDROP`.
    backdrop : ndarray, shape (h, w, 3) or None
        The fitted backdrop surface (J'a'b' at every pixel) of a studio shot, else None.
    """

    weights: np.ndarray
    background_jab: np.ndarray | None
    background_share: float
    scene: bool
    confidence: float
    flags: tuple = ()
    backdrop: np.ndarray | None = None


def _planes(jab):
    """J'a'b' as three contiguous (h, w) planes, shape (3, h, w); no copy when ``jab`` is a view
    of channel-first memory (as :func:`harmony.photo.palette.srgb8_to_jab` returns)."""
    return np.ascontiguousarray(np.moveaxis(jab, -1, 0))


def _shadow(lightness, dj, coloured, like, flood, shadow_edge, kernels=None):
    """Shadow pixels: shadow-coloured, smooth and without a step of ``shadow_edge`` to a
    neighbour; decided only where it matters, outside the ``flood`` (elsewhere False).

    Curvature is taken against the neighbours that could be backdrop or shadow by colour only
    (``like``; a normalised 3 x 3 mean), so that a shadow beside a dark leg is not taken for an
    outline. Both 3 x 3 means are what ``uniform_filter(..., (1, 3, 3))`` runs, axis by axis,
    on the box around the pixels that matter. scipy keeps a running sum along each line (since
    scipy 1.0); for J' from 1 to 128 in float32 (the palette's pixel table) every such sum is
    exact in double, so a line started at the box gives the same bits as one started at the
    image edge. Other input is filtered whole."""
    if kernels is not None and lightness.dtype == dj.dtype == np.float32 and shadow_edge > 0:
        found, done = kernels.shadow_found(lightness, dj, coloured, like, flood, np.float32(shadow_edge),
                                           np.float32(SHADOW_CURVATURE), np.float32(SHADOW_RELATIVE_CURVATURE))
        if done:
            return found
    h, w = lightness.shape
    rows = np.flatnonzero((coloured & ~flood).any(axis=1))
    shadow = np.zeros((h, w), dtype=bool)
    if rows.size == 0:
        return shadow
    cols = np.flatnonzero((coloured & ~flood).any(axis=0))
    inner = np.s_[rows[0]: rows[-1] + 1, cols[0]: cols[-1] + 1]
    box = np.s_[max(rows[0] - 1, 0): rows[-1] + 2, max(cols[0] - 1, 0): cols[-1] + 2]
    exact = lightness.dtype == np.float32 and 1.0 <= lightness.min() and lightness.max() < 128.0
    if not exact:
        box = np.s_[0:h, 0:w]
    # ``inner`` as seen from inside ``box``
    part = np.s_[inner[0].start - box[0].start: inner[0].stop - box[0].start,
                 inner[1].start - box[1].start: inner[1].stop - box[1].start]
    light, like_box = lightness[box], like[box]
    # The first pass runs down the columns: on a transposed copy, each column is one contiguous
    # line (the same values in the same order, so the same sums), which scipy runs far faster.
    across = np.empty((2,) + light.shape[::-1], dtype=light.dtype)
    across[0] = like_box.T
    np.multiply(light.T, across[0], out=across[1])
    across = ndimage.uniform_filter1d(across, 3, axis=2, mode="nearest")
    means = np.ascontiguousarray(across.transpose(0, 2, 1))
    ndimage.uniform_filter1d(means, 3, axis=2, output=means, mode="nearest")
    local = means[1] / np.maximum(means[0], 1e-6)
    curvature = np.abs(light - local)
    smooth = curvature < np.maximum(SHADOW_CURVATURE, SHADOW_RELATIVE_CURVATURE * np.abs(dj[box]))
    found = coloured[box] & smooth & _steps_below(light, like_box, shadow_edge)
    shadow[inner] = found[part]
    return shadow


def _steps_below(lightness, among, limit):
    """True where every absolute J' difference from a neighbour is below ``limit`` (finite
    values), counting only neighbours where ``among`` holds for both pixels; shape (h, w)."""
    if not limit > 0:
        return np.zeros(lightness.shape, dtype=bool)
    calm_x = np.abs(lightness[:, 1:] - lightness[:, :-1]) < limit
    calm_x |= ~(among[:, 1:] & among[:, :-1])
    calm_y = np.abs(lightness[1:, :] - lightness[:-1, :]) < limit
    calm_y |= ~(among[1:, :] & among[:-1, :])
    ok = np.ones(lightness.shape, dtype=bool)
    ok[:, :-1] &= calm_x
    ok[:, 1:] &= calm_x
    ok[:-1, :] &= calm_y
    ok[1:, :] &= calm_y
    return ok


def colour_step_sq(jab):
    """Largest squared ΔE between each pixel and its four neighbours, shape (h, w).

    ``jab`` has shape (h, w, 3); the sums run over J', a', b' in that order."""
    planes = _planes(np.asarray(jab))
    h, w = planes.shape[1:]
    step = np.zeros((h, w), dtype=planes.dtype)
    for axis in (2, 1):  # across, then down
        d = np.diff(planes, axis=axis)
        d *= d
        sq = d[0] + d[1]
        sq += d[2]
        lead = (slice(None), slice(None, -1)) if axis == 2 else (slice(None, -1), slice(None))
        trail = (slice(None), slice(1, None)) if axis == 2 else (slice(1, None), slice(None))
        np.maximum(step[lead], sq, out=step[lead])
        np.maximum(step[trail], sq, out=step[trail])
    return step


def backdrop_model(jab, ring, usable, tolerance, iterations=3):
    """Fit a smooth backdrop surface to the border ring.

    Parameters
    ----------
    jab : ndarray, shape (h, w, 3)
    ring, usable : ndarray, shape (h, w), bool
        The border ring, and the pixels that may take part (opaque).
    tolerance : float
        ΔE beyond which a ring pixel is not backdrop (a product touching the border) and is left
        out of the next fit.
    iterations : int
        Refits on the inliers of the previous fit.

    Returns
    -------
    surface : ndarray, shape (h, w, 3)
        The backdrop's J'a'b' at every pixel.
    residual : ndarray, shape (n,)
        ΔE of each usable ring pixel from the surface.
    inlier : ndarray, shape (n,), bool

    Notes
    -----
    Starts from the per-channel median of the ring (robust to a product touching the border),
    then least squares over the ring pixels within ``tolerance`` of the current fit, with a
    quadratic in (x, y): enough for a sweep's fall-off and a vignette, too stiff to follow an
    object. The first refit is planar so that a far-off start cannot bend the surface.
    """
    jab = np.asarray(jab)
    h, w = jab.shape[:2]
    index = np.flatnonzero(np.asarray(ring, bool) & np.asarray(usable, bool))
    ys, xs = np.divmod(index, w)
    design = basis(ys / max(h - 1, 1) - 0.5, xs / max(w - 1, 1) - 0.5)
    surface, residual, inlier = fit_surface(_planes(jab), index, design, tolerance, iterations)
    return np.moveaxis(surface, 0, -1), residual, inlier


@lru_cache(maxsize=16)
def _ring_sides(h, w, width):
    """Flat pixel indices of the ring's four sides as two (index, length) pairs: top and bottom
    rows, shape (2, width, w), then left and right columns, shape (2, width, h)."""
    flat = np.arange(h * w).reshape(h, w)
    sides = ((np.stack([flat[:width], flat[-width:]]), w),
             (np.stack([flat[:, :width].T, flat[:, -width:].T]), h))
    for index, _ in sides:
        index.setflags(write=False)
    return sides


def _ring_steps(planes, surface, width, tolerance):
    """Largest ΔE between backdrop-like points 4 px apart along the four sides of the ring
    (``planes`` and ``surface`` shape (3, h, w)).

    Each side's profile is its mean across the ring's width; sides of one length are gathered
    and taken together."""
    h, w = planes.shape[1:]
    flat_planes, flat_surface = planes.reshape(3, -1), surface.reshape(3, -1)
    worst = 0.0
    for index, length in _ring_sides(h, w, width):
        if length < 6:
            continue
        profile = flat_planes.take(index, axis=1).mean(axis=2)  # (3, 2, length)
        model = flat_surface.take(index, axis=1).mean(axis=2)
        ok = np.sqrt(((profile - model) ** 2).sum(axis=0)) <= tolerance
        both = ok[:, 4:] & ok[:, :-4]
        if both.any():
            step = ((profile[..., 4:] - profile[..., :-4]) ** 2).sum(axis=0)
            worst = max(worst, float(np.sqrt(step[both].max())))
    return worst


@lru_cache(maxsize=16)
def _patch_index(h, w, width):
    """Flat pixel indices of the eight border patches of :func:`_patch_bias`, shape (8, m) (rows
    of the top and bottom halves first, then the columns' halves), or None when the patches
    differ in size."""
    flat = np.arange(h * w).reshape(h, w)
    patches = [flat[:width, : w // 2], flat[:width, w // 2:], flat[-width:, : w // 2], flat[-width:, w // 2:],
               flat[: h // 2, :width], flat[h // 2:, :width], flat[: h // 2, -width:], flat[h // 2:, -width:]]
    if len({p.size for p in patches}) != 1:
        return None
    index = np.stack([p.ravel() for p in patches])
    index.setflags(write=False)
    return index


def _patch_bias(diff, width):
    """Largest ΔE of a border patch's median colour from the surface: the backdrop's own unevenness.

    The ring is cut into eight patches (each side in two halves); ``diff`` is J'a'b' minus the
    fitted surface as planes, shape (3, h, w). A median does not depend on the order of the
    pixels, so patches of one size are gathered and partitioned together."""
    h, w = diff.shape[1:]
    index = _patch_index(h, w, width)
    if index is not None:
        medians = np.ascontiguousarray(median_rows(diff.reshape(3, -1).take(index, axis=1)).T)  # (8, 3)
    else:
        patches = (diff[:, :width, : w // 2], diff[:, :width, w // 2 :], diff[:, -width:, : w // 2],
                   diff[:, -width:, w // 2 :], diff[:, : h // 2, :width], diff[:, h // 2 :, :width],
                   diff[:, : h // 2, -width:], diff[:, h // 2 :, -width:])
        medians = np.stack([median_rows(p.reshape(3, -1)) for p in patches])
    # What np.linalg.norm computes for a vector: the square root of its dot with itself.
    return max(0.0, max(float(np.sqrt(m.dot(m))) for m in medians))


def _enclosed_backdrop(labels, n, near, ringing_zone, diff, opening, bias, kernels=None):
    """Which of the ``n`` enclosed regions (``labels``) continue the backdrop: a lookup by label,
    or None when no region has a pixel within the opening tolerance.

    A region wide enough away from strong edges (:data:`ENCLOSED_CLEAR_PIXELS`) is judged by the
    mean offset from the surface of those pixels, against ``bias()`` (the backdrop's own patch
    unevenness, computed only then); a narrower one by the mean offset of its pixels within the
    opening tolerance, against ``opening``. Means come from bincount (fast with many small
    regions), over the pixels in raster order; the pixels are already within the opening
    tolerance, so no outlier can pull a mean far."""
    if kernels is not None:
        found, n_near, off, n_clear, off_clear = kernels.region_offsets(labels, n, near, ringing_zone, diff)
        if not found:
            return None

        def clear_offsets():
            return off_clear
    else:
        enclosed_near = (labels != 0) & near
        pick_near = np.flatnonzero(enclosed_near)
        if pick_near.size == 0:
            return None
        pick_clear = np.flatnonzero(enclosed_near & ~ringing_zone)  # away from strong edges: own colour
        flat_labels, flat_diff = labels.ravel(), diff.reshape(3, -1)

        def region_means(pick):
            region = flat_labels[pick]
            count = np.bincount(region, minlength=n + 1)
            offsets = flat_diff.take(pick, axis=1)
            sums = np.stack([np.bincount(region, weights=offsets[c], minlength=n + 1) for c in range(3)], axis=-1)
            return count[1:], sums[1:] / np.maximum(count[1:, None], 1)

        n_near, off = region_means(pick_near)
        n_clear = np.bincount(flat_labels[pick_clear], minlength=n + 1)[1:]

        def clear_offsets():  # only when some region is wide
            return region_means(pick_clear)[1]
    wide = n_clear >= ENCLOSED_CLEAR_PIXELS
    limit = opening
    if wide.any():  # judged by their own colour against the backdrop's unevenness
        off = np.where(wide[:, None], clear_offsets(), off)
        limit = np.where(wide, bias(), opening)
    keep = np.zeros(n + 1, dtype=bool)
    keep[1:] = (n_near > 0) & (np.sqrt((off**2).sum(axis=-1)) <= limit)
    return keep


def _opening(residual, cap):
    """The opening tolerance from the ring's inlier residuals: ``OPENING_SPREAD_FACTOR`` times
    their 95th percentile (``np.percentile``), kept within [``OPENING_MIN_DELTA_E``, ``cap``].

    The percentile lies between the two order statistics it interpolates, so when both put it
    clearly below the lower limit (or above ``cap``) the limit is the answer without it."""
    n = residual.size
    low = int(0.95 * (n - 1))
    if n >= 2 and low + 1 < n:
        lo, hi = np.partition(residual, (low, low + 1))[[low, low + 1]]
        margin = 1.0 + 1e-9
        if OPENING_SPREAD_FACTOR * hi * margin < OPENING_MIN_DELTA_E:
            return OPENING_MIN_DELTA_E
        if OPENING_SPREAD_FACTOR * lo > cap * margin and cap >= OPENING_MIN_DELTA_E:
            return cap
    spread = float(np.percentile(residual, 95))
    return min(max(OPENING_SPREAD_FACTOR * spread, OPENING_MIN_DELTA_E), cap)


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


def _scene(shape, transparent):
    if transparent is None:
        return Mask(_centre_prior(shape), None, 0.0, True, SCENE_CONFIDENCE)
    weights = _centre_prior(shape) * ~transparent
    return Mask(weights, None, float(transparent.mean()), True, SCENE_CONFIDENCE)


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
    step_sq=None,
    kernels=None,
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
        ΔE (CAM02-UCS) from the fitted backdrop surface within which a ring pixel counts as
        backdrop when deciding whether the border is uniform.
    uniform_share : float
        The border is uniform (a studio shot) when at least this share of its pixels lies within
        ``tolerance`` of the backdrop surface, and the ring has no step (see the module docstring).
    shadow_ab : float
        Largest a'b' distance from the backdrop's a'b' of a shadow pixel (shadows are as neutral
        as the backdrop they fall on).
    shadow_depth : float
        Largest drop in J' below the backdrop of a shadow pixel.
    shadow_edge : float
        A shadow pixel differs by less than this in J' from each of its neighbours.
    step_sq : ndarray, shape (h, w), optional
        :func:`colour_step_sq` of ``jab``, when the caller already has it.

    Returns
    -------
    Mask

    Notes
    -----
    A uniform border whose colour is not a backdrop, with backdrop removal leaving only an even
    scatter, is a one-material frame: nothing is removed (see the module docstring for the rule).
    """
    jab = np.asarray(jab)
    if jab.dtype.kind != "f":
        jab = jab.astype(float)
    if jab.ndim != 3 or jab.shape[2] != 3:
        raise ValueError(f"jab must have shape (h, w, 3), got {jab.shape}")
    h, w = jab.shape[:2]
    # Channel planes: every pass below runs over contiguous (h, w) arrays.
    planes = _planes(jab)
    # Without alpha nothing is transparent: the shares below are counts over plain areas.
    transparent = None if opaque is None else ~np.asarray(opaque, bool)
    width = max(1, int(round(ring_fraction * min(h, w))))
    ring = border_ring((h, w), width)

    if transparent is not None and transparent[ring].mean() >= 0.5:
        weights = (~transparent).astype(float)
        return Mask(weights, None, float(transparent.mean()), False, 1.0)

    ring_pixels, design = ring_index(h, w, width, None if opaque is None else ~transparent)
    surface, ring_residual, inlier = fit_surface(planes, ring_pixels, design, tolerance, 3)
    share = np.count_nonzero(inlier) / inlier.size
    if share < uniform_share:
        return _scene((h, w), transparent)
    flat_surface = surface.reshape(3, -1)
    span = flat_surface.max(axis=1) - flat_surface.min(axis=1)
    if span[0] > MAX_FALLOFF_J or max(span[1], span[2]) > MAX_FALLOFF_AB:
        return _scene((h, w), transparent)
    if _ring_steps(planes, surface, width, tolerance) > MAX_RING_STEP:
        return _scene((h, w), transparent)

    diff = planes - surface
    dj = diff[0]
    chroma_sq = diff[1] ** 2 + diff[2] ** 2
    d2 = chroma_sq + dj * dj
    background = median_rows(flat_surface.take(ring_basis(h, w, width)[0], axis=1))
    # The 5 ΔE rule protects light parts on a light studio backdrop; on a dark or coloured
    # backdrop (a chart on black) ΔE is inflated by noise and the plain tolerance applies.
    light = bool(is_backdrop_colour(background))
    cap = OPENING_MAX_DELTA_E if light else tolerance
    opening = _opening(ring_residual[inlier], cap) if light else tolerance
    near = d2 <= opening**2
    lightness = planes[0]
    coloured = (dj < 0.0) & (dj >= -shadow_depth) & (chroma_sq <= shadow_ab**2)
    # JPEG ringing beside a strong edge moves the backdrop by several ΔE: there, within
    # ``tolerance`` of the surface is enough (a light part's own outline is no strong edge).
    if step_sq is None:
        step_sq = colour_step_sq(jab)
    strong = step_sq > (RINGING_EDGE_FACTOR * tolerance) ** 2
    ringing_zone = dilate_cross(strong, 2)
    ringing = ringing_zone & (d2 <= tolerance**2)
    candidate = near | ringing
    label = label_cross if kernels is None else kernels.label_cross
    labels, count = label(candidate)
    edge_regions = connected_to_edge(labels, count)
    flood = edge_regions[labels]
    shadow = _shadow(lightness, dj, coloured, coloured | near, flood, shadow_edge, kernels)
    # Shadows lie on the floor around the product and reach only so far from the backdrop: a
    # product as dark as its own contact shadow where it stands on it is not flooded beyond the
    # shadow's width, and a flat panel inside an opening is not taken for a shadow of it.
    reach = max(2, int(round(SHADOW_REACH * min(h, w))))
    back = grow_within(flood, shadow, reach, kernels)
    # Enclosed regions that continue the backdrop: regions within the opening tolerance, apart
    # from the flood, whose median colour lies as close to the surface as the backdrop's own
    # patches do. Shadow-coloured pixels do not join them, so a flat light panel set into an
    # opening (a mirror, a cane seat) is not swallowed with the gap around it.
    if back is flood or not (candidate & back & ~flood).any():
        # The shadows took no candidate pixel: the regions are the flood's leftovers as labelled
        # (numbers with no pixel left count nothing; each region's sums run in raster order).
        relabel = np.arange(count + 1, dtype=labels.dtype)
        relabel[edge_regions] = 0
        labels = relabel[labels]
        n = count
    else:
        box_labels, n, box = label_box(candidate & ~back, label)
        labels = np.zeros((h, w), dtype=np.int32)
        labels[box] = box_labels
    keep = _enclosed_backdrop(labels, n, near, ringing_zone, diff, opening,
                              lambda: min(max(ENCLOSED_BIAS_FACTOR * _patch_bias(diff, width),
                                              ENCLOSED_MIN_DELTA_E), cap), kernels)
    if keep is not None:
        back |= keep[labels]
    if transparent is not None:
        back |= transparent
    # Shadow pixels in corners (a leg meeting its shadow) have too few smooth neighbours for the
    # curvature test; take those that continue a background neighbour within a small J' step.
    close_x = np.abs(lightness[:, 1:] - lightness[:, :-1]) < SHADOW_GROW_STEP
    close_y = np.abs(lightness[1:, :] - lightness[:-1, :]) < SHADOW_GROW_STEP
    back = grow_along(back, coloured & ~back, close_x, close_y, 2, kernels)
    # Specks the flood went round (noise on a shadow failing the smoothness test) are background.
    left_labels, m, box = label_box(~back, label)
    if m:
        speck = np.bincount(left_labels.ravel(), minlength=m + 1) < max(3, int(0.0003 * h * w))
        speck[0] = False
        back[box] |= speck[left_labels]
    left = ~back
    n_left = np.count_nonzero(left)
    if transparent is None:
        # Shares of plain areas: the inner box and the ring around it.
        inner_box = left[width: h - width, width: w - width]
        inner_size = inner_box.size
        inner_count = np.count_nonzero(inner_box)
        ring_left = (n_left - inner_count) / (h * w - inner_size)
        inner_left = inner_count / inner_size if inner_size else ring_left
        kept = left
    else:
        inner = ~ring & ~transparent
        ring_left = float(left[ring & ~transparent].mean())
        inner_left = float(left[inner].mean()) if inner.any() else ring_left
        kept = left & ~transparent
    even = inner_left <= EVEN_LEFTOVER_RATIO * ring_left + EVEN_LEFTOVER_SLACK
    if even and not light:
        if transparent is None:
            return Mask(np.ones((h, w)), None, 0.0, False, FULL_FRAME_CONFIDENCE)
        weights = (~transparent).astype(float)
        return Mask(weights, None, float(transparent.mean()), False, FULL_FRAME_CONFIDENCE)
    confidence, flags = share, []
    kept_share = np.count_nonzero(kept) / kept.size
    if 0.0 < kept_share < SMALL_AREA_SHARE:
        flags.append(FLAG_SMALL_AREA)
        confidence = min(confidence, SMALL_AREA_CONFIDENCE)
    # Near the backdrop, leaving out the outline (its blends are always near).
    body = kept & ~dilate_cross(back, 1)
    n_body = np.count_nonzero(body)
    if n_body:
        close = np.count_nonzero(body & (d2 <= NEAR_BACKDROP_DELTA_E**2)) / n_body
        if close >= NEAR_BACKDROP_SHARE:
            flags.append(FLAG_NEAR_BACKDROP)
            confidence = min(confidence, NEAR_BACKDROP_CONFIDENCE)
    weights = left.astype(float)
    return Mask(weights, background, (h * w - n_left) / (h * w), False, confidence, tuple(flags),
                np.moveaxis(surface, 0, -1))
