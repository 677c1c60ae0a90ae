"""All cross-category pairs at once: soft-binned histograms, one blocked matrix product, exact re-rank.

The exact raw score of two palettes is bilinear in their weights (the contract of
:mod:`harmony.rules.score`)::

    raw(a, b) = w_a @ kernel(jab_a, jab_b) @ w_b

Replace each palette by a histogram ``h`` over a fixed set of bin centres, each colour's weight
spread over its neighbouring centres, and the raw score becomes ``h_a @ K @ h_b`` with the small
bin-by-bin matrix ``K = kernel(centres_a, centres_b)``. For two whole categories that is one matrix
product ``H_a K H_b^T``. K is factorised once by its (full or randomised, :func:`low_rank`)
singular value decomposition and kept to the rank its singular values need,
``(H_a U S)(V^T H_b^T)`` (see :func:`screen_top_k`); the
product is computed tile by tile so memory is bounded by the tile size, and
each product keeps a running top-c of its best partners. The top-c candidates are then re-scored
with the exact kernel, so the final order is the exact order whenever the exact top-k lies inside
the screened top-c; the benchmark measures how often that holds (recall@k).

Bins
----
* chromatic bins: a grid of ``hue_bins`` hue angles (circular) x ``lightness_bins`` lightness
  levels J' in [0, 100]; a colour's chromatic share is spread over the 4 x 4 nearest centres by
  bicubic convolution weights (Keys 1981, the default) or over the 2 x 2 nearest bilinearly
  (``BinGrid.interpolation``), circular in hue and clamped at the ends of J';
* neutral bins: ``lightness_bins`` lightness levels on the grey axis (a' = b' = 0); a colour's
  neutral share is spread over the four (cubic) or two (linear) nearest levels.

The neutral share of a colour is :func:`harmony.colour.neutral.neutrality` (the same smooth fade the
rules use), the chromatic share is the rest. A chromatic centre takes the weighted mean
colourfulness M' of the colours that fell into it (at least the end of the neutral fade, so the
centre is fully chromatic); an empty bin takes :data:`DEFAULT_CENTRE_COLOURFULNESS`.

The approximation ``h_a K h_b`` is the interpolant of the kernel between grid points (bilinear
or bicubic on each side), so for a smooth kernel its error shrinks with the square (linear) or
the cube (cubic) of the bin spacing.
"""

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_limits

from harmony.colour.neutral import NEUTRAL_COLOURFULNESS, NEUTRAL_FADE, neutrality
from harmony.rules.exact import (  # noqa: F401  (re-exported: the screen's re-rank)
    RERANK_CHUNK,
    PaletteStack,
    ScreenResult,
    _order,
    exact_raw,
    exact_raw_candidates,
    exact_top_k,
    outer_form,
    pairwise_form,
)

__all__ = [
    "BinGrid",
    "PaletteStack",
    "ScreenResult",
    "DEFAULT_CENTRE_COLOURFULNESS",
    "histograms",
    "bin_centres",
    "bin_kernel",
    "low_rank",
    "FULL_SVD_SIZE",
    "screen_scores",
    "top_k_blocked",
    "SAMPLE_COLUMNS",
    "exact_raw",
    "exact_raw_candidates",
    "pairwise_form",
    "outer_form",
    "RERANK_CHUNK",
    "exact_top_k",
    "screen_top_k",
]

#: Colourfulness M' of a chromatic bin centre that no colour fell into. Its value does not change
#: any score (the bin has zero weight); it only has to be a plausible chromatic colour. About the
#: M' of Munsell chroma 6 at value 6 (15-22, see the design notes' Munsell measurements).
DEFAULT_CENTRE_COLOURFULNESS = 18.0


