"""The Ou & Luo (2006) two-colour harmony model, in CIELAB (D65).

The model predicts how harmonious two colours look side by side as a sum of three terms,
``CH = H_C + H_L + H_H`` (chromatic, lightness and hue effects); ``CH > 0`` reads as harmonious.

References
----------
L.-C. Ou, M. R. Luo (2006). A colour harmony model for two-colour combinations.
    Color Research & Application 31(3):191-204.

Notes
-----
The coefficients below are the ones that independent open implementations of the model agree
on; the paper's own equations were not consulted here, so the paper is cited as the origin of
the model rather than as a checked source of each number.

``Delta H*ab`` is the CIELAB *metric* hue difference,
``sqrt(Delta E*ab^2 - Delta L*^2 - Delta C*ab^2)``, not a difference of hue angles.
"""

import numpy as np
from colorspacious import cspace_convert

from harmony.colour import space as colour

__all__ = [
    "CIELAB_D65",
    "jab_to_lab",
    "harmony_terms",
    "two_colour_harmony",
]

#: colorspacious specification of CIELAB under the D65 white (CIE 15:2004), which is the
#: space the model works in.
CIELAB_D65 = {"name": "CIELab", "XYZ100_w": "D65"}


def jab_to_lab(jab):
    """CAM02-UCS J'a'b' to CIELAB L*a*b* (D65), shape (..., 3)."""
    return cspace_convert(colour.jab_to_xyz100(jab), "XYZ100", CIELAB_D65)


def _single_colour_hue_effect(lab):
    """H_SY = E_C (H_S + E_Y) of one colour: its own contribution to the hue effect."""
    L, a, b = lab[..., 0], lab[..., 1], lab[..., 2]
    c = np.hypot(a, b)
    h = np.degrees(np.arctan2(b, a)) % 360.0
    e_c = 0.5 + 0.5 * np.tanh(-2.0 + 0.5 * c)
    h_s = -0.08 - 0.14 * np.sin(np.radians(h + 50.0)) - 0.07 * np.sin(np.radians(2.0 * h + 90.0))
    # (90 - h)/10 with h in degrees, exactly as the model states it.
    u = (90.0 - h) / 10.0
    e_y = ((0.22 * L - 12.8) / 10.0) * np.exp(u - np.exp(u))
    return e_c * (h_s + e_y)


def harmony_terms(lab1, lab2):
    """The three terms of the model for two colours (broadcast over leading axes).

    Parameters
    ----------
    lab1, lab2 : array_like, shape (..., 3)
        CIELAB L*a*b* under D65.

    Returns
    -------
    h_c, h_l, h_h : ndarray, shape (...)
        Chromatic effect ``0.04 + 0.53 tanh(0.8 - 0.045 dC)`` with
        ``dC = sqrt(dH*ab^2 + (dC*ab / 1.46)^2)``; lightness effect
        ``H_Lsum + H_dL`` with ``H_Lsum = 0.28 + 0.54 tanh(-3.88 + 0.029 (L1 + L2))`` and
        ``H_dL = 0.14 + 0.15 tanh(-2 + 0.2 |L1 - L2|)``; hue effect ``H_SY1 + H_SY2``.
    """
    p = colour.as_triplets(lab1, "lab1")
    q = colour.as_triplets(lab2, "lab2")
    c1 = np.hypot(p[..., 1], p[..., 2])
    c2 = np.hypot(q[..., 1], q[..., 2])
    d_c = c1 - c2
    # dH*ab^2 = dE^2 - dL^2 - dC^2 = 2 (C1 C2 - a1 a2 - b1 b2), which is >= 0 exactly; the
    # maximum only removes rounding residue of order 1e-12 for colours of (nearly) equal hue.
    d_h2 = np.maximum(2.0 * (c1 * c2 - p[..., 1] * q[..., 1] - p[..., 2] * q[..., 2]), 0.0)
    delta_c = np.sqrt(d_h2 + (d_c / 1.46) ** 2)
    h_c = 0.04 + 0.53 * np.tanh(0.8 - 0.045 * delta_c)
    l_sum = p[..., 0] + q[..., 0]
    h_lsum = 0.28 + 0.54 * np.tanh(-3.88 + 0.029 * l_sum)
    h_dl = 0.14 + 0.15 * np.tanh(-2.0 + 0.2 * np.abs(p[..., 0] - q[..., 0]))
    h_h = _single_colour_hue_effect(p) + _single_colour_hue_effect(q)
    return h_c, h_lsum + h_dl, h_h


def two_colour_harmony(lab1, lab2):
    """Ou & Luo (2006) harmony CH = H_C + H_L + H_H of two CIELAB (D65) colours, shape (...).

    Symmetric in its two arguments. Values above 0 are predicted harmonious.

    Examples
    --------
    >>> round(float(two_colour_harmony([50.0, 0.0, 0.0], [50.0, 0.0, 0.0])), 3)
    0.251
    """
    h_c, h_l, h_h = harmony_terms(lab1, lab2)
    return h_c + h_l + h_h
