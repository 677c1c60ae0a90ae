"""Where the data harmony ships lives: the default rules, the room templates and the demo shop.

The files sit at the top of the checkout (``rules/``, ``demo_room_sets/``) and install inside the
package as ``harmony/data/rules`` and ``harmony/data/rooms``; they are found through
:mod:`importlib.resources` in an installed wheel, and in the checkout itself when installed editable.
"""

from importlib.resources import files
from pathlib import Path

__all__ = ["RULES_DIR", "DEFAULT_RULES", "DEMO_DIR", "ROOMS_DIR", "SHOP_DIR", "room_template"]


def _folder(name, checkout_name):
    """The shipped folder ``harmony/data/NAME`` of an installed wheel, else the checkout's own
    folder (an editable install reads the files where they are edited)."""
    installed = files("harmony").joinpath("data", name)
    if installed.is_dir():
        return Path(str(installed))  # a wheel installs plain files, never a zip
    return Path(__file__).resolve().parent.parent / checkout_name


#: Rules files shipped with harmony (``rules/`` in the checkout).
RULES_DIR = _folder("rules", "rules")
DEFAULT_RULES = RULES_DIR / "default.toml"
#: Room templates and the demo shop (``demo_room_sets/`` in the checkout).
DEMO_DIR = ROOMS_DIR = _folder("rooms", "demo_room_sets")
SHOP_DIR = DEMO_DIR / "shop"


def room_template(name):
    """The path of a shipped room template by name (``"bedroom"``, ``"dining_corner"``), or None."""
    stem = str(name).removesuffix(".toml")
    if not stem or "/" in stem or "\\" in stem or stem.startswith("."):
        return None
    path = ROOMS_DIR / f"{stem}.toml"
    return path if path.is_file() else None
