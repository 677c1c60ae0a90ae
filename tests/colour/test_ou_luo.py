"""The Ou & Luo (2006) two-colour harmony model, term by term on hand-worked values."""

import math
import warnings

import numpy as np
import pytest

from harmony.colour import srgb1_to_jab, srgb1_to_xyz100
from harmony.colour.ou_luo import harmony_terms, jab_to_lab, two_colour_harmony
from harmony.rules import PairRules, load_rules

# Hand-worked pair: colour 1 = L*a*b* (50, 20, 0), hue 0; colour 2 = (60, 0, 30), hue 90.
# C1 = 20, C2 = 30, dC*ab = -10, dL = 10, dE^2 = 10^2 + 20^2 + 30^2 = 1400,
# dH*ab^2 = dE^2 - dL^2 - dC*ab^2 = 1400 - 100 - 100 = 1200 (metric hue difference, not 90 degrees),
# dC = sqrt(1200 + (10 / 1.46)^2) = sqrt(1246.913...) = 35.3116...
LAB1 = np.array([50.0, 20.0, 0.0])
LAB2 = np.array([60.0, 0.0, 30.0])


def test_chromatic_term_by_hand():
    delta_c = math.sqrt(1200.0 + (10.0 / 1.46) ** 2)
    assert delta_c == pytest.approx(35.3116, abs=1e-4)  # hand arithmetic
    h_c, _, _ = harmony_terms(LAB1, LAB2)
    assert h_c == pytest.approx(0.04 + 0.53 * math.tanh(0.8 - 0.045 * delta_c), abs=1e-12)
    # A hue-angle difference (90 degrees) in place of the metric dH*ab would give another value.
    wrong = math.sqrt(90.0**2 + (10.0 / 1.46) ** 2)
    assert abs(h_c - (0.04 + 0.53 * math.tanh(0.8 - 0.045 * wrong))) > 0.05
    # Worked on paper: 0.8 - 0.045 * 35.3117 = -0.78903; tanh(-0.78903) = -(e^1.57805 - 1) /
    # (e^1.57805 + 1) = -3.8458 / 5.8458 = -0.65786; 0.04 + 0.53 * -0.65786 = -0.30867.
    assert h_c == pytest.approx(-0.30866, abs=1e-4)


def test_metric_hue_difference_across_the_wrap():
    # Two colours of chroma 20 at hue 350 and hue 10: 20 degrees apart across 0, not 340.
    # CIE 15:2004: dH*ab = 2 sqrt(C1 C2) sin(dh / 2) = 2 * 20 * sin(10 deg) = 6.9459, with dC*ab = 0.
    # 0.8 - 0.045 * 6.9459 = 0.48743; tanh(0.48743) = 0.45218; H_C = 0.04 + 0.53 * 0.45218 = 0.27965.
    lab1 = [50.0, 20.0 * math.cos(math.radians(350.0)), 20.0 * math.sin(math.radians(350.0))]
    lab2 = [50.0, 20.0 * math.cos(math.radians(10.0)), 20.0 * math.sin(math.radians(10.0))]
    h_c, _, _ = harmony_terms(lab1, lab2)
    assert h_c == pytest.approx(0.27965, abs=1e-4)


def test_lightness_term_by_hand():
    _, h_l, _ = harmony_terms(LAB1, LAB2)
    h_lsum = 0.28 + 0.54 * math.tanh(-3.88 + 0.029 * 110.0)  # L1 + L2 = 110
    h_dl = 0.14 + 0.15 * math.tanh(-2.0 + 0.2 * 10.0)        # |L1 - L2| = 10: tanh(0) = 0
    assert h_dl == 0.14
    assert h_l == pytest.approx(h_lsum + h_dl, abs=1e-12)
    # Worked on paper: -3.88 + 3.19 = -0.69; tanh(-0.69) = -(e^1.38 - 1) / (e^1.38 + 1)
    # = -2.9749 / 4.9749 = -0.59798; H_Lsum = 0.28 - 0.54 * 0.59798 = -0.04291; H_L = 0.09709.
    assert h_l == pytest.approx(0.09709, abs=1e-4)


