"""The invented demo shop "Tovendel": a deterministic generator of its products and photos.

Tovendel does not exist: its name, collections, products, prices and photos are all made up here,
for the demo and the report only (never as check values). The products follow a few colour
stories (terracotta and sand, teal and brass, sage and oak, navy and cream, charcoal and mustard,
blush and walnut) plus neutrals, so that cross-category harmony has real structure to find.

Photos are drawn with numpy and Pillow: a furniture-like shape per category with a texture per
material (wood grain, fabric weave, metal sheen, wool pile, ...) on a slightly uneven off-white
studio background with a soft contact shadow and JPEG noise. About one product in ten also has a
room-scene photo (wall, floor, window, other furniture, the product in the middle) listed after
the studio photo, and a few have only the room scene.

Everything comes from one seeded :class:`numpy.random.Generator`: the same seed gives
byte-identical files. Regenerate the committed shop with ``python -m harmony.demo.shop``.
"""

import argparse
import csv
import sys
import time
from pathlib import Path

import numpy as np

from harmony.demo.draw import draw_photo, encode_jpeg
from harmony.demo.products import *  # noqa: F401,F403  (one place to reach every name of the shop)
from harmony.demo.products import (
    CATALOGUE_COLUMNS,
    DEFAULT_SEED,
    DEFAULT_SHOP_DIR,
    SHOP_NAME,
    ShopSummary,
    design_products,
)
from harmony.demo.products import __all__ as _products_all

__all__ = [*_products_all, "draw_photo", "encode_jpeg", "write_shop", "main"]

def write_shop(directory=DEFAULT_SHOP_DIR, seed=DEFAULT_SEED, only=None, progress=None):
    """Design the shop from ``seed`` and write ``catalogue.csv`` and ``images/*.jpg`` in ``directory``.

    Parameters
    ----------
    directory : path
        Output folder; created if missing. Existing files of the same names are overwritten, and
        when the whole shop is written, other ``images/*.jpg`` files there are removed.
    seed : int
        Seed of the one :class:`numpy.random.Generator` everything comes from.
    only : iterable of str, optional
        Product ids to write (catalogue rows and photos); all products when None.
    progress : bool, optional
        Show a progress bar; by default only when stderr is a terminal.

    Returns
    -------
    ShopSummary
    """
    from tqdm import tqdm

    start = time.perf_counter()
    directory = Path(directory)
    products = design_products(np.random.default_rng(seed))
    if only is not None:
        wanted = set(only)
        unknown = wanted - {prod.id for prod in products}
        if unknown:
            raise ValueError(f"unknown demo product id(s): {', '.join(sorted(unknown))}")
        products = tuple(prod for prod in products if prod.id in wanted)
    (directory / "images").mkdir(parents=True, exist_ok=True)
    if progress is None:
        progress = sys.stderr.isatty()
    n_images = 0
    for prod in tqdm(products, desc="demo photos", unit="product", disable=not progress):
        for rel, kind in prod.images:
            (directory / rel).write_bytes(encode_jpeg(draw_photo(prod, kind)))
            n_images += 1
    if only is None:  # the whole shop: photos of products that no longer exist would be stray
        listed = {Path(rel).name for prod in products for rel, _ in prod.images}
        for stale in (directory / "images").glob("*.jpg"):
            if stale.name not in listed:
                stale.unlink()
    catalogue = directory / "catalogue.csv"
    with open(catalogue, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=CATALOGUE_COLUMNS, lineterminator="\n")
        writer.writeheader()
        for prod in products:
            writer.writerow(prod.row())
    return ShopSummary(directory, catalogue, len(products), n_images, time.perf_counter() - start)


def main(argv=None):
    """``python -m harmony.demo.shop [--out-dir DIR] [--seed N]``: regenerate the demo shop."""
    parser = argparse.ArgumentParser(prog="python -m harmony.demo.shop",
                                     description=f"Regenerate the invented demo shop {SHOP_NAME}.")
    parser.add_argument("--out-dir", dest="out", default=str(DEFAULT_SHOP_DIR), help="output folder (default: %(default)s)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="generator seed (default: %(default)s)")
    args = parser.parse_args(argv)
    summary = write_shop(args.out, seed=args.seed)
    print(f"{SHOP_NAME}: {summary.products} products, {summary.images} photos in {summary.directory} "
          f"({summary.seconds:.1f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
