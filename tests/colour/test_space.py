"""Colour core against independent references."""

import warnings

import numpy as np
import pytest

from harmony import colour as hc


@pytest.fixture(scope="module")
def colour_science():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    return colour


def test_cam02ucs_agrees_with_colour_science(colour_science):
    # Gold: colour-science's independent CIECAM02 / CAM02-UCS (Luo, Cui & Li 2006), same sRGB
    # viewing conditions. colour-science 0.4 takes XYZ and the white in [0, 1]. The residual
    # (about 0.011 max here) comes from the two libraries' different D65 white constants and
    # rounding; 0.015 is far below a just-noticeable difference (about 1.7 in CAM02-UCS, see
    # test_palette.test_jnd_constant_against_cielab).
    colour = colour_science
    rng = np.random.default_rng(20261201)
    srgb1 = rng.random((400, 3))
    xyz1 = colour.sRGB_to_XYZ(srgb1)
    white = colour.xy_to_XYZ(colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"])
    ref = colour.XYZ_to_CAM02UCS(
        xyz1,
        XYZ_w=white,
        L_A=64 / np.pi * 0.2,
        Y_b=20,
        surround=colour.VIEWING_CONDITIONS_CIECAM02["Average"],
    )
    ours = hc.srgb1_to_jab(srgb1)
    assert np.max(hc.delta_e(ours, ref)) < 0.015


def test_srgb_transfer_function_matches_iec_61966_2_1():
    # Gold: IEC 61966-2-1 piecewise decoding, linear below 0.04045, ((V + 0.055)/1.055)^2.4 above;
    # sRGB primaries matrix row for Y: 0.2126 R + 0.7152 G + 0.0722 B.
    v = np.linspace(0, 1, 101)
    lin = np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)
    grey = np.stack([v, v, v], axis=-1)
    assert np.allclose(hc.lrv(grey, space="srgb1"), 100 * lin, atol=0.02)
    red = hc.lrv([1.0, 0.0, 0.0], space="srgb1")
    assert red == pytest.approx(21.26, abs=0.01)


def test_white_is_slightly_colourful_under_srgb_viewing_conditions():
    # DESIGN note (colorspacious, incomplete adaptation): sRGB white has M' of about 2.2.
    white = hc.srgb1_to_jab([1.0, 1.0, 1.0])
    assert hc.lightness(white) == pytest.approx(100.0, abs=0.01)
    assert 2.0 < hc.colourfulness(white) < 2.5


def test_hue_angle_range_and_wrap():
    jab = np.array([[50, 1, 0], [50, 0, 1], [50, -1, 0], [50, 0, -1], [50, 1, -1e-12], [50, 0.0, -0.0]])
    h = hc.hue_deg(jab)
    assert np.all((h >= 0) & (h < 360))
    assert h[:4] == pytest.approx([0, 90, 180, 270])


def test_round_trip_and_vectorised_shapes():
    rng = np.random.default_rng(1)
    srgb1 = rng.random((4, 5, 3))
    jab = hc.srgb1_to_jab(srgb1)
    assert jab.shape == (4, 5, 3)
    assert np.allclose(hc.jab_to_srgb1(jab), srgb1, atol=1e-6)
    assert hc.delta_e(jab, jab[:1]).shape == (4, 5)


def test_shape_errors_name_the_shape():
    with pytest.raises(ValueError, match=r"\(4,\)"):
        hc.srgb1_to_jab([1, 2, 3, 4])


@pytest.mark.parametrize("code", ["#12345", "xyz", "#gg0000"])
def test_bad_hex_codes(code):
    with pytest.raises(ValueError, match="rrggbb"):
        hc.hex_to_srgb1(code)


def test_hex_round_trip():
    assert hc.srgb1_to_hex(hc.hex_to_srgb1("#a1b2c3")) == "#a1b2c3"


def test_zero_lightness_is_black_and_just_above_it_is_converted():
    # J' = 0 is no light: black in sRGB and XYZ, without colorspacious's division by J = 0
    # (it warns and gives nan there). Just above 0 the conversion runs as usual: near black.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        dark = np.array([[0.0, 0.0, 0.0], [0.0, 5.0, -5.0], [-0.0, 1.0, 1.0]])
        assert np.array_equal(hc.jab_to_srgb1(dark), np.zeros((3, 3)))
        assert np.array_equal(hc.jab_to_xyz100(dark[1]), np.zeros(3))
        assert hc.jab_to_hex(dark[1]) == "#000000"
        near = hc.jab_to_xyz100([0.01, 0.0, 0.0])
        assert np.all(near > 0) and np.all(near < 1e-4)
        mixed = hc.jab_to_srgb1([[0.0, 3.0, 3.0], [100.0, -1.91, -1.15]])
        assert np.array_equal(mixed[0], np.zeros(3)) and np.allclose(mixed[1], 1.0, atol=1e-3)
