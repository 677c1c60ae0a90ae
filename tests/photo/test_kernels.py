"""The compiled kernels (numba) against the numpy and scipy steps they stand for, bit for bit, and
whole palettes with and without them. Inputs are random arrays from seeded generators and
photographs no one here made (test inputs, not check values); every reference is the numpy
path's own result, or scipy's."""

import subprocess
import sys

import numpy as np
import pytest
from reference_data import sample_photo
from scipy import ndimage

from harmony.demo.synthetic import cutout_composite, cutout_mask, encode_jpeg, open_frame_shot, studio_shot
from harmony.photo import clusters, kernels, mask as mask_module, palette as palette_module
from harmony.photo.image import decode_image
from harmony.photo.palette import PaletteSettings, compiled_kernels, palette_from_decoded
from harmony.photo.regions import CROSS


def _same(a, b):
    return a.dtype == b.dtype and a.shape == b.shape and np.array_equal(a, b)


def test_binning_and_table_match_the_numpy_binning():
    rng = np.random.default_rng(1)
    for trial in range(60):
        h, w = (int(v) for v in rng.integers(1, 50, 2))
        if trial % 3 == 0:  # a few colours, as on a studio shot
            srgb8 = rng.choice(rng.integers(0, 256, (6, 3)), size=(h, w)).astype(np.uint8)
        else:
            srgb8 = rng.integers(0, 256, (h, w, 3)).astype(np.uint8)
        for levels in (8, 32, 256):
            want = palette_module._bin_colours(srgb8, levels)
            got = palette_module._bin_colours(srgb8, levels, kernels)
            assert got[1] == want[1] and _same(got[0], want[0].astype(np.int64)) and _same(got[2], want[2])


def test_colour_steps_match_the_numpy_steps():
    rng = np.random.default_rng(2)
    for dtype in (np.float32, np.float64):
        for h, w in [(1, 1), (1, 9), (9, 1), (23, 31)]:
            planes = (rng.normal(size=(3, h, w)) * 20).astype(dtype)
            want = mask_module.colour_step_sq(np.moveaxis(planes, 0, -1))
            assert _same(kernels.colour_step_sq(planes), want)


def test_bin_sums_match_bincount():
    rng = np.random.default_rng(3)
    for trial in range(100):
        n, n_bins = int(rng.integers(1, 400)), int(rng.integers(1, 30))
        inverse = rng.integers(0, n_bins, n).astype(np.int64)
        jab = (rng.normal(size=(3, n)) * 30).astype(np.float32)
        product = rng.random(n) * (rng.random(n) < 0.7) if trial % 2 else (rng.random(n) < 0.6).astype(float)
        clean, inner = product * (rng.random(n) < 0.8), product * (rng.random(n) < 0.9)
        want = palette_module._bin_sums(inverse, n_bins, jab, product, clean, inner)
        got = kernels.bin_sums(inverse, n_bins, jab, product, clean, inner)
        assert all(_same(g, w) for g, w in zip(got, want))


def test_unmixing_matches_the_numpy_unmixing():
    rng = np.random.default_rng(4)
    for _ in range(100):
        n, k = int(rng.integers(1, 200)), int(rng.integers(1, 12))
        px = rng.normal(size=(3, n)) * 20 + 50
        back = (rng.normal(size=(3, n)) * 2 + 90).astype(np.float32)
        centres = rng.normal(size=(k, 3)) * 20 + 50
        if k > 1:
            centres[-1] = centres[0]  # a tie: the first wins
        want_k, want_a = palette_module._unmix(px, back, centres)
        got_k, got_a = kernels.unmix(px, back, centres)
        assert _same(got_k, want_k.astype(np.int64)) and _same(got_a, want_a)


