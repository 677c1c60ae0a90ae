import numpy as np
import pytest

from harmony import colour
from harmony.photo.palette import Palette
from harmony.report.safety import (
    CAUTION_NOTE,
    LARGE_AREA_MIN_LRV_DIFFERENCE,
    LARGE_AREA_MIN_LUX,
    MIN_LRV_DIFFERENCE,
    contrast_caution,
    is_floor_covering,
    required_difference,
    stands_on_floor,
    surface_lrv,
)


def _flat(srgb1):
    return Palette(jab=[colour.srgb1_to_jab(srgb1)], weights=[1.0])


def _srgb_decode(v):
    # IEC 61966-2-1:1999, section 5.2: the sRGB transfer function, written out here independently.
    v = np.asarray(v, dtype=float)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


@pytest.mark.parametrize(
    "srgb1, expected",
    [
        # Gold: IEC 61966-2-1: black has Y = 0, the white D65 has Y = 1 (LRV 100).
        ([0.0, 0.0, 0.0], 0.0),
        ([1.0, 1.0, 1.0], 100.0),
        # Gold: IEC 61966-2-1 mid grey 0.5 decodes to ((0.5 + 0.055) / 1.055) ** 2.4 = 0.21404.
        ([0.5, 0.5, 0.5], 21.404),
        # Gold: 8-bit 119 decodes to 0.1845, close to the 18 % photographic grey card.
        ([119 / 255] * 3, 18.447),
    ],
)
def test_surface_lrv_of_greys_follows_iec_61966_2_1(srgb1, expected):
    # The photo LRV goes through CAM02-UCS and back; the round trip must not move Y.
    assert surface_lrv(_flat(srgb1)) == pytest.approx(expected, abs=0.02)


def test_surface_lrv_agrees_with_colour_science_on_chromatic_colours():
    colour_science = pytest.importorskip("colour")
    rng = np.random.default_rng(7)
    srgb = rng.uniform(0.05, 0.95, size=(12, 3))
    # Gold: colour-science's independent sRGB -> XYZ (IEC 61966-2-1 matrix and transfer function).
    xyz = colour_science.sRGB_to_XYZ(srgb)
    for rgb, ref in zip(srgb, xyz[:, 1] * 100.0):
        assert surface_lrv(_flat(rgb)) == pytest.approx(ref, abs=0.05)


def test_surface_lrv_averages_reflectance_not_lightness():
    # Half black, half white reflects 50 % of the light: LRV 50 (Y adds over area), not the LRV of
    # the mid-lightness grey.
    pal = Palette(jab=colour.srgb1_to_jab([[0, 0, 0], [1, 1, 1]]), weights=[0.5, 0.5])
    assert surface_lrv(pal) == pytest.approx(50.0, abs=0.05)
    grey_y = 100.0 * _srgb_decode(0.5)
    assert surface_lrv(pal) > grey_y + 20


def test_thresholds_are_those_of_bs_8300_2_annex_b():
    # BS 8300-2:2018, Annex B: 30 points between adjacent surfaces; 20 for large areas > 200 lux.
    assert MIN_LRV_DIFFERENCE == 30.0
    assert LARGE_AREA_MIN_LRV_DIFFERENCE == 20.0
    assert LARGE_AREA_MIN_LUX == 200.0
    assert required_difference() == 30.0
    assert required_difference(large_area=True) == 30.0  # no illuminance known: no allowance
    assert required_difference(large_area=True, illuminance_lux=200.0) == 30.0  # "more than 200"
    assert required_difference(large_area=True, illuminance_lux=350.0) == 20.0
    assert required_difference(large_area=False, illuminance_lux=500.0) == 30.0


def test_contrast_caution_boundaries():
    assert contrast_caution("rug", 40.0, "sofa", 70.0) is None  # exactly 30: enough
    c = contrast_caution("rug", 40.0, "sofa", 69.0)
    assert c is not None and c.difference == pytest.approx(29.0) and c.required == 30.0
    assert "rug" in c.message and "sofa" in c.message and "29" in c.message
    assert contrast_caution("rug", 40.0, "floor", 65.0, large_area=True, illuminance_lux=300) is None
    assert contrast_caution("rug", 40.0, "floor", 55.0, large_area=True, illuminance_lux=300) is not None


def test_contrast_caution_rejects_impossible_lrv():
    with pytest.raises(ValueError, match="LRV of rug-7 must lie in"):
        contrast_caution("rug-7", 120.0, "sofa", 30.0)
    with pytest.raises(ValueError, match="LRV of sofa must lie in"):
        contrast_caution("rug", 12.0, "sofa", float("nan"))
    with pytest.raises(ValueError, match="illuminance_lux"):
        required_difference(True, -5)


def test_caution_note_defers_to_codes_and_measurement():
    for phrase in ("BS 8300-2:2018", "30 points", "200 lux", "BS 8493", "approximate", "local codes"):
        assert phrase in CAUTION_NOTE


@pytest.mark.parametrize(
    "category, covering, on_floor",
    [
        ("Rug", True, False),
        ("runner rugs", True, False),
        ("door-mat", True, False),
        ("sofa", False, True),
        ("Coffee Table", False, True),
        ("floor lamp", False, True),
        ("cushion", False, False),
        ("wall mirror", False, False),
    ],
)
def test_category_roles(category, covering, on_floor):
    assert is_floor_covering(category) is covering
    assert stands_on_floor(category) is on_floor


def test_close_band_is_the_floor_lrvs_within_the_required_difference():
    # BS 8300-2:2018 Annex B: a floor must differ from the rug by at least 30 LRV points.
    from harmony.report.safety import close_band

    assert close_band(45.0) == (15.0, 75.0)
    assert close_band(10.0) == (0.0, 40.0)  # clipped to the 0-100 LRV scale (BS 8493)
    assert close_band(90.0, required=20.0) == (70.0, 100.0)
    with pytest.raises(ValueError, match="LRV must lie in"):
        close_band(101.0)
    with pytest.raises(ValueError, match="required difference must be positive"):
        close_band(50.0, required=0.0)


def test_message_never_rounds_a_shortfall_up_to_the_figure():
    c = contrast_caution("rug", 60.0, "floor", 30.4, large_area=True)
    assert c is not None and c.difference == pytest.approx(29.6)
    assert "differ by 29.6 points" in c.message and "at least 30" in c.message
    assert "differ by 12 points" in contrast_caution("rug", 40.0, "sofa", 28.0).message
