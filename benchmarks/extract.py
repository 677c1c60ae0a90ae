"""Palette extraction speed on 800x800 studio JPEGs, one core, against decoding alone.

Prints a table and, as its last line, one JSON object with ``images_per_s``,
``ratio_to_decode`` (extraction time per image / full-size decode-only time per image) and
``ratio_to_draft_decode`` (extraction / the draft-mode decode that extraction itself starts
with, :func:`harmony.photo.image.decode_image` at the working size), all measured in this run.
Targets: at least 200 images/s and at most 3x the draft-mode decode.

Extraction is timed twice: with the numpy steps (``numpy_*`` in the JSON), which small jobs
run, and with the compiled kernels (numba, :mod:`harmony.photo.kernels`), which extraction
jobs of at least ``COMPILED_MIN_IMAGES`` images load; the targets are judged on the latter.
Both give the same palettes (``tests/photo/test_kernels.py``). The time to load the kernels is
printed too (from numba's cache, or compiling when the cache is cold).

The generated shots are flat drawings with a dozen colours; a second set, cut-outs of real
photographs (scikit-image's and scikit-learn's sample images, when installed) composited onto a
studio sweep at the same size, shows the cost on photo texture (hundreds to thousands of colour
bins), reported beside the target rows (``photos_*`` in the JSON).

With ``--baseline DIR`` (a checkout of another revision, e.g. made with ``git worktree add``)
the same JPEGs are also extracted by that revision's code, in a child process pinned to one
thread, twice, alternating with this revision's two timings, and the table gains its rows and
the ratios.

    python benchmarks/extract.py [--images N] [--repeats R] [--baseline DIR]
"""

import argparse
import io
import json
import os
import tempfile
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

from _revision import load_average, run_child  # noqa: E402
from harmony.demo.synthetic import cutout_composite, cutout_mask, encode_jpeg, studio_shot  # noqa: E402
from harmony.photo.image import decode_image  # noqa: E402
from harmony.photo.palette import COMPILED_MIN_IMAGES, PaletteSettings, extract_palette, load_kernels  # noqa: E402

TARGET_IMAGES_PER_S = 200.0
TARGET_RATIO = 3.0  # against the draft-mode decode

# Run in the child with the baseline checkout first on sys.path: the same timing loop
# (each image's best of R passes, default settings, one warm-up image) as this script's.
_CHILD = """
import glob, json, os, sys, time
sys.path.insert(0, sys.argv[1])
import harmony.photo.palette as palette
from threadpoolctl import threadpool_limits
files = sorted(glob.glob(os.path.join(sys.argv[2], "*.jpg")))
jpegs = [open(f, "rb").read() for f in files]
settings = palette.PaletteSettings()
palette.extract_palette(jpegs[0], settings)
best = [float("inf")] * len(jpegs)
with threadpool_limits(limits=1):
    for _ in range(int(sys.argv[3])):
        for i, data in enumerate(jpegs):
            t0 = time.perf_counter()
            palette.extract_palette(data, settings)
            best[i] = min(best[i], time.perf_counter() - t0)
print(json.dumps({"extract_s": sum(best) / len(jpegs), "module": palette.__file__, "key": settings.key}))
"""


def _best_of(fn, items, repeats):
    """Mean over ``items`` of each item's best time in ``repeats`` passes: on a shared machine
    a pass is often interrupted, one image rarely in every pass."""
    best = [float("inf")] * len(items)
    for _ in range(repeats):
        for i, item in enumerate(items):
            t0 = time.perf_counter()
            fn(item)
            best[i] = min(best[i], time.perf_counter() - t0)
    return sum(best) / len(items)


def _photo_cutouts(rng, size=800):
    """JPEGs of real photographs cut out (an ellipse or a ring) and composited onto a studio
    sweep, or [] when scikit-image is not installed."""
    try:
        import skimage.data
        from sklearn.datasets import load_sample_image
    except ImportError:
        return []
    photos = [skimage.data.chelsea(), skimage.data.coffee(), skimage.data.astronaut(), skimage.data.rocket(),
              load_sample_image("china.jpg"), load_sample_image("flower.jpg")]
    out = []
    for photo in photos:
        for kind in ("ellipse", "ring"):
            composite, _ = cutout_composite(rng, photo[..., :3], cutout_mask(photo.shape, kind), size=size)
            out.append(encode_jpeg(composite, quality=90))
    return out


def _baseline(checkout, jpegs, repeats):
    """Seconds per image of ``extract_palette`` of the code in ``checkout`` on ``jpegs``."""
    with tempfile.TemporaryDirectory() as folder:
        for i, data in enumerate(jpegs):
            with open(os.path.join(folder, f"{i:04d}.jpg"), "wb") as fh:
                fh.write(data)
        env = dict(os.environ, OMP_NUM_THREADS="1", HARMONY_NUMBA="1")  # its fastest path
        return run_child(_CHILD, checkout, [folder, repeats], env=env)


def _numpy_steps(on):
    """Extract with the numpy steps (``on``) or with the compiled kernels."""
    if on:
        os.environ["HARMONY_NUMBA"] = "0"
    else:
        os.environ.pop("HARMONY_NUMBA", None)


