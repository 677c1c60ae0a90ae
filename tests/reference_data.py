"""Reference vectors for the tests, one module, each marked with its provenance.

gold   : a published standard or worked example, or an independent library's values.
silver : produced by this project; a regression guard only, never proof of correctness.
"""

import warnings

import numpy as np

__all__ = [
    "colorchecker_srgb1",
    "EXIF_ORIENTATION_PIXELS",
    "ANSI_TRUECOLOUR_EXAMPLE",
    "SCENE_PHOTOS",
    "sample_photo",
]


def colorchecker_srgb1():
    """gold: the 24 ColorChecker patches (X-Rite, after November 2014) as sRGB in [0, 1].

    Source: colour-science's ``colour.CCS_COLOURCHECKERS['ColorChecker24 - After November 2014']``
    (CIE xyY under D50), converted with ``colour.XYZ_to_sRGB`` using a Bradford adaptation to D65
    (IEC 61966-2-1 encoding). Patch 18 ("cyan") lies outside the sRGB gamut and is clipped to it,
    as any sRGB photograph of the chart would be.

    Returns
    -------
    names : list of str
    srgb1 : ndarray, shape (24, 3)
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour

    chart = colour.CCS_COLOURCHECKERS["ColorChecker24 - After November 2014"]
    names = list(chart.data)
    xyy = np.array([chart.data[n] for n in names])
    srgb = colour.XYZ_to_sRGB(
        colour.xyY_to_XYZ(xyy),
        illuminant=chart.illuminant,
        chromatic_adaptation_transform="Bradford",
    )
    return names, np.clip(srgb, 0.0, 1.0)


#: gold: CIPA DC-008-2019 (Exif 2.32), tag 0x0112 Orientation. A stored 2x3 image (w=3, h=2)
#: with pixel values 0..5 row by row, and how each orientation value must be displayed.
#: 1 = top-left (as stored); 3 = bottom-right (rotate 180); 6 = right-top (rotate 90 clockwise
#: to display); 8 = left-bottom (rotate 90 counter-clockwise); 2 = mirrored left-right.
EXIF_ORIENTATION_PIXELS = {
    "stored": [[0, 1, 2], [3, 4, 5]],
    1: [[0, 1, 2], [3, 4, 5]],
    2: [[2, 1, 0], [5, 4, 3]],
    3: [[5, 4, 3], [2, 1, 0]],
    6: [[3, 0], [4, 1], [5, 2]],
    8: [[2, 5], [1, 4], [0, 3]],
}

#: gold: ECMA-48 SGR with the ISO/IEC 8613-6 direct-colour form "48;2;r;g;b" (background), reset
#: with SGR 0. Worked example for #ff8000, two cells wide.
ANSI_TRUECOLOUR_EXAMPLE = ("#ff8000", "\x1b[48;2;255;128;0m  \x1b[0m")

#: gold (photographs no one in this project made): scikit-image sample images whose borders are
#: busy (people, objects, animals, landscapes); each must be recognised as a scene.
SCENE_PHOTOS = ("astronaut", "coffee", "chelsea", "rocket")


def sample_photo(name):
    """gold: a real photograph no one here made, as sRGB uint8: scikit-image's sample images by
    name (``skimage.data.<name>``) and scikit-learn's ``china.jpg`` and ``flower.jpg``
    (``sklearn.datasets.load_sample_image``)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if name in ("china.jpg", "flower.jpg"):
            from sklearn.datasets import load_sample_image

            return load_sample_image(name)
        import skimage.data

        return getattr(skimage.data, name)()
