"""Weighted colour palettes of product photos, in CAM02-UCS.

A :class:`Palette` is what every later stage (scores, screen, sets, feeds, reports) consumes.
"""

import json
import os
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from harmony import colour
from harmony.colour.neutral import NEUTRAL_COLOURFULNESS, NEUTRAL_FADE, neutrality
from harmony.errors import HarmonyError, ImageError, warn
from harmony.photo.clusters import SeededDraws, merge_close, sq_dist_planes, weighted_kmeans

__all__ = [
    "PALETTE_JSON_FORMAT",
    "Palette",
    "PaletteSettings",
    "JND_DELTA_E",
    "JSON_JAB_LIMIT",
    "JSON_J_RANGE",
    "extract_palette",
    "palette_from_decoded",
    "weighted_kmeans",
    "NEUTRAL_COLOURFULNESS",
    "NEUTRAL_FADE",
    "neutrality",
]

#: Version of the palette JSON (``harmony palette --json``, ``harmony palettes``): 2 names a
#: colour's proportion ``share`` (format 1 called it ``weight``; both are read).
PALETTE_JSON_FORMAT = 2

#: Largest magnitude of an a' or b' value read from palette JSON. Colours of the sRGB gamut
#: stay within about J' 0-100 and |a'|, |b'| < 50 in CAM02-UCS (Luo, Cui & Li 2006); 1000 leaves
#: room for any real colour while keeping products of them far from float overflow.
JSON_JAB_LIMIT = 1000.0

#: Range of J' read from palette JSON. The sRGB white is J' 100 and black 0 (colorspacious,
#: tests/photo/test_palette.py); 120 leaves room for a brighter source while staying well below
#: J' = 100 + 1 / c1 = 242.9 (c1 = 0.007, Luo, Cui & Li 2006), past which J' has no J to invert to.
JSON_J_RANGE = (0.0, 120.0)