def _time_set(jpegs, settings, repeats, baseline):
    """(draft-decode s, numpy-steps extract s, compiled extract s, baseline result or None) per
    image of ``jpegs``: the revisions twice, alternating (numpy steps, compiled, baseline, and
    again), so all see the same machine and get as many chances; the best of each counts."""

    def decode_draft(data):
        decode_image(data, max_side=settings.max_side, max_pixels=settings.max_pixels)

    draft_s = _best_of(decode_draft, jpegs, repeats)
    numpy_s = compiled_s = float("inf")
    base = None
    for _ in range(2):
        for numpy_steps in (True, False):
            _numpy_steps(numpy_steps)
            took = _best_of(lambda d: extract_palette(d, settings), jpegs, repeats)
            if numpy_steps:
                numpy_s = min(numpy_s, took)
            else:
                compiled_s = min(compiled_s, took)
        if baseline:
            got = _baseline(baseline, jpegs, repeats)
            base = got if base is None or got["extract_s"] < base["extract_s"] else base
    _numpy_steps(False)
    return draft_s, numpy_s, compiled_s, base


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=40)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--baseline", metavar="DIR", help="a checkout of the revision to compare with")
    args = parser.parse_args()
    rng = np.random.default_rng(2024)
    jpegs = [encode_jpeg(studio_shot(rng).srgb8, quality=90) for _ in range(args.images)]
    photos = _photo_cutouts(rng)
    settings = PaletteSettings()
    extract_palette(jpegs[0], settings)  # warm-up: imports, caches
    t0 = time.perf_counter()
    if load_kernels() is None:
        raise SystemExit("the compiled kernels did not load (numba missing, or HARMONY_NUMBA=0)")
    load_s = time.perf_counter() - t0

    def decode_full(data):
        Image.open(io.BytesIO(data)).convert("RGB").load()

    load_before = load_average()
    with threadpool_limits(limits=1):
        decode_s = _best_of(decode_full, jpegs, args.repeats)
        draft_s, numpy_s, extract_s, base = _time_set(jpegs, settings, args.repeats, args.baseline)
        if photos:
            photo_draft_s, photo_numpy_s, photo_s, photo_base = _time_set(photos, settings, args.repeats,
                                                                          args.baseline)

    rate = 1.0 / extract_s
    ratio = extract_s / decode_s
    ratio_draft = extract_s / draft_s
    print(f"{'generated studio shots, 800 x 800':<36}{'ms/image':>10}{'images/s':>10}{'x draft':>10}")

    def row(name, sec, draft):
        print(f"{name:<36}{sec * 1e3:>10.2f}{1 / sec:>10.0f}{sec / draft:>10.2f}")

    row("decode (full size)", decode_s, draft_s)
    row("decode (draft, working)", draft_s, draft_s)
    if base:
        row("extract_palette (baseline)", base["extract_s"], draft_s)
    row("extract_palette (numpy steps)", numpy_s, draft_s)
    row("extract_palette (compiled)", extract_s, draft_s)
    if photos:
        print(f"{len(photos)} real-photo cut-outs, 800 x 800 (not the target set)")
        row("decode (draft, working)", photo_draft_s, photo_draft_s)
        if photo_base:
            row("extract_palette (baseline)", photo_base["extract_s"], photo_draft_s)
        row("extract_palette (numpy steps)", photo_numpy_s, photo_draft_s)
        row("extract_palette (compiled)", photo_s, photo_draft_s)
    else:
        print("real-photo cut-outs: skipped (scikit-image and scikit-learn are not installed)")
    saved = numpy_s - extract_s
    print(f"compiled kernels loaded in {load_s:.2f} s; they save {saved * 1e3:.2f} ms an image, so a job breaks "
          f"even after about {load_s / max(saved, 1e-9):.0f} images on one core "
          f"(jobs of {COMPILED_MIN_IMAGES} or more load them)")
    if base:
        print(f"baseline: {args.baseline} ({base['key']}); this revision takes "
              f"{extract_s / base['extract_s']:.2f}x its time on the shots"
              + (f", {photo_s / photo_base['extract_s']:.2f}x on the cut-outs" if photos else ""))
    print(f"load average: {load_before} before, {load_average()} after")
    print(f"targets (generated shots, compiled): >= {TARGET_IMAGES_PER_S:.0f} images/s, <= {TARGET_RATIO:.0f}x "
          f"draft decode; {'met' if rate >= TARGET_IMAGES_PER_S and ratio_draft <= TARGET_RATIO else 'NOT met'}")
    summary = {
        "images": args.images,
        "decode_ms": round(decode_s * 1e3, 3),
        "extract_ms": round(extract_s * 1e3, 3),
        "images_per_s": round(rate, 1),
        "ratio_to_decode": round(ratio, 2),
        "draft_decode_ms": round(draft_s * 1e3, 3),
        "ratio_to_draft_decode": round(ratio_draft, 2),
        "numpy_extract_ms": round(numpy_s * 1e3, 3),
        "numpy_images_per_s": round(1.0 / numpy_s, 1),
        "numpy_ratio_to_draft_decode": round(numpy_s / draft_s, 2),
        "kernel_load_s": round(load_s, 3),
        "settings": settings.key,
    }
    if base:
        summary["baseline_extract_ms"] = round(base["extract_s"] * 1e3, 3)
        summary["ratio_to_baseline"] = round(extract_s / base["extract_s"], 2)
    if photos:
        summary["photos"] = len(photos)
        summary["photos_extract_ms"] = round(photo_s * 1e3, 3)
        summary["photos_images_per_s"] = round(1.0 / photo_s, 1)
        summary["photos_ratio_to_draft_decode"] = round(photo_s / photo_draft_s, 2)
        summary["photos_numpy_extract_ms"] = round(photo_numpy_s * 1e3, 3)
        if photo_base:
            summary["photos_baseline_extract_ms"] = round(photo_base["extract_s"] * 1e3, 3)
            summary["photos_ratio_to_baseline"] = round(photo_s / photo_base["extract_s"], 2)
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
