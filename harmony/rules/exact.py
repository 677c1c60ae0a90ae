"""Exact raw pair scores for many palettes at once: the re-rank behind the screen and the feed.

``raw(pa, pb) = pa.weights @ kernel(pa.jab, pb.jab) @ pb.weights`` (the bilinear contract of
:mod:`harmony.rules`), evaluated in broadcast chunks over stacks of palettes.
"""

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from harmony.photo.palette import Palette

__all__ = ["PaletteStack", "ScreenResult", "RERANK_CHUNK", "pairwise_form", "outer_form", "exact_raw", "exact_raw_candidates", "exact_top_k"]


@dataclass(frozen=True, eq=False)
class PaletteStack:
    """Palettes packed into arrays, padded to the longest palette with zero-weight colours.

    Attributes
    ----------
    jab : ndarray, shape (n, k, 3)
        CAM02-UCS colours; padding repeats each palette's first colour (weight 0), so a kernel is
        only ever evaluated on real colours.
    weights : ndarray, shape (n, k)
        Colour weights; each row sums to 1.
    """

    jab: np.ndarray
    weights: np.ndarray

    def __post_init__(self):
        jab = np.array(self.jab, dtype=float)
        weights = np.array(self.weights, dtype=float)
        if jab.ndim != 3 or jab.shape[2] != 3:
            raise ValueError(f"jab must have shape (n, k, 3), got {jab.shape}")
        if weights.shape != jab.shape[:2]:
            raise ValueError(f"weights must have shape {jab.shape[:2]}, got {weights.shape}")
        jab.setflags(write=False)
        weights.setflags(write=False)
        object.__setattr__(self, "jab", jab)
        object.__setattr__(self, "weights", weights)

    def __len__(self):
        return int(self.jab.shape[0])

    @classmethod
    def from_palettes(cls, palettes):
        """Pack a sequence of :class:`~harmony.photo.palette.Palette` (or a PaletteStack, returned as is)."""
        if isinstance(palettes, PaletteStack):
            return palettes
        palettes = list(palettes)
        if not palettes:
            return cls(np.zeros((0, 1, 3)), np.zeros((0, 1)))
        for i, p in enumerate(palettes):
            if not isinstance(p, Palette):
                raise TypeError(f"item {i} is a {type(p).__name__}, not a Palette")
        k = max(len(p) for p in palettes)
        jab = np.empty((len(palettes), k, 3))
        weights = np.zeros((len(palettes), k))
        for i, p in enumerate(palettes):
            n = len(p)
            jab[i, :n] = p.jab
            jab[i, n:] = p.jab[0]
            weights[i, :n] = p.weights
        return cls(jab, weights)


@dataclass(frozen=True, eq=False)
class ScreenResult:
    """Top partners of each product of side a among the products of side b.

    Attributes
    ----------
    indices : ndarray of int, shape (n_a, k)
        Row i lists indices into side b, best first. ``k = min(requested k, n_b)``.
    raw : ndarray, shape (n_a, k)
        Their raw scores: exact when ``exact`` is True, screened otherwise.
    exact : bool
        Whether ``raw`` (and the order) comes from the exact kernel.
    candidates : int
        How many screened candidates per product were re-scored exactly (0 when not exact).
    rank : int
        Rank of the factorised bin kernel used by the screen (0 for :func:`exact_top_k`).
    truncation_bound : float
        Largest change of any screened score caused by the rank truncation.
    """

    indices: np.ndarray
    raw: np.ndarray
    exact: bool
    candidates: int
    rank: int = 0
    truncation_bound: float = 0.0


#: Colour pairs per broadcast kernel call of :func:`exact_raw_candidates`; each temporary of the
#: kernel holds this many floats (2**15 is 256 kB, e.g. 21 products x 15 candidates x 10 x 10).
#: Measured on the screen benchmark: temporaries that stay in the processor's cache make the
#: re-rank about twice as fast as 4 MB ones (0.30 s against 0.60-0.67 s for 5,000 x 15 candidates).
RERANK_CHUNK = 1 << 15


