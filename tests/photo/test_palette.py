import subprocess
import sys

import numpy as np
import pytest
from reference_data import colorchecker_srgb1

from harmony import colour
from harmony.demo.synthetic import colour_chart, encode_jpeg, encode_png, studio_shot
from harmony.errors import HarmonyError, ImageError
from harmony.photo.palette import (
    JND_DELTA_E,
    Palette,
    PaletteSettings,
    extract_palette,
    weighted_kmeans,
)


@pytest.fixture(scope="module")
def shot():
    return studio_shot(np.random.default_rng(1))


@pytest.mark.parametrize("encode", [encode_png, encode_jpeg])
def test_colorchecker_recovered_at_k24(encode):
    # gold: ColorChecker sRGB values from colour-science (reference_data.colorchecker_srgb1).
    _, srgb = colorchecker_srgb1()
    pal = extract_palette(encode(colour_chart(srgb)), PaletteSettings(colours=24))
    ref = colour.srgb1_to_jab(srgb)
    d = colour.delta_e(ref[:, None, :], pal.jab[None, :, :])
    assert len(pal) == 24 and not pal.scene
    # JPEG (quality 90, 4:2:0 chroma) shifts small patches by up to about 2 ΔE; PNG is lossless.
    assert d.min(axis=1).max() < 3.0
    share = np.bincount(d.argmin(axis=0), weights=pal.weights, minlength=24)
    assert np.all(np.abs(share - 1 / 24) < 0.025)


def test_studio_shot_colours_and_shares(shot):
    pal = extract_palette(encode_jpeg(shot.srgb8))
    painted = colour.srgb1_to_jab(shot.colours_srgb1)
    backdrop = colour.srgb1_to_jab(shot.background_srgb1)
    shadow = colour.srgb1_to_jab(shot.background_srgb1 * (1 - np.linspace(0.02, 0.22, 6))[:, None])
    refs = np.vstack([painted, backdrop[None], shadow])
    nearest = colour.delta_e(pal.jab[:, None, :], refs[None]).argmin(axis=1)
    # No weight on the backdrop or the shadow: every colour is nearest to a painted one.
    assert np.all(nearest < len(painted))
    d = colour.delta_e(painted[:, None, :], pal.jab[None]).min(axis=1)
    assert d.max() < 3.0
    share = np.bincount(nearest, weights=pal.weights, minlength=len(painted))
    assert np.allclose(share, shot.shares, atol=0.03)
    # The near-white pillow inside the product is kept (about 9 % of the product).
    assert share[2] > 0.06
    assert not pal.scene and pal.confidence >= 0.8
    assert pal.background_share > 0.6
    assert colour.delta_e(pal.background_jab, backdrop) < 2.0


def test_palette_invariants(shot):
    pal = extract_palette(encode_jpeg(shot.srgb8), PaletteSettings(colours=10))
    assert np.isclose(pal.weights.sum(), 1.0)
    assert np.all(np.diff(pal.weights) <= 0)
    assert np.all(pal.weights >= 0.01 - 1e-12)
    d = colour.delta_e(pal.jab[:, None], pal.jab[None])
    assert np.all(d[np.triu_indices(len(pal), 1)] >= PaletteSettings().merge_delta_e)
    assert Palette.from_json(pal.to_json()).to_json() == pal.to_json()


def test_deterministic_in_process_and_across_processes(shot, tmp_path):
    data = encode_jpeg(shot.srgb8)
    path = tmp_path / "shot.jpg"
    path.write_bytes(data)
    a = extract_palette(path).to_json()
    assert extract_palette(path).to_json() == a
    code = "import sys; from harmony.photo.palette import extract_palette; print(extract_palette(sys.argv[1]).to_json())"
    out = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == a


def test_merge_and_specks():
    # Two halves ΔE about 1 apart become one colour; a 0.3 % speck is dropped.
    img = np.full((120, 120, 3), 245, np.uint8)
    img[20:100, 20:60] = (120, 60, 40)
    img[20:100, 60:100] = (121, 61, 41)
    img[58:60, 88:90] = (20, 200, 20)
    pal = extract_palette(encode_png(img), PaletteSettings(colours=5))
    assert len(pal) == 1
    assert colour.delta_e(pal.jab[0], colour.srgb1_to_jab(np.array([120.5, 60.5, 40.5]) / 255)) < 1.0


def test_weighted_kmeans_matches_scikit_learn():
    # gold: scikit-learn's KMeans with sample_weight on well-separated weighted blobs.
    from sklearn.cluster import KMeans

    rng = np.random.default_rng(5)
    centres = np.array([[20.0, 0, 0], [50, 20, -10], [80, -15, 25], [60, 0, 30]])
    pts = np.vstack([c + rng.normal(0, 1.5, (60, 3)) for c in centres])
    w = rng.uniform(0.5, 3.0, len(pts))
    ours, _ = weighted_kmeans(pts, w, 4, np.random.default_rng(0))
    ref = KMeans(4, n_init=4, random_state=0).fit(pts, sample_weight=w).cluster_centers_
    d = np.sqrt(((ours[:, None] - ref[None]) ** 2).sum(-1))
    assert np.allclose(d.min(axis=1), 0.0, atol=1e-9)


