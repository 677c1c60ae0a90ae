"""Look-alikes of one category: EMD in CAM02-UCS (screened by the centroid bound) against the plain
nearest-colour ΔE*ab method, for speed and for agreement.

For ``--queries`` products of ``--n`` synthetic palettes of one category it times:

- nearest colour ΔE*ab (baseline): each colour's share × distance to the nearest colour of the
  other palette, summed both ways, in CIELAB (CIE 1976), vectorised over all candidates;
- EMD, all pairs: the exact EMD in CAM02-UCS against every candidate, solved in one batch;
- EMD, screened: the same top-10, with candidates visited in the order of the centroid lower
  bound (Rubner et al. 2000, section 4.2) and the search stopped once the bound passes the 10th best.

Agreement: Spearman rank correlation of the two distances over all candidates of a query (mean over
queries) and the overlap of their top-10 lists; recall@10 of the screened EMD against all-pairs EMD.
Prints a table with times relative to the baseline measured in the same run, and ends with one JSON
line. Timings are noisy when other processes use the cores.
"""

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
from colorspacious import cspace_convert
from scipy.stats import spearmanr

from _revision import load_average

from harmony import colour
from harmony.colour.space import CAM02UCS
from harmony.photo.palette import Palette
from harmony.colour.emd import emd_pairs, signature
from harmony.suggest.lookalike import top_similar

TOP = 10


def synthetic_palettes(n, rng, k=8):
    """Plausible furniture palettes: a base colour, shades of it and a few accents (sRGB -> CAM02-UCS)."""
    base = rng.random((n, 1, 3))
    shades = base + rng.normal(0.0, 0.08, (n, k, 3))
    accents = rng.random((n, k, 3))
    srgb1 = np.clip(np.where(rng.random((n, k, 1)) < 0.3, accents, shades), 0.0, 1.0)
    weights = np.sort(rng.dirichlet(np.full(k, 0.7), n), axis=1)[:, ::-1]
    return colour.srgb1_to_jab(srgb1), weights


def nearest_colour_all(lab_q, w_q, lab, w):
    """Baseline distance from one palette (k, 3) to n palettes (n, m, 3), shares summing to 1."""
    d = np.sqrt(((lab_q[None, :, None, :] - lab[:, None, :, :]) ** 2).sum(axis=-1))  # (n, k, m)
    return d.min(axis=2) @ w_q + (d.min(axis=1) * w).sum(axis=1)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2000, help="palettes in the category")
    ap.add_argument("--queries", type=int, default=30, help="query products")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--picture", metavar="PNG", help="also draw the table as a bar chart (needs chromium)")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    jab, w = synthetic_palettes(args.n, rng)
    lab = cspace_convert(jab, CAM02UCS, "CIELab")
    pals = [Palette(jab=jab[i], weights=w[i]) for i in range(args.n)]
    cents = np.einsum("nk,nkc->nc", w, jab)
    queries = rng.choice(args.n, size=args.queries, replace=False)

    t_base = t_all = t_screen = 0.0
    rho, overlap, recall, solved = [], [], [], 0
    for q in queries:
        rest = np.delete(np.arange(args.n), q)
        t0 = time.perf_counter()
        base = nearest_colour_all(lab[q], w[q], lab[rest], w[rest])
        t_base += time.perf_counter() - t0
        t0 = time.perf_counter()
        first = signature(jab[q], w[q])
        full = emd_pairs([first] * len(rest), [signature(jab[j], w[j]) for j in rest])
        t_all += time.perf_counter() - t0
        t0 = time.perf_counter()
        idx, _dist, n_solved = top_similar(pals[q], [pals[j] for j in rest], TOP, centroids=cents[rest])
        t_screen += time.perf_counter() - t0
        solved += n_solved
        exact_top = set(np.argsort(full, kind="stable")[:TOP].tolist())
        recall.append(len(exact_top & set(idx.tolist())) / TOP)
        rho.append(spearmanr(full, base).statistic)
        overlap.append(len(exact_top & set(np.argsort(base, kind="stable")[:TOP].tolist())) / TOP)

    per_q = lambda t: 1000.0 * t / args.queries
    rows = [
        ("nearest colour dE*ab (baseline)", per_q(t_base), 1.0, "-"),
        ("EMD CAM02-UCS, all pairs", per_q(t_all), t_all / t_base, f"{args.n - 1} EMDs"),
        ("EMD CAM02-UCS, centroid screen", per_q(t_screen), t_screen / t_base,
         f"{solved / args.queries:.0f} EMDs ({solved / (args.queries * (args.n - 1)) * 100:.1f} %)"),
    ]
    print(f"{args.n} palettes of one category, {args.queries} queries, top-{TOP}")
    print(f"{'method':<34} {'ms/query':>9} {'x baseline':>10}  work")
    for name, ms, ratio, work in rows:
        print(f"{name:<34} {ms:>9.2f} {ratio:>10.1f}  {work}")
    print(f"agreement EMD vs nearest colour: Spearman {np.mean(rho):.3f} (min {np.min(rho):.3f}), "
          f"top-{TOP} overlap {np.mean(overlap):.3f}")
    print(f"recall@{TOP} of the screened EMD against all-pairs EMD: {np.mean(recall):.3f}")
    if args.picture:
        notes = [f"Screened EMD: {solved / (args.queries * (args.n - 1)) * 100:.1f} % of EMDs solved, recall@{TOP} "
                 f"against all-pairs EMD {np.mean(recall):.3f}; {t_all / t_screen:.1f}x faster than all pairs, "
                 f"{t_screen / t_base:.1f}x the baseline's time.",
                 f"Agreement EMD vs nearest-colour \u0394E*ab: Spearman {np.mean(rho):.3f}, top-{TOP} overlap "
                 f"{np.mean(overlap):.3f}. Load average {load_average()} on 2 cores."]
        draw(args.picture, f"Look-alikes: {args.n} palettes of one category, top-{TOP} of {args.queries} query products "
             "(ms per query, log scale)", [(name, ms) for name, ms, _, _ in rows], notes)
    print(json.dumps({
        "n": args.n, "queries": args.queries, "ms_per_query_baseline": per_q(t_base),
        "ms_per_query_emd_all": per_q(t_all), "ms_per_query_emd_screened": per_q(t_screen),
        "screened_vs_baseline": t_screen / t_base, "screened_vs_all_pairs": t_all / t_screen,
        "emd_solved_share": solved / (args.queries * (args.n - 1)), "recall_at_10": float(np.mean(recall)),
        "spearman": float(np.mean(rho)), "top10_overlap": float(np.mean(overlap)),
    }))
    return 0


