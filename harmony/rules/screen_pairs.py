"""One screen for both directions of a category pair (see :func:`screen_both_ways`)."""

import numpy as np

from harmony.rules.screen import (
    BinGrid,
    PaletteStack,
    ScreenResult,
    _order,
    _prepare,
    exact_raw_candidates,
    top_k_blocked,
)

__all__ = ["screen_both_ways"]


def _rerank(stack_a, stack_b, cand, kernel, k, workers):
    raw = exact_raw_candidates(stack_a, stack_b, cand, kernel, workers=workers)
    return _order(cand, raw, min(k, len(stack_b)))


def screen_both_ways(stack_a, stack_b, kernel_ab, kernel_ba, k=10, *, partners_a=None, partners_b=None,
                     candidates=None, grid=BinGrid(), block=2048, rank_tol=1e-6, workers=1, exact_below=0,
                     rows_a=None, rows_b=None):
    """Exact top-k both ways between two categories from one screen: a's best b and b's best a.

    The bin kernel is built and factorised once, ``K_ab ~ L R^T``; the screen of b against a
    is the transpose, ``(H_b R)(L^T H_a^T)``. That holds when ``kernel_ba(y, x) = kernel_ab(x, y)``
    for every pair of colours (the rules of ``(b, a)`` are those of ``(a, b)`` flipped, see
    :meth:`harmony.rules.RuleSet.for_pair`); the exact re-rank uses each direction's own kernel.

    Parameters
    ----------
    stack_a, stack_b : PaletteStack
        Every product of each category.
    kernel_ab, kernel_ba : PairRules or callable
        As in :func:`screen_top_k`, for each orientation.
    partners_a, partners_b : ndarray of int, optional
        Which products of each side may be listed as partners (in stock); default all.
    candidates, grid, block, rank_tol, workers, exact_below
        As in :func:`screen_top_k`; ``exact_below`` applies to each direction on its own.
    rows_a, rows_b : slice, optional
        Only these products of each side get partners (a block of a large category pair; an
        empty slice skips a direction). The screen is still prepared on every product, so a
        block's rows come out exactly as in the whole run.

    Returns
    -------
    (ScreenResult, ScreenResult)
        a against ``stack_b[partners_b]`` and b against ``stack_a[partners_a]``; indices point
        into the partner lists.
    """
    k = int(k)
    if k < 1:
        raise ValueError(f"k must be at least 1, got {k}")
    c = -(-3 * k // 2) if candidates is None else int(candidates)
    if c < k:
        raise ValueError(f"candidates ({c}) must be at least k ({k})")
    n_a, n_b = len(stack_a), len(stack_b)
    partners_a = np.arange(n_a) if partners_a is None else np.asarray(partners_a, dtype=np.int64)
    partners_b = np.arange(n_b) if partners_b is None else np.asarray(partners_b, dtype=np.int64)
    sub_a = PaletteStack(stack_a.jab[partners_a], stack_a.weights[partners_a])
    sub_b = PaletteStack(stack_b.jab[partners_b], stack_b.weights[partners_b])
    exact_ab = n_a * len(partners_b) <= int(exact_below)
    exact_ba = n_b * len(partners_a) <= int(exact_below)
    prep = None
    if not (exact_ab and exact_ba) and len(partners_a) and len(partners_b):
        prep = _prepare(stack_a, stack_b, kernel_ab, grid, rank_tol, max(int(block), 1))

    def one_way(stack_x, sub_y, q, hb, cols, kernel, exact_all, rows):
        if rows is not None:
            stack_x = PaletteStack(stack_x.jab[rows], stack_x.weights[rows])
            q = None if q is None else q[rows]
        n_x, n_y = len(stack_x), len(sub_y)
        if n_y == 0 or n_x == 0:
            empty = np.zeros((n_x, 0))
            return ScreenResult(indices=empty.astype(np.int64), raw=empty, exact=True, candidates=0)
        if exact_all:
            every = np.ascontiguousarray(np.broadcast_to(np.arange(n_y), (n_x, n_y)))
            idx, raw = _rerank(stack_x, sub_y, every, kernel, k, workers)
            return ScreenResult(indices=idx, raw=raw, exact=True, candidates=n_y)
        cand = top_k_blocked(q, np.ascontiguousarray(hb[:, cols]), c, block=block)
        idx, raw = _rerank(stack_x, sub_y, cand, kernel, k, workers)
        return ScreenResult(indices=idx, raw=raw, exact=True, candidates=cand.shape[1],
                            rank=prep.rank, truncation_bound=prep.bound)

    q_a = hb_b = q_b = hb_a = None
    if prep is not None:
        q_a, hb_b = prep.q, prep.hb
        q_b, hb_a = np.ascontiguousarray(prep.hb.T), np.ascontiguousarray(prep.q.T)
    ab = one_way(stack_a, sub_b, q_a, hb_b, partners_b, kernel_ab, exact_ab, rows_a)
    ba = one_way(stack_b, sub_a, q_b, hb_a, partners_a, kernel_ba, exact_ba, rows_b)
    return ab, ba
