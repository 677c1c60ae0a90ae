"""The colour-science core: sRGB (IEC 61966-2-1) <-> CAM02-UCS, neutrality, Ou & Luo's model, hue templates.

The functions of :mod:`harmony.colour.space` are re-exported here (``colour.srgb1_to_jab``).
This subpackage is the bottom of the house: it imports nothing of harmony but
:mod:`harmony.errors`.
"""

from harmony.colour.neutral import NEUTRAL_COLOURFULNESS, NEUTRAL_FADE, neutrality
from harmony.colour.space import *  # noqa: F401,F403
from harmony.colour.space import __all__ as _space_all

__all__ = [*_space_all, "NEUTRAL_COLOURFULNESS", "NEUTRAL_FADE", "neutrality"]
