"""harmony: colour palettes from product photos, cross-category colour harmony, room sets.

The public API is re-exported here, e.g. ``harmony.extract_palette(path)``. Names are resolved on
first use, so ``import harmony`` (and the command line) stays fast.

Subpackages, from the bottom up (each may import only those before it):

========== ==============================================================================
colour     sRGB <-> CAM02-UCS, neutrality, Ou & Luo (2006), hue templates
photo      decoding, backdrop and shadow masks, palettes, swatches
shop       catalogue, SQLite store, extraction engine, interaction logs
rules      the rules file, rule kinds, exact pair score, all-pairs screen, wheel picture
suggest    feed, room templates, set search under a budget, room view
evaluation offline evaluation against interaction logs
report     the offline HTML report
demo       the invented demo shop and ``harmony demo`` (nothing else imports it)
cli        the ``harmony`` command line
========== ==============================================================================

``errors``, ``fileio`` and ``resources`` sit below them all.
"""

import importlib

__version__ = "0.1.0"

_PUBLIC = {
    "delta_e": "harmony.colour",
    "colourfulness": "harmony.colour",
    "hue_deg": "harmony.colour",
    "jab_to_srgb1": "harmony.colour",
    "lightness": "harmony.colour",
    "lrv": "harmony.colour",
    "srgb1_to_jab": "harmony.colour",
    "neutrality": "harmony.colour",
    "CatalogueError": "harmony.errors",
    "EventsError": "harmony.errors",
    "HarmonyError": "harmony.errors",
    "ImageError": "harmony.errors",
    "RoomError": "harmony.errors",
    "RulesError": "harmony.errors",
    "StoreError": "harmony.errors",
    "Palette": "harmony.photo.palette",
    "PaletteSettings": "harmony.photo.palette",
    "extract_palette": "harmony.photo.palette",
    "load_rules": "harmony.rules",
    "pair_score": "harmony.rules.score",
    "screen_top_k": "harmony.rules.screen",
    "normalise_category": "harmony.shop.catalogue",
    "read_catalogue": "harmony.shop.catalogue",
    "Store": "harmony.shop.store",
    "run_extraction": "harmony.shop.engine",
    "read_events": "harmony.shop.events",
    "build_feed": "harmony.suggest.feed_run",
    "suggest_partners": ("harmony.suggest.feed", "suggest"),
    "load_room": "harmony.suggest.room",
    "search_bundles": "harmony.suggest.bundle",
    "evaluate": "harmony.evaluation",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name):
    where = _PUBLIC.get(name)
    if where is None:
        raise AttributeError(f"module 'harmony' has no attribute {name!r}")
    module, attr = where if isinstance(where, tuple) else (where, name)
    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC))