def test_scene_photo_low_confidence():
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import skimage.data
    pal = extract_palette(encode_png(skimage.data.astronaut()))
    assert pal.scene and pal.confidence < 0.5 and pal.background_jab is None


def test_settings_validation_and_key():
    assert PaletteSettings().key == PaletteSettings().key
    assert PaletteSettings(colours=5).key != PaletteSettings().key
    with pytest.raises(HarmonyError, match="colours: must be an integer from 1 to 64, got 0"):
        PaletteSettings(colours=0)
    with pytest.raises(HarmonyError, match="levels: must be a power of two"):
        PaletteSettings(levels=30)
    with pytest.raises(HarmonyError, match=r"min_share: must lie in \[0, 0.5\)"):
        PaletteSettings(min_share=0.7)


def test_bad_inputs(tmp_path):
    with pytest.raises(ImageError, match=r"missing\.jpg: no such file"):
        extract_palette(tmp_path / "missing.jpg")
    (tmp_path / "t.png").write_bytes(b"\x89PNG but not really")
    with pytest.raises(ImageError, match=r"t\.png: not an image"):
        extract_palette(tmp_path / "t.png")
    blank = tmp_path / "blank.png"
    blank.write_bytes(encode_png(np.full((64, 64, 3), 240, np.uint8)))
    with pytest.raises(ImageError, match=r"blank\.png: nothing left after removing the background"):
        extract_palette(blank)
    with pytest.raises(ImageError, match=r"<bytes>: image is 64x64 = 4096 pixels, over the limit of 100"):
        extract_palette(encode_png(np.zeros((64, 64, 3), np.uint8)), PaletteSettings(max_pixels=100))
    with pytest.raises(ImageError, match="expected a file path or bytes"):
        extract_palette(12)


@pytest.mark.parametrize("step, merged", [(3, True), (4, True), (6, False), (8, False)])
def test_merge_threshold_is_the_jnd(step, merged):
    # Two flat halves `step` sRGB levels apart: ΔE 1.2 and 1.7 (under JND_DELTA_E = 2.3) become
    # one colour, ΔE 2.5 and 3.3 stay two.
    a = np.array([120, 60, 40])
    b = a + step
    d = colour.delta_e(colour.srgb1_to_jab(a / 255), colour.srgb1_to_jab(b / 255))
    assert (d < JND_DELTA_E) == merged
    img = np.full((120, 120, 3), 245, np.uint8)
    img[20:100, 20:60] = a
    img[20:100, 60:100] = b
    pal = extract_palette(encode_png(img), PaletteSettings(colours=5))
    assert len(pal) == (1 if merged else 2)


def test_jnd_constant_against_cielab():
    # gold: colour-science's CIELAB (CIE 15:2004) and the CIELAB JND of 2.3 (Mahy, Van Eycken &
    # Oosterlinck 1994, value from memory). Random steps of ΔE*ab = 2.3 from mid-gamut sRGB
    # colours, measured in CAM02-UCS: JND_DELTA_E must be at least that step (the merge never
    # keeps apart colours a viewer cannot tell apart) and at most 1.5 times it.
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour as cs
    rng = np.random.default_rng(3)
    srgb = rng.uniform(0.1, 0.9, (500, 3))
    d65 = cs.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"]
    lab = cs.XYZ_to_Lab(cs.sRGB_to_XYZ(srgb), d65)
    step = rng.normal(size=(500, 3))
    step *= 2.3 / np.linalg.norm(step, axis=1, keepdims=True)
    moved = cs.XYZ_to_sRGB(cs.Lab_to_XYZ(lab + step, d65))
    ucs_step = np.median(colour.delta_e(colour.srgb1_to_jab(srgb), colour.srgb1_to_jab(moved)))
    assert 1.0 <= JND_DELTA_E / ucs_step <= 1.5


