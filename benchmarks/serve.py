"""Requests per second and latency of ``harmony serve`` over loopback, on the demo shop and a 50k store.

Starts the server as its own process on a free port of 127.0.0.1, sends a fixed number of
requests from 1, 8 and 32 concurrent clients (httpx's async client, one keep-alive connection
per client) and prints requests/s and p50/p99 latency of the partners endpoint
(``/v1/products/{id}/partners?category=CAT&top=10``), first for queries the server has not seen
(cold: one screen row + exact re-rank each), then repeated (served from its cache of computed
partners). The baseline is ``/v1/health`` at 32 clients in the same run, through the same client
and server: it is the cost of HTTP alone.

The synthetic store holds ``--products`` palettes (50,000 by default) in 10 categories, generated
directly (no photos), written through the store's own API. Target on a 2-core machine: at least
500 requests/s with p99 at most 50 ms at 32 clients on the 50k store (warm). Ends with one JSON
line. Timings are noisy when other processes use the cores: the load average is printed.

Talks only to 127.0.0.1; the server process is always stopped.
"""

import argparse
import asyncio
import json
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx
import numpy as np

from harmony import colour
from harmony.photo.palette import Palette
from harmony.resources import SHOP_DIR
from harmony.shop.catalogue import Catalogue, Product
from harmony.shop.store import FileHash, Store

#: Categories of the synthetic store: ten the shipped rules pair with each other.
CATEGORIES = ("sofa", "rug", "armchair", "cushion", "coffee table", "floor lamp", "dining table",
              "dining chair", "pendant lamp", "bed")

SERVER_CODE = "from harmony.cli import main; main()"


def synthetic_store(path, n, rng):
    """A store of ``n`` products with generated palettes (3-8 colours: a base colour, shades, accents)."""
    products, hashes, results = [], {}, []
    folder = os.path.dirname(os.path.abspath(path))
    for i in range(n):
        cat = CATEGORIES[i % len(CATEGORIES)]
        pid = f"S{i:06d}"
        image = f"img/{pid}.jpg"
        products.append(Product(id=pid, category=cat, price=float(rng.integers(20, 2000)),
                                stock=None if i % 7 else 0, title=f"synthetic {cat} {i}", currency="EUR",
                                images=(image,), attributes={}))
        sha = f"{i:064x}"
        hashes[os.path.normpath(os.path.join(folder, image))] = FileHash(os.path.join(folder, image), sha, 1, 1)
    ks = rng.integers(3, 9, n)
    base = rng.random((n, 1, 3))
    srgb = np.clip(np.where(rng.random((n, 8, 1)) < 0.3, rng.random((n, 8, 3)),
                            base + rng.normal(0.0, 0.08, (n, 8, 3))), 0.0, 1.0)
    jab = colour.srgb1_to_jab(srgb)
    for i in range(n):
        k = int(ks[i])
        w = np.sort(rng.dirichlet(np.full(k, 0.7)))[::-1]
        pal = Palette(jab=jab[i, :k], weights=w, sha256=f"{i:064x}", width=256, height=256, background_jab=None,
                      background_share=0.0, scene=False, confidence=1.0, source="")
        results.append((pal.sha256, pal, None))
    cat = Catalogue(products=tuple(products), problems=(), path=Path(folder) / "catalogue.csv")
    with Store.create(path) as store:
        store.sync_catalogue(cat, hashes, "synthetic")
        for r0 in range(0, n, 5000):
            store.record(results[r0 : r0 + 5000], "synthetic")
    return [(p.id, p.category) for p in products]


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_server(db, port):
    proc = subprocess.Popen([sys.executable, "-c", SERVER_CODE, "serve", "--db", str(db), "--port", str(port)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 900
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"the server exited with status {proc.returncode}")
        time.sleep(0.2)
        try:
            health = httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=1.0)
            # Wait for the screens of the large categories, built in the background after loading.
            if health.status_code == 200 and not health.json()["warming_up"]:
                return proc
        except httpx.HTTPError:
            pass
    proc.kill()
    raise SystemExit("the server was not ready within 900 s")


async def _load(base, paths, clients):
    """Send every path once, ``clients`` at a time; (seconds, latencies in ms, non-200 count)."""
    it = iter(paths)
    latencies, bad = [], 0
    limits = httpx.Limits(max_connections=clients, max_keepalive_connections=clients)
    async with httpx.AsyncClient(base_url=base, limits=limits, timeout=60.0) as client:
        async def worker():
            nonlocal bad
            for path in it:
                t0 = time.perf_counter()
                try:
                    r = await client.get(path)
                    bad += r.status_code != 200
                except httpx.TransportError:  # counted, not fatal: the figures say how many
                    bad += 1
                latencies.append((time.perf_counter() - t0) * 1000.0)
        t0 = time.perf_counter()
        await asyncio.gather(*(worker() for _ in range(clients)))
        return time.perf_counter() - t0, np.array(latencies), bad


