"""Requests per second and latency of ``harmony serve`` over loopback, on the demo shop and a 50k store.

Starts the server as its own process on a free port of 127.0.0.1, sends a fixed number of
requests from 1, 8 and 32 concurrent clients and prints requests/s and p50/p99 latency of the
partners endpoint (``/v1/products/{id}/partners?category=CAT&top=10``), first for queries the
server has not seen (cold: one screen row + exact re-rank each), then repeated (served from its
cache of computed answers). The baseline is ``/v1/health`` at 32 clients in the same run, through
the same client and server: a request routed through the application and answered with a small
JSON object computed each time.

The load generator is a minimal HTTP/1.1 client over asyncio streams (uvloop when installed), in
its own process (``--client-procs`` of them): one keep-alive connection per client, each request
written whole, the answer read by its ``Content-Length``. On a 2-core machine the client shares
the cores with the server, so it must cost less per request than the server does, or the figures
measure the client: httpx's async client spent more CPU per request than the server answering
from its cache. httpx stays the client of the tests, where correctness matters and speed does not.
The table also gives the CPU time per request of the server process (from ``/proc``) and of the
client processes: those depend far less on other processes' load than requests/s do.

The synthetic store holds ``--products`` palettes (50,000 by default) in 10 categories, generated
directly (no photos), written through the store's own API. Target on a 2-core machine: at least
500 requests/s with p99 at most 50 ms at 32 clients on the 50k store (warm). Ends with one JSON
line. Timings are noisy when other processes use the cores: the load average is printed.

Talks only to 127.0.0.1, sends a bounded number of requests, and always stops the server process.
"""

import argparse
import asyncio
import json
import multiprocessing
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


async def _drive(port, paths, clients):
    """Send every path once over ``clients`` keep-alive connections; (start, end, latencies ms, errors).

    A minimal HTTP/1.1 client over asyncio streams: one ``GET`` written whole, the status line and
    headers read up to the blank line, the body read by its ``Content-Length`` (the server always
    sends one). A connection the server drops is counted as an error and opened again.
    """
    requests = [f"GET {p} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n\r\n".encode("ascii") for p in paths]
    it = iter(requests)
    latencies, bad = [], 0
    conns = [await asyncio.open_connection("127.0.0.1", port) for _ in range(clients)]

    async def worker(reader, writer):
        nonlocal bad
        for req in it:
            t0 = time.perf_counter()
            try:
                writer.write(req)
                head = await reader.readuntil(b"\r\n\r\n")
                length = 0
                for line in head.split(b"\r\n")[1:]:
                    if line[:15].lower() == b"content-length:":
                        length = int(line[15:])
                        break
                await reader.readexactly(length)
                bad += head[9:12] != b"200"
            except (OSError, asyncio.IncompleteReadError, asyncio.LimitOverrunError, ValueError):
                bad += 1  # counted, not fatal: the figures say how many
                writer.close()
                reader, writer = await asyncio.open_connection("127.0.0.1", port)
            latencies.append((time.perf_counter() - t0) * 1000.0)
        writer.close()

    start, cpu = time.monotonic(), time.process_time()
    await asyncio.gather(*(worker(r, w) for r, w in conns))
    return start, time.monotonic(), latencies, bad, time.process_time() - cpu


def client_process(port, paths, clients):
    """Run :func:`_drive` in this process (a child of the benchmark), on uvloop when installed."""
    try:
        import uvloop
    except ImportError:
        uvloop = None
    if uvloop is not None and hasattr(uvloop, "run"):  # uvloop.run: 0.18 and later
        return uvloop.run(_drive(port, paths, clients))
    return asyncio.run(_drive(port, paths, clients))


