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
