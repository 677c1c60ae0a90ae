"""Benchmark: palette extraction over a generated catalogue, 1 vs 2 workers, then a re-run.

Generates ``--images`` distinct 800x800 studio-shot JPEGs (harmony.demo.synthetic; a few base shots,
each turned and tinted into distinct variants) into a temporary folder with a CSV catalogue, then

1. extracts everything with 1 worker into a fresh store (the baseline),
2. extracts everything with 2 workers into another fresh store,
3. runs 2 workers again over the second store (nothing changed: nothing to extract).

Targets on a 2-core machine: run 2 at least 1.7x the baseline's images/s; run 3 under 5 % of
run 2's time. Both stores must hold identical palettes. Run it on a quiet machine. The last
line printed is one JSON object.
"""

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from harmony.demo.synthetic import encode_jpeg, studio_shot
from harmony.shop.engine import run_extraction
from harmony.shop.store import Store

CATEGORIES = ("sofa", "rug", "armchair", "floor lamp", "cushion")


def make_catalogue(folder, n_images, size, n_base, rng):
    """Write ``n_images`` distinct JPEGs and ``catalogue.csv`` into ``folder``; return the CSV path."""
    images = folder / "images"
    images.mkdir()
    bases = [studio_shot(rng, width=size, height=size).srgb8 for _ in range(n_base)]
    lines = ["id,title,category,price,currency,stock,image"]
    for i in range(n_images):
        base = bases[i % n_base]
        variant = i // n_base
        # Eight turns and mirror images times a small per-channel tint: distinct bytes and pixels.
        turned = np.rot90(base, k=variant % 4)
        if (variant // 4) % 2:
            turned = turned[:, ::-1]
        gain = 1.0 - 0.004 * (variant // 8) * np.array([1.0, 0.5, -0.5])
        pixels = np.clip(np.rint(turned * gain), 0, 255).astype(np.uint8)
        name = f"item-{i:05d}.jpg"
        (images / name).write_bytes(encode_jpeg(np.ascontiguousarray(pixels), quality=90))
        category = CATEGORIES[i % len(CATEGORIES)]
        lines.append(f"B{i:05d},Item {i},{category},{50 + i % 400},EUR,{i % 7},images/{name}")
    path = folder / "catalogue.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _palette_bytes(db):
    with Store(db) as store:
        return {pid: (p.jab.tobytes(), p.weights.tobytes()) for pid, p in store.palettes().items()}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=2000)
    parser.add_argument("--size", type=int, default=800, help="image side in pixels")
    parser.add_argument("--base", type=int, default=50, help="distinct generated shots to vary")
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(args.seed)

    with tempfile.TemporaryDirectory(prefix="harmony-bench-") as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        catalogue = make_catalogue(folder, args.images, args.size, min(args.base, args.images), rng)
        generate_s = time.perf_counter() - t0
        print(f"generated {args.images} {args.size}x{args.size} JPEGs in {generate_s:.1f} s", file=sys.stderr)

        runs = []
        for label, workers, db in (
            ("first run", 1, folder / "one.db"),
            ("first run", 2, folder / "two.db"),
            ("re-run", 2, folder / "two.db"),
        ):
            summary = run_extraction(catalogue, db, workers=workers, progress=False)
            runs.append((label, workers, summary))

        one, two, again = (s for _label, _w, s in runs)
        if one.new != args.images or two.new != args.images or again.new != 0 or one.failed or two.failed:
            raise SystemExit(f"unexpected counts: {one.line()} | {two.line()} | {again.line()}")
        if _palette_bytes(folder / "one.db") != _palette_bytes(folder / "two.db"):
            raise SystemExit("1-worker and 2-worker stores differ")

    rate_1 = args.images / one.seconds
    rate_2 = args.images / two.seconds
    rerun_fraction = again.seconds / two.seconds
    print(f"{'run':<10} {'workers':>7} {'seconds':>9} {'images/s':>9} {'vs 1 worker':>12}")
    for label, workers, s in runs:
        # A re-run extracts nothing, so it has no images/s of its own.
        rate = f"{args.images / s.seconds:9.1f}" if s.new else f"{'-':>9}"
        ratio = one.seconds / s.seconds
        print(f"{label:<10} {workers:>7} {s.seconds:>9.2f} {rate} {ratio:>11.2f}x")
    print(f"speed-up with 2 workers: {rate_2 / rate_1:.2f}x (target >= 1.7x); "
          f"re-run: {100 * rerun_fraction:.1f} % of the first run (target < 5 %)")
    print(json.dumps({
        "benchmark": "extract_catalogue",
        "images": args.images,
        "size": args.size,
        "images_per_s_1": round(rate_1, 2),
        "images_per_s_2": round(rate_2, 2),
        "speedup_2": round(rate_2 / rate_1, 3),
        "rerun_fraction": round(rerun_fraction, 4),
        "rerun_seconds": round(again.seconds, 3),
        "targets_met": bool(rate_2 / rate_1 >= 1.7 and rerun_fraction < 0.05),
    }))


if __name__ == "__main__":
    main()