def cpu_seconds(pids):
    """User + system CPU seconds used so far by the processes ``pids`` (Linux /proc), or None."""
    total = 0
    try:
        for pid in pids:
            with open(f"/proc/{pid}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            total += int(fields[11]) + int(fields[12])  # utime, stime in clock ticks (proc(5))
    except (OSError, IndexError, ValueError):
        return None
    return total / os.sysconf("SC_CLK_TCK")


def measure(port, paths, clients, procs=1, server_pids=()):
    """requests/s and p50/p99 latency of ``paths`` sent by ``clients`` connections from ``procs``
    client processes (the connections and paths split evenly between them), and the CPU time per
    request of the server processes ``server_pids`` and of the client processes."""
    procs = max(1, min(procs, clients))
    ctx = multiprocessing.get_context("spawn")
    with ctx.Pool(procs) as pool:
        pool.map(time.sleep, [0.0] * procs)  # the clients' interpreters are up before the clock starts
        cpu0 = cpu_seconds(server_pids)
        jobs = [pool.apply_async(client_process, (port, paths[i::procs], clients // procs + (i < clients % procs)))
                for i in range(procs)]
        results = [job.get(timeout=3600) for job in jobs]
        cpu1 = cpu_seconds(server_pids)
    seconds = max(r[1] for r in results) - min(r[0] for r in results)
    lat = np.concatenate([np.asarray(r[2]) for r in results])
    bad = sum(r[3] for r in results)
    n = len(paths)
    return {"clients": clients, "requests": n, "rps": n / seconds,
            "p50_ms": float(np.percentile(lat, 50)), "p99_ms": float(np.percentile(lat, 99)), "errors": int(bad),
            "server_cpu_us": None if cpu0 is None or cpu1 is None else (cpu1 - cpu0) / n * 1e6,
            "client_cpu_us": sum(r[4] for r in results) / n * 1e6}


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
    proc = start_server(db, port)
    pids = [proc.pid]
    rows = []
    try:
        queries = partner_paths(pairs, rules, args.distinct, rng)
        cold = measure(port, queries, 8, args.client_procs, pids)
        rows.append({"store": label, "endpoint": "partners (cold)", **cold})
        for clients in (1, 8, 32):
            paths = [queries[i % len(queries)] for i in range(args.requests)]
            rows.append({"store": label, "endpoint": "partners", **measure(port, paths, clients, args.client_procs, pids)})
        rows.append({"store": label, "endpoint": "health (baseline)",
                     **measure(port, ["/v1/health"] * args.requests, 32, args.client_procs, pids)})
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
    ap.add_argument("--client-procs", type=int, default=1, help="load generator processes")
    ap.add_argument("--skip-demo", action="store_true", help="measure the synthetic store only")
    args = ap.parse_args(argv)
    from harmony.rules import load_rules

    rules = load_rules()
    rng = np.random.default_rng(args.seed)
    work = Path(tempfile.mkdtemp(prefix="harmony-serve-bench-"))
    rows = []
    try:
        if not args.skip_demo:
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
    print(f"{'store':<6} {'endpoint':<18} {'clients':>7} {'requests':>8} {'req/s':>8} {'p50 ms':>7} {'p99 ms':>7} "
          f"{'errors':>6} {'server us/req':>13} {'client us/req':>13}")
    for r in rows:
        server_us = "?" if r["server_cpu_us"] is None else f"{r['server_cpu_us']:.0f}"
        print(f"{r['store']:<6} {r['endpoint']:<18} {r['clients']:>7} {r['requests']:>8} {r['rps']:>8.0f} "
              f"{r['p50_ms']:>7.1f} {r['p99_ms']:>7.1f} {r['errors']:>6} {server_us:>13} {r['client_cpu_us']:>13.0f}")
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
        "server_cpu_us_32": None if warm32["server_cpu_us"] is None else round(warm32["server_cpu_us"], 1),
        "client_cpu_us_32": round(warm32["client_cpu_us"], 1),
        "target_met": bool(warm32["rps"] >= 500 and warm32["p99_ms"] <= 50),
        "errors": sum(r["errors"] for r in rows),
        "loadavg": [float(x) for x in load] if load[0] != "?" else None,
    }
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
