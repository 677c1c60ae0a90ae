"""Generated test images: studio shots of painted products with known colours, and colour charts.

Everything here is drawn from numbers, deterministic given a :class:`numpy.random.Generator`, and
meant for tests, benchmarks and the demo only. The painted colours and their exact areas are
returned with the image, so a test can compare an extracted palette with what was painted.
"""

import io
from dataclasses import dataclass

import numpy as np
from PIL import Image

__all__ = [
    "StudioShot",
    "DEFAULT_PRODUCT_SRGB1",
    "DEFAULT_BACKGROUND_SRGB1",
    "studio_shot",
    "colour_chart",
    "encode_jpeg",
    "encode_png",
    "SWEEP_SRGB1",
    "KnownShot",
    "OPEN_FRAME_KINDS",
    "sweep_backdrop",
    "open_frame_shot",
    "light_neutral_shot",
    "cutout_composite",
    "cutout_mask",
]

#: Painted colours of the default product (invented): body, two cushions, a near-white pillow set
#: inside the body (to check that it is not mistaken for the background), and dark legs.
DEFAULT_PRODUCT_SRGB1 = np.array(
    [
        [0.20, 0.36, 0.55],  # body: a mid blue
        [0.80, 0.55, 0.25],  # cushions: ochre
        [0.95, 0.94, 0.91],  # pillow: near-white, close to the background
        [0.25, 0.17, 0.12],  # legs: dark brown
    ]
)

#: Off-white studio backdrop (invented).
DEFAULT_BACKGROUND_SRGB1 = np.array([0.96, 0.955, 0.94])


@dataclass(frozen=True, eq=False)
class StudioShot:
    """A generated studio photograph and what was painted into it.

    Attributes
    ----------
    srgb8 : ndarray, shape (h, w, 3), uint8
        The image (before any JPEG coding).
    colours_srgb1 : ndarray, shape (n, 3)
        The painted product colours.
    shares : ndarray, shape (n,)
        Each colour's share of the product's pixels (sums to 1).
    labels : ndarray, shape (h, w), int
        Index of the painted colour at each pixel, -1 for background and shadow.
    background_srgb1 : ndarray, shape (3,)
        The backdrop colour at its brightest point.
    shadow : ndarray, shape (h, w), float
        Darkening factor of the soft shadow in [0, 1] (0 = no shadow).
    """

    srgb8: np.ndarray
    colours_srgb1: np.ndarray
    shares: np.ndarray
    labels: np.ndarray
    background_srgb1: np.ndarray
    shadow: np.ndarray


def _srgb1_to_8(img):
    return np.rint(np.clip(img, 0.0, 1.0) * 255.0).astype(np.uint8)


