"""Embedded ICC profiles really change the decoded colours, and in the right way.

The profiles are built from scratch in ``icc_profiles`` (ICC.1:2001-04 v2 matrix/TRC display
profiles); their colorants come from colour-science's sRGB colourspace (IEC 61966-2-1 primaries,
D65 white), adapted to the ICC's D50 PCS illuminant with the Bradford transform, computed here
rather than typed in from memory. The expected decoded colours are colour-science's own
conversion of the same primaries to sRGB, an implementation independent of LittleCMS (which
Pillow's ImageCms wraps) and of harmony.
"""

import io

import colour
import numpy as np
import pytest
from icc_profiles import ICC_D50_XYZ, matrix_trc_display_profile, s15fixed16, u8fixed8
from PIL import Image, ImageCms

from harmony.photo.image import decode_image, load_image

#: The tone curves store gamma 2.2 as u8Fixed8Number, i.e. 563/256 = 2.19921875.
GAMMA = 563 / 256

#: Largest allowed gap, in 8-bit codes, between harmony's decoded pixel and colour-science's
#: float conversion: half a code for rounding plus the error of LittleCMS's 8-bit pipeline
#: (measured at most 0.66 codes on GRID while writing this test).
CODE_TOLERANCE = 1.0

_SRGB = colour.RGB_COLOURSPACES["sRGB"]


def _srgb_colorants_d50():
    """gold: sRGB's RGB->XYZ matrix (colour-science, IEC 61966-2-1) Bradford-adapted D65 -> D50."""
    d65_xyz = colour.xy_to_XYZ(_SRGB.whitepoint)
    cat = colour.adaptation.matrix_chromatic_adaptation_VonKries(
        d65_xyz, np.array(ICC_D50_XYZ), transform="Bradford"
    )
    return cat @ _SRGB.matrix_RGB_to_XYZ


def _swap_red_blue(colorants):
    return np.asarray(colorants)[:, [2, 1, 0]]


def _grid():
    """Every combination of a few levels per channel: darks (where a 2.2 power law and the sRGB
    curve differ most), mid-tones and the extremes."""
    levels = [0, 5, 10, 16, 32, 64, 96, 128, 160, 200, 230, 255]
    rgb = np.stack(np.meshgrid(levels, levels, levels, indexing="ij"), axis=-1)
    return rgb.reshape(-1, 3).astype(np.uint8)


GRID = _grid()  # 1728 colours


def _image_bytes(srgb8, icc, fmt="PNG", shape=(36, 48)):
    img = Image.fromarray(np.asarray(srgb8, np.uint8).reshape(*shape, 3), "RGB")
    buf = io.BytesIO()
    img.save(buf, fmt, icc_profile=icc, **({"quality": 95} if fmt == "JPEG" else {}))
    return buf.getvalue()


def _colour_science_decode(device8, colorants):
    """gold: colour-science's conversion of device RGB under a matrix/power-law display whose
    D50 colorants are ``colorants``, to sRGB (Bradford D50 -> D65), in 8-bit codes (float)."""
    colorants = np.asarray(colorants, dtype=float)
    primaries = colour.XYZ_to_xy(colorants.T)
    display = colour.RGB_Colourspace(
        "display under test",
        primaries,
        colour.XYZ_to_xy(np.array(ICC_D50_XYZ)),
        matrix_RGB_to_XYZ=colorants,
        matrix_XYZ_to_RGB=np.linalg.inv(colorants),
        cctf_encoding=lambda v: np.power(np.clip(v, 0, None), 1 / GAMMA),
        cctf_decoding=lambda v: np.power(np.clip(v, 0, None), GAMMA),
    )
    srgb1 = colour.RGB_to_RGB(
        np.asarray(device8, dtype=float) / 255.0,
        display,
        _SRGB,
        chromatic_adaptation_transform="Bradford",
        apply_cctf_decoding=True,
        apply_cctf_encoding=True,
    )
    # Both displays share sRGB's gamut, so the clip only trims floating-point noise at 0 and 1.
    return 255.0 * np.clip(srgb1, 0.0, 1.0)


@pytest.fixture(scope="module")
def srgb_like_icc():
    return matrix_trc_display_profile(_srgb_colorants_d50(), GAMMA, "Gamma 2.2 display, sRGB primaries")


@pytest.fixture(scope="module")
def swapped_icc():
    return matrix_trc_display_profile(
        _swap_red_blue(_srgb_colorants_d50()), GAMMA, "Gamma 2.2 display, red and blue exchanged"
    )


def test_s15fixed16_encoding_examples():
    # gold: the examples table of the s15Fixed16Number clause (ICC.1:2010 4.6; the same table is
    # in ICC.1:2001-04), written down from memory of the specification.
    assert s15fixed16(-32768.0) == bytes.fromhex("80000000")
    assert s15fixed16(0.0) == bytes.fromhex("00000000")
    assert s15fixed16(1.0) == bytes.fromhex("00010000")
    assert s15fixed16(32767 + 65535 / 65536) == bytes.fromhex("7fffffff")
    # gold: the D50 PCS illuminant as ICC headers store it, X = 0x0000F6D6, Z = 0x0000D32D (from
    # memory; they equal round(0.9642 * 65536) and round(0.8249 * 65536)).
    assert s15fixed16(0.9642) == bytes.fromhex("0000f6d6")
    assert s15fixed16(0.8249) == bytes.fromhex("0000d32d")
    assert u8fixed8(2.2) == bytes.fromhex("0233")  # 563 / 256
    with pytest.raises(ValueError, match="s15Fixed16Number range"):
        s15fixed16(32768.0)
    with pytest.raises(ValueError, match="u8Fixed8Number range"):
        u8fixed8(-1.0)