def _json_number(value, key, high, low=None):
    """``value`` as a float, or a HarmonyError naming ``key`` (NaN, infinity, out of range)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise HarmonyError(f"{key}: not a number: {value!r}")
    number = float(value)
    if not np.isfinite(number):
        raise HarmonyError(f"{key}: not a finite number ({value!r})")
    lo = -high if low is None else low
    if not lo <= number <= high:
        raise HarmonyError(f"{key}: {number:g} is outside [{lo:g}, {high:g}]")
    return number


def _json_flags(value, where):
    """The ``flags`` of a palette JSON: a list of strings, else a one-line error naming the key."""
    if not isinstance(value, list) or not all(isinstance(f, str) for f in value):
        raise HarmonyError(f"{where}: a list of strings is required, got {value!r}")
    return tuple(value)


def _frozen(arr, shape_tail, name):
    out = np.array(arr, dtype=float)
    if out.shape[1:] != shape_tail or out.ndim != 1 + len(shape_tail):
        raise ValueError(f"{name} must have shape (k, {', '.join(map(str, shape_tail))}), got {out.shape}")
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class Palette:
    """The honest palette of one product photo.

    Attributes
    ----------
    jab : ndarray, shape (k, 3)
        CAM02-UCS J'a'b' of the palette colours, sorted by weight, heaviest first.
    weights : ndarray, shape (k,)
        Share of the product's visible pixels held by each colour; sums to 1.
    sha256 : str
        Content hash of the image file the palette was extracted from.
    width, height : int
        Pixel size of the image as stored (after EXIF orientation).
    background_jab : ndarray, shape (3,) or None
        Colour of the studio background, None for a transparent background or a room scene.
    background_share : float
        Fraction of the image's pixels that were background or shadow.
    scene : bool
        True when the photo is a room (lifestyle) scene rather than a studio shot.
    confidence : float
        0..1; low for scenes (the product was guessed with a centre prior) and for flagged
        palettes.
    flags : tuple of str
        Why the palette may be wrong although the photo is a studio shot: ``"small-area"`` (the
        kept product is implausibly small) or ``"near-backdrop"`` (clear parts of the product lie
        within a few ΔE of the backdrop, so some may be lost or kept wrongly); see
        :mod:`harmony.photo.mask`. Empty when there is no doubt.
    source : str
        The image path, for people; not part of the palette's identity.
    """

    jab: np.ndarray
    weights: np.ndarray
    sha256: str = ""
    width: int = 0
    height: int = 0
    background_jab: np.ndarray | None = None
    background_share: float = 0.0
    scene: bool = False
    confidence: float = 1.0
    flags: tuple = ()
    source: str = ""

    def __post_init__(self):
        jab = _frozen(self.jab, (3,), "jab")
        weights = np.array(self.weights, dtype=float)
        if weights.shape != (jab.shape[0],):
            raise ValueError(f"weights must have shape ({jab.shape[0]},), got {weights.shape}")
        if jab.shape[0] == 0:
            raise ValueError("a palette needs at least one colour")
        # np.isclose(total, 1, atol=1e-9) for one number: |total - 1| <= 1e-9 + 1e-5 * 1.
        total = float(weights.sum())
        if np.any(weights < 0) or not abs(total - 1.0) <= 1e-9 + 1e-5:
            raise ValueError(f"weights must be non-negative and sum to 1, got sum {weights.sum()!r}")
        weights.setflags(write=False)
        object.__setattr__(self, "jab", jab)
        object.__setattr__(self, "weights", weights)
        if self.background_jab is not None:
            bg = np.array(self.background_jab, dtype=float)
            if bg.shape != (3,):
                raise ValueError(f"background_jab must have shape (3,), got {bg.shape}")
            bg.setflags(write=False)
            object.__setattr__(self, "background_jab", bg)
        if not 0.0 <= float(self.confidence) <= 1.0:
            raise ValueError(f"confidence must lie in [0, 1], got {self.confidence!r}")
        if isinstance(self.flags, str) or not all(isinstance(f, str) for f in self.flags):
            raise ValueError(f"flags must be a sequence of strings, got {self.flags!r}")
        object.__setattr__(self, "flags", tuple(self.flags))

    def __len__(self):
        return int(self.jab.shape[0])

    @property
    def hex(self):
        """'#rrggbb' of each colour, in palette order."""
        return colour.jab_to_hex(self.jab)

    def to_dict(self, image=None):
        """The palette as the JSON object that ``harmony palette --json`` prints."""
        jab = self.jab
        m = colour.colourfulness(jab)
        hue = colour.hue_deg(jab)
        lrv = colour.lrv(jab)
        neutral = neutrality(jab) >= 0.5
        colours = [
            {
                "hex": code,
                "share": float(w),
                "J": float(j[0]),
                "a": float(j[1]),
                "b": float(j[2]),
                "M": float(mm),
                "hue": float(hh),
                "lrv": float(yy),
                "neutral": bool(nn),
            }
            for code, w, j, mm, hh, yy, nn in zip(self.hex, self.weights, jab, m, hue, lrv, neutral)
        ]
        background = None
        if self.background_jab is not None:
            background = {
                "hex": colour.jab_to_hex(self.background_jab),
                "share": float(self.background_share),
            }
        return {
            "format": PALETTE_JSON_FORMAT,
            "image": self.source if image is None else str(image),
            "sha256": self.sha256,
            "width": int(self.width),
            "height": int(self.height),
            "scene": bool(self.scene),
            "confidence": float(self.confidence),
            "flags": list(self.flags),
            "background": background,
            "colours": colours,
        }

    def to_json(self, image=None):
        """One line of JSON; :meth:`from_json` restores the colours and weights exactly."""
        return json.dumps(self.to_dict(image=image), separators=(",", ":"))

    @classmethod
    def from_dict(cls, data, where="palette"):
        """Rebuild a palette from :meth:`to_dict` output; ``where`` names the source in errors.

        Every number must be finite and in its range (:data:`JSON_J_RANGE` for J',
        :data:`JSON_JAB_LIMIT` for a'b'), so a NaN, an infinity, a 1e308 or a J' no colour has is
        an error naming the key, never a score of "nan".
        """
        try:
            colours = data["colours"]
            if not isinstance(colours, list) or not colours:
                raise HarmonyError(f"{where}: colours: must be a non-empty list of colours")
            jab, weights = [], []
            for i, c in enumerate(colours):
                if not isinstance(c, dict):
                    raise HarmonyError(f"{where}: colours[{i}]: must be an object")
                jab.append([_json_number(c["J"], f"{where}: colours[{i}].J", JSON_J_RANGE[1], low=JSON_J_RANGE[0])]
                           + [_json_number(c[key], f"{where}: colours[{i}].{key}", JSON_JAB_LIMIT) for key in "ab"])
                # "weight" is the name format 1 (before harmony 0.2) gave the share.
                name = "share" if "share" in c else "weight"
                weights.append(_json_number(c[name], f"{where}: colours[{i}].{name}", 1.0, low=0.0))
            bg = data.get("background")
            # The background is stored as a hex code: it round-trips to 8 bits per channel.
            bg_jab = None if bg is None else colour.srgb1_to_jab(colour.hex_to_srgb1(bg["hex"]))
            share = _json_number(bg["share"], f"{where}: background.share", 1.0, low=0.0) if bg else 0.0
            return cls(
                jab=jab,
                weights=weights,
                sha256=str(data.get("sha256", "")),
                width=int(_json_number(data.get("width", 0), f"{where}: width", 2**31, low=0.0)),
                height=int(_json_number(data.get("height", 0), f"{where}: height", 2**31, low=0.0)),
                background_jab=bg_jab,
                background_share=share,
                scene=bool(data.get("scene", False)),
                confidence=_json_number(data.get("confidence", 1.0), f"{where}: confidence", 1.0, low=0.0),
                flags=_json_flags(data.get("flags", []), f"{where}: flags"),
                source=str(data.get("image", "")),
            )
        except KeyError as exc:
            raise HarmonyError(f"{where}: palette JSON lacks key {exc.args[0]!r}") from None
        except (TypeError, ValueError) as exc:
            if isinstance(exc, HarmonyError):
                raise
            raise HarmonyError(f"{where}: not a palette: {exc}") from None

    @classmethod
    def from_json(cls, text, where="palette"):
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise HarmonyError(f"{where}: not JSON: {exc.msg} (line {exc.lineno})") from None
        if not isinstance(data, dict):
            raise HarmonyError(f"{where}: palette JSON must be an object")
        return cls.from_dict(data, where=where)


# --------------------------------------------------------------------------------------------
# Extraction
# --------------------------------------------------------------------------------------------

#: Just-noticeable colour difference used to merge palette colours: ΔE = 2.3, the JND in CIELAB
#: estimated by Mahy, Van Eycken & Oosterlinck (1994), Color Res. Appl. 19(2):105-121 (value from
#: memory), used here as a CAM02-UCS distance. The units are not the same size: measured with
#: colour-science's CIELAB on random mid-gamut sRGB colours, a ΔE*ab step of 2.3 is a CAM02-UCS
#: step of about 1.7 (median; quartiles 1.3-2.0), so this threshold is about 1.4 CIELAB JNDs.
#: A test holds it between 1 and 1.5 of them.
JND_DELTA_E = 2.3

#: Version of the extraction method; part of :attr:`PaletteSettings.key`, so stored palettes
#: made by an older method are not mistaken for current ones. Version 3: one-material
#: (full-bleed) frames keep every pixel (:mod:`harmony.photo.mask`), and the pixel cap applies to the
#: decoded size (:mod:`harmony.photo.image`). Version 4: the backdrop is a fitted smooth surface
#: (studio sweeps), enclosed openings onto it are background, shadows must be smooth, palettes
#: carry flags, every product pixel counts towards its nearest colour's share, and pixel colours
#: come from a cached CAM02-UCS table.
METHOD_VERSION = 4


@dataclass(frozen=True)
class PaletteSettings:
    """How palettes are extracted; every field changes the result, so all are part of :attr:`key`.

    Attributes
    ----------
    colours : int
        k of the k-means step (10 by default, common practice); the palette may come out shorter
        after merging and dropping specks.
    max_side : int
        Long side of the working image in pixels.
    levels : int
        Quantisation levels per sRGB channel (a power of two from 8 to 256) for binning pixels.
    merge_delta_e : float
        Colours closer than this ΔE (CAM02-UCS) are merged; :data:`JND_DELTA_E` by default.
    min_share : float
        Colours with a smaller share of the product are dropped (specks).
    tolerance : float
        ΔE from the border colour within which edge-connected pixels are backdrop.
    uniform_share : float
        Share of border pixels that must match the backdrop for a studio shot.
    edge_delta_e : float
        Pixels differing by more than this ΔE from a neighbour are blends on an edge and are
        left out of the palette (unless that would leave out most of the product).
    max_pixels : int
        Decompression-bomb cap on the decoded size (after JPEG draft-mode scaling); the declared
        size is capped at :data:`harmony.photo.image.MAX_DECLARED_PIXELS` whatever this is.
    seed : int
        Seed of the k-means++ initialisation.
    """

    colours: int = 10
    max_side: int = 128
    levels: int = 32
    merge_delta_e: float = JND_DELTA_E
    min_share: float = 0.01
    tolerance: float = 6.0
    uniform_share: float = 0.8
    edge_delta_e: float = 12.0
    max_pixels: int = 50_000_000
    seed: int = 0

    def __post_init__(self):
        if not (isinstance(self.colours, int) and 1 <= self.colours <= 64):
            raise HarmonyError(f"colours: must be an integer from 1 to 64, got {self.colours!r}")
        if not (isinstance(self.max_side, int) and self.max_side >= 16):
            raise HarmonyError(f"max_side: must be an integer of at least 16, got {self.max_side!r}")
        if self.levels not in (8, 16, 32, 64, 128, 256):
            raise HarmonyError(f"levels: must be a power of two from 8 to 256, got {self.levels!r}")
        if not 0.0 <= self.min_share < 0.5:
            raise HarmonyError(f"min_share: must lie in [0, 0.5), got {self.min_share!r}")
        for name in ("merge_delta_e", "tolerance", "edge_delta_e"):
            if not getattr(self, name) >= 0.0:
                raise HarmonyError(f"{name}: must be non-negative, got {getattr(self, name)!r}")
        if not 0.0 < self.uniform_share <= 1.0:
            raise HarmonyError(f"uniform_share: must lie in (0, 1], got {self.uniform_share!r}")

    @property
    def key(self):
        """Short stable string naming the method version and every setting, e.g. ``'v1-k10-...'``."""
        return (
            f"v{METHOD_VERSION}-k{self.colours}-s{self.max_side}-q{self.levels}"
            f"-m{self.merge_delta_e:g}-p{self.min_share:g}-t{self.tolerance:g}"
            f"-u{self.uniform_share:g}-e{self.edge_delta_e:g}-x{self.max_pixels}-r{self.seed}"
        )


#: Levels per sRGB channel of the cached CAM02-UCS table (2 sRGB levels a cell: a pixel's J'a'b'
#: is that of its cell's centre, within about 0.4 ΔE of its own).
FINE_LEVELS = 128
_BLOCK = 8  # cells per block side: the table is filled a block of 8 x 8 x 8 cells at a time
#: The table: J', a' and b' planes with one column per cell, block by block (column
#: ``block * 512 + cell in block``), so the few blocks a photo touches lie together in memory.
_TABLE = None
_DONE = None


def _fill_table(blocks):
    """Make sure the table holds every cell of the given blocks (flat block indices)."""
    global _TABLE, _DONE
    shift = 8 - int(np.log2(FINE_LEVELS))
    side = FINE_LEVELS // _BLOCK
    if _TABLE is None:
        _TABLE = np.empty((3, FINE_LEVELS**3), dtype=np.float32)
        _DONE = np.zeros(side**3, dtype=bool)
    missing = blocks[~_DONE[blocks]]
    if len(missing):
        cell = np.arange(_BLOCK)
        local = np.stack(np.meshgrid(cell, cell, cell, indexing="ij"), axis=-1).reshape(-1, 3)
        for b in missing:
            b0, rest = divmod(int(b), side * side)
            b1, b2 = divmod(rest, side)
            cells = local + np.array([b0, b1, b2]) * _BLOCK
            centre = (cells * (1 << shift) + ((1 << shift) - 1) / 2.0) / 255.0
            start = int(b) * _BLOCK**3
            _TABLE[:, start: start + _BLOCK**3] = colour.srgb1_to_jab(centre).T
            _DONE[b] = True


@lru_cache(maxsize=8)
def _channel_codes(levels):
    """Per 8-bit channel value (rows: red, green, blue; 256 columns), its part of a pixel's
    table row (in the high bits, from bit 24) and of its bin at ``levels`` per channel (the low
    bits): a pixel's codes are the sum of its three channels' parts."""
    value = np.arange(256)
    fine = value >> (8 - int(np.log2(FINE_LEVELS)))
    block, cell = fine // _BLOCK, fine % _BLOCK
    side = FINE_LEVELS // _BLOCK
    bits = levels.bit_length() - 1
    coarse = value >> (8 - bits)
    parts = []
    for axis in range(3):
        up = 2 - axis  # red is the most significant
        row = (block * side**up * _BLOCK**3 + cell * _BLOCK**up) << 24
        parts.append(row + (coarse << (bits * up)))
    parts = np.array(parts)
    parts.setflags(write=False)
    return parts


def _pixel_codes(channels, levels):
    """Table rows and bins (``levels`` per channel) of pixels given as channel planes, shape
    (3, n), uint8."""
    parts = _channel_codes(levels)
    both = parts[0].take(channels[0])
    both += parts[1].take(channels[1])
    both += parts[2].take(channels[2])
    return both >> 24, both & ((1 << 24) - 1)


def _jab_planes(rows, blocks=None, kernels=None):
    """J'a'b' planes, shape (3, n) float32, of pixels given by their table rows.

    ``blocks`` lists the table blocks the pixels fall in, when the caller knows them."""
    if blocks is None:
        side = FINE_LEVELS // _BLOCK
        blocks = np.flatnonzero(np.bincount(rows // _BLOCK**3, minlength=side**3))
    _fill_table(blocks)
    if kernels is not None:
        return kernels.table_rows(_TABLE, rows)
    return _TABLE.take(rows, axis=1)


def srgb8_to_jab(srgb8):
    """CAM02-UCS J'a'b' of 8-bit sRGB pixels through a cached table, shape (..., 3), float32.

    The table holds the colour of every cell of :data:`FINE_LEVELS` levels per channel. It is
    filled on demand, a fixed block of cells at a time, so each entry is always computed in the
    same batch and is the same bit for bit whatever images came before; a long run converts each
    colour region once instead of once per photo. The result is a view of channel-first memory
    (``np.moveaxis(result, -1, 0)`` is contiguous).
    """
    srgb8 = np.asarray(srgb8, dtype=np.uint8)
    rgb = srgb8.reshape(-1, 3)
    rows, _ = _pixel_codes(np.ascontiguousarray(rgb.T), 8)
    planes = _jab_planes(rows)
    return np.moveaxis(planes.reshape((3,) + srgb8.shape[:-1]), 0, -1)


def _bin_colours(srgb8, levels, kernels=None):
    """Quantise pixels into ``levels``^3 bins.

    Returns the bin index of every pixel (into the occupied bins), the number of occupied bins
    and the J'a'b' of every pixel (:func:`srgb8_to_jab`) as planes, shape (3, n). No colour is
    converted twice. ``kernels``: :mod:`harmony.photo.kernels`, the same result compiled.
    """
    bits = levels.bit_length() - 1
    if kernels is not None:
        rows, inverse, n_bins, blocks = kernels.pixel_bins(
            srgb8.reshape(-1, 3), _channel_codes(levels), levels**3, _BLOCK**3, (FINE_LEVELS // _BLOCK) ** 3)
        return inverse, n_bins, _jab_planes(rows, blocks, kernels)
    rows, code = _pixel_codes(np.ascontiguousarray(srgb8.reshape(-1, 3).T), levels)
    counts = np.bincount(code, minlength=levels**3)
    occupied = np.flatnonzero(counts > 0)
    blocks = None
    coarse = bits - int(np.log2(FINE_LEVELS // _BLOCK))  # table blocks are 16 levels a side
    if coarse >= 0:  # the occupied bins name the table blocks the pixels fall in
        side = FINE_LEVELS // _BLOCK
        br, bg, bb = (occupied >> (2 * bits)) >> coarse, ((occupied >> bits) & (levels - 1)) >> coarse, \
            (occupied & (levels - 1)) >> coarse
        blocks = np.flatnonzero(np.bincount((br * side + bg) * side + bb, minlength=side**3))
    pixel_planes = _jab_planes(rows, blocks)
    index = np.zeros(levels**3, dtype=np.intp)
    index[occupied] = np.arange(occupied.size)
    return index[code], occupied.size, pixel_planes


def _bin_sums(inverse, n_bins, jab_planes, product, clean, inner):
    """Of the occupied bins holding product: their J'a'b' as planes, shape (3, n) (means weighted by
    ``product``, so a product's bins are not pulled towards backdrop pixels sharing a bin) and
    their masses under ``clean`` and ``inner``. Pixels of weight 0 add nothing to any sum
    (x + 0.0 == x): only the product's pixels are summed, in raster order, all six sums by one
    bincount (each bin's sum still runs over its pixels in order)."""
    some = np.flatnonzero(product != 0)
    inv = inverse[some]
    values = np.empty((6, some.size))
    values[0] = product[some]
    values[1:4] = jab_planes.take(some, axis=1)
    values[1:4] *= values[0]
    values[4] = clean[some]
    values[5] = inner[some]
    where = inv + (n_bins * np.arange(6))[:, None]
    sums = np.bincount(where.ravel(), weights=values.ravel(), minlength=6 * n_bins).reshape(6, n_bins)
    mass = sums[0]
    bins = np.flatnonzero(mass > 0)
    jab = sums[1:4, bins] / mass[bins]  # planes, shape (3, n)
    return jab, sums[4, bins], sums[5, bins]


def _unmix(px, back, centres):
    """For outline pixels ``px`` (planes, shape (3, n)) against the backdrop ``back`` there: the
    nearest colour on the lines from the backdrop through each centre, and how far along it
    (0-1). Plane by plane, in the order of a sum over the three channels."""
    span = [centres[:, c][None, :] - back[c][:, None] for c in range(3)]  # (n, k) each
    rel = [(px[c] - back[c])[:, None] for c in range(3)]
    dot = rel[0] * span[0] + rel[1] * span[1] + rel[2] * span[2]
    norm = span[0] * span[0] + span[1] * span[1] + span[2] * span[2]
    alpha = np.clip(dot / np.maximum(norm, 1e-9), 0.0, 1.0)
    resid = (rel[0] - alpha * span[0]) ** 2 + (rel[1] - alpha * span[1]) ** 2 + (rel[2] - alpha * span[2]) ** 2
    k = np.argmin(resid, axis=1)
    return k, alpha[np.arange(k.size), k]


#: Images an extraction job must have before it loads the compiled kernels. Loading them costs
#: about 0.5 s from numba's cache (about 10 s the first time, compiling) and saves about 1 ms per
#: image per core (measured on a 2-core machine, benchmarks/extract.py): smaller jobs finish
#: sooner with the numpy steps, which give the same palettes.
COMPILED_MIN_IMAGES = 1000

_KERNELS = []  # [] not tried in this process; [harmony.photo.kernels] loaded; [None] unusable here


_SWITCH = {"1": "1", "true": "1", "yes": "1", "on": "1", "0": "0", "false": "0", "no": "0", "off": "0", "": ""}
_WARNED_SETTING = set()


def _numba_setting():
    """``HARMONY_NUMBA`` as "1" (always the kernels), "0" (never) or "" (by job size); another
    value is warned of once and read as unset."""
    raw = os.environ.get("HARMONY_NUMBA", "")
    value = _SWITCH.get(raw.strip().casefold())
    if value is None:
        if raw not in _WARNED_SETTING:
            _WARNED_SETTING.add(raw)
            warn(f"HARMONY_NUMBA={raw!r} is neither 1 nor 0 (nor true/false, yes/no, on/off); "
                 "the compiled kernels are used by job size")
        return ""
    return value


def load_kernels():
    """Load the compiled kernels (:mod:`harmony.photo.kernels`, numba) in this process, run
    each once on a small drawn shot, and return them; None where numba does not import or the
    kernels fail (a one-line warning says why), or where the environment variable
    ``HARMONY_NUMBA`` is ``0``. Palettes are the same either way."""
    if _numba_setting() == "0":
        return None
    if not _KERNELS:
        try:
            from harmony.photo import kernels
        except (ImportError, OSError) as exc:  # numba missing, or built for another numpy
            kernels = None
            warn(f"numba does not import ({exc}); extracting with the numpy steps, which give the same "
                 "palettes, more slowly")
        _KERNELS.append(kernels)
        if kernels is not None:
            try:
                palette_from_decoded(_warm_up_shot(), PaletteSettings())
            except Exception as exc:  # noqa: BLE001 - a compiler failure must not stop extraction
                _KERNELS[0] = None
                warn(f"the compiled palette kernels failed ({type(exc).__name__}: {exc}); "
                     "extracting with the numpy steps, which give the same palettes, more slowly")
    return _KERNELS[0]


def compiled_kernels():
    """The kernels palettes are extracted with in this process: those :func:`load_kernels` has
    loaded (large extraction jobs load them), always with ``HARMONY_NUMBA=1``, never with ``0``."""
    setting = _numba_setting()
    if setting == "0":
        return None
    if setting == "1" and not _KERNELS:
        return load_kernels()
    return _KERNELS[0] if _KERNELS else None


def _warm_up_shot(size=96):
    """A small noisy studio shot (a light sweep, a dark block with a soft shadow below it) that
    takes every compiled step once."""
    from harmony.photo.image import DecodedImage

    rng = np.random.default_rng(0)
    y, x = np.mgrid[0:size, 0:size] / size
    img = np.full((size, size, 3), 0.92) - 0.05 * y[..., None]
    block = (abs(x - 0.5) < 0.2) & (abs(y - 0.45) < 0.25)
    img *= (1.0 - 0.35 * np.exp(-(((y - 0.72) / 0.03) ** 2)) * (abs(x - 0.5) < 0.25))[..., None]
    img[block] = (0.35, 0.2, 0.12)
    img += rng.normal(0.0, 0.03, img.shape) * block[..., None] + rng.normal(0.0, 0.004, img.shape)
    srgb8 = np.round(np.clip(img, 0.0, 1.0) * 255).astype(np.uint8)
    srgb8.setflags(write=False)  # as decoded images come (numba compiles per array type)
    return DecodedImage(srgb8=srgb8, opaque=None, width=size, height=size, sha256="", source="<warm-up>")


def palette_from_decoded(decoded, settings=PaletteSettings()):
    """Extract the palette of an already decoded image (:class:`harmony.photo.image.DecodedImage`).

    See :func:`extract_palette` for the method.
    """
    from harmony.photo.mask import colour_step_sq, foreground_mask

    fast = compiled_kernels()
    h, w = decoded.srgb8.shape[:2]
    inverse, n_bins, jab_planes = _bin_colours(decoded.srgb8, settings.levels, fast)
    pixel_jab = np.moveaxis(jab_planes.reshape(3, h, w), 0, -1)  # a view of the planes
    step_sq = colour_step_sq(pixel_jab) if fast is None else fast.colour_step_sq(jab_planes.reshape(3, h, w))
    mask = foreground_mask(
        pixel_jab,
        decoded.opaque,
        tolerance=settings.tolerance,
        uniform_share=settings.uniform_share,
        step_sq=step_sq,
        kernels=fast,
    )
    product = mask.weights.ravel()
    if np.count_nonzero(product > 0) < max(16, 0.002 * h * w):
        raise ImageError(f"{decoded.source}: nothing left after removing the background")
    # Pixels on a sharp colour edge are blends of their neighbours (anti-aliasing, the box
    # filter, JPEG ringing): only clean pixels shape the colours (k-means). Every product pixel
    # inside the outline then counts fully towards its nearest colour, so regions with much inner
    # edge (fine texture) keep their share. A pixel on the outline is part product, part
    # backdrop: against a fitted backdrop it is unmixed (the share of the nearest colour on the
    # line from the backdrop through the pixel), so thin parts (slats, legs, frames) count by
    # their area; without a backdrop it counts only when nearly pure.
    blended = step_sq.ravel() > settings.edge_delta_e**2
    background = (mask.weights <= 0.0)
    touching = np.zeros_like(background)
    touching[1:] |= background[:-1]
    touching[:-1] |= background[1:]
    touching[:, 1:] |= background[:, :-1]
    touching[:, :-1] |= background[:, 1:]
    outline = touching.ravel() & (product > 0)
    if mask.backdrop is None:
        outline &= blended
    clean = np.where(blended | outline, 0.0, product)
    if clean.sum() < 16:
        clean = product
    inner = np.where(outline, 0.0, product)
    bin_planes, clean_mass, inner_mass = (_bin_sums if fast is None else fast.bin_sums)(
        inverse, n_bins, jab_planes, product, clean, inner)
    fit = clean_mass > 0
    rng = SeededDraws(settings.seed, settings.colours)
    # One k-means++ start: the greedy seeding with 2 + ln k trials per centre is already close
    # to the best of several starts on these few thousand bins (the ColorChecker chart at k = 24
    # comes out the same with 1 to 6 starts), and each start costs as much as the rest.
    centres, _ = weighted_kmeans(bin_planes[:, fit].T, clean_mass[fit], settings.colours, rng, n_init=1,
                                 kernels=fast)
    nearest = np.argmin(sq_dist_planes(bin_planes, centres), axis=0)
    mass = np.bincount(nearest, weights=inner_mass, minlength=len(centres))
    edge = np.flatnonzero(outline)
    if edge.size:
        px = jab_planes.take(edge, axis=1).astype(float)
        if mask.backdrop is None:
            d2 = sq_dist_planes(px, centres)
            k = np.argmin(d2, axis=0)
            pure = d2[k, np.arange(edge.size)] <= (settings.edge_delta_e / 2.0) ** 2
            mass += np.bincount(k[pure], weights=product[edge][pure], minlength=len(centres))
        else:
            back = np.moveaxis(mask.backdrop, -1, 0).reshape(3, -1).take(edge, axis=1)
            k, a = (_unmix if fast is None else fast.unmix)(px, back, centres)
            mass += np.bincount(k, weights=a * product[edge], minlength=len(centres))
    centres, mass = centres[mass > 0], mass[mass > 0]
    centres, mass = (merge_close if fast is None else fast.merge_close)(centres, mass, settings.merge_delta_e)
    share = mass / mass.sum()
    big = share >= settings.min_share
    if not big.any():
        big = share == share.max()
    centres, share = centres[big], share[big]
    # Heaviest first; ties broken by J', a', b' so the order never depends on cluster numbering.
    order = np.lexsort((centres[:, 2], centres[:, 1], centres[:, 0], -share))
    weights = share[order] / share[order].sum()
    return Palette(
        jab=centres[order],
        weights=weights,
        sha256=decoded.sha256,
        width=decoded.width,
        height=decoded.height,
        background_jab=mask.background_jab,
        background_share=mask.background_share,
        scene=mask.scene,
        confidence=float(np.clip(mask.confidence, 0.0, 1.0)),
        flags=tuple(mask.flags),
        source=decoded.source,
    )


def extract_palette(source, settings=PaletteSettings()):
    """The honest palette of one product photo.

    Parameters
    ----------
    source : str, pathlib.Path or bytes
        An image file or its bytes.
    settings : PaletteSettings

    Returns
    -------
    Palette
        Colours in CAM02-UCS sorted by weight, weights summing to 1, with the backdrop colour and
        share, the scene flag and a confidence. The same bytes and settings give the same palette,
        byte for byte.

    Raises
    ------
    ImageError
        ``"<file>: <reason>"`` for a missing or unreadable file, a file that is not an image, a
        truncated or corrupt image, one over a pixel limit, or one with nothing left after
        removing the background (an empty studio backdrop; a full-bleed frame of one material
        keeps all its pixels instead, see :mod:`harmony.photo.mask`).

    Notes
    -----
    Steps: decode small (JPEG draft mode, then a box filter to ``max_side``); bin pixels at
    ``levels`` per channel and convert each occupied bin's mean colour to CAM02-UCS; find the
    backdrop and shadow (:func:`harmony.photo.mask.foreground_mask`); weighted k-means on the product's
    bins; merge colours closer than ``merge_delta_e``; drop specks under ``min_share``.

    A textured surface of one colour (a woven fabric, a grained wood) is a spread of shades, not
    one colour: k-means cuts that spread into slices, and the merge keeps every slice whose centre
    is at least ``merge_delta_e`` from the others, as a just-noticeable difference should. Such a
    product therefore comes out as a run of neighbouring shades (on the demo shop's denim sofa:
    six blues 2.3-3.2 ΔE apart, J' 36-49, hue within 2 degrees). That is the honest content of
    the photo; the score is bilinear in the weights and smooth in the colours, so it barely
    depends on how the spread is cut (collapsing those six blues into one moves that sofa's pair
    scores by at most 0.011). Families of shades are formed where they are needed, by
    :func:`harmony.suggest.roomview.colour_groups`.
    """
    from harmony.photo.image import decode_image, read_source

    data, name = read_source(source)
    decoded = decode_image(data, name=name, max_side=settings.max_side, max_pixels=settings.max_pixels)
    return palette_from_decoded(decoded, settings)