def studio_shot(
    rng,
    width=800,
    height=800,
    colours_srgb1=None,
    background_srgb1=None,
    unevenness=0.02,
    shadow_depth=0.22,
    noise=0.006,
):
    """Draw a piece of furniture on an uneven off-white backdrop with a soft floor shadow.

    The product is a body with two cushions and a near-white pillow on it, standing on two legs;
    the legs stand in an elliptical shadow that fades smoothly into the backdrop.

    Parameters
    ----------
    rng : numpy.random.Generator
        Drives the layout jitter and the sensor noise.
    width, height : int
        Image size in pixels (at least 64 each).
    colours_srgb1 : array_like, shape (4, 3), optional
        Body, cushion, pillow and leg colours; :data:`DEFAULT_PRODUCT_SRGB1` if omitted.
    background_srgb1 : array_like, shape (3,), optional
        Backdrop colour; :data:`DEFAULT_BACKGROUND_SRGB1` if omitted.
    unevenness : float
        Relative brightness fall-off of the backdrop from its centre to its corners.
    shadow_depth : float
        Relative darkening at the shadow's centre.
    noise : float
        Standard deviation of the added Gaussian noise, in sRGB units.

    Returns
    -------
    StudioShot
    """
    if width < 64 or height < 64:
        raise ValueError(f"width and height must be at least 64, got {width}x{height}")
    colours = DEFAULT_PRODUCT_SRGB1 if colours_srgb1 is None else np.asarray(colours_srgb1, float)
    if colours.shape != (4, 3):
        raise ValueError(f"colours_srgb1 must have shape (4, 3), got {colours.shape}")
    bg = DEFAULT_BACKGROUND_SRGB1 if background_srgb1 is None else np.asarray(background_srgb1, float)

    yy, xx = np.mgrid[0:height, 0:width].astype(float)
    u, v = xx / width, yy / height
    jitter = rng.uniform(-0.03, 0.03, size=2)
    cx, cy = 0.5 + jitter[0], 0.48 + jitter[1]

    # Backdrop: brightest at the centre, falling off smoothly (uneven studio lighting).
    fall = 1.0 - unevenness * ((u - 0.5) ** 2 + (v - 0.4) ** 2) / 0.5
    img = bg[None, None, :] * fall[..., None]

    # Soft shadow on the floor under the product: a wide Gaussian ellipse.
    floor_y = cy + 0.25
    shadow = shadow_depth * np.exp(-(((u - cx) / 0.30) ** 2 + ((v - floor_y) / 0.05) ** 2))
    img = img * (1.0 - shadow[..., None])

    labels = np.full((height, width), -1, dtype=int)
    body = (np.abs(u - cx) < 0.30) & (v > cy - 0.12) & (v < cy + 0.16)
    cushions = ((np.abs(u - (cx - 0.14)) < 0.12) | (np.abs(u - (cx + 0.14)) < 0.12)) & (
        v > cy - 0.20
    ) & (v <= cy - 0.12)
    pillow = (((u - cx) / 0.09) ** 2 + ((v - cy) / 0.07) ** 2) < 1.0
    legs = ((np.abs(u - (cx - 0.25)) < 0.03) | (np.abs(u - (cx + 0.25)) < 0.03)) & (
        v >= cy + 0.16
    ) & (v < floor_y)
    for index, region in enumerate((body, cushions, pillow, legs)):
        labels[region] = index
    product = labels >= 0
    # Gentle shading across the product so its colours are not single values.
    shade = 1.0 - 0.04 * (v - cy)
    img[product] = colours[labels[product]] * shade[product][:, None]
    img = img + rng.normal(0.0, noise, size=img.shape)

    counts = np.bincount(labels[product], minlength=len(colours)).astype(float)
    return StudioShot(
        srgb8=_srgb1_to_8(img),
        colours_srgb1=colours.copy(),
        shares=counts / counts.sum(),
        labels=labels,
        background_srgb1=bg.copy(),
        shadow=shadow,
    )


