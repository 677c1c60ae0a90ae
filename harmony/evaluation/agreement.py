"""Agreement of a rules file with the Ou & Luo (2006) two-colour harmony model on reference colours.

An independent check of a rules file: for many pairs of single colours, the rank correlation
(Spearman) between the rules' kernel and the model's harmony ``CH``. The model was fitted to
human ratings of colour pairs; the rules were not fitted to it, so agreement is evidence and not
a tautology.

Two sets of pairs:

* Munsell renotation colours: a seeded sample of the "real" renotation colours (Newhall, Nickerson
  & Judd 1943, as tabulated by colour-science) that lie inside the sRGB gamut, every pair of them.
  The data are for Illuminant C; they are adapted to D65 with CAT02 and converted to CAM02-UCS
  under the project's viewing conditions. Needs colour-science (a test dependency).
* random in-gamut pairs: sRGB colours drawn uniformly from the unit cube.

References
----------
L.-C. Ou, M. R. Luo (2006). A colour harmony model for two-colour combinations.
    Color Research & Application 31(3):191-204.
S. M. Newhall, D. Nickerson, D. B. Judd (1943). Final report of the O.S.A. subcommittee on the
    spacing of the Munsell colors. J. Opt. Soc. Am. 33(7):385-418 (the renotation data).
C. Spearman (1904). The proof and measurement of association between two things. American
    Journal of Psychology 15(1):72-101.
B. Efron, R. J. Tibshirani (1993). An Introduction to the Bootstrap. Chapman & Hall, ch. 13.
"""

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.stats import rankdata

from harmony.colour import space as colour
from harmony.colour.ou_luo import jab_to_lab, two_colour_harmony

__all__ = [
    "MUNSELL_SAMPLE",
    "RANDOM_PAIRS",
    "Agreement",
    "munsell_renotation_jab",
    "random_srgb_jab",
    "all_pairs",
    "spearman",
    "agreement",
]

#: Munsell colours sampled; every pair of them is used (110 colours give 5,995 pairs).
MUNSELL_SAMPLE = 110
#: Random in-gamut colour pairs.
RANDOM_PAIRS = 6000


@dataclass(frozen=True)
class Agreement:
    """Spearman's rho between a rules file's kernel and Ou & Luo's ``CH``, with a bootstrap interval."""

    rho: float
    ci: tuple
    pairs: int


def munsell_renotation_jab(count=MUNSELL_SAMPLE, rng=None):
    """CAM02-UCS of ``count`` Munsell renotation colours inside the sRGB gamut, seeded sample.

    Parameters
    ----------
    count : int
        How many colours; all in-gamut colours when None.
    rng : numpy.random.Generator, optional
        Draws the sample (seed 0 when not given).

    Returns
    -------
    ndarray, shape (count, 3)
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour as cs
        from colour.notation.datasets.munsell import MUNSELL_COLOURS_REAL
    from colorspacious import cspace_convert

    ccs = cs.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]
    white_c, white_d65 = cs.xy_to_XYZ(ccs["C"]), cs.xy_to_XYZ(ccs["D65"])
    xyy = np.array([xyy for _, xyy in MUNSELL_COLOURS_REAL], dtype=float)
    xyy[:, 2] /= 100.0  # the table's Y is on a 0-100 scale
    xyz = cs.xyY_to_XYZ(xyy)
    xyz = cs.chromatic_adaptation(xyz, white_c, white_d65, method="Von Kries", transform="CAT02")
    jab = cspace_convert(xyz * 100.0, "XYZ100", colour.CAM02UCS)
    keep = colour.in_srgb_gamut(colour.jab_to_srgb1(jab), tol=1e-3)
    jab = jab[keep]
    if count is None or count >= len(jab):
        return jab
    rng = np.random.default_rng(0) if rng is None else rng
    return jab[np.sort(rng.choice(len(jab), size=int(count), replace=False))]


def random_srgb_jab(count, rng):
    """CAM02-UCS of ``count`` sRGB colours drawn uniformly from the unit cube, shape (count, 3)."""
    return colour.srgb1_to_jab(rng.random((int(count), 3)))


def all_pairs(n):
    """Index arrays ``(i, j)`` of every unordered pair of ``n`` items, ``i < j``."""
    i, j = np.triu_indices(int(n), k=1)
    return i, j


def spearman(x, y):
    """Spearman's rank correlation of two 1-D arrays (mid-ranks for ties)."""
    rx, ry = rankdata(x), rankdata(y)
    rx, ry = rx - rx.mean(), ry - ry.mean()
    den = np.sqrt((rx * rx).sum() * (ry * ry).sum())
    return float((rx * ry).sum() / den) if den > 0 else float("nan")


def agreement(pair_rules, jab_a, jab_b, rng, resamples=1000, level=0.95):
    """Spearman agreement of ``pair_rules.pairwise(jab_a, jab_b)`` with Ou & Luo's CH.

    Parameters
    ----------
    pair_rules : harmony.rules.PairRules
    jab_a, jab_b : ndarray, shape (n, 3)
        The two colours of each pair.
    rng : numpy.random.Generator
        Draws the bootstrap resamples of pairs.
    resamples : int
    level : float

    Returns
    -------
    Agreement
        rho and its percentile bootstrap interval over pairs.
    """
    rules = np.asarray(pair_rules.pairwise(jab_a, jab_b), dtype=float)
    model = np.asarray(two_colour_harmony(jab_to_lab(jab_a), jab_to_lab(jab_b)), dtype=float)
    rho = spearman(rules, model)
    n = len(rules)
    boots = np.array([spearman(rules[k], model[k]) for k in rng.integers(0, n, size=(int(resamples), n))])
    alpha = (1.0 - float(level)) / 2.0
    return Agreement(rho, (float(np.quantile(boots, alpha)), float(np.quantile(boots, 1.0 - alpha))), n)
