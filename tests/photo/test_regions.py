"""Boolean mask operations against scipy.ndimage (the reference library each function names).
The masks are random test inputs from seeded generators, not check values."""

import numpy as np
import pytest
from scipy import ndimage

from harmony.photo.regions import (
    CROSS,
    connected_to_edge,
    dilate_cross,
    from_bits,
    grow_along,
    grow_within,
    label_box,
    label_cross,
    to_bits,
)
from harmony.photo import kernels

# Each function's numpy form, and the compiled kernel standing for it (harmony.photo.kernels).
BOTH = pytest.mark.parametrize("compiled", [None, kernels], ids=["numpy", "compiled"])


def _masks(seed, count, high=40):
    rng = np.random.default_rng(seed)
    for _ in range(count):
        h, w = (int(v) for v in rng.integers(1, high, 2))
        yield rng, rng.random((h, w)) < rng.random()


def test_cross_is_scipys_default_structure():
    # scipy: label and binary_dilation default to generate_binary_structure(ndim, 1).
    assert np.array_equal(CROSS, ndimage.generate_binary_structure(2, 1))


def test_bits_round_trip():
    for rng, mask in _masks(1, 200):
        stride = mask.shape[1] + int(rng.integers(1, 4))
        assert np.array_equal(from_bits(to_bits(mask, stride), mask.shape, stride), mask)


def test_dilate_cross_matches_binary_dilation():
    # scipy.ndimage.binary_dilation with its default cross and a False border.
    for rng, mask in _masks(2, 200):
        times = int(rng.integers(1, 4))
        assert np.array_equal(dilate_cross(mask, times), ndimage.binary_dilation(mask, iterations=times))


@BOTH
def test_grow_within_matches_masked_binary_dilation(compiled):
    # scipy.ndimage.binary_dilation(seed, iterations=steps, mask=seed | allowed).
    for rng, seed in _masks(3, 600, high=70):
        seed &= rng.random(seed.shape) < 0.3
        allowed = rng.random(seed.shape) < rng.random()
        steps = int(rng.integers(1, 20))
        want = ndimage.binary_dilation(seed, iterations=steps, mask=seed | allowed)
        assert np.array_equal(grow_within(seed, allowed, steps, compiled), want)


@BOTH
def test_grow_along_matches_a_pixel_by_pixel_loop(compiled):
    # Reference: each round, every free pixel with a grown 4-neighbour across a close pair joins.
    for rng, seed in _masks(4, 300, high=25):
        h, w = seed.shape
        free = (rng.random((h, w)) < 0.6) & ~seed
        close_x = rng.random((h, max(w - 1, 0))) < 0.7
        close_y = rng.random((max(h - 1, 0), w)) < 0.7
        steps = int(rng.integers(1, 5))
        want = seed.copy()
        for _ in range(steps):
            new = want.copy()
            for r in range(h):
                for c in range(w):
                    if not free[r, c] or want[r, c]:
                        continue
                    near = ((c > 0 and want[r, c - 1] and close_x[r, c - 1]) or
                            (c < w - 1 and want[r, c + 1] and close_x[r, c]) or
                            (r > 0 and want[r - 1, c] and close_y[r - 1, c]) or
                            (r < h - 1 and want[r + 1, c] and close_y[r, c]))
                    new[r, c] = bool(near)
            want = new
        got = grow_along(seed, free, close_x, close_y, steps, compiled)
        assert np.array_equal(got, want) and (got is seed) == np.array_equal(want, seed)


@BOTH
def test_label_box_matches_label(compiled):
    # scipy.ndimage.label (4-connected): the same numbering, within the mask's bounding box.
    for _, mask in _masks(5, 200):
        labels, n, box = label_box(mask, label_cross if compiled is None else compiled.label_cross)
        want, count = ndimage.label(mask)
        full = np.zeros(mask.shape, dtype=want.dtype)
        full[box] = labels
        assert n == count and np.array_equal(full, want)


def test_connected_to_edge():
    for _, mask in _masks(6, 100):
        labels, count = ndimage.label(mask)
        keep = connected_to_edge(labels, count)
        for k in range(1, count + 1):
            region = labels == k
            touches = region[0].any() or region[-1].any() or region[:, 0].any() or region[:, -1].any()
            assert keep[k] == touches
        assert not keep[0]


@pytest.mark.parametrize("steps", [1, 15])
def test_grow_within_returns_the_seed_when_nothing_can_grow(steps):
    seed = np.zeros((5, 5), dtype=bool)
    seed[2, 2] = True
    assert grow_within(seed, np.zeros_like(seed), steps) is seed