def colour_chart(colours_srgb1, columns=6, patch=64, gutter=12, margin=None, gutter_srgb1=(0.0, 0.0, 0.0)):
    """Lay colour patches out in a grid of equal squares on a uniform surround.

    Parameters
    ----------
    colours_srgb1 : array_like, shape (n, 3)
        Patch colours, row by row.
    columns : int
        Patches per row.
    patch, gutter : int
        Side of each square and the width of the surround between them, in pixels.
    margin : int, optional
        Width of the surround around the grid; ``2 * gutter`` if omitted.
    gutter_srgb1 : array_like, shape (3,)
        Colour of the surround.

    Returns
    -------
    ndarray, shape (h, w, 3), uint8
    """
    colours = np.asarray(colours_srgb1, dtype=float)
    if colours.ndim != 2 or colours.shape[1] != 3:
        raise ValueError(f"colours_srgb1 must have shape (n, 3), got {colours.shape}")
    margin = 2 * gutter if margin is None else int(margin)
    rows = -(-len(colours) // columns)
    h = rows * patch + (rows - 1) * gutter + 2 * margin
    w = columns * patch + (columns - 1) * gutter + 2 * margin
    img = np.empty((h, w, 3))
    img[:] = np.asarray(gutter_srgb1, dtype=float)
    for i, c in enumerate(colours):
        r, k = divmod(i, columns)
        y0 = margin + r * (patch + gutter)
        x0 = margin + k * (patch + gutter)
        img[y0 : y0 + patch, x0 : x0 + patch] = c
    return _srgb1_to_8(img)


def encode_jpeg(srgb8, quality=90):
    """JPEG bytes of an 8-bit RGB image (baseline, 4:2:0 chroma subsampling, Pillow's default)."""
    buf = io.BytesIO()
    Image.fromarray(np.asarray(srgb8, dtype=np.uint8), "RGB").save(buf, "JPEG", quality=quality)
    return buf.getvalue()


def encode_png(srgb8):
    """PNG bytes of an 8-bit RGB, RGBA or grey image."""
    buf = io.BytesIO()
    Image.fromarray(np.asarray(srgb8, dtype=np.uint8)).save(buf, "PNG")
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# Products of known geometry on studio sweeps: open frames, light neutrals, cut-outs
# --------------------------------------------------------------------------------------------

#: Off-white sweep of the generated open-frame and light-neutral shots (invented).
SWEEP_SRGB1 = np.array([0.95, 0.945, 0.93])


@dataclass(frozen=True, eq=False)
class KnownShot:
    """A generated studio shot of a product whose parts have known areas.

    Attributes
    ----------
    srgb8 : ndarray, shape (h, w, 3), uint8
    part_srgb1 : ndarray, shape (n, 3)
        The flat colour of each part (before shading and noise).
    shares : ndarray, shape (n,)
        Each part's share of the product's visible area (sums to 1).
    coverage : ndarray, shape (n, h, w), float
        How much of each pixel each part covers (anti-aliased, exact to 1/16 of a pixel).
    backdrop_srgb1 : ndarray, shape (3,)
        The sweep's colour at its brightest (top).
    backdrop : ndarray, shape (h, w, 3)
        The sweep with its fall-off and contact shadow, before the product was set on it.
    """

    srgb8: np.ndarray
    part_srgb1: np.ndarray
    shares: np.ndarray
    coverage: np.ndarray
    backdrop_srgb1: np.ndarray
    backdrop: np.ndarray

    def part_delta_e(self, index):
        """ΔE (CAM02-UCS) of part ``index`` from the backdrop behind it (median over its pixels)."""
        from harmony import colour

        where = self.coverage[index] > 0.99
        behind = colour.srgb1_to_jab(np.median(self.backdrop[where], axis=0))
        return float(colour.delta_e(colour.srgb1_to_jab(self.part_srgb1[index]), behind))

    def backdrop_tones(self, n=24):
        """J'a'b' of ``n`` backdrop colours spanning the sweep and its shadow, shape (n, 3)."""
        from harmony import colour

        free = self.backdrop[self.coverage.sum(axis=0) < 0.01]
        order = np.argsort(free.sum(axis=1))
        picks = free[order[np.linspace(0, len(order) - 1, n).astype(int)]]
        return colour.srgb1_to_jab(picks)


def sweep_backdrop(rng, size, backdrop_srgb1=SWEEP_SRGB1, falloff=0.1):
    """A studio sweep, shape (size, size, 3): brightest at the top, ``falloff`` darker (relative)
    at the bottom, with a faint vignette and a smooth unevenness."""
    yy, xx = np.mgrid[0:size, 0:size].astype(float) / (size - 1)
    light = (1.0 - falloff * yy**1.2) * (1.0 - 0.02 * ((xx - 0.5) ** 2 + (yy - 0.4) ** 2) / 0.5)
    coarse = rng.normal(0.0, 1.0, (6, 6))
    uneven = np.asarray(Image.fromarray(coarse.astype(np.float32), "F").resize((size, size), Image.BICUBIC))
    light = light * (1.0 + 0.003 * uneven / max(np.abs(uneven).max(), 1e-9))
    return np.asarray(backdrop_srgb1, float)[None, None, :] * light[..., None]


def _coverage(size, shapes, ss=4):
    """Anti-aliased coverage of each part, shape (n, size, size), later parts over earlier ones.

    ``shapes`` is a list (one per part) of lists of ``(kind, coords)`` with kind "rect",
    "ellipse" or "polygon" and coords in units of the image side."""
    from PIL import ImageDraw

    big = size * ss
    owner = np.full((big, big), -1, dtype=np.int16)
    for index, parts in enumerate(shapes):
        layer = Image.new("L", (big, big), 0)
        draw = ImageDraw.Draw(layer)
        for kind, coords in parts:
            pts = [c * big for c in coords]
            if kind == "rect":
                draw.rectangle(pts, fill=255)
            elif kind == "ellipse":
                draw.ellipse(pts, fill=255)
            elif kind == "hole":  # cut back to nothing inside this part's own layer
                draw.ellipse(pts, fill=0)
            else:
                draw.polygon([(pts[i], pts[i + 1]) for i in range(0, len(pts), 2)], fill=255)
        owner[np.asarray(layer) > 0] = index
    cover = np.stack([(owner == i).reshape(size, ss, size, ss).mean(axis=(1, 3)) for i in range(len(shapes))])
    return cover


def _contact_shadow(size, y, x0, x1, depth, softness):
    """Darkening factor of a soft floor shadow under a product standing at height ``y``."""
    yy, xx = np.mgrid[0:size, 0:size].astype(float) / (size - 1)
    across = np.clip(np.minimum(xx - x0, x1 - xx) / softness + 1.0, 0.0, None)
    fade_x = 1.0 - np.exp(-(across**2))
    return depth * fade_x * np.exp(-(((yy - y) / softness) ** 2))


def _render(rng, size, part_srgb1, shapes, backdrop_srgb1, falloff, shadow_y, shadow_x, shadow_depth, noise):
    cover = _coverage(size, shapes)
    img = sweep_backdrop(rng, size, backdrop_srgb1, falloff)
    if shadow_depth > 0:
        shadow = _contact_shadow(size, shadow_y, shadow_x[0], shadow_x[1], shadow_depth, 0.035)
        img = img * (1.0 - shadow[..., None])
    backdrop = img.copy()
    yy = np.mgrid[0:size, 0:size][0] / (size - 1)
    shade = (1.0 + 0.03 * (0.5 - yy))[..., None]
    for c, part in zip(cover, np.asarray(part_srgb1, float)):
        img = img * (1.0 - c[..., None]) + (part[None, None, :] * shade) * c[..., None]
    img = img + rng.normal(0.0, noise, img.shape)
    area = cover.sum(axis=(1, 2))
    return KnownShot(_srgb1_to_8(img), np.asarray(part_srgb1, float), area / area.sum(), cover,
                     np.asarray(backdrop_srgb1, float), backdrop)


#: The open-frame geometries :func:`open_frame_shot` draws.
OPEN_FRAME_KINDS = ("slats", "shelves", "ring", "ladder", "legs")


def open_frame_shot(rng, kind, frame_srgb1, inlay_srgb1=None, size=400, falloff=0.12, noise=0.005,
                    backdrop_srgb1=SWEEP_SRGB1):
    """An open product with known geometry: the backdrop shows through it.

    Kinds: ``"slats"`` (a chair back of vertical slats on four legs), ``"shelves"`` (an open shelf
    unit), ``"ring"`` (a round frame), ``"ladder"`` (a ladder-back chair: horizontal rails) and
    ``"legs"`` (a table: top and four thin legs). With ``inlay_srgb1`` an enclosed light panel is
    set into the opening (a cane seat, a mirror, a back panel) as the second part.
    """
    s = 1.0
    frame, inlay = [], []
    if kind == "slats":
        frame += [("rect", (0.28, 0.12, 0.33, 0.88)), ("rect", (0.67, 0.12, 0.72, 0.88)),
                  ("rect", (0.28, 0.12, 0.72, 0.17)), ("rect", (0.28, 0.5, 0.72, 0.56))]
        frame += [("rect", (u, 0.17, u + 0.025, 0.5)) for u in (0.385, 0.445, 0.505, 0.565)]
        frame += [("rect", (0.24, 0.56, 0.28, 0.88)), ("rect", (0.72, 0.56, 0.76, 0.88))]
        inlay += [("rect", (0.335, 0.22, 0.665, 0.45))] if inlay_srgb1 is not None else []
        floor = 0.88
    elif kind == "shelves":
        frame += [("rect", (0.2, 0.1, 0.24, 0.9)), ("rect", (0.76, 0.1, 0.8, 0.9))]
        frame += [("rect", (0.2, v, 0.8, v + 0.03)) for v in (0.1, 0.34, 0.58, 0.84)]
        inlay += [("rect", (0.24, 0.13, 0.76, 0.34))] if inlay_srgb1 is not None else []
        floor = 0.9
    elif kind == "ring":
        frame += [("ellipse", (0.2, 0.12, 0.8, 0.72)), ("hole", (0.26, 0.18, 0.74, 0.66)),
                  ("rect", (0.48, 0.72, 0.52, 0.88)), ("rect", (0.36, 0.86, 0.64, 0.89))]
        inlay += [("ellipse", (0.3, 0.22, 0.7, 0.62))] if inlay_srgb1 is not None else []
        floor = 0.89
    elif kind == "ladder":
        frame += [("rect", (0.3, 0.1, 0.35, 0.9)), ("rect", (0.65, 0.1, 0.7, 0.9))]
        frame += [("rect", (0.35, v, 0.65, v + 0.035)) for v in (0.14, 0.24, 0.34, 0.44)]
        frame += [("rect", (0.27, 0.52, 0.73, 0.57)), ("rect", (0.27, 0.57, 0.31, 0.9)),
                  ("rect", (0.69, 0.57, 0.73, 0.9))]
        inlay += [("rect", (0.35, 0.175, 0.65, 0.24))] if inlay_srgb1 is not None else []
        floor = 0.9
    elif kind == "legs":
        frame += [("rect", (0.12, 0.35, 0.88, 0.41))]
        frame += [("rect", (u, 0.41, u + 0.025, 0.85)) for u in (0.15, 0.3, 0.675, 0.825)]
        frame += [("rect", (0.15, 0.6, 0.85, 0.62))]
        inlay += [("rect", (0.325, 0.41, 0.675, 0.6))] if inlay_srgb1 is not None else []
        floor = 0.85
    else:
        raise ValueError(f"kind must be one of {OPEN_FRAME_KINDS}, got {kind!r}")
    shapes = [frame] + ([inlay] if inlay else [])
    parts = [frame_srgb1] + ([inlay_srgb1] if inlay else [])
    return _render(rng, size, parts, [[(k, tuple(c * s for c in co)) for k, co in p] for p in shapes],
                   backdrop_srgb1, falloff, floor, (0.2, 0.8), 0.3, noise)


def light_neutral_shot(rng, body_srgb1, legs_srgb1=None, lower_srgb1=None, size=400, falloff=0.12,
                       noise=0.005, backdrop_srgb1=SWEEP_SRGB1, shape="box"):
    """A flat light product (a grey sofa body, an off-white cabinet, a globe) on a sweep.

    Parts: the body first, then the lower half (``lower_srgb1``: a coloured base) and the legs
    (``legs_srgb1``: dark legs lifting the body off its contact shadow), when given.
    """
    body = [("ellipse", (0.25, 0.2, 0.75, 0.7))] if shape == "globe" else [("rect", (0.15, 0.3, 0.85, 0.72))]
    shapes, parts = [body], [body_srgb1]
    bottom = 0.7 if shape == "globe" else 0.72
    if lower_srgb1 is not None:
        lower = [("rect", (0.15, 0.56, 0.85, 0.72))] if shape != "globe" else [("rect", (0.25, 0.5, 0.75, 0.7))]
        if shape == "globe":
            lower = [("polygon", tuple(v for t in np.linspace(0, np.pi, 20)
                                       for v in (0.5 + 0.25 * np.cos(t), 0.45 + 0.25 * np.sin(t))))]
        shapes.append(lower)
        parts.append(lower_srgb1)
    if legs_srgb1 is not None:
        shapes.append([("rect", (u, bottom, u + 0.03, 0.82)) for u in (0.18, 0.79)])
        parts.append(legs_srgb1)
        floor = 0.82
    else:
        floor = bottom
    return _render(rng, size, parts, shapes, backdrop_srgb1, falloff, floor, (0.15, 0.85), 0.3, noise)


def cutout_mask(shape, kind="ellipse"):
    """An exact geometric mask to cut a region out of a photograph of ``shape`` (h, w, ...): a
    centred disc of radius 0.4 of the short side (``"ellipse"``), or that disc with a hole of
    radius 0.4 x sqrt(0.3) (``"ring"``, an opening the backdrop shows through)."""
    h, w = shape[:2]
    yy, xx = np.mgrid[0:h, 0:w]
    r = 0.4 * min(h, w)
    r2 = ((yy - h / 2) / r) ** 2 + ((xx - w / 2) / r) ** 2
    if kind not in ("ellipse", "ring"):
        raise ValueError(f"kind must be 'ellipse' or 'ring', got {kind!r}")
    return (r2 < 1.0) & ((r2 > 0.3) if kind == "ring" else True)


def cutout_composite(rng, photo_srgb8, mask, size=400, falloff=0.15, backdrop_srgb1=SWEEP_SRGB1,
                     shadow_depth=0.3):
    """Composite the pixels of ``photo_srgb8`` where ``mask`` holds onto a studio sweep.

    The cut-out (its bounding box scaled to fill 70 % of the frame, nearest-neighbour so every
    product pixel is an original photo pixel) stands on a soft contact shadow. Returns the
    composite (uint8) and the product pixels as they were composited (uint8, shape (n, 3)).
    """
    mask = np.asarray(mask, bool)
    ys, xs = np.nonzero(mask)
    crop = photo_srgb8[ys.min(): ys.max() + 1, xs.min(): xs.max() + 1]
    cmask = mask[ys.min(): ys.max() + 1, xs.min(): xs.max() + 1]
    ch, cw = cmask.shape
    scale = 0.7 * size / max(ch, cw)
    nh, nw = max(1, int(ch * scale)), max(1, int(cw * scale))
    iy = np.minimum((np.arange(nh) / scale).astype(int), ch - 1)
    ix = np.minimum((np.arange(nw) / scale).astype(int), cw - 1)
    pix, pm = crop[iy][:, ix], cmask[iy][:, ix]
    img = sweep_backdrop(rng, size, backdrop_srgb1, falloff)
    y0, x0 = int(0.12 * size), (size - nw) // 2
    rows = np.flatnonzero(pm.any(axis=1))
    foot = (y0 + rows.max()) / (size - 1)
    img = img * (1.0 - _contact_shadow(size, foot, x0 / size, (x0 + nw) / size, shadow_depth, 0.03)[..., None])
    out = _srgb1_to_8(img + rng.normal(0.0, 0.004, img.shape))
    region = out[y0:y0 + nh, x0:x0 + nw]
    region[pm] = pix[pm]
    return out, pix[pm]