@dataclass(frozen=True)
class BinGrid:
    """The bin layout of the screen's histograms.

    Attributes
    ----------
    hue_bins : int
        Number of hue centres on the circle (spacing 360 / hue_bins degrees). The defaults (7.5
        degrees, J' steps of 5, cubic) were chosen by measuring recall@10 against the exact top-10
        under ``rules/default.toml`` on synthetic palettes (``benchmarks/screen.py``).
    lightness_bins : int
        Number of lightness levels J' from 0 to 100, for the chromatic grid and the grey axis.
    neutral_threshold, neutral_fade : float
        The neutral fade of :func:`harmony.colour.neutral.neutrality`; use the rules file's values.
    interpolation : {"cubic", "linear"}
        How a colour's weight is spread over the grid: bilinear over the 2 x 2 nearest centres,
        or bicubic (Keys 1981) over the 4 x 4 nearest, whose weights may be negative but whose
        approximation of a smooth kernel is much closer at the same spacing.
    """

    hue_bins: int = 48
    lightness_bins: int = 21
    neutral_threshold: float = NEUTRAL_COLOURFULNESS
    neutral_fade: float = NEUTRAL_FADE
    interpolation: str = "cubic"

    def __post_init__(self):
        if self.interpolation not in ("linear", "cubic"):
            raise ValueError(f"interpolation must be 'linear' or 'cubic', got {self.interpolation!r}")
        if int(self.hue_bins) < 3:
            raise ValueError(f"hue_bins must be at least 3, got {self.hue_bins!r}")
        if int(self.lightness_bins) < 2:
            raise ValueError(f"lightness_bins must be at least 2, got {self.lightness_bins!r}")
        if not self.neutral_fade >= 0:
            raise ValueError(f"neutral_fade must be >= 0, got {self.neutral_fade!r}")

    @property
    def chromatic_entries(self):
        """Chromatic bins one colour's weight is spread over (4 linear, 16 cubic)."""
        return 4 if self.interpolation == "linear" else 16

    @property
    def n_chromatic(self):
        return int(self.hue_bins) * int(self.lightness_bins)

    @property
    def size(self):
        """Total number of bins: chromatic grid plus the grey axis."""
        return self.n_chromatic + int(self.lightness_bins)

    @property
    def hue_centres_deg(self):
        return np.arange(int(self.hue_bins)) * (360.0 / int(self.hue_bins))

    @property
    def lightness_centres(self):
        return np.linspace(0.0, 100.0, int(self.lightness_bins))

    @property
    def fully_chromatic_colourfulness(self):
        """The M' at which :func:`neutrality` reaches 0 (end of the fade)."""
        return float(self.neutral_threshold) + float(self.neutral_fade) / 2.0


def _axis_weights(pos, n, circular, interpolation):
    """Nodes and weights interpolating at fractional grid positions ``pos`` on ``n`` nodes.

    Linear: the two nearest nodes. Cubic: the four nearest nodes with the cubic convolution
    weights of Keys (1981), a = -1/2 (the Catmull-Rom spline), which reproduce polynomials up to
    degree 2 and make the interpolation error O(h^3) instead of O(h^2). Off a non-circular axis
    the nodes are clamped to the ends (the end value is repeated).

    References
    ----------
    R. G. Keys (1981). Cubic convolution interpolation for digital image processing.
        IEEE Trans. Acoustics, Speech and Signal Processing 29(6):1153-1160.
    """
    if circular:
        i0 = np.floor(pos)
    else:
        i0 = np.minimum(np.floor(pos), n - 2)
    t = pos - i0
    i0 = i0.astype(np.int64)
    if interpolation == "linear":
        offsets = (0, 1)
        weights = (1.0 - t, t)
    else:
        t2, t3 = t * t, t * t * t
        offsets = (-1, 0, 1, 2)
        weights = (
            0.5 * (-t3 + 2.0 * t2 - t),
            0.5 * (3.0 * t3 - 5.0 * t2 + 2.0),
            0.5 * (-3.0 * t3 + 4.0 * t2 + t),
            0.5 * (t3 - t2),
        )
    nodes = [(i0 + o) % n if circular else np.clip(i0 + o, 0, n - 1) for o in offsets]
    return np.stack(nodes, axis=-1), np.stack(weights, axis=-1)