def measure(base, paths, clients):
    seconds, lat, bad = asyncio.run(_load(base, paths, clients))
    return {"clients": clients, "requests": len(paths), "rps": len(paths) / seconds,
            "p50_ms": float(np.percentile(lat, 50)), "p99_ms": float(np.percentile(lat, 99)), "errors": int(bad)}


def partner_paths(pairs, rules, count, rng):
    """``count`` partner queries of distinct products, each for one category its own pairs with."""
    cats = sorted({c for _, c in pairs})
    pick = rng.choice(len(pairs), size=min(count, len(pairs)), replace=False)
    out = []
    for i in pick:
        pid, own = pairs[int(i)]
        targets = [c for c in cats if rules.pairs_with(own, c)]
        cat = targets[int(rng.integers(len(targets)))]
        out.append(f"/v1/products/{pid}/partners?category={cat.replace(' ', '%20')}&top=10")
    return out


def run_store(label, db, pairs, args, rules, rng):
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    proc = start_server(db, port)
    rows = []
    try:
        queries = partner_paths(pairs, rules, args.distinct, rng)
        cold = measure(base, queries, 8)
        rows.append({"store": label, "endpoint": "partners (cold)", **cold})
        for clients in (1, 8, 32):
            paths = [queries[i % len(queries)] for i in range(args.requests)]
            rows.append({"store": label, "endpoint": "partners", **measure(base, paths, clients)})
        rows.append({"store": label, "endpoint": "health (baseline)",
                     **measure(base, ["/v1/health"] * args.requests, 32)})
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--products", type=int, default=50_000, help="products of the synthetic store")
    ap.add_argument("--requests", type=int, default=3000, help="requests per measurement")
    ap.add_argument("--distinct", type=int, default=300, help="distinct partner queries (the cold pass)")
    ap.add_argument("--seed", type=int, default=20261216)
    args = ap.parse_args(argv)
    from harmony.rules import load_rules

    rules = load_rules()
    rng = np.random.default_rng(args.seed)
    work = Path(tempfile.mkdtemp(prefix="harmony-serve-bench-"))
    rows = []
    try:
        demo_db = work / "demo.db"
        subprocess.run([sys.executable, "-c", SERVER_CODE, "extract", str(SHOP_DIR / "catalogue.csv"),
                        "--db", str(demo_db)], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        with Store(demo_db, read_only=True) as store:
            demo_pairs = [(p.id, p.category_key) for p in store.products()]
        rows += run_store("demo", demo_db, demo_pairs, args, rules, rng)
        t0 = time.perf_counter()
        big_db = work / "synthetic.db"
        big_pairs = synthetic_store(big_db, args.products, rng)
        print(f"synthetic store of {args.products} products written in {time.perf_counter() - t0:.1f} s",
              file=sys.stderr)
        rows += run_store(f"{args.products // 1000}k", big_db, big_pairs, args, rules, rng)
    finally:
        shutil.rmtree(work, ignore_errors=True)

    load = open("/proc/loadavg").read().split()[:3] if os.path.exists("/proc/loadavg") else ["?"] * 3
    print(f"load average: {' '.join(load)} (cores: {os.cpu_count()})")
    print(f"{'store':<6} {'endpoint':<18} {'clients':>7} {'requests':>8} {'req/s':>8} {'p50 ms':>7} {'p99 ms':>7} {'errors':>6}")
    for r in rows:
        print(f"{r['store']:<6} {r['endpoint']:<18} {r['clients']:>7} {r['requests']:>8} {r['rps']:>8.0f} "
              f"{r['p50_ms']:>7.1f} {r['p99_ms']:>7.1f} {r['errors']:>6}")
    big = [r for r in rows if r["store"] != "demo"]
    warm32 = next(r for r in big if r["endpoint"] == "partners" and r["clients"] == 32)
    cold = next(r for r in big if r["endpoint"] == "partners (cold)")
    health = next(r for r in big if r["endpoint"].startswith("health"))
    summary = {
        "products": args.products,
        "rps_32": round(warm32["rps"], 1),
        "p50_ms_32": round(warm32["p50_ms"], 2),
        "p99_ms_32": round(warm32["p99_ms"], 2),
        "cold_rps_8": round(cold["rps"], 1),
        "cold_p99_ms_8": round(cold["p99_ms"], 2),
        "health_rps_32": round(health["rps"], 1),
        "ratio_vs_health": round(warm32["rps"] / health["rps"], 3),
        "target_met": bool(warm32["rps"] >= 500 and warm32["p99_ms"] <= 50),
        "errors": sum(r["errors"] for r in rows),
        "loadavg": [float(x) for x in load] if load[0] != "?" else None,
    }
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
