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
from .palette import Palette, PaletteSettings, extract_palette, neutrality
from .rules import load_rules
from .score import pair_score
from .catalogue import normalise_category, read_catalogue
from .store import Store
from .engine import run_extraction
from .feed import build_feed, suggest
from .screen import screen_top_k
from .room import load_room
from .bundle import search_bundles
from .events import read_events
from .evaluate import evaluate

__version__ = "0.1.0"

__all__ = [
    "PaletteSettings",
    "Store",
    "build_feed",
    "evaluate",
    "extract_palette",
    "load_room",
    "load_rules",
    "normalise_category",
    "pair_score",
    "read_catalogue",
    "read_events",
    "run_extraction",
    "screen_top_k",
    "search_bundles",
    "suggest",
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
