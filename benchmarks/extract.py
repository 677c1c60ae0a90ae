"""Palette extraction speed on 800x800 studio JPEGs, one core, against decoding alone.

Prints a table and, as its last line, one JSON object with ``images_per_s``,
``ratio_to_decode`` (extraction time per image / full-size decode-only time per image) and
``ratio_to_draft_decode`` (extraction / the draft-mode decode that extraction itself starts
with, :func:`harmony.photo.image.decode_image` at the working size), all measured in this run.
Targets: at least 200 images/s and at most 3x the draft-mode decode.

    python benchmarks/extract.py [--images N] [--repeats R]
"""

import argparse
import io
import json
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

from harmony.demo.synthetic import encode_jpeg, studio_shot  # noqa: E402
from harmony.photo.image import decode_image  # noqa: E402
from harmony.photo.palette import PaletteSettings, extract_palette  # noqa: E402

TARGET_IMAGES_PER_S = 200.0
TARGET_RATIO = 3.0  # against the draft-mode decode


def _best_of(fn, items, repeats):
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        for item in items:
            fn(item)
        best = min(best, time.perf_counter() - t0)
    return best / len(items)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=40)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    rng = np.random.default_rng(2024)
    jpegs = [encode_jpeg(studio_shot(rng).srgb8, quality=90) for _ in range(args.images)]
    settings = PaletteSettings()
    extract_palette(jpegs[0], settings)  # warm-up: imports, caches

    def decode_full(data):
        Image.open(io.BytesIO(data)).convert("RGB").load()

    def decode_draft(data):
        decode_image(data, max_side=settings.max_side, max_pixels=settings.max_pixels)

    with threadpool_limits(limits=1):
        decode_s = _best_of(decode_full, jpegs, args.repeats)
        draft_s = _best_of(decode_draft, jpegs, args.repeats)
        extract_s = _best_of(lambda d: extract_palette(d, settings), jpegs, args.repeats)

    rate = 1.0 / extract_s
    ratio = extract_s / decode_s
    ratio_draft = extract_s / draft_s
    print(f"{'step':<28}{'ms/image':>10}{'images/s':>10}{'x draft':>10}")
    print(f"{'decode (full size)':<28}{decode_s * 1e3:>10.2f}{1 / decode_s:>10.0f}{decode_s / draft_s:>10.2f}")
    print(f"{'decode (draft, working)':<28}{draft_s * 1e3:>10.2f}{1 / draft_s:>10.0f}{1.0:>10.2f}")
    print(f"{'extract_palette':<28}{extract_s * 1e3:>10.2f}{rate:>10.0f}{ratio_draft:>10.2f}")
    print(f"load average: {' '.join(open('/proc/loadavg').read().split()[:3]) if os.path.exists('/proc/loadavg') else 'n/a'}")
    print(f"targets: >= {TARGET_IMAGES_PER_S:.0f} images/s, <= {TARGET_RATIO:.0f}x draft decode; "
          f"{'met' if rate >= TARGET_IMAGES_PER_S and ratio_draft <= TARGET_RATIO else 'NOT met'}")
    print(json.dumps({
        "images": args.images,
        "decode_ms": round(decode_s * 1e3, 3),
        "extract_ms": round(extract_s * 1e3, 3),
        "images_per_s": round(rate, 1),
        "ratio_to_decode": round(ratio, 2),
        "draft_decode_ms": round(draft_s * 1e3, 3),
        "ratio_to_draft_decode": round(ratio_draft, 2),
        "settings": settings.key,
    }))


if __name__ == "__main__":
    main()
