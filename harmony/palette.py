"""Weighted colour palettes of product photos, in CAM02-UCS.

A :class:`Palette` is what every later stage (scores, screen, sets, feeds, reports) consumes.
"""

import json
from dataclasses import dataclass

import numpy as np

from . import colour
from .errors import HarmonyError

__all__ = [
    "Palette",
    "NEUTRAL_COLOURFULNESS",
    "NEUTRAL_FADE",
    "neutrality",
]

#: Colourfulness M' below which a colour counts as neutral (its hue carries no meaning), and the
#: full width of the smooth fade around it. Measured with colour-science's Munsell renotation data
#: (value 6, ten principal hues, Illuminant C adapted to D65 with CAT02) through colorspacious:
#: chroma 1 lands at M' 2.7-6.5, chroma 2 at 5.4-10.5, chroma 4 at 10.7-16.8; sRGB white is 2.2.
#: A centre of 7 with a fade from 5 to 9 treats chroma-1 colours as neutral, chroma-4 colours as
#: chromatic, and blends chroma 2 (greige, stone, putty: neutrals in interior-design common practice).
#: ``rules/default.toml`` carries the same numbers; a test checks that they agree.
NEUTRAL_COLOURFULNESS = 7.0
NEUTRAL_FADE = 4.0


def neutrality(jab, threshold=NEUTRAL_COLOURFULNESS, fade=NEUTRAL_FADE):
    """How neutral each colour is, in [0, 1]: 1 well below ``threshold``, 0 well above it.

    A smoothstep over colourfulness M' from ``threshold - fade/2`` to ``threshold + fade/2``,
    so there is no cliff at the threshold. Shape (...) for ``jab`` of shape (..., 3).
    """
    m = colour.colourfulness(jab)
    if fade <= 0:
        return (m < threshold).astype(float)
    t = np.clip((m - (threshold - fade / 2.0)) / fade, 0.0, 1.0)
    return 1.0 - t * t * (3.0 - 2.0 * t)


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
        0..1; low for scenes (the product was guessed with a centre prior).
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
    source: str = ""

    def __post_init__(self):
        jab = _frozen(self.jab, (3,), "jab")
        weights = np.array(self.weights, dtype=float)
        if weights.shape != (jab.shape[0],):
            raise ValueError(f"weights must have shape ({jab.shape[0]},), got {weights.shape}")
        if jab.shape[0] == 0:
            raise ValueError("a palette needs at least one colour")
        if np.any(weights < 0) or not np.isclose(weights.sum(), 1.0, atol=1e-9):
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
                "weight": float(w),
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
            "image": self.source if image is None else str(image),
            "sha256": self.sha256,
            "width": int(self.width),
            "height": int(self.height),
            "scene": bool(self.scene),
            "confidence": float(self.confidence),
            "background": background,
            "colours": colours,
        }

    def to_json(self, image=None):
        """One line of JSON; :meth:`from_json` restores the colours and weights exactly."""
        return json.dumps(self.to_dict(image=image), separators=(",", ":"))

    @classmethod
    def from_dict(cls, data, where="palette"):
        """Rebuild a palette from :meth:`to_dict` output; ``where`` names the source in errors."""
        try:
            colours = data["colours"]
            jab = [[c["J"], c["a"], c["b"]] for c in colours]
            weights = [c["weight"] for c in colours]
            bg = data.get("background")
            # The background is stored as a hex code: it round-trips to 8 bits per channel.
            bg_jab = None if bg is None else colour.srgb1_to_jab(colour.hex_to_srgb1(bg["hex"]))
            share = bg["share"] if bg else 0.0
            return cls(
                jab=jab,
                weights=weights,
                sha256=str(data.get("sha256", "")),
                width=int(data.get("width", 0)),
                height=int(data.get("height", 0)),
                background_jab=bg_jab,
                background_share=float(share),
                scene=bool(data.get("scene", False)),
                confidence=float(data.get("confidence", 1.0)),
                source=str(data.get("image", "")),
            )
        except KeyError as exc:
            raise HarmonyError(f"{where}: palette JSON lacks key {exc.args[0]!r}") from None
        except (TypeError, ValueError) as exc:
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
