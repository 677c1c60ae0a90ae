"""sRGB and CAM02-UCS: the one place where viewing conditions and colour conversions live.

All functions take and return float arrays with a trailing axis of 3 (``(..., 3)``).
``srgb1`` is non-linear sRGB in [0, 1] (IEC 61966-2-1), ``xyz100`` is CIE XYZ with the white
at Y = 100, ``jab`` is CAM02-UCS J'a'b' (Luo, Cui & Li 2006).

References
----------
IEC 61966-2-1:1999, Multimedia systems and equipment - Colour measurement and management -
    Part 2-1: Default RGB colour space - sRGB.
M. R. Luo, G. Cui, C. Li (2006). Uniform colour spaces based on CIECAM02 colour appearance model.
    Color Research & Application 31(4):320-330.
N. Moroney et al. (2002). The CIECAM02 color appearance model. IS&T/SID 10th Color Imaging Conf.
"""

import numpy as np
from colorspacious import CIECAM02Space, cspace_convert

__all__ = [
    "as_triplets",
    "VIEWING_CONDITIONS",
    "CAM02UCS",
    "srgb1_to_jab",
    "jab_to_srgb1",
    "srgb1_to_xyz100",
    "jab_to_xyz100",
    "lightness",
    "colourfulness",
    "hue_deg",
    "delta_e",
    "lrv",
    "srgb1_to_hex",
    "hex_to_srgb1",
    "jab_to_hex",
    "in_srgb_gamut",
]

#: CIECAM02 viewing conditions used everywhere: the sRGB reference viewing environment as
#: colorspacious defines it (IEC 61966-2-1 Annex: D65 white with Y_w = 100, adapting luminance
#: L_A = 64/pi * 0.2 cd/m^2 (20 % of a 64 lux ambient), background Y_b = 20, average surround).
#: colour-science's ``VIEWING_CONDITIONS_CIECAM02['Average']`` with the same L_A and Y_b agrees.
VIEWING_CONDITIONS = CIECAM02Space.sRGB

#: colorspacious colour-space specification of CAM02-UCS under :data:`VIEWING_CONDITIONS`.
CAM02UCS = {"name": "CAM02-UCS", "ciecam02_space": VIEWING_CONDITIONS}


def as_triplets(x, name):
    """``x`` as a float array with a trailing axis of 3; ValueError naming ``name`` and the shape."""
    arr = np.asarray(x, dtype=float)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise ValueError(f"{name} must have a trailing axis of 3, got shape {arr.shape}")
    return arr


def srgb1_to_jab(srgb1):
    """Convert sRGB in [0, 1] to CAM02-UCS J'a'b'.

    Parameters
    ----------
    srgb1 : array_like, shape (..., 3)
        Non-linear sRGB (IEC 61966-2-1), nominally in [0, 1].

    Returns
    -------
    jab : ndarray, shape (..., 3)
        CAM02-UCS J' (about 0 to 100), a', b'.

    Examples
    --------
    >>> import numpy as np
    >>> np.round(srgb1_to_jab([1.0, 1.0, 1.0]), 1)
    array([100. ,  -1.9,  -1.2])
    """
    return cspace_convert(as_triplets(srgb1, "srgb1"), "sRGB1", CAM02UCS)


def _from_jab(jab, space):
    """``cspace_convert`` from CAM02-UCS, with J' <= 0 taken as black: no light, and CIECAM02's
    inverse divides by J there (colorspacious warns and returns nan)."""
    jab = as_triplets(jab, "jab")
    dark = jab[..., 0] <= 0.0
    if not np.any(dark):
        return cspace_convert(jab, CAM02UCS, space)
    out = cspace_convert(np.where(dark[..., None], [1.0, 0.0, 0.0], jab), CAM02UCS, space)
    out[dark] = 0.0
    return out


def jab_to_srgb1(jab):
    """Convert CAM02-UCS J'a'b' to sRGB in [0, 1]; out-of-gamut colours fall outside [0, 1]."""
    return _from_jab(jab, "sRGB1")


def srgb1_to_xyz100(srgb1):
    """sRGB in [0, 1] to CIE XYZ (D65, Y of white = 100), per IEC 61966-2-1."""
    return cspace_convert(as_triplets(srgb1, "srgb1"), "sRGB1", "XYZ100")