def test_one_kmeans_start_matches_the_numpy_start():
    rng = np.random.default_rng(5)
    for trial in range(200):
        n, k = int(rng.integers(1, 300)), int(rng.integers(1, 16))
        points = rng.normal(size=(n, 3)) * rng.choice([1.0, 20.0])
        if trial % 4 == 0:
            points[: n // 2] = points[0]  # repeated points: zero distances, empty clusters
        weights = rng.random(n) * (rng.random(n) < 0.9)
        if not weights.sum() > 0:
            weights[0] = 1.0
        seed = int(rng.integers(0, 1000))
        want = clusters.weighted_kmeans(points, weights, k, clusters.SeededDraws(seed, k), n_init=1)
        got = clusters.weighted_kmeans(points, weights, k, clusters.SeededDraws(seed, k), n_init=1,
                                       kernels=kernels)
        assert _same(got[0], want[0]) and np.array_equal(got[1], want[1])


def test_labels_match_scipy():
    # scipy.ndimage.label with the 4-neighbour cross: the same numbers on every pixel.
    rng = np.random.default_rng(7)
    masks = [np.zeros((5, 7), bool), np.ones((5, 7), bool), np.ones((1, 9), bool), np.eye(6, dtype=bool)]
    for _ in range(1500):
        h, w = (int(v) for v in rng.integers(1, 40, 2))
        masks.append(rng.random((h, w)) < rng.random())
    y, x = np.mgrid[:60, :80]
    masks.append(((y - 30) ** 2 + (x - 40) ** 2 > 20**2) | ((y - 30) ** 2 + (x - 40) ** 2 < 6**2))
    for m in masks:
        want, n = ndimage.label(m, CROSS)
        got, count = kernels.label_cross(m)
        assert count == n and _same(got, want)


def test_shadow_test_matches_the_numpy_test():
    # mask._shadow's numpy path (scipy.ndimage.uniform_filter1d on the box) on J' in the range
    # where its sums are exact, as the palette's pixel table gives.
    rng = np.random.default_rng(8)
    for trial in range(300):
        h, w = (int(v) for v in rng.integers(3, 40, 2))
        lightness = (rng.random((h, w)) * 98.7 + 1.28).astype(np.float32)
        if trial % 2:  # smooth shadows, where the curvature test decides
            lightness = (np.linspace(40, 90, w)[None, :] + rng.normal(size=(h, w)) * 0.3).astype(np.float32)
        dj = (rng.normal(size=(h, w)) * 10).astype(np.float32)
        coloured = rng.random((h, w)) < 0.6
        like = coloured | (rng.random((h, w)) < 0.3)
        flood = rng.random((h, w)) < rng.random() * 0.5
        want = mask_module._shadow(lightness, dj, coloured, like, flood, 6.0)
        got = mask_module._shadow(lightness, dj, coloured, like, flood, 6.0, kernels)
        assert _same(got, want)


def test_enclosed_regions_match_the_numpy_means():
    # mask._enclosed_backdrop's numpy path: bincount means of each region's near pixels.
    rng = np.random.default_rng(10)
    for trial in range(300):
        h, w = (int(v) for v in rng.integers(2, 40, 2))
        labels, n = ndimage.label(rng.random((h, w)) < rng.random(), CROSS)
        near = rng.random((h, w)) < rng.random()
        ringing_zone = rng.random((h, w)) < 0.3
        diff = (rng.normal(size=(3, h, w)) * rng.choice([0.5, 3.0])).astype(np.float32)
        opening = float(rng.choice([1.0, 3.0, 4.5]))

        def bias():
            return 2.0

        want = mask_module._enclosed_backdrop(labels, n, near, ringing_zone, diff, opening, bias)
        got = mask_module._enclosed_backdrop(labels, n, near, ringing_zone, diff, opening, bias, kernels)
        assert (got is None and want is None) or _same(got, want)


def _palette_fields(pal):
    return (pal.jab.tobytes(), pal.weights.tobytes(), pal.flags, pal.scene, pal.confidence,
            pal.background_share, None if pal.background_jab is None else pal.background_jab.tobytes())


def test_whole_palettes_are_the_same_with_and_without_the_kernels():
    # gold inputs: real photographs no one here made (scikit-image's and scikit-learn's sample
    # images) cut out onto a studio sweep, whole as room scenes, and as a transparent cut-out;
    # then generated studio shots and open frames.
    rng = np.random.default_rng(9)
    images = []
    for name in ("chelsea", "coffee", "astronaut", "rocket", "china.jpg", "flower.jpg"):
        photo = sample_photo(name)[..., :3]
        for kind in ("ellipse", "ring"):
            images.append(encode_jpeg(cutout_composite(rng, photo, cutout_mask(photo.shape, kind))[0], quality=85))
        images.append(encode_jpeg(photo, quality=90))
    images += [encode_jpeg(studio_shot(rng).srgb8, quality=90) for _ in range(12)]
    walnut, cane = (0.42, 0.28, 0.18), (0.85, 0.78, 0.6)  # test inputs: a dark frame, a light inlay
    images += [encode_jpeg(open_frame_shot(rng, kind, walnut).srgb8, quality=85) for kind in ("slats", "legs")]
    images.append(encode_jpeg(open_frame_shot(rng, "ring", walnut, cane).srgb8, quality=85))
    settings = PaletteSettings()
    for data in images:
        decoded = decode_image(data, max_side=settings.max_side)
        with pytest.MonkeyPatch.context() as patch:
            patch.setattr(palette_module, "compiled_kernels", lambda: kernels)
            fast = palette_from_decoded(decoded, settings)
            patch.setattr(palette_module, "compiled_kernels", lambda: None)
            slow = palette_from_decoded(decoded, settings)
        assert _palette_fields(fast) == _palette_fields(slow)


def test_kernels_serve_once_loaded_always_with_1_never_with_0(monkeypatch):
    monkeypatch.setattr(palette_module, "_KERNELS", [])
    monkeypatch.delenv("HARMONY_NUMBA", raising=False)
    assert compiled_kernels() is None  # small jobs: the numpy steps
    monkeypatch.setenv("HARMONY_NUMBA", "1")
    assert compiled_kernels() is kernels
    monkeypatch.setenv("HARMONY_NUMBA", "0")
    assert compiled_kernels() is None and palette_module.load_kernels() is None
    monkeypatch.delenv("HARMONY_NUMBA")
    assert compiled_kernels() is kernels  # loaded above


@pytest.mark.parametrize("raw, loaded", [("1", True), ("TRUE", True), (" on ", True), ("0", False),
                                         ("false", False), ("Off", False)])
def test_the_switch_reads_the_usual_spellings(monkeypatch, raw, loaded):
    monkeypatch.setattr(palette_module, "_KERNELS", [])
    monkeypatch.setenv("HARMONY_NUMBA", raw)
    assert (compiled_kernels() is kernels) is loaded


def test_an_unknown_switch_value_is_warned_of_once_and_read_as_unset(monkeypatch, capsys):
    monkeypatch.setattr(palette_module, "_KERNELS", [])
    monkeypatch.setattr(palette_module, "_WARNED_SETTING", set())
    monkeypatch.setenv("HARMONY_NUMBA", "fast")
    assert compiled_kernels() is None and compiled_kernels() is None  # by job size: not loaded
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "HARMONY_NUMBA='fast' is neither 1 nor 0" in err


def test_loading_runs_every_kernel_once():
    # The warm-up shot takes every kernel, so workers forked after loading compile nothing: in a
    # fresh process, loading leaves each kernel with its compiled code.
    script = ("import os; os.environ.pop('HARMONY_NUMBA', None)\n"
              "from harmony.photo import palette, kernels\n"
              "assert not any(getattr(kernels, n).signatures for n in kernels.__all__)\n"
              "assert palette.load_kernels() is kernels\n"
              "print(sorted(n for n in kernels.__all__ if not getattr(kernels, n).signatures))")
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"


def test_kernels_that_fail_leave_the_numpy_steps_with_one_warning(monkeypatch, capsys):
    # A compiler or runtime failure of a kernel (here a kernel that raises) must not stop an
    # extraction: one warning line, then the numpy steps.
    monkeypatch.setattr(palette_module, "_KERNELS", [])
    monkeypatch.delenv("HARMONY_NUMBA", raising=False)

    def broken(*args):
        raise RuntimeError("LLVM ERROR: out of cheese")

    monkeypatch.setattr(kernels, "colour_step_sq", broken)
    assert palette_module.load_kernels() is None and palette_module.load_kernels() is None
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "compiled palette kernels failed (RuntimeError: LLVM ERROR" in err
    assert compiled_kernels() is None
    assert len(palette_from_decoded(palette_module._warm_up_shot())) >= 1


def test_without_numba_the_numpy_steps_serve_after_one_warning(monkeypatch, capsys):
    import builtins

    real_import = builtins.__import__

    def no_numba(name, *args, **kwargs):
        if name == "harmony.photo" and args[2] and "kernels" in args[2]:
            raise ImportError("No module named 'numba'")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(palette_module, "_KERNELS", [])
    monkeypatch.setenv("HARMONY_NUMBA", "1")
    monkeypatch.setattr(builtins, "__import__", no_numba)
    assert compiled_kernels() is None and compiled_kernels() is None
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "numba does not import (No module named 'numba')" in err


def test_kernels_compile_without_a_writable_cache(monkeypatch):
    # numba refuses cache=True where no cache folder can be written (RuntimeError "cannot cache
    # function ... no locator available"); the kernel is then compiled without its cache.
    import numba

    real = numba.njit

    def refusing(*args, **options):
        if options.get("cache"):
            raise RuntimeError("cannot cache function 'f': no locator available for file 'x.py'")
        return real(*args, **options)

    monkeypatch.setattr(numba, "njit", refusing)

    def twice(x):
        return 2 * x

    assert kernels._compiled(twice)(21) == 42
