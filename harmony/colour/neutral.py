"""How neutral a colour is: a smooth fade over CAM02-UCS colourfulness M'.

A neutral colour's hue carries no meaning, so hue rules and hue drawings fade out with it.
"""

import numpy as np

from harmony.colour import space as colour

__all__ = ["NEUTRAL_COLOURFULNESS", "NEUTRAL_FADE", "neutrality"]

#: Colourfulness M' below which a colour counts as neutral (its hue carries no meaning), and the
#: full width of the smooth fade around it. Measured with colour-science's Munsell renotation data
#: (value 6, ten principal hues, Illuminant C adapted to D65 with CAT02) through colorspacious:
#: chroma 1 lands at M' 2.7-6.5, chroma 2 at 5.4-10.5, chroma 4 at 10.7-16.8; sRGB white is 2.2.
#: A centre of 7 with a fade from 3 to 11 treats sRGB white as neutral, chroma-4 colours as
#: chromatic, and blends chroma 1 and 2 (greige, stone, putty: neutrals in interior-design common
#: practice). The wide fade keeps a score's slope over M' gentle near the threshold.
#: ``rules/default.toml`` carries the same numbers; a test checks that they agree.
NEUTRAL_COLOURFULNESS = 7.0
NEUTRAL_FADE = 8.0


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
