import warnings

import numpy as np
import pytest
from reference_data import SCENE_PHOTOS

from harmony import colour
from harmony.colour.neutral import NEUTRAL_COLOURFULNESS
from harmony.demo.synthetic import encode_jpeg, encode_png, studio_shot
from harmony.photo.image import decode_image
from harmony.photo.mask import (
    BACKDROP_MIN_LIGHTNESS,
    FULL_FRAME_CONFIDENCE,
    SCENE_CONFIDENCE,
    border_ring,
    foreground_mask,
    is_backdrop_colour,
)


def _jab(srgb8):
    return colour.srgb1_to_jab(np.asarray(srgb8, float) / 255.0)


def test_border_ring():
    ring = border_ring((10, 12), 2)
    assert ring.sum() == 10 * 12 - 6 * 8
    assert not ring[2:8, 2:10].any()


def test_studio_shot_mask_matches_painted_product():
    # The generated shot knows which pixels were painted; compare at full resolution (PNG, no
    # JPEG loss) so every pixel has its label.
    shot = studio_shot(np.random.default_rng(7), 240, 240)
    mask = foreground_mask(_jab(shot.srgb8))
    assert not mask.scene and mask.confidence >= 0.8
    product = shot.labels >= 0
    kept = mask.weights > 0
    iou = (kept & product).sum() / (kept | product).sum()
    assert iou > 0.97
    # The near-white pillow inside the product is kept although it is close to the backdrop.
    pillow = shot.labels == 2
    assert colour.delta_e(_jab(shot.colours_srgb1[2] * 255), _jab(shot.background_srgb1 * 255)) < 6.0
    assert kept[pillow].mean() > 0.97
    # The soft shadow is removed where it is noticeable.
    shadow = (shot.shadow > 0.05) & ~product
    # (a few outline pixels where legs meet the shadow are blends and stay)
    assert shadow.sum() > 100 and kept[shadow].mean() < 0.03
    # The backdrop colour is the painted one (within noise and the fall-off).
    assert colour.delta_e(mask.background_jab, _jab(shot.background_srgb1 * 255)) < 2.0


