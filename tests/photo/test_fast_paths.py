"""The shortcuts of the masking and palette steps against the numpy and scipy calls they stand
for, bit for bit. Inputs are random arrays from seeded generators (test inputs, not check
values); every reference is numpy's or scipy's own result."""

import numpy as np
import pytest
from scipy import ndimage

from harmony.photo import mask as mask_module
from harmony.photo import clusters, kernels
from harmony.photo import palette as palette_module
from harmony.photo.surface import basis, grid_basis, median_rows, ring_basis


def test_median_rows_is_numpys_median():
    # numpy.median, including ties, odd and even lengths and signed zeros.
    rng = np.random.default_rng(1)
    for n in range(1, 40):
        for dtype in (np.float32, np.float64):
            x = rng.normal(size=(3, n)).astype(dtype)
            x[0] = np.round(x[0])
            x[1, : n // 2] = -0.0
            want = np.median(x, axis=-1)
            got = median_rows(x)
            assert np.array_equal(got, want) and np.array_equal(np.signbit(got), np.signbit(want))


def test_surface_in_either_orientation_is_the_same_product():
    # numpy (BLAS) matrix products: the grid basis times the coefficients, as rows or as planes.
    rng = np.random.default_rng(2)
    for h, w in [(128, 128), (97, 128), (17, 200)]:
        rows = grid_basis(h, w).T
        y = np.linspace(-0.5, 0.5, h)[:, None] * np.ones((1, w))
        x = np.ones((h, 1)) * np.linspace(-0.5, 0.5, w)[None, :]
        assert np.array_equal(rows, basis(y, x).reshape(-1, 6))
        index, design = ring_basis(h, w, 4)
        for _ in range(20):
            coef = rng.normal(size=(6, 3)) * np.array([[50], [5], [5], [3], [3], [3]])
            assert np.array_equal((rows @ coef).T, np.ascontiguousarray(coef.T) @ grid_basis(h, w))
            assert np.array_equal((design @ coef).T, np.ascontiguousarray(coef.T) @ np.ascontiguousarray(design.T))
        coef = np.zeros((6, 3))
        coef[0] = rng.normal(size=3)
        assert np.array_equal(design @ coef, np.broadcast_to(coef[0], (len(index), 3)))


def test_the_float32_surface_is_the_float64_surface_rounded():
    # fit_surface evaluates the surface in the planes' float32 (numpy's float32 product); against
    # the planes' values in float64 it differs by float32 rounding only: a few units in the last
    # place of J' near 90 (7.6e-6 each; measured up to 1.7e-5 here), far below a just-noticeable
    # difference (JND_DELTA_E, 2.3).
    from harmony.photo.surface import fit_surface

    rng = np.random.default_rng(12)
    for h, w in [(128, 128), (97, 128), (17, 200)]:
        y, x = np.mgrid[0:h, 0:w] / max(h, w)
        truth = np.stack([90 - 15 * y + 4 * x * y, 1.5 * x - 0.5, 2 * y * y - 1])
        planes64 = truth + rng.normal(size=(3, h, w)) * 0.3
        index, design = ring_basis(h, w, 4)
        surface32, _, inlier32 = fit_surface(planes64.astype(np.float32), index, design, 6.0, 3)
        surface64, _, inlier64 = fit_surface(planes64.astype(np.float32).astype(float), index, design, 6.0, 3)
        assert surface32.dtype == np.float32 and surface64.dtype == np.float64
        assert np.array_equal(inlier32, inlier64)
        assert np.abs(surface32 - surface64).max() < 1e-4


def test_opening_is_the_clipped_percentile():
    # numpy.percentile(residual, 95), scaled and clipped as the module docstring says.
    rng = np.random.default_rng(3)
    for _ in range(2000):
        n = int(rng.integers(1, 60))
        residual = rng.random(n) * rng.choice([0.5, 1.2, 1.45, 1.55, 3.0])
        cap = mask_module.OPENING_MAX_DELTA_E
        spread = float(np.percentile(residual, 95))
        want = min(max(mask_module.OPENING_SPREAD_FACTOR * spread, mask_module.OPENING_MIN_DELTA_E), cap)
        assert mask_module._opening(residual, cap) == want


def test_ring_steps_match_the_side_by_side_means():
    # numpy.mean of each side's strip across the ring, side by side; ΔE as numpy's norm of the
    # channel differences. The left and right strips are summed row by row, where numpy's mean
    # along a row of 8 or more adds pairwise: a few float32 steps of J' near 50 apart (3.8e-6
    # each), the same steps.
    rng = np.random.default_rng(10)
    for trial in range(400):
        h, w = (int(v) for v in rng.integers(3, 70, 2))
        width = min(int(rng.integers(1, 12)), h, w)
        dtype = np.float32 if trial % 2 else np.float64
        planes = (rng.normal(size=(3, h, w)) * rng.choice([0.3, 2.0, 10.0]) + 50).astype(dtype)
        surface = (planes + rng.normal(size=(3, h, w)) * 0.5).astype(dtype)
        want = 0.0
        for axis, sides in ((1, (planes[:, :width], planes[:, -width:])), (2, (planes[:, :, :width], planes[:, :, -width:]))):
            model_sides = (surface[:, :width], surface[:, -width:]) if axis == 1 else (surface[:, :, :width], surface[:, :, -width:])
            for side, model_side in zip(sides, model_sides):
                if side.shape[3 - axis] < 6:
                    continue
                profile, model = side.mean(axis=axis), model_side.mean(axis=axis)
                ok = np.sqrt(((profile - model) ** 2).sum(axis=0)) <= 2.0
                both = ok[4:] & ok[:-4]
                if both.any():
                    step = np.sqrt(((profile[:, 4:] - profile[:, :-4]) ** 2).sum(axis=0))
                    want = max(want, float(step[both].max()))
        assert mask_module._ring_steps(planes, surface, width, 2.0) == pytest.approx(want, abs=1e-4)


def test_shadow_box_filter_matches_the_whole_image_filter():
    # scipy.ndimage.uniform_filter over the whole frame, (1, 3, 3), mode "nearest", for float32
    # J' in the pixel table's range: the box gives the same bits inside it.
    rng = np.random.default_rng(5)
    for _ in range(300):
        h, w = (int(v) for v in rng.integers(5, 60, 2))
        lightness = (rng.random((h, w)) * 98.7 + 1.28).astype(np.float32)
        like = rng.random((h, w)) < rng.random()
        stack = np.stack([like, lightness * like]).astype(np.float32)
        whole = ndimage.uniform_filter(stack, (1, 3, 3), mode="nearest")
        r0, c0 = int(rng.integers(1, h - 2)), int(rng.integers(1, w - 2))
        r1, c1 = int(rng.integers(r0 + 1, h)), int(rng.integers(c0 + 1, w))
        box = ndimage.uniform_filter(stack[:, r0 - 1: r1 + 1, c0 - 1: c1 + 1], (1, 3, 3), mode="nearest")
        assert np.array_equal(box[:, 1:-1, 1:-1], whole[:, r0:r1, c0:c1])


def test_shadow_test_matches_the_whole_frame_version():
    # The shadow test written out over the whole frame with scipy.ndimage.uniform_filter.
    rng = np.random.default_rng(6)
    for trial in range(300):
        h, w = (int(v) for v in rng.integers(3, 50, 2))
        dtype = np.float32 if trial % 3 else np.float64
        lightness = (rng.random((h, w)) * 98.7 + 1.28).astype(dtype)
        dj = (rng.normal(size=(h, w)) * 3).astype(dtype)
        coloured = rng.random((h, w)) < 0.5
        like = coloured | (rng.random((h, w)) < 0.3)
        flood = rng.random((h, w)) < rng.random()
        weights = like.astype(dtype)
        means = ndimage.uniform_filter(np.stack([weights, lightness * weights]), (1, 3, 3), mode="nearest")
        curvature = np.abs(lightness - means[1] / np.maximum(means[0], 1e-6))
        smooth = curvature < np.maximum(mask_module.SHADOW_CURVATURE, mask_module.SHADOW_RELATIVE_CURVATURE * np.abs(dj))
        steep = np.zeros((h, w))
        dx = np.abs(np.diff(lightness, axis=1)) * (like[:, 1:] & like[:, :-1])
        dy = np.abs(np.diff(lightness, axis=0)) * (like[1:] & like[:-1])
        for target, value in ((steep[:, :-1], dx), (steep[:, 1:], dx), (steep[:-1], dy), (steep[1:], dy)):
            np.maximum(target, value, out=target)
        want = coloured & smooth & (steep < 6.0) & ~flood
        got = mask_module._shadow(lightness, dj, coloured, like, flood, 6.0) & ~flood
        assert np.array_equal(got, want)


def test_patch_bias_is_the_largest_patch_median_norm():
    # numpy.median of each of the eight border patches, then numpy.linalg.norm.
    rng = np.random.default_rng(7)
    for _ in range(200):
        h, w = (int(v) for v in rng.integers(8, 90, 2))
        width = int(rng.integers(1, 5))
        diff = (rng.normal(size=(3, h, w)) * rng.choice([0.1, 2.0])).astype(np.float32)
        patches = (diff[:, :width, : w // 2], diff[:, :width, w // 2:], diff[:, -width:, : w // 2],
                   diff[:, -width:, w // 2:], diff[:, : h // 2, :width], diff[:, h // 2:, :width],
                   diff[:, : h // 2, -width:], diff[:, h // 2:, -width:])
        want = max(float(np.linalg.norm(np.median(p.reshape(3, -1), axis=1))) for p in patches)
        assert mask_module._patch_bias(diff, width) == want


def test_colour_steps():
    # numpy: the largest squared ΔE to a 4-neighbour, summed over J', a', b' in that order.
    rng = np.random.default_rng(8)
    jab = (rng.normal(size=(20, 30, 3)) * 10).astype(np.float32)
    dx = np.zeros((20, 29), np.float32)
    dy = np.zeros((19, 30), np.float32)
    for c in range(3):
        dx += np.diff(jab[..., c], axis=1) ** 2
        dy += np.diff(jab[..., c], axis=0) ** 2
    want = np.zeros((20, 30), np.float32)
    for target, value in ((want[:, :-1], dx), (want[:, 1:], dx), (want[:-1], dy), (want[1:], dy)):
        np.maximum(target, value, out=target)
    assert np.array_equal(mask_module.colour_step_sq(jab), want)


def test_seeded_draws_are_the_generators_draws():
    # numpy.random.default_rng(seed).random, one number or a few at a time.
    for seed in (0, 3):
        for k in (1, 2, 10, 64):
            draws = clusters.SeededDraws(seed, k)
            rng = np.random.default_rng(seed)
            trials = 2 + int(np.log(k))
            assert draws.random() == rng.random()
            for _ in range(k - 1):
                assert np.array_equal(draws.random(trials), rng.random(trials))


@pytest.mark.parametrize("merge", [clusters.merge_close, kernels.merge_close], ids=["numpy", "compiled"])
def test_merge_close_matches_recomputing_every_distance(merge):
    # Reference: the closest pair by numpy.argmin over all distances, recomputed after each merge
    # (for the numpy merge and its compiled twin alike).
    rng = np.random.default_rng(9)
    for _ in range(300):
        m = int(rng.integers(1, 20))
        centres = rng.normal(size=(m, 3)) * rng.choice([1.0, 3.0])
        masses = rng.random(m) * 10
        limit = float(rng.choice([0.5, 2.3, 5.0]))
        want_c, want_m = [c for c in centres], [float(v) for v in masses]
        while len(want_c) > 1:
            arr = np.array(want_c)
            d = np.sqrt(clusters.sq_dist(arr, arr))
            np.fill_diagonal(d, np.inf)
            i, j = np.unravel_index(int(np.argmin(d)), d.shape)
            if not d[i, j] < limit:
                break
            i, j = min(i, j), max(i, j)
            total = want_m[i] + want_m[j]
            want_c[i] = (want_m[i] * want_c[i] + want_m[j] * want_c[j]) / total
            want_m[i] = total
            del want_c[j], want_m[j]
        got_c, got_m = merge(centres, masses, limit)
        assert np.array_equal(got_c, np.array(want_c)) and np.array_equal(got_m, np.array(want_m))


def _einsum_sq_dist(points, centres):
    d = points[:, None, :] - centres[None, :, :]
    return np.einsum("nkc,nkc->nk", d, d)


def test_squared_distances_are_numpys_einsum():
    # numpy.einsum's sum of squared differences over three coordinates, bit for bit, in either
    # layout (points as rows or as coordinate planes).
    rng = np.random.default_rng(12)
    for _ in range(500):
        n, k = int(rng.integers(1, 400)), int(rng.integers(1, 12))
        points = rng.normal(size=(n, 3)) * rng.choice([0.1, 3.0, 30.0, 100.0], size=(n, 1))
        centres = rng.normal(size=(k, 3)) * rng.choice([1.0, 20.0])
        want = _einsum_sq_dist(points, centres)
        assert np.array_equal(clusters.sq_dist(points, centres), want)
        planes = np.ascontiguousarray(points.T)
        assert np.array_equal(clusters.sq_dist_planes(planes, centres), want.T)


def test_distance_is_the_square_root_of_numpys_einsum():
    # numpy.sqrt of numpy.einsum's sum of squared differences, bit for bit.
    rng = np.random.default_rng(11)
    points = rng.normal(size=(400, 3)) * rng.choice([0.1, 3.0, 30.0], size=(400, 1))
    want = np.sqrt(_einsum_sq_dist(points[:200], points[200:]))
    got = [[clusters._distance(a, b) for b in points[200:].tolist()] for a in points[:200].tolist()]
    assert np.array_equal(np.array(got), want)


def test_pixel_table_matches_colorspacious_at_cell_centres():
    # The table holds colour.srgb1_to_jab (colorspacious) of each cell's centre, cast to float32.
    from harmony import colour

    rng = np.random.default_rng(10)
    srgb8 = rng.integers(0, 256, size=(40, 50, 3), dtype=np.uint8)
    shift = 8 - int(np.log2(palette_module.FINE_LEVELS))
    centre = ((srgb8.astype(float) // (1 << shift)) * (1 << shift) + ((1 << shift) - 1) / 2.0) / 255.0
    want = colour.srgb1_to_jab(centre.reshape(-1, 3)).astype(np.float32).reshape(40, 50, 3)
    assert np.array_equal(palette_module.srgb8_to_jab(srgb8), want)


def test_seeded_draws_follow_numpy_generator_past_the_kept_run():
    # Reference: numpy's own Generator with the same seed; three k-means starts ask for three
    # times the run kept for one, which must continue the same sequence, not fail or repeat.
    draws = clusters.SeededDraws(7, 10)
    want = np.random.default_rng(7)
    for size in [None, 5, 3, None] * 20:
        got = draws.random(size)
        expected = want.random() if size is None else want.random(size)
        np.testing.assert_array_equal(got, expected)