def pairwise_form(kernel):
    """The broadcasting form of a kernel, or None when only the outer form is known.

    The screen's kernel contract: ``kernel`` is either

    * an object with a broadcasting ``pairwise(jab_a (..., 3), jab_b (..., 3)) -> (...)`` method
      (such as :class:`harmony.rules.PairRules`), whose outer form is
      ``pairwise(a[:, None], b[None, :])``; a bound ``PairRules.kernel`` counts as its rules; or
    * any callable outer kernel ``kernel(jab_a (n, 3), jab_b (m, 3)) -> (n, m)``.

    Both forms give the same numbers; the broadcasting form lets the exact re-rank score many
    products in one call, the outer form is evaluated once per product.
    """
    pairwise = getattr(kernel, "pairwise", None)
    if callable(pairwise):
        return pairwise
    owner = getattr(kernel, "__self__", None)
    if owner is not None and getattr(kernel, "__name__", "") == "kernel":
        pairwise = getattr(owner, "pairwise", None)
        if callable(pairwise):
            return pairwise
    return None


def outer_form(kernel):
    """The outer form ``(n, 3), (m, 3) -> (n, m)`` of a kernel given either way (see :func:`pairwise_form`)."""
    if callable(kernel):
        return kernel
    pairwise = getattr(kernel, "pairwise", None)
    if not callable(pairwise):
        raise TypeError(f"a kernel must be callable or have a pairwise method, got {type(kernel).__name__}")
    return lambda a, b: pairwise(np.asarray(a, dtype=float)[:, None, :], np.asarray(b, dtype=float)[None, :, :])


def exact_raw(palette_a, palettes_b, kernel):
    """Exact raw scores of one palette against every palette of a stack, shape (n_b,).

    One kernel call over all colours of side b, so this is the honest vectorised baseline.
    ``kernel`` as in :func:`pairwise_form`.
    """
    kernel = outer_form(kernel)
    stack_a = PaletteStack.from_palettes([palette_a]) if isinstance(palette_a, Palette) else palette_a
    stack_b = PaletteStack.from_palettes(palettes_b)
    ja, wa = stack_a.jab[0], stack_a.weights[0]
    n_b, kb = stack_b.weights.shape
    if n_b == 0:
        return np.zeros(0)
    kmat = np.asarray(kernel(ja, stack_b.jab.reshape(-1, 3)), dtype=float)
    return ((wa @ kmat).reshape(n_b, kb) * stack_b.weights).sum(axis=1)


