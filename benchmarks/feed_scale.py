"""The feed at a shop's scale: synthetic stores of 1k, 10k and 50k products over 10 categories.

Each size runs in its own process (so its peak resident memory is its own): a synthetic store
is made (palettes generated directly, no photos: benchmark inputs, not check values), then
``harmony.suggest.feed_run.write_feed_stream`` writes the JSONL feed (top 10, default rules).
The local engine runs the category pairs in its default number of worker processes (the cores,
at most 2). Prints seconds, rows per second and peak RSS per size (the parent's plus the
workers': an upper bound of their sum), and a baseline measured in the same run:
the old per-row path (each listed pair scored again and explained by ``pair_scores``) on rows of
the smallest store, for the ratio column. Ends with one JSON line for the largest size:
``{"products": 50000, "seconds": ..., "peak_rss_mb": ..., "rows": ...}``.

Targets on a 2-core machine for 50k products: at most 90 s and 1,000 MB.
"""

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

CATEGORIES = ("sofa", "rug", "armchair", "coffee table", "floor lamp", "cushion", "curtain",
              "dining table", "dining chair", "pendant lamp")


def synthetic_palettes(n, rng, k_max=10):
    """Palettes of 3..k_max colours from uniform random sRGB, weights Dirichlet, heaviest first."""
    from harmony import colour
    from harmony.photo.palette import Palette

    ks = rng.integers(3, k_max + 1, n)
    jab = colour.srgb1_to_jab(rng.random((n * k_max, 3))).reshape(n, k_max, 3)
    out = []
    for i in range(n):
        w = np.sort(rng.dirichlet(np.ones(ks[i])))[::-1]
        out.append(Palette(jab[i, : ks[i]], w))
    return out


def make_store(folder, products, seed=14, out_of_stock=0.05):
    """A store of ``products`` products spread evenly over CATEGORIES, 5 % out of stock."""
    from harmony.shop.catalogue import Catalogue, Product
    from harmony.shop.store import FileHash, Store

    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    gone = rng.random(products) < out_of_stock
    items = tuple(
        Product(id=f"P{i:07d}", category=CATEGORIES[i % len(CATEGORIES)], price=100.0,
                stock=0 if gone[i] else None, title=f"Item {i}", currency="EUR", images=(f"img/{i}.jpg",))
        for i in range(products)
    )
    catalogue = Catalogue(products=items, problems=(), path=(folder / "catalogue.csv").resolve(), skipped_rows=0)
    hashes = {}
    for p in items:
        path = catalogue.image_file(p.images[0])
        hashes[path] = FileHash(path, f"sha-{p.id}", 1, 0)
    pals = synthetic_palettes(products, rng)
    db = folder / "harmony.db"
    with Store.create(db) as store:
        store.sync_catalogue(catalogue, hashes, "synthetic")
        store.record([(f"sha-{p.id}", pal, None) for p, pal in zip(items, pals)], "synthetic")
    return db


def peak_rss_mb():
    """Peak resident memory of this process plus, per worker process of the local engine, the
    largest peak of any worker (an upper bound of the processes' sum at any moment)."""
    from harmony.suggest.feed_pool import default_workers

    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    child = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return (own + (default_workers() * child if default_workers() > 1 else 0)) / 1024.0


def run_one(products, folder):
    """In a child process: make the store, write the feed, print one JSON line."""
    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.feed_run import write_feed_stream

    t0 = time.perf_counter()
    db = make_store(Path(folder) / f"s{products}", products)
    store_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    with Store(db) as store:
        _, rows, _ = write_feed_stream(store, load_rules(), Path(folder) / f"feed{products}.jsonl", top=10,
                                       warn=lambda m: None)
    seconds = time.perf_counter() - t0
    print(json.dumps({"products": products, "seconds": round(seconds, 2), "rows": rows,
                      "peak_rss_mb": round(peak_rss_mb(), 1), "store_seconds": round(store_s, 2)}))


def baseline(folder, rows_wanted=3000):
    """Rows per second of the old per-row path: pair_scores on listed pairs of the 1k store."""
    from harmony.rules import load_rules
    from harmony.rules.score import colour_labels, pair_scores
    from harmony.shop.store import Store

    db = Path(folder) / "s1000" / "harmony.db"
    rules = load_rules()
    with Store(db) as store:
        pals = store.palettes()
        products = store.products()
    by_cat = {}
    for p in products:
        by_cat.setdefault(p.category_key, []).append(p.id)
    a, b = sorted(by_cat)[:2]
    pr = rules.for_pair(a, b)
    rng = np.random.default_rng(0)
    ia = rng.choice(by_cat[a], rows_wanted)
    ib = rng.choice(by_cat[b], rows_wanted)
    t = pr.neutral_threshold
    t0 = time.perf_counter()
    labels = {}
    for pid in set(ia) | set(ib):
        labels[pid] = colour_labels(pals[pid].jab, t)
    pair_scores([pals[i] for i in ia], [pals[j] for j in ib], pr,
                labels_a=[labels[i] for i in ia], labels_b=[labels[j] for j in ib])
    return rows_wanted / (time.perf_counter() - t0)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1000,10000,50000", help="products per store, comma-separated")
    ap.add_argument("--child", type=int, default=0, help=argparse.SUPPRESS)
    ap.add_argument("--folder", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        run_one(args.child, args.folder)
        return
    sizes = sorted(int(s) for s in args.sizes.split(","))
    if 1000 not in sizes:
        sizes = [1000] + sizes  # the baseline runs on the 1k store
    results = []
    with tempfile.TemporaryDirectory(prefix="feed-scale-") as folder:
        for n in sizes:
            out = subprocess.run([sys.executable, __file__, "--child", str(n), "--folder", folder],
                                 check=True, capture_output=True, text=True)
            results.append(json.loads(out.stdout.strip().splitlines()[-1]))
        base_rate = baseline(folder)
    print(f"load average at the end: {os.getloadavg()[0]:.2f} (noisy when other processes use the cores)")
    print(f"baseline: old per-row path (pair_scores on each listed pair) {base_rate:,.0f} rows/s")
    print(f"{'products':>9} {'rows':>10} {'seconds':>9} {'rows/s':>10} {'vs baseline':>12} {'peak RSS MB':>12}")
    for r in results:
        rate = r["rows"] / r["seconds"]
        print(f"{r['products']:>9,} {r['rows']:>10,} {r['seconds']:>9.1f} {rate:>10,.0f} "
              f"{rate / base_rate:>11.1f}x {r['peak_rss_mb']:>12.0f}")
    if len(results) >= 2:
        # Seconds per product between the two largest sizes, extrapolated to 1M products.
        a, b = results[-2], results[-1]
        slope = (b["seconds"] - a["seconds"]) / (b["products"] - a["products"])
        print(f"slope {slope * 1000:.2f} s per 1,000 products; 1,000,000 products about "
              f"{(b['seconds'] + slope * (1_000_000 - b['products'])) / 60:.0f} min on one machine")
    last = results[-1]
    sys.stdout.flush()
    print(json.dumps({"products": last["products"], "seconds": last["seconds"],
                      "peak_rss_mb": last["peak_rss_mb"], "rows": last["rows"]}))


if __name__ == "__main__":
    main()