def test_textured_single_colour_product():
    # A woven fabric of one blue: light and dark threads (a 2-pixel check), sensor noise and a
    # gentle shading, on an off-white backdrop (invented test picture). Its palette is a run of
    # neighbouring shades: all of the same hue, inside the painted lightness range, none closer
    # than the JND to another, and together they average to the painted mean.
    rng = np.random.default_rng(8)
    yy, xx = np.mgrid[0:150, 0:180]
    factor = 0.88 + 0.12 * ((xx // 2 + yy // 2) % 2) + 0.1 * (yy / 150) + rng.normal(0, 0.03, yy.shape)
    fabric = np.clip(np.array([0.33, 0.41, 0.55]) * factor[..., None], 0.0, 1.0)
    img = np.full((240, 240, 3), 244, np.uint8)
    img[45:195, 30:210] = np.rint(fabric * 255).astype(np.uint8)
    pal = extract_palette(encode_jpeg(img))
    painted = colour.srgb1_to_jab(fabric.reshape(-1, 3))
    lo, hi = np.percentile(painted[:, 0], [1, 99])
    assert len(pal) >= 2
    assert np.all((pal.jab[:, 0] > lo) & (pal.jab[:, 0] < hi))
    hue = colour.hue_deg(pal.jab)
    assert np.ptp(hue) < 3.0 and abs(hue.mean() - colour.hue_deg(painted.mean(axis=0))) < 3.0
    d = colour.delta_e(pal.jab[:, None], pal.jab[None])
    assert np.all(d[np.triu_indices(len(pal), 1)] >= JND_DELTA_E)
    mean = pal.weights @ pal.jab
    assert colour.delta_e(mean, painted.mean(axis=0)) < 1.0


# CIECAM02 hue angles of the unique hues (red, yellow, green, blue), from the hue-quadrature table
# of CIE 159:2004 (values from memory). CAM02-UCS a', b' share CIECAM02's hue angle.
UNIQUE_HUES = {"red": 20.14, "yellow": 90.0, "green": 164.25, "blue": 237.53}


def _nearest_unique_hue(h):
    return min(UNIQUE_HUES, key=lambda k: abs((h - UNIQUE_HUES[k] + 180.0) % 360.0 - 180.0))


def test_full_bleed_fabric_gives_a_red_palette():
    from test_mask import red_fabric

    pal = extract_palette(encode_jpeg(red_fabric(np.random.default_rng(5))))
    assert not pal.scene and pal.background_jab is None and pal.background_share == 0.0
    assert pal.confidence == 0.6
    assert all(_nearest_unique_hue(h) == "red" for h in colour.hue_deg(pal.jab))
    assert np.all(colour.colourfulness(pal.jab) > 20)


def test_flat_frames(tmp_path):
    # An empty off-white backdrop is still an error; a flat mid grey is a grey material.
    blank = tmp_path / "offwhite.png"
    blank.write_bytes(encode_png(np.full((64, 64, 3), (242, 240, 236), np.uint8)))
    with pytest.raises(ImageError, match=r"offwhite\.png: nothing left after removing the background"):
        extract_palette(blank)
    grey = extract_palette(encode_png(np.full((64, 64, 3), 128, np.uint8)))
    assert grey.hex == ["#808080"] and grey.confidence == 0.6 and grey.background_jab is None


def test_studio_master_over_the_decoded_cap_gives_a_palette():
    # A 9000x6000 (54 MP) studio master: JPEG draft mode decodes it at 1/8 scale (1125x750).
    import io

    from PIL import Image, ImageDraw

    im = Image.new("RGB", (9000, 6000), (244, 243, 240))
    ImageDraw.Draw(im).rectangle([3000, 1500, 6000, 4500], fill=(180, 40, 40))
    buf = io.BytesIO()
    im.save(buf, "JPEG", quality=20)
    del im
    data = buf.getvalue()
    pal = extract_palette(data)
    assert (pal.width, pal.height) == (9000, 6000) and not pal.scene
    assert len(pal) == 1 and _nearest_unique_hue(colour.hue_deg(pal.jab[0])) == "red"
    assert pal.background_share == pytest.approx(1 - (3001 * 3001) / 54e6, abs=0.01)


def test_method_version_in_key():
    assert PaletteSettings().key.startswith("v4-")


def test_palette_json_format_2_says_share_and_still_reads_format_1():
    pal = Palette(jab=[[50.0, 10.0, 5.0], [70.0, 0.0, 0.0]], weights=[0.75, 0.25])
    data = pal.to_dict()
    assert data["format"] == 2 and [c["share"] for c in data["colours"]] == [0.75, 0.25]
    old = {**data, "colours": [{("weight" if k == "share" else k): v for k, v in c.items()} for c in data["colours"]]}
    del old["format"]
    assert np.allclose(Palette.from_dict(old).weights, [0.75, 0.25])


def test_flags_round_trip_and_validation(tmp_path):
    pal = Palette(jab=[[50.0, 1.0, 2.0]], weights=[1.0], confidence=0.6, flags=("near-backdrop",))
    again = Palette.from_json(pal.to_json())
    assert again.flags == ("near-backdrop",) and again.to_json() == pal.to_json()
    assert Palette.from_dict({k: v for k, v in pal.to_dict().items() if k != "flags"}).flags == ()
    with pytest.raises(ValueError, match="flags must be a sequence of strings"):
        Palette(jab=[[50.0, 1.0, 2.0]], weights=[1.0], flags="near-backdrop")
    # The store keeps them.
    from harmony.shop.store import Store

    with Store(tmp_path / "s.db", create=True) as store:
        assert "flags" in {r[1] for r in store._db.execute("PRAGMA table_info(palettes)")}


def test_suggest_shows_the_flag():
    from harmony.cli.feed_cmd import _doubt

    pal = Palette(jab=[[50.0, 1.0, 2.0]], weights=[1.0], confidence=0.6, flags=("near-backdrop",))
    assert _doubt(pal) == "  [palette flagged: near-backdrop, confidence 0.60]"
    assert _doubt(Palette(jab=[[50.0, 1.0, 2.0]], weights=[1.0])) == ""