def _shares(jab, grid):
    """Bin indices and weights of each colour's soft assignment, shape (..., grid.entries) each.

    The first ``grid.chromatic_entries`` entries are chromatic bins, the rest grey-axis bins.
    """
    jab = np.asarray(jab, dtype=float)
    nh, nl = int(grid.hue_bins), int(grid.lightness_bins)
    neutral = neutrality(jab, grid.neutral_threshold, grid.neutral_fade)
    chroma = 1.0 - neutral
    hue = np.degrees(np.arctan2(jab[..., 2], jab[..., 1])) % 360.0
    h_nodes, h_w = _axis_weights(hue / (360.0 / nh), nh, True, grid.interpolation)
    lpos = np.clip(jab[..., 0], 0.0, 100.0) / (100.0 / (nl - 1))
    l_nodes, l_w = _axis_weights(lpos, nl, False, grid.interpolation)
    shape = jab.shape[:-1]
    chrom_idx = (h_nodes[..., :, None] * nl + l_nodes[..., None, :]).reshape(shape + (-1,))
    chrom_w = (h_w[..., :, None] * l_w[..., None, :]).reshape(shape + (-1,)) * chroma[..., None]
    idx = np.concatenate([chrom_idx, grid.n_chromatic + l_nodes], axis=-1)
    share = np.concatenate([chrom_w, l_w * neutral[..., None]], axis=-1)
    return idx, share


def _bin_colourfulness(stack, idx, w, grid):
    """Weighted mean M' of the chromatic mass in each chromatic bin (NaN where a bin is empty)."""
    m = np.hypot(stack.jab[..., 1], stack.jab[..., 2])
    e = grid.chromatic_entries
    chrom = idx[..., :e].ravel()
    # Cubic weights can be negative; the mean uses their magnitudes.
    cw = np.abs(w[..., :e])
    mass = np.bincount(chrom, weights=cw.ravel(), minlength=grid.n_chromatic)
    m_sum = np.bincount(chrom, weights=(cw * m[..., None]).ravel(), minlength=grid.n_chromatic)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(mass > 0, m_sum / np.where(mass > 0, mass, 1.0), np.nan)


def _weighted_shares(stack, grid):
    idx, share = _shares(stack.jab, grid)
    return idx, share * stack.weights[..., None]


def _dense(idx, w, size):
    n = idx.shape[0]
    rows = np.broadcast_to(np.arange(n)[:, None, None], idx.shape)
    flat = (rows * size + idx).ravel()
    return np.bincount(flat, weights=w.ravel(), minlength=n * size).reshape(n, size)


def histograms(palettes, grid=BinGrid()):
    """Soft-binned histograms of palettes, and the mean colourfulness of each chromatic bin.

    Parameters
    ----------
    palettes : sequence of Palette or PaletteStack
    grid : BinGrid

    Returns
    -------
    hist : ndarray, shape (n, grid.size)
        Row i is palette i's weight spread over the bins; rows sum to 1.
    bin_colourfulness : ndarray, shape (grid.n_chromatic,)
        Weighted mean M' of the chromatic mass in each chromatic bin (NaN where the bin is empty).
    """
    stack = PaletteStack.from_palettes(palettes)
    idx, w = _weighted_shares(stack, grid)
    return _dense(idx, w, grid.size), _bin_colourfulness(stack, idx, w, grid)


def bin_centres(grid=BinGrid(), bin_colourfulness=None):
    """CAM02-UCS J'a'b' of every bin centre, shape (grid.size, 3), in histogram order.

    ``bin_colourfulness`` (from :func:`histograms`) sets each chromatic centre's M'; it is raised
    to at least the end of the neutral fade so a chromatic centre is fully chromatic.
    """
    nh, nl = int(grid.hue_bins), int(grid.lightness_bins)
    hue = np.radians(np.repeat(grid.hue_centres_deg, nl))
    j_chrom = np.tile(grid.lightness_centres, nh)
    m = np.full(grid.n_chromatic, DEFAULT_CENTRE_COLOURFULNESS)
    if bin_colourfulness is not None:
        given = np.asarray(bin_colourfulness, dtype=float)
        if given.shape != (grid.n_chromatic,):
            raise ValueError(f"bin_colourfulness must have shape ({grid.n_chromatic},), got {given.shape}")
        m = np.where(np.isfinite(given), given, m)
    m = np.maximum(m, grid.fully_chromatic_colourfulness + 1e-6)
    chrom = np.stack([j_chrom, m * np.cos(hue), m * np.sin(hue)], axis=-1)
    grey = np.stack([grid.lightness_centres, np.zeros(nl), np.zeros(nl)], axis=-1)
    return np.concatenate([chrom, grey], axis=0)