def exact_raw_candidates(stack_a, stack_b, candidates, kernel, workers=1, chunk=RERANK_CHUNK):
    """Exact raw scores of each product of side a against its own candidates of side b.

    Parameters
    ----------
    stack_a, stack_b : PaletteStack
    candidates : ndarray of int, shape (n_a, c)
        Indices into side b.
    kernel : PairRules, bound PairRules.kernel, or outer callable
        See :func:`pairwise_form`. With a broadcasting form, many products are scored per
        kernel call on arrays of shape (products, c, k_a, k_b); an outer callable is called once
        per product. Must be safe to call from several threads at once when ``workers > 1`` (a
        kernel made of numpy operations is: numpy releases the interpreter lock inside its loops).
    workers : int
        Threads sharing the products; 1 computes in the calling thread.
    chunk : int
        Colour pairs per broadcast kernel call (bounds the memory of the temporaries); at least
        one product is scored per call.

    Returns
    -------
    raw : ndarray, shape (n_a, c)
        ``raw[i, t] = w_a[i] @ kernel(jab_a[i], jab_b[cand[i, t]]) @ w_b[cand[i, t]]``.
    """
    candidates = np.asarray(candidates)
    n_a, c = candidates.shape
    out = np.empty((n_a, c))
    if c == 0 or n_a == 0:
        return out
    kb = stack_b.weights.shape[1]
    rows = max(1, int(chunk) // (c * stack_a.weights.shape[1] * kb))
    pairwise = pairwise_form(kernel)
    outer = outer_form(kernel)

    rules = getattr(pairwise, "__self__", None)
    # Kernel blocks are laid out (p, k_a, c, k_b): each side-a colour meets a long contiguous run
    # of candidate colours, so numpy's loops run long (short innermost loops of k_b cost a third
    # more); the values, and the sum below, are those of any other layout.
    if pairwise is not None and callable(getattr(rules, "pairwise_sides", None)):
        # Per-colour quantities once per palette colour, gathered per pair (same bits as pairwise).
        side_a, side_b = rules.side(stack_a.jab), rules.side(stack_b.jab.reshape(-1, 3))
        colour = np.arange(kb)

        def kernel_block(r0, r1, cand):
            sa = side_a.take((slice(r0, r1), slice(None), None))  # (p, k_a, 1)
            sb = side_b.take((cand[:, :, None] * kb + colour).reshape(r1 - r0, 1, -1))  # (p, 1, c k_b)
            return rules.pairwise_sides(sa, sb).reshape(r1 - r0, -1, cand.shape[1], kb)
    else:

        def kernel_block(r0, r1, cand):
            ja = stack_a.jab[r0:r1, :, None, None, :]  # (p, k_a, 1, 1, 3)
            jb = stack_b.jab[cand][:, None, :, :, :]  # (p, 1, c, k_b, 3)
            return pairwise(ja, jb)

    def run_batched(lo, hi):
        for r0 in range(lo, hi, rows):
            r1 = min(hi, r0 + rows)
            cand = candidates[r0:r1]
            kmat = np.asarray(kernel_block(r0, r1, cand), dtype=float)  # (p, k_a, c, k_b)
            # einsum's order of summation follows the memory layout: (p, c, k_a, k_b) as always.
            kmat = np.ascontiguousarray(kmat.transpose(0, 2, 1, 3))
            out[r0:r1] = np.einsum("pa,pcab,pcb->pc", stack_a.weights[r0:r1], kmat, stack_b.weights[cand])

    def run_looped(lo, hi):
        for i in range(lo, hi):
            cand = candidates[i]
            kmat = np.asarray(outer(stack_a.jab[i], stack_b.jab[cand].reshape(-1, 3)), dtype=float)
            out[i] = ((stack_a.weights[i] @ kmat).reshape(c, kb) * stack_b.weights[cand]).sum(axis=1)

    run = run_looped if pairwise is None else run_batched
    workers = max(1, min(int(workers), n_a))
    if workers == 1:
        run(0, n_a)
        return out
    bounds = np.linspace(0, n_a, workers + 1).astype(int)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        for f in [pool.submit(run, lo, hi) for lo, hi in zip(bounds[:-1], bounds[1:])]:
            f.result()
    return out


def _order(indices, raw, k):
    """Sort each row by raw score descending, ties by index ascending; keep the first k."""
    rows = np.arange(indices.shape[0])[:, None]
    # lexsort sorts along the last axis by the last key first.
    perm = np.lexsort((indices, -raw))
    return indices[rows, perm][:, :k], raw[rows, perm][:, :k]


def exact_top_k(palettes_a, palettes_b, kernel, k=10):
    """The exact top-k of every product of side a: the baseline the screen is measured against.

    Returns a :class:`ScreenResult` with ``exact=True``; cost is one kernel call per product of
    side a over all colours of side b.
    """
    stack_a = PaletteStack.from_palettes(palettes_a)
    stack_b = PaletteStack.from_palettes(palettes_b)
    n_a, n_b = len(stack_a), len(stack_b)
    k = min(int(k), n_b)
    idx = np.empty((n_a, k), dtype=np.int64)
    raw = np.empty((n_a, k))
    for i in range(n_a):
        row = exact_raw(PaletteStack(stack_a.jab[i : i + 1], stack_a.weights[i : i + 1]), stack_b, kernel)
        ii, rr = _order(np.arange(n_b)[None, :], row[None, :], k)
        idx[i], raw[i] = ii[0], rr[0]
    return ScreenResult(indices=idx, raw=raw, exact=True, candidates=n_b)