def jab_to_xyz100(jab):
    """CAM02-UCS J'a'b' to CIE XYZ (Y of white = 100) under :data:`VIEWING_CONDITIONS`."""
    return _from_jab(jab, "XYZ100")


def lightness(jab):
    """CAM02-UCS lightness J', shape (...)."""
    return as_triplets(jab, "jab")[..., 0]


def colourfulness(jab):
    """CAM02-UCS colourfulness M' = hypot(a', b'), shape (...).

    Notes
    -----
    Under :data:`VIEWING_CONDITIONS` sRGB white has M' of about 2.2, since CIECAM02 adaptation to
    the D65 white is incomplete (degree of adaptation D < 1) at this adapting luminance.
    """
    arr = as_triplets(jab, "jab")
    return np.hypot(arr[..., 1], arr[..., 2])


def hue_deg(jab):
    """CAM02-UCS hue angle h = atan2(b', a') in degrees, in [0, 360), shape (...)."""
    arr = as_triplets(jab, "jab")
    h = np.degrees(np.arctan2(arr[..., 2], arr[..., 1])) % 360.0
    # -0.0 % 360 and values within rounding of 360 both land on 360.0 in floating point.
    return np.where(h >= 360.0, 0.0, h)


def delta_e(jab1, jab2):
    """Perceptual difference: Euclidean distance in CAM02-UCS, broadcast over leading axes."""
    a = as_triplets(jab1, "jab1")
    b = as_triplets(jab2, "jab2")
    return np.sqrt(np.sum((a - b) ** 2, axis=-1))


def lrv(xyz100_or_jab, *, space="jab"):
    """Light reflectance value, LRV = CIE Y on a 0-100 scale (BS 8493; as used by BS 8300-2:2018).

    Parameters
    ----------
    xyz100_or_jab : array_like, shape (..., 3)
        Colours in CAM02-UCS (``space="jab"``), sRGB in [0, 1] (``"srgb1"``) or XYZ100 (``"xyz100"``).

    Notes
    -----
    A photograph only approximates the LRV of the surface it shows: exposure and lighting shift it.
    """
    if space == "jab":
        xyz = jab_to_xyz100(xyz100_or_jab)
    elif space == "srgb1":
        xyz = srgb1_to_xyz100(xyz100_or_jab)
    elif space == "xyz100":
        xyz = as_triplets(xyz100_or_jab, "xyz100")
    else:
        raise ValueError(f"space must be 'jab', 'srgb1' or 'xyz100', got {space!r}")
    return xyz[..., 1]


def in_srgb_gamut(srgb1, tol=1e-6):
    """True where every channel of ``srgb1`` lies in [0, 1] (within ``tol``), shape (...)."""
    arr = as_triplets(srgb1, "srgb1")
    return np.all((arr >= -tol) & (arr <= 1.0 + tol), axis=-1)


def srgb1_to_hex(srgb1):
    """'#rrggbb' for one colour, or a list for an array of colours; channels are clipped to [0, 1].

    Clipping is the display convention here: palette centres are means of in-gamut pixels and lie
    at most a rounding step outside the gamut.
    """
    arr = as_triplets(srgb1, "srgb1")
    ints = np.rint(np.clip(arr, 0.0, 1.0) * 255.0).astype(int)
    flat = [f"#{r:02x}{g:02x}{b:02x}" for r, g, b in ints.reshape(-1, 3)]
    return flat[0] if arr.ndim == 1 else flat


def hex_to_srgb1(code):
    """Parse '#rrggbb' (or 'rrggbb') into sRGB in [0, 1]; raises ValueError naming the bad code."""
    text = str(code).strip().lstrip("#")
    if len(text) != 6:
        raise ValueError(f"not a colour code of the form #rrggbb: {code!r}")
    try:
        values = [int(text[i : i + 2], 16) for i in (0, 2, 4)]
    except ValueError:
        raise ValueError(f"not a colour code of the form #rrggbb: {code!r}") from None
    return np.array(values, dtype=float) / 255.0


def jab_to_hex(jab):
    """'#rrggbb' of CAM02-UCS colours (see :func:`srgb1_to_hex` for the clipping convention)."""
    return srgb1_to_hex(jab_to_srgb1(jab))
