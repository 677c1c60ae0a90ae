"""Matsuda's hue templates (Cohen-Or et al. 2006): sector widths and the exact best rotation."""

import numpy as np
import pytest

from harmony import colour
from harmony.colour.hue_templates import (
    TEMPLATES,
    arc_outside,
    best_template,
    fit_template,
)


def test_sector_widths_match_the_paper():
    # Gold: Cohen-Or et al. (2006), Fig. 2 / Matsuda; as fractions of the circle in open
    # implementations of the paper (0.05, 0.26, 0.22 of 360 degrees).
    widths = {name: tuple(w for _, w in t.sectors) for name, t in TEMPLATES.items()}
    assert widths["i"] == pytest.approx((0.05 * 360,))
    assert widths["V"] == pytest.approx((0.26 * 360,))
    assert widths["L"] == pytest.approx((0.05 * 360, 0.22 * 360))
    assert widths["I"] == pytest.approx((0.05 * 360, 0.05 * 360))
    assert widths["T"] == pytest.approx((180.0,))
    assert widths["Y"] == pytest.approx((0.26 * 360, 0.05 * 360))
    assert widths["X"] == pytest.approx((0.26 * 360, 0.26 * 360))
    assert widths["N"] == ()
    # L: a quarter-turn between the sector centres; I, Y, X: opposite.
    assert TEMPLATES["L"].sectors[1][0] - TEMPLATES["L"].sectors[0][0] == 90.0
    for name in "IYX":
        assert TEMPLATES[name].sectors[1][0] - TEMPLATES[name].sectors[0][0] == 180.0


def test_arc_outside_by_hand():
    t = TEMPLATES["i"]  # 18 degrees wide, centred on the rotation
    assert arc_outside([0.0, 9.0, 19.0, 350.0, 180.0], t, 0.0) == pytest.approx([0, 0, 10, 1, 171])
    assert arc_outside([100.0], t, 95.0) == pytest.approx([0.0])


@pytest.mark.parametrize("name", ["i", "V", "L", "I", "T", "Y", "X"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_best_rotation_beats_a_dense_scan(name, seed):
    # Reference: exhaustive scan of rotations on a 0.01 degree grid (independent of the kink argument).
    rng = np.random.default_rng(seed)
    hues = rng.uniform(0, 360, 7)
    w = rng.uniform(0.1, 1.0, 7)
    fit = fit_template(hues, w, TEMPLATES[name])
    grid = np.arange(0, 360, 0.01)
    scan = arc_outside(hues[None, :], TEMPLATES[name], grid[:, None]) @ w / w.sum()
    assert fit.distance <= scan.min() + 1e-9
    assert fit.distance >= scan.min() - 0.01  # the grid is at most 0.005 degrees off the optimum
    assert np.dot(w, arc_outside(hues, TEMPLATES[name], fit.rotation_deg)) / w.sum() == pytest.approx(fit.distance)


def test_complementary_pair_fits_I_and_analogous_fits_i():
    # Munsell 5R and 5BG are complements (Munsell, A Color Notation); two hues 180 degrees
    # apart fit template I exactly, which i and V cannot.
    fits = {n: fit_template([30.0, 210.0], [1.0, 1.0], TEMPLATES[n]) for n in "iVI"}
    assert fits["I"].distance == pytest.approx(0.0)
    assert fits["i"].distance > 50 and fits["V"].distance > 40
    assert fit_template([40.0, 52.0], [1, 1], TEMPLATES["i"]).distance == pytest.approx(0.0)


def test_best_template_on_palettes():
    # sRGB primaries through colorspacious: a red and a near-red are one hue family (i);
    # greys only give N.
    red = colour.srgb1_to_jab([[0.8, 0.1, 0.1], [0.8, 0.2, 0.1]])
    best, fits = best_template(red, [0.5, 0.5])
    assert best.name == "i" and best.distance == pytest.approx(0.0, abs=1.0)
    greys = colour.srgb1_to_jab([[0.5, 0.5, 0.5], [0.9, 0.9, 0.9]])
    assert best_template(greys, [0.7, 0.3])[0].name == "N"
    assert set(fits) == set("iVLITYX")