@pytest.mark.parametrize("name", SCENE_PHOTOS)
def test_skimage_photographs_are_scenes(name):
    # gold: real photographs from scikit-image's sample data; their borders are busy.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import skimage.data

    img = decode_image(encode_png(getattr(skimage.data, name)()), max_side=128)
    mask = foreground_mask(_jab(img.srgb8))
    assert mask.scene
    assert mask.confidence == SCENE_CONFIDENCE
    assert mask.background_jab is None
    # Centre prior: the centre counts more than the corners.
    h, w = mask.weights.shape
    assert mask.weights[h // 2, w // 2] > 5 * mask.weights[0, 0]


def test_transparent_background():
    rgba = np.zeros((40, 40, 4), np.uint8)
    rgba[..., :3] = (250, 250, 250)
    rgba[10:30, 10:30] = (200, 40, 40, 255)
    img = decode_image(encode_png(rgba))
    mask = foreground_mask(_jab(img.srgb8), img.opaque)
    assert mask.background_jab is None and not mask.scene
    assert mask.background_share == pytest.approx(1 - 400 / 1600)
    assert (mask.weights > 0).sum() == 400


def test_light_grey_product_in_shadow_is_kept():
    # A light grey box (sharp outline) standing in the soft shadow is not taken for shadow.
    colours = [[0.78, 0.78, 0.78], [0.78, 0.78, 0.78], [0.78, 0.78, 0.78], [0.70, 0.70, 0.70]]
    shot = studio_shot(np.random.default_rng(2), 200, 200, colours_srgb1=colours)
    mask = foreground_mask(_jab(shot.srgb8))
    assert (mask.weights > 0)[shot.labels >= 0].mean() > 0.95


def test_bad_shape():
    with pytest.raises(ValueError, match=r"shape \(h, w, 3\), got \(4, 3\)"):
        foreground_mask(np.zeros((4, 3)))


def test_jpeg_noise_does_not_break_uniformity():
    shot = studio_shot(np.random.default_rng(11))
    img = decode_image(encode_jpeg(shot.srgb8, quality=75), max_side=128)
    mask = foreground_mask(_jab(img.srgb8))
    assert not mask.scene


def test_plain_wall_over_a_different_floor_is_a_scene():
    # A room with a plain grey wall: most of the border ring is one colour, but the floor fills
    # the bottom side, 8 ΔE away from the wall. A studio backdrop never changes like that.
    wall = colour.srgb1_to_jab([0.60, 0.60, 0.62])
    floor = wall + np.array([-8.0, 0.0, 0.0])
    jab = np.broadcast_to(wall, (100, 100, 3)).copy()
    jab[80:] = floor
    jab[40:85, 25:75] = colour.srgb1_to_jab([0.2, 0.2, 0.25])  # the sofa
    mask = foreground_mask(jab)
    assert mask.scene
    assert mask.confidence == SCENE_CONFIDENCE
    # The same picture with the floor the wall's colour is a studio shot.
    jab[80:] = wall
    jab[40:85, 25:75] = colour.srgb1_to_jab([0.2, 0.2, 0.25])
    assert not foreground_mask(jab).scene


def red_fabric(rng, h=200, w=240):
    """A full-bleed red woven fabric (invented test picture): a 2-pixel check of light and dark
    threads with sensor noise, filling the whole frame."""
    yy, xx = np.mgrid[0:h, 0:w]
    factor = 0.92 + 0.08 * ((xx // 2 + yy // 2) % 2) + rng.normal(0, 0.02, yy.shape)
    return np.rint(np.clip(np.array([0.62, 0.12, 0.14]) * factor[..., None], 0, 1) * 255).astype(np.uint8)


def test_full_bleed_fabric_is_one_material():
    img = decode_image(encode_jpeg(red_fabric(np.random.default_rng(5))), max_side=128)
    mask = foreground_mask(_jab(img.srgb8))
    assert not mask.scene and mask.background_jab is None and mask.background_share == 0.0
    assert mask.confidence == FULL_FRAME_CONFIDENCE and 0.5 <= FULL_FRAME_CONFIDENCE < 0.8
    assert np.all(mask.weights == 1.0)


def test_flat_off_white_frame_is_all_background():
    mask = foreground_mask(_jab(np.full((64, 64, 3), 240, np.uint8)))
    assert not mask.scene and np.all(mask.weights == 0.0) and mask.background_share == 1.0


def test_flat_mid_grey_frame_is_one_material():
    # sRGB grey 128 (J' 56) is darker than any studio backdrop: a grey swatch, kept whole.
    mask = foreground_mask(_jab(np.full((64, 64, 3), 128, np.uint8)))
    assert np.all(mask.weights == 1.0) and mask.confidence == FULL_FRAME_CONFIDENCE


def test_product_on_coloured_backdrop_still_removes_it():
    # A blue box on a uniform red sweep: the leftover stands inside the frame, not spread evenly,
    # so the red border is a backdrop after all and goes.
    img = np.zeros((120, 120, 3), np.uint8)
    img[...] = (160, 30, 35)
    img[35:85, 40:80] = (40, 60, 150)
    mask = foreground_mask(_jab(img))
    kept = mask.weights > 0
    assert mask.background_jab is not None and mask.confidence >= 0.8
    assert kept[35:85, 40:80].all() and kept.sum() == 50 * 40


def test_backdrop_colour_rule():
    # sRGB (IEC 61966-2-1) white and light grey are backdrop colours; the grey 0.7 step sits just
    # above BACKDROP_MIN_LIGHTNESS, a mid grey and a saturated pastel do not qualify.
    jab = colour.srgb1_to_jab([[1.0, 1.0, 1.0], [0.7, 0.7, 0.7], [0.5, 0.5, 0.5], [1.0, 0.8, 0.8]])
    assert jab[1, 0] >= BACKDROP_MIN_LIGHTNESS and colour.colourfulness(jab[3]) >= NEUTRAL_COLOURFULNESS
    assert is_backdrop_colour(jab).tolist() == [True, True, False, False]