def bin_kernel(kernel, centres_a, centres_b, chunk=RERANK_CHUNK):
    """K = kernel(centres_a, centres_b), checked to have shape (len(a), len(b)) and finite values.

    ``kernel`` as in :func:`pairwise_form`. Evaluated in row blocks of about ``chunk`` colour pairs
    (each row of K depends on its own centre of side a only, so the bits are those of one call),
    whose temporaries stay in the processor's cache: a third of the time of one call over a
    1,000 x 1,000 kernel.
    """
    outer = outer_form(kernel)
    want = (len(centres_a), len(centres_b))
    rows = max(1, int(chunk) // max(1, want[1]))
    if want[0] <= rows:
        k = np.asarray(outer(centres_a, centres_b), dtype=float)
    else:
        k = np.concatenate([np.asarray(outer(centres_a[r0 : r0 + rows], centres_b), dtype=float)
                            for r0 in range(0, want[0], rows)])
    if k.shape != want:
        raise ValueError(f"kernel returned shape {k.shape}, expected {want}")
    if not np.all(np.isfinite(k)):
        raise ValueError("kernel returned non-finite values on the bin centres")
    return k


def _project(idx, w, factor, size, block):
    """``histograms @ factor`` in row chunks of ``block`` palettes, as float32 (n, r), and the
    largest 2-norm of a histogram."""
    n = idx.shape[0]
    out = np.empty((n, factor.shape[1]), dtype=np.float32)
    norm = 0.0
    for r0 in range(0, n, block):
        hist = _dense(idx[r0 : r0 + block], w[r0 : r0 + block], size)
        out[r0 : r0 + block] = hist @ factor
        norm = max(norm, float(np.sqrt(np.einsum("ij,ij->i", hist, hist)).max()))  # no temporary
    return out, norm


@dataclass(frozen=True, eq=False)
class _Prepared:
    stack_a: PaletteStack
    stack_b: PaletteStack
    q: np.ndarray  # (n_a, r) float32: H_a U S
    hb: np.ndarray  # (r, n_b) float32: V^T H_b^T
    rank: int
    bound: float  # largest change of a screened score from dropping singular values


def _both(f, args_a, args_b, workers):
    """``(f(*args_a), f(*args_b))``, the two calls in two threads (one BLAS thread each) when
    ``workers > 1``; each call gives the same bits either way."""
    if workers <= 1:
        return f(*args_a), f(*args_b)
    with threadpool_limits(limits=1), ThreadPoolExecutor(max_workers=2) as pool:
        fa, fb = pool.submit(f, *args_a), pool.submit(f, *args_b)
        return fa.result(), fb.result()


def _binned(stack, grid):
    idx, w = _weighted_shares(stack, grid)
    return idx, w, bin_centres(grid, _bin_colourfulness(stack, idx, w, grid))


def _prepare(palettes_a, palettes_b, kernel, grid, rank_tol, block, workers=1):
    stack_a = PaletteStack.from_palettes(palettes_a)
    stack_b = PaletteStack.from_palettes(palettes_b)
    (idx_a, w_a, centres_a), (idx_b, w_b, centres_b) = _both(_binned, (stack_a, grid), (stack_b, grid), workers)
    # Only bins that some palette touches matter; the factorisation is done on those alone.
    used_a = np.flatnonzero(np.bincount(idx_a[w_a != 0], minlength=grid.size))
    used_b = np.flatnonzero(np.bincount(idx_b[w_b != 0], minlength=grid.size))
    if used_a.size == 0 or used_b.size == 0:
        used_a = used_a if used_a.size else np.array([0])
        used_b = used_b if used_b.size else np.array([0])
    ca, cb = centres_a[used_a], centres_b[used_b]
    if workers > 1 and len(ca) > 1:  # row halves: each entry is computed on its own, same bits
        half = len(ca) // 2
        k = np.concatenate(_both(bin_kernel, (kernel, ca[:half], cb), (kernel, ca[half:], cb), workers))
    else:
        k = bin_kernel(kernel, ca, cb)
    factor_a, factor_b, rank, residual = low_rank(k, rank_tol)
    left = np.zeros((grid.size, rank))
    left[used_a] = factor_a
    right = np.zeros((grid.size, rank))
    right[used_b] = factor_b
    (q, norm_a), (hb, norm_b) = _both(_project, (idx_a, w_a, left, grid.size, block),
                                      (idx_b, w_b, right, grid.size, block), workers)
    hb = np.ascontiguousarray(hb.T)
    bound = residual * norm_a * norm_b
    return _Prepared(stack_a, stack_b, q, hb, rank, bound)


#: Bin kernels with both sides at most this size are factorised by a full SVD; larger ones by
#: the randomised range finder of :func:`low_rank`.
FULL_SVD_SIZE = 160


def low_rank(k, rank_tol=1e-6, rng=None, sketch=128):
    """A truncated factorisation ``k ~ left @ right.T`` keeping singular values above
    ``rank_tol`` times the largest, and a bound on the spectral norm of what it leaves out.

    Parameters
    ----------
    k : ndarray, shape (n, m)
    rank_tol : float
    rng : numpy.random.Generator, optional
        Draws the random test matrix of the range finder; default ``default_rng(0)`` so the
        screen is deterministic.
    sketch : int
        First width of the random test matrix; doubled until the sketch's smallest singular
        value falls below the tolerance (so every kept direction was inside the sketch).

    Returns
    -------
    left : ndarray, shape (n, r)
        ``U_r S_r``.
    right : ndarray, shape (m, r)
        ``V_r``.
    rank : int
        r >= 1.
    residual : float
        An upper bound of ``||k - left @ right.T||_2``: the (r+1)-th singular value after a
        full SVD (exact), the Frobenius norm of the remainder after the randomised one (the
        spectral norm never exceeds the Frobenius norm).

    Notes
    -----
    Small matrices (both sides at most :data:`FULL_SVD_SIZE`) get the full SVD. Larger ones get
    the randomised range finder of Halko, Martinsson & Tropp (2011), Algorithm 4.1 (no power
    iterations, which would square away the small singular values that the tolerance keeps),
    followed by the SVD of the small projected matrix (their Algorithm 5.1). A full SVD of a
    1,000 x 1,000 bin kernel takes about 0.3 s and much longer when other processes share the
    cores; the range finder needs two matrix products of 1,000 x 1,000 by 1,000 x 128.

    References
    ----------
    N. Halko, P.-G. Martinsson, J. A. Tropp (2011). Finding structure with randomness:
        probabilistic algorithms for constructing approximate matrix decompositions.
        SIAM Review 53(2):217-288.
    """
    k = np.asarray(k, dtype=float)
    n, m = k.shape
    small = min(n, m)
    with threadpool_limits(limits=1):
        return _low_rank(k, rank_tol, rng, sketch, n, m, small)


def _low_rank(k, rank_tol, rng, sketch, n, m, small):
    # Small factorisations run on one BLAS thread: on a busy machine a second thread makes them
    # 2-10 times slower, and one thread gives the same numbers on every machine size.
    def keep(sv):
        return max(1, int(np.count_nonzero(sv > rank_tol * sv[0]))) if sv[0] > 0 else 1

    if max(n, m) <= FULL_SVD_SIZE or small <= sketch:
        u, sv, vt = np.linalg.svd(k, full_matrices=False)
        rank = keep(sv)
        residual = float(sv[rank]) if rank < len(sv) else 0.0
        return u[:, :rank] * sv[:rank], vt[:rank].T, rank, residual
    rng = np.random.default_rng(0) if rng is None else rng
    width = int(sketch)
    while True:
        q, _ = np.linalg.qr(k @ rng.standard_normal((m, width)))
        ub, sv, vt = np.linalg.svd(q.T @ k, full_matrices=False)
        if width >= small or (sv[0] > 0 and sv[-1] <= rank_tol * sv[0]) or sv[0] == 0:
            break
        width = min(2 * width, small)
    rank = keep(sv)
    left = (q @ ub[:, :rank]) * sv[:rank]
    right = vt[:rank].T
    residual = float(np.linalg.norm(k - left @ right.T))
    return left, right, rank, residual


def screen_scores(palettes_a, palettes_b, kernel, grid=BinGrid(), rank_tol=1e-6):
    """The full screened raw-score matrix ``H_a K H_b^T``, shape (n_a, n_b). For small inputs and
    tests; :func:`screen_top_k` never builds it."""
    prep = _prepare(palettes_a, palettes_b, kernel, grid, rank_tol, 4096)
    return prep.q.astype(float) @ prep.hb.astype(float)


#: Columns sampled from each row to set the selection threshold of :func:`top_k_blocked`.
SAMPLE_COLUMNS = 512


def _row_threshold(q, hb, k, sample):
    """A lower bound of each row's k-th largest score: the k-th largest over a column sample."""
    n_b = hb.shape[1]
    if n_b <= sample:
        cols = slice(None)
    else:
        cols = np.linspace(0, n_b - 1, sample).astype(np.int64)
    s = q @ hb[:, cols]
    width = s.shape[1]
    return np.partition(s, width - k, axis=1)[:, width - k]


def top_k_blocked(q, hb, k, block=2048, sample=SAMPLE_COLUMNS):
    """Indices of the k largest entries of each row of ``q @ hb``, computed tile by tile.

    Parameters
    ----------
    q : ndarray, shape (n_a, d)
    hb : ndarray, shape (d, n_b)
    k : int
        Clipped to n_b.
    block : int
        Tile side: at most ``block x block`` scores exist at any time, plus the entries that
        pass each row's threshold.
    sample : int
        Columns sampled per row to set its threshold (see Notes).

    Returns
    -------
    indices : ndarray of int64, shape (n_a, min(k, n_b))
        Best first; ties at equal scores to the lower column.

    Notes
    -----
    Exact, without partitioning every row: the k-th largest score over any subset of a row's
    columns is at most the k-th largest over the whole row, so every entry of the row's top-k is
    at least that threshold. Each tile keeps only the entries at or above their row's threshold
    (about ``k * n_b / sample`` per row), and those few are sorted.
    """
    block = int(block)
    if block < 1:
        raise ValueError(f"block must be at least 1, got {block}")
    n_a, n_b = q.shape[0], hb.shape[1]
    k = min(int(k), n_b)
    out = np.empty((n_a, k), dtype=np.int64)
    if k == 0 or n_a == 0:
        return out
    sample = max(int(sample), k)
    for r0 in range(0, n_a, block):
        qr = q[r0 : r0 + block]
        rows_here = qr.shape[0]
        floor = _row_threshold(qr, hb, k, sample)[:, None]
        hit_rows, hit_cols, hit_vals = [], [], []
        for c0 in range(0, n_b, block):
            s = qr @ hb[:, c0 : c0 + block]
            flat = np.flatnonzero(s >= floor)  # much faster than a 2-D nonzero
            r, c = np.divmod(flat, s.shape[1])
            hit_rows.append(r)
            hit_cols.append(c + c0)
            hit_vals.append(s.ravel()[flat])
        r = np.concatenate(hit_rows)
        c = np.concatenate(hit_cols)
        v = np.concatenate(hit_vals)
        short = np.flatnonzero(np.bincount(r, minlength=rows_here) < k)
        if short.size:
            # The sample's product may round a score a hair above the tile's; such rows (rare)
            # are selected from their whole row instead.
            keep = ~np.isin(r, short)
            s = qr[short] @ hb
            rr = np.repeat(short, n_b)
            r = np.concatenate([r[keep], rr])
            c = np.concatenate([c[keep], np.tile(np.arange(n_b), short.size)])
            v = np.concatenate([v[keep], s.ravel()])
        out[r0 : r0 + rows_here] = _best_of_rows(r, c, v, rows_here, k)
    return out


def _best_of_rows(r, c, v, n_rows, k):
    """The k best hits of each row, best first, ties to the lower column.

    ``r, c, v`` are the hits' rows, columns and values, each row's hits in ascending column
    order and every row with at least k of them. Equal to ``np.lexsort((c, -v, r))`` cut to k per
    row, at a fraction of its cost: a stable radix sort by row, one partition per row of the
    rows padded to a common width, and a sort of the k winners only.
    """
    counts = np.bincount(r, minlength=n_rows)
    key = r.astype(np.uint16) if n_rows <= 1 << 16 else r  # 16-bit keys take numpy's radix sort
    order = np.argsort(key, kind="stable")
    c, v = c[order], v[order]
    start = np.cumsum(counts) - counts
    out = np.empty((n_rows, k), dtype=np.int64)
    # Rows with many more hits than the rest (ties over a whole row) would make the padding huge.
    wide = counts > max(4 * -(-len(v) // n_rows), k)
    for i in np.flatnonzero(wide):
        cs, vs = c[start[i] : start[i] + counts[i]], v[start[i] : start[i] + counts[i]]
        out[i] = cs[np.lexsort((cs, -vs))[:k]]
    narrow = np.flatnonzero(~wide)
    if narrow.size == 0:
        return out
    n = counts[narrow]
    width = int(n.max())
    hit = np.repeat(start[narrow], n) + (np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n))
    slot = np.arange(width) < n[:, None]  # row-major, so filling by it keeps each row's order
    vals = np.full((narrow.size, width), -np.inf, dtype=v.dtype)
    cols = np.zeros((narrow.size, width), dtype=np.int64)
    vals[slot] = v[hit]
    cols[slot] = c[hit]
    kth = np.partition(vals, width - k, axis=1)[:, width - k : width - k + 1]
    above = vals > kth
    tied = vals == kth
    # Of the entries equal to the k-th value, the lowest columns (the leftmost) fill the row.
    take = above | (tied & (np.cumsum(tied, axis=1) <= k - above.sum(axis=1, keepdims=True)))
    best_v = vals[take].reshape(-1, k)
    best_c = cols[take].reshape(-1, k)
    out[narrow] = np.take_along_axis(best_c, np.argsort(-best_v, axis=1, kind="stable"), axis=1)
    return out


#: Colour pairs per kernel call of the re-rank when it runs on several threads. Measured on the
#: screen benchmark (2 cores): with :data:`RERANK_CHUNK` the threads wait on each other for the
#: interpreter between the many small calls (0.30 s on 2 threads against 0.43 s on one); four
#: times larger calls take 0.20-0.24 s. The chunk changes only how many products share a call.
THREAD_RERANK_CHUNK = 1 << 17


def _select_and_rerank_threads(q, side_a, prep, c, kernel, block, workers):
    """Candidate selection and exact re-rank of contiguous row ranges of side a, one thread each.

    Every row is selected and re-scored exactly as in one thread (rows are independent), so the
    result has the same bits. The matrix products run on one BLAS thread each inside the
    threads, so the workers do not oversubscribe the cores.
    """
    n_a = len(side_a)
    cand = np.empty((n_a, min(c, prep.hb.shape[1])), dtype=np.int64)
    raw = np.empty(cand.shape)

    def run(lo, hi):
        cand[lo:hi] = top_k_blocked(q[lo:hi], prep.hb, c, block=block)
        part = PaletteStack(side_a.jab[lo:hi], side_a.weights[lo:hi])
        raw[lo:hi] = exact_raw_candidates(part, prep.stack_b, cand[lo:hi], kernel, chunk=THREAD_RERANK_CHUNK)

    bounds = np.linspace(0, n_a, workers + 1).astype(int)
    with threadpool_limits(limits=1), ThreadPoolExecutor(max_workers=workers) as pool:
        for f in [pool.submit(run, lo, hi) for lo, hi in zip(bounds[:-1], bounds[1:])]:
            f.result()
    return cand, raw


def screen_top_k(palettes_a, palettes_b, kernel, k=10, *, candidates=None, grid=BinGrid(),
                 block=2048, exact=True, rank_tol=1e-6, workers=1, exact_below=0, rows=None):
    """Top-k partners in side b of every product of side a, by the screen and an exact re-rank.

    Parameters
    ----------
    palettes_a, palettes_b : sequence of Palette or PaletteStack
        Side a is the oriented first category of the kernel.
    kernel : PairRules, bound PairRules.kernel, or callable
        The raw kernel per colour pair (see :func:`pairwise_form`): a
        :class:`harmony.rules.PairRules` or its bound ``kernel`` (the exact re-rank then scores
        many products per broadcast call, see :data:`RERANK_CHUNK`), or any outer callable
        ``kernel(jab_a (n, 3), jab_b (m, 3)) -> (n, m)`` (re-rank called once per product).
    k : int
        Partners per product (clipped to the size of side b).
    candidates : int, optional
        Screened candidates per product that are re-scored exactly; default ``ceil(1.5 k)``.
        The re-rank dominates the run time, so this trades time for recall.
    grid : BinGrid
    block : int
        Tile side of the blocked product; memory is O(block^2 + block * candidates) on top of the
        (n_a + n_b) x rank factors.
    exact : bool
        Re-score the candidates with the exact kernel (default). False returns the screened
        top-k and screened scores.
    rank_tol : float
        Singular values of K below ``rank_tol`` times the largest are dropped (see Notes).
    workers : int
        Threads for the candidate selection and the exact re-rank (each thread takes a
        contiguous range of side a's products and one BLAS thread); the result does not depend
        on it.
    exact_below : int
        When ``exact`` and ``n_a * n_b`` is at most this, skip the screen and score every pair
        exactly (the result then equals :func:`exact_top_k`, ``candidates = n_b``, ``rank = 0``).
        For small categories the exact scores cost less than factorising the bin kernel.
    rows : slice, optional
        Only these products of side a get partners (a block of a large category pair); the
        screen is prepared on every product of both sides, so each row comes out as in a whole
        run. The result has one row per product of the block.

    Returns
    -------
    ScreenResult
        Rows sorted best first; ties by lower index.

    Notes
    -----
    K is factorised once by :func:`low_rank`, ``K ~ U_r S_r V_r^T``, and the screen computes
    ``(H_a U_r S_r)(V_r^T H_b^T)`` with the r singular values above the tolerance. Since
    ``|h_a (K - K_r) h_b| <= ||K - K_r||_2 |h_a|_2 |h_b|_2``, dropping the rest changes any screened
    score by at most ``residual |h_a|_2 |h_b|_2`` (reported as ``truncation_bound``, with the
    largest histogram norms; ``residual`` is ``s_(r+1)`` after a full SVD, the Frobenius norm of
    the remainder after the randomised one).
    """
    k = int(k)
    if k < 1:
        raise ValueError(f"k must be at least 1, got {k}")
    c = -(-3 * k // 2) if candidates is None else int(candidates)
    if c < k:
        raise ValueError(f"candidates ({c}) must be at least k ({k})")
    if exact:
        stack_a = PaletteStack.from_palettes(palettes_a)
        stack_b = PaletteStack.from_palettes(palettes_b)
        n_a, n_b = len(stack_a), len(stack_b)
        if n_a * n_b <= int(exact_below):
            if rows is not None:
                stack_a = PaletteStack(stack_a.jab[rows], stack_a.weights[rows])
            every = np.broadcast_to(np.arange(n_b), (len(stack_a), n_b))
            raw = exact_raw_candidates(stack_a, stack_b, every, kernel, workers=workers)
            idx, raw = _order(np.ascontiguousarray(every), raw, min(k, n_b))
            return ScreenResult(indices=idx, raw=raw, exact=True, candidates=n_b)
        palettes_a, palettes_b = stack_a, stack_b
    prep = _prepare(palettes_a, palettes_b, kernel, grid, rank_tol, max(int(block), 1), int(workers))
    n_b = len(prep.stack_b)
    k_eff = min(k, n_b)
    q, side_a = prep.q, prep.stack_a
    if rows is not None:  # a block of side a: the screen above saw every product, as in a whole run
        q, side_a = q[rows], PaletteStack(side_a.jab[rows], side_a.weights[rows])
    workers = max(1, min(int(workers), len(side_a)))
    if exact and workers > 1:
        cand, raw = _select_and_rerank_threads(q, side_a, prep, c, kernel, block, workers)
    else:
        cand = top_k_blocked(q, prep.hb, c if exact else k, block=block)
    if exact and workers == 1:
        raw = exact_raw_candidates(side_a, prep.stack_b, cand, kernel)
    elif not exact:
        raw = np.empty(cand.shape)
        for r0 in range(0, cand.shape[0], block):
            rows = slice(r0, r0 + block)
            raw[rows] = np.einsum(
                "ir,ric->ic", q[rows].astype(float), prep.hb[:, cand[rows]].astype(float)
            )
    idx, raw = _order(cand, raw, k_eff)
    return ScreenResult(
        indices=idx,
        raw=raw,
        exact=bool(exact),
        candidates=cand.shape[1] if exact else 0,
        rank=prep.rank,
        truncation_bound=prep.bound,
    )
