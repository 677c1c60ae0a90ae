"""Palette extraction speed on 800x800 studio JPEGs, one core, against full-size decoding.

Prints a table and, as its last line, one JSON object with ``images_per_s`` and
``ratio_to_decode`` (extraction time per image / full-size decode-only time per image, both
measured in this run). Targets: at least 200 images/s, ratio at most 5.

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
from harmony.photo.palette import PaletteSettings, extract_palette  # noqa: E402

TARGET_IMAGES_PER_S = 200.0
TARGET_RATIO = 5.0


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

    with threadpool_limits(limits=1):
        decode_s = _best_of(decode_full, jpegs, args.repeats)
        extract_s = _best_of(lambda d: extract_palette(d, settings), jpegs, args.repeats)

    rate = 1.0 / extract_s
    ratio = extract_s / decode_s
    print(f"{'step':<28}{'ms/image':>10}{'images/s':>10}{'x decode':>10}")
    print(f"{'decode only (full size)':<28}{decode_s * 1e3:>10.2f}{1 / decode_s:>10.0f}{1.0:>10.2f}")
    print(f"{'extract_palette':<28}{extract_s * 1e3:>10.2f}{rate:>10.0f}{ratio:>10.2f}")
    print(f"targets: >= {TARGET_IMAGES_PER_S:.0f} images/s, <= {TARGET_RATIO:.0f}x decode; "
          f"{'met' if rate >= TARGET_IMAGES_PER_S and ratio <= TARGET_RATIO else 'NOT met'}")
    print(json.dumps({
        "images": args.images,
        "decode_ms": round(decode_s * 1e3, 3),
        "extract_ms": round(extract_s * 1e3, 3),
        "images_per_s": round(rate, 1),
        "ratio_to_decode": round(ratio, 2),
        "settings": settings.key,
    }))


if __name__ == "__main__":
    main()