def test_profile_reads_back_through_littlecms(srgb_like_icc):
    # gold: LittleCMS (through ImageCms) parses the bytes and reports the fields we wrote.
    assert srgb_like_icc[36:40] == b"acsp"
    assert int.from_bytes(srgb_like_icc[:4], "big") == len(srgb_like_icc)
    assert len(srgb_like_icc) % 4 == 0
    prof = ImageCms.ImageCmsProfile(io.BytesIO(srgb_like_icc)).profile
    assert prof.device_class == "mntr"
    assert prof.xcolor_space == "RGB "
    assert prof.connection_space == "XYZ "
    assert prof.version == pytest.approx(2.4)
    assert prof.is_matrix_shaper
    assert prof.profile_description == "Gamma 2.2 display, sRGB primaries"
    assert prof.copyright == "No copyright, test data"
    colorants = _srgb_colorants_d50()
    for i, tag in enumerate(("red_colorant", "green_colorant", "blue_colorant")):
        np.testing.assert_allclose(getattr(prof, tag)[0], colorants[:, i], atol=2**-16)
    np.testing.assert_allclose(prof.media_white_point[0], ICC_D50_XYZ, atol=1e-4)
    # gold: the red colorant of the common sRGB ICC profiles, (0.4361, 0.2225, 0.0139) (value from
    # memory), agrees with the colour-science derivation to the four digits quoted.
    np.testing.assert_allclose(prof.red_colorant[0], (0.4361, 0.2225, 0.0139), atol=6e-5)


def test_bad_colorant_shape():
    with pytest.raises(ValueError, match=r"shape \(3, 3\), got \(3,\)"):
        matrix_trc_display_profile([1.0, 1.0, 1.0], GAMMA, "bad")


def test_srgb_primaries_gamma22_profile_decodes_close_to_untagged(srgb_like_icc):
    untagged = decode_image(_image_bytes(GRID, None)).srgb8.reshape(-1, 3).astype(float)
    np.testing.assert_array_equal(untagged, GRID)  # untagged pixels are taken as sRGB as they are
    tagged = decode_image(_image_bytes(GRID, srgb_like_icc)).srgb8.reshape(-1, 3).astype(float)

    # Nearly the same colours: sRGB's curve is not a pure 2.2 power law. colour-science puts the
    # largest gap over all 8-bit codes at 8.5 codes (code 16), and 1.5 codes from code 128 up;
    # allow half a code of rounding on top of that.
    assert np.abs(tagged - GRID).max() <= 9
    bright = (GRID >= 128).all(axis=1)
    assert np.abs(tagged[bright] - GRID[bright]).max() <= 2
    # Neutral greys stay neutral (the colorants sum to the D50 white).
    grey = (GRID == GRID[:, :1]).all(axis=1)
    assert np.ptp(tagged[grey], axis=1).max() <= 1

    # And the conversion was really done: the dark codes follow the 2.2 power law, not sRGB.
    expected = _colour_science_decode(GRID, _srgb_colorants_d50())
    assert np.abs(tagged - expected).max() <= CODE_TOLERANCE
    assert np.abs(untagged - expected).max() > 5  # skipping the profile would fail the line above


def test_red_blue_swapped_profile_swaps_red_and_blue(swapped_icc):
    pure = np.array([[255, 0, 0], [0, 0, 255], [0, 255, 0], [255, 255, 255], [0, 0, 0]], np.uint8)
    out = decode_image(_image_bytes(pure, swapped_icc, shape=(1, 5))).srgb8.reshape(-1, 3).astype(int)
    # gold: with the red and blue colorants exchanged, device red is sRGB's blue primary and
    # device blue is sRGB's red; green, white and black are unchanged.
    expected = np.array([[0, 0, 255], [255, 0, 0], [0, 255, 0], [255, 255, 255], [0, 0, 0]])
    assert np.abs(out - expected).max() <= 1


@pytest.mark.parametrize("use_path", [False, True])
def test_red_blue_swapped_profile_matches_colour_science(swapped_icc, tmp_path, use_path):
    data = _image_bytes(GRID, swapped_icc)
    if use_path:
        path = tmp_path / "swapped.png"
        path.write_bytes(data)
        decoded = load_image(path)
    else:
        decoded = decode_image(data)
    tagged = decoded.srgb8.reshape(-1, 3).astype(float)
    expected = _colour_science_decode(GRID, _swap_red_blue(_srgb_colorants_d50()))
    assert np.abs(tagged - expected).max() <= CODE_TOLERANCE
    # Sanity of the reference itself: exchanging the colorants exchanges the channels, so it
    # equals the sRGB-primaries reference applied to the colours with red and blue exchanged.
    same = _colour_science_decode(GRID[:, ::-1], _srgb_colorants_d50())
    np.testing.assert_allclose(expected, same, atol=1e-6)


def test_swapped_profile_in_jpeg(swapped_icc):
    rng = np.random.default_rng(20240611)
    # Flat 8x8-aligned patches survive JPEG at quality 95 within a few codes (common practice),
    # so a swap of red and blue (a change of up to 255 codes) stands out clearly.
    colours = rng.integers(0, 256, size=(12, 3)).astype(np.uint8)
    patches = np.repeat(np.repeat(colours.reshape(3, 4, 3), 16, axis=0), 16, axis=1)
    decoded = decode_image(_image_bytes(patches, swapped_icc, "JPEG", shape=(48, 64)), max_side=None)
    centres = decoded.srgb8[8::16, 8::16].reshape(-1, 3).astype(float)
    expected = _colour_science_decode(colours, _swap_red_blue(_srgb_colorants_d50()))
    assert np.abs(centres - expected).max() <= 6