def test_hue_term_by_hand():
    _, _, h_h = harmony_terms(LAB1, LAB2)
    # colour 1: C = 20, h = 0; E_Y carries exp(9 - e^9), which is 0 to double precision
    e_c1 = 0.5 + 0.5 * math.tanh(-2.0 + 0.5 * 20.0)
    h_s1 = -0.08 - 0.14 * math.sin(math.radians(50.0)) - 0.07 * math.sin(math.radians(90.0))
    e_y1 = ((0.22 * 50.0 - 12.8) / 10.0) * math.exp(9.0 - math.exp(9.0))
    # colour 2: C = 30, h = 90; (90 - h)/10 = 0 so E_Y = (0.22*60 - 12.8)/10 * e^-1 = 0.04 / e
    e_c2 = 0.5 + 0.5 * math.tanh(-2.0 + 0.5 * 30.0)
    h_s2 = -0.08 - 0.14 * math.sin(math.radians(140.0)) - 0.07 * math.sin(math.radians(270.0))
    e_y2 = 0.04 / math.e
    assert h_s2 == pytest.approx(-0.01 - 0.14 * math.sin(math.radians(40.0)), abs=1e-12)
    expected = e_c1 * (h_s1 + e_y1) + e_c2 * (h_s2 + e_y2)
    assert h_h == pytest.approx(expected, abs=1e-12)
    # Worked on paper: E_C1 = E_C2 = 1 to 6 decimals (tanh 8, tanh 13);
    # H_S1 = -0.08 - 0.14 * 0.76604 - 0.07 = -0.25725; H_S2 = -0.08 - 0.14 * 0.64279 + 0.07 = -0.09999;
    # E_Y2 = 0.04 / 2.71828 = 0.014715; H_H = -0.25725 - 0.09999 + 0.01472 = -0.34252.
    assert h_h == pytest.approx(-0.34252, abs=1e-4)
    # CH = H_C + H_L + H_H = -0.30866 + 0.09709 - 0.34252 = -0.55409: not harmonious.
    assert two_colour_harmony(LAB1, LAB2) == pytest.approx(-0.55409, abs=2e-4)


def test_total_is_the_sum_and_symmetric():
    total = two_colour_harmony(LAB1, LAB2)
    assert total == pytest.approx(sum(harmony_terms(LAB1, LAB2)), abs=1e-15)
    assert total == pytest.approx(two_colour_harmony(LAB2, LAB1), abs=1e-15)


def test_equal_greys_by_hand():
    # L* = 50 greys: dC = 0, H_C = 0.04 + 0.53 tanh(0.8); H_Lsum = 0.28 + 0.54 tanh(-0.98);
    # H_dL = 0.14 + 0.15 tanh(-2); C = 0 so E_C = 0.5 + 0.5 tanh(-2) and h = 0 for each.
    e_c = 0.5 + 0.5 * math.tanh(-2.0)
    h_s = -0.08 - 0.14 * math.sin(math.radians(50.0)) - 0.07
    expected = (0.04 + 0.53 * math.tanh(0.8)) + (0.28 + 0.54 * math.tanh(-0.98)) \
        + (0.14 + 0.15 * math.tanh(-2.0)) + 2 * e_c * h_s
    assert two_colour_harmony([50.0, 0, 0], [50.0, 0, 0]) == pytest.approx(expected, abs=1e-12)
    assert expected == pytest.approx(0.2514, abs=1e-4)  # hand arithmetic


def test_broadcasting():
    grid = two_colour_harmony(np.array([LAB1, LAB2])[:, None, :], np.array([LAB2, LAB1, LAB1])[None, :, :])
    assert grid.shape == (2, 3)
    assert grid[0, 0] == pytest.approx(two_colour_harmony(LAB1, LAB2))


def test_cielab_conversion_against_colour_science():
    # Gold: colour-science's XYZ_to_Lab (CIE 15:2004 CIELAB). colorspacious's "D65" white is the
    # tabulated XYZ (95.047, 100, 108.883); colour-science derives its D65 from xy (0.3127, 0.3290),
    # 0.01 L*a*b* units away, so the same tabulated white is given to both.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    rng = np.random.default_rng(3)
    srgb = rng.uniform(0.05, 0.95, size=(20, 3))
    d65 = colour.XYZ_to_xy(np.array([0.95047, 1.0, 1.08883]))
    expected = colour.XYZ_to_Lab(srgb1_to_xyz100(srgb) / 100.0, d65)
    np.testing.assert_allclose(jab_to_lab(srgb1_to_jab(srgb)), expected, atol=1e-6)


def test_rule_kind_in_a_kernel():
    rs = load_rules()
    rule = rs.rules["ou_luo"]
    base = rs.default_rules()
    pr = PairRules("t", ("a", "b"), ((rule, 2.0),), base.neutral_threshold, base.neutral_fade, 0.0, 1.0)
    jab = srgb1_to_jab(np.array([[0.7, 0.2, 0.1], [0.1, 0.4, 0.5], [0.9, 0.9, 0.85]]))
    lab = jab_to_lab(jab)
    expected = 2.0 * two_colour_harmony(lab[:, None, :], lab[None, :, :])
    np.testing.assert_allclose(pr.kernel(jab, jab), expected, atol=1e-9)