def draw(path, title, bars, notes):
    """A horizontal bar chart on a log scale, as SVG rendered to PNG by headless Chromium."""
    import math
    import shutil
    import subprocess
    import tempfile
    from html import escape

    width, left, bar_h, gap, top = 900, 270, 24, 16, 70
    low = math.log10(min(ms for _, ms in bars)) - 0.5
    high = math.log10(max(ms for _, ms in bars))
    scale = (width - left - 120) / (high - low)
    parts = [f'<text x="8" y="26" font-size="17" font-weight="bold">{escape(title)}</text>']
    for k, (name, ms) in enumerate(sorted(bars, key=lambda b: b[1])):
        y = top + k * (bar_h + gap)
        w = (math.log10(ms) - low) * scale
        parts.append(f'<text x="{left - 6}" y="{y + 17}" font-size="13" text-anchor="end">{escape(name)}</text>'
                     f'<rect x="{left}" y="{y}" width="{w:.1f}" height="{bar_h}" fill="#4a6fa5"/>'
                     f'<text x="{left + w + 5:.1f}" y="{y + 17}" font-size="13">{ms:.0f} ms</text>')
    y = top + len(bars) * (bar_h + gap) + 24
    for k, note in enumerate(notes):
        parts.append(f'<text x="8" y="{y + 20 * k}" font-size="14">{escape(note)}</text>')
    height = y + 20 * len(notes)
    svg = (f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
           f'font-family="Liberation Sans, Arial, sans-serif"><rect width="100%" height="100%" fill="white"/>'
           + "".join(parts) + "</svg>")
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        raise SystemExit("error: --picture needs chromium (apt-get install chromium)")
    with tempfile.TemporaryDirectory() as folder:
        page = Path(folder) / "chart.html"
        page.write_text(f"<html><body style='margin:0'>{svg}</body></html>", encoding="utf-8")
        subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
                        f"--user-data-dir={folder}/profile", f"--screenshot={Path(path).resolve()}",
                        f"--window-size={width},{height}", page.as_uri()],
                       check=True, capture_output=True, timeout=120)


if __name__ == "__main__":
    sys.exit(main())
