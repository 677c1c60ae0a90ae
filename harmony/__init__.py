"""harmony: colour palettes from product photos, cross-category colour harmony, room sets.

The public API is re-exported here, e.g. ``harmony.extract_palette(path)``.
"""

from .colour import (
    delta_e,
    colourfulness,
    hue_deg,
    jab_to_srgb1,
    lightness,
    lrv,
    srgb1_to_jab,
)
from .errors import (
    CatalogueError,
    EventsError,
    HarmonyError,
    ImageError,
    RoomError,
    RulesError,
    StoreError,
)
from .palette import Palette, neutrality

__version__ = "0.1.0"

__all__ = [
    "CatalogueError",
    "EventsError",
    "HarmonyError",
    "ImageError",
    "Palette",
    "RoomError",
    "RulesError",
    "StoreError",
    "colourfulness",
    "delta_e",
    "hue_deg",
    "jab_to_srgb1",
    "lightness",
    "lrv",
    "neutrality",
    "srgb1_to_jab",
]
