"""Pictures of palettes: PNG strips whose segment widths are the weights, and terminal blocks."""

import io
import os

import numpy as np
from PIL import Image

from harmony import colour
from harmony.fileio import write_bytes_whole

__all__ = ["segment_widths", "swatch_array", "write_swatch", "ansi_block", "terminal_has_colour"]


def segment_widths(weights, width):
    """Integer pixel widths proportional to ``weights`` that add up to exactly ``width``.

    Cumulative rounding: segment i spans round(width * cumsum[i-1]) to round(width * cumsum[i]),
    so no rounding error builds up along the strip.
    """
    w = np.asarray(weights, dtype=float)
    if w.ndim != 1 or w.size == 0 or np.any(w < 0) or not w.sum() > 0:
        raise ValueError(f"weights must be a non-empty 1-d array of non-negative values, got {w!r}")
    edges = np.rint(np.concatenate([[0.0], np.cumsum(w) / w.sum()]) * width).astype(int)
    return np.diff(edges)


def swatch_array(palettes, width=600, height=48, gap=4):
    """One strip per palette, stacked with a white gap between: uint8 array (h, width, 3)."""
    palettes = list(palettes)
    if not palettes:
        raise ValueError("no palettes to draw")
    rows = len(palettes)
    img = np.full((rows * height + (rows - 1) * gap, width, 3), 255, dtype=np.uint8)
    for r, pal in enumerate(palettes):
        srgb = np.clip(colour.jab_to_srgb1(pal.jab), 0.0, 1.0)
        rgb8 = np.rint(srgb * 255.0).astype(np.uint8)
        x = 0
        y = r * (height + gap)
        for c, span in zip(rgb8, segment_widths(pal.weights, width)):
            img[y : y + height, x : x + span] = c
            x += span
    return img


def write_swatch(palettes, path, width=600, height=48):
    """Write the strips of ``palettes`` (a Palette or a sequence of them) as a PNG file.

    The file is written whole: through a temporary file in the same folder and a rename, so a
    failed or interrupted write leaves no half-written picture and keeps any older file.

    Raises
    ------
    HarmonyError
        ``"<path>: cannot write the swatch: <reason>"`` when the file cannot be written.
    """
    if hasattr(palettes, "jab"):
        palettes = [palettes]
    buf = io.BytesIO()
    Image.fromarray(swatch_array(palettes, width=width, height=height), "RGB").save(buf, format="PNG")
    return write_bytes_whole(path, buf.getvalue(), what="swatch")


def ansi_block(hex_code, width=2):
    """``width`` spaces on a 24-bit background colour (SGR 48;2;r;g;b, ISO/IEC 8613-6), then reset.

    Raises ValueError for a code that is not ``#rrggbb``.
    """
    r, g, b = np.rint(colour.hex_to_srgb1(hex_code) * 255.0).astype(int)
    return f"\x1b[48;2;{r};{g};{b}m{' ' * width}\x1b[0m"


def terminal_has_colour(stream):
    """True when ``stream`` is a terminal and the NO_COLOR convention (no-color.org) is not set."""
    if os.environ.get("NO_COLOR"):
        return False
    if os.environ.get("TERM") == "dumb":
        return False
    isatty = getattr(stream, "isatty", None)
    return bool(isatty and isatty())
