"""Where the project's bundled data lives (rule files, demo shop, room templates)."""

from pathlib import Path

__all__ = ["PROJECT_ROOT", "RULES_DIR", "DEFAULT_RULES", "DEMO_DIR"]

#: The checkout that holds ``rules/`` and ``demo_room_sets/`` (the package is installed editable).
PROJECT_ROOT = Path(__file__).resolve().parent.parent
RULES_DIR = PROJECT_ROOT / "rules"
DEFAULT_RULES = RULES_DIR / "default.toml"
DEMO_DIR = PROJECT_ROOT / "demo_room_sets"
