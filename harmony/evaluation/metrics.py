"""Metrics of one ranked list: AUC, NDCG@k and hit@k, with ties handled exactly (see :mod:`harmony.evaluation`)."""

import math

import numpy as np

__all__ = ["CUTOFF", "auc", "ndcg_at_k", "hit_at_k"]

CUTOFF = 10

# --------------------------------------------------------------------------------------------
# Metrics of one ranked list
# --------------------------------------------------------------------------------------------


def _as_list(scores, values, name):
    s = np.asarray(scores, dtype=float)
    v = np.asarray(values, dtype=float)
    if s.ndim != 1 or v.shape != s.shape:
        raise ValueError(f"scores and {name} must be 1-D of the same length, got {s.shape} and {v.shape}")
    if not np.all(np.isfinite(s)):
        raise ValueError("scores must be finite")
    return s, v


def auc(scores, labels):
    """Area under the ROC curve: the chance that a positive outranks a negative, ties count 1/2.

    Parameters
    ----------
    scores : array_like, shape (n,)
        Higher means ranked earlier.
    labels : array_like, shape (n,)
        True (or > 0) for positives.

    Returns
    -------
    float
        In [0, 1]; NaN when there is no positive or no negative.

    Notes
    -----
    The Mann-Whitney U statistic over mid-ranks divided by n_pos * n_neg (Hanley & McNeil 1982).
    """
    s, y = _as_list(scores, labels, "labels")
    pos = y > 0
    n_pos, n_neg = int(pos.sum()), int((~pos).sum())
    if n_pos == 0 or n_neg == 0:
        return math.nan
    ranks = _mid_ranks(s)
    u = ranks[pos].sum() - n_pos * (n_pos + 1) / 2.0
    return float(u / (n_pos * n_neg))


def _mid_ranks(s):
    """Ranks 1..n in ascending order, ties sharing the mean of their ranks (the "average" method
    of ``scipy.stats.rankdata``, without its per-call overhead: the evaluation calls it thousands
    of times on short lists)."""
    order = np.argsort(s, kind="stable")
    sorted_s = s[order]
    starts = np.flatnonzero(np.r_[True, sorted_s[1:] != sorted_s[:-1]])
    ends = np.r_[starts[1:], s.size]
    ranks = np.empty(s.size)
    ranks[order] = np.repeat((starts + ends + 1) / 2.0, ends - starts)
    return ranks


def _tie_groups(s):
    """Order by descending score, and the start index and size of each run of equal scores."""
    order = np.argsort(-s, kind="stable")
    sorted_s = s[order]
    starts = np.flatnonzero(np.r_[True, sorted_s[1:] != sorted_s[:-1]])
    sizes = np.diff(np.r_[starts, s.size])
    return order, starts, sizes


def ndcg_at_k(scores, gains, k=CUTOFF):
    """Normalised discounted cumulated gain of the first ``k`` (Järvelin & Kekäläinen 2002).

    Parameters
    ----------
    scores : array_like, shape (n,)
        Higher means ranked earlier.
    gains : array_like, shape (n,)
        Graded relevance, >= 0 (0 for negatives).
    k : int
        Rank cutoff.

    Returns
    -------
    float
        In [0, 1]; NaN when no gain is above 0.

    Notes
    -----
    DCG@k = sum over ranks i <= k of gain_i / log2(i + 1), and NDCG@k = DCG@k divided by the
    DCG@k of the candidates sorted by gain. The gain is the graded relevance itself (linear), as
    in Järvelin & Kekäläinen and in scikit-learn's ``ndcg_score``, not the 2**rel - 1 of Burges
    et al. (2005). The discount 1/log2(i + 1) is Burges et al.'s, also scikit-learn's;
    Järvelin & Kekäläinen's original leaves the first b ranks undiscounted and divides by
    log_b(i) after them, which for b = 2 differs from it at every rank after the first.
    Candidates with equal scores share the mean of their gains at each of their positions
    (McSherry & Najork 2008), which is the expected DCG over random orders of the tie and what
    ``ndcg_score(..., ignore_ties=False)`` computes. Unlike scikit-learn, which scores a list
    without any gain as 0, this returns NaN for it (such a query is never formed).
    """
    s, g = _as_list(scores, gains, "gains")
    if np.any(g < 0):
        raise ValueError("gains must be >= 0")
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    n = s.size
    discount = np.zeros(n)
    top = min(k, n)
    discount[:top] = 1.0 / np.log2(np.arange(2, top + 2))
    ideal = float(np.sort(g)[::-1] @ discount)
    if ideal <= 0:
        return math.nan
    order, starts, sizes = _tie_groups(s)
    group_gain = np.add.reduceat(g[order], starts) / sizes
    group_discount = np.add.reduceat(discount, starts)
    return float(group_gain @ group_discount / ideal)


def hit_at_k(scores, labels, k=CUTOFF):
    """Whether a positive is among the first ``k``, in expectation over random orders of ties.

    Parameters
    ----------
    scores : array_like, shape (n,)
    labels : array_like, shape (n,)
        True (or > 0) for positives.
    k : int

    Returns
    -------
    float
        1 or 0 without ties at the cutoff; otherwise the probability of a hit when the tie that
        straddles the cutoff is ordered at random (hypergeometric). NaN without positives.
    """
    s, y = _as_list(scores, labels, "labels")
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    pos = y > 0
    if not pos.any():
        return math.nan
    order, starts, sizes = _tie_groups(s)
    group_pos = np.add.reduceat(pos[order].astype(int), starts)
    above = 0
    for size, n_pos in zip(sizes.tolist(), group_pos.tolist()):
        slots = k - above
        if slots <= 0:
            return 0.0
        if slots >= size:
            if n_pos > 0:
                return 1.0
            above += size
            continue
        # ``slots`` of the ``size`` tied candidates make the cut: P(none of them is a positive).
        return 1.0 - math.comb(size - n_pos, slots) / math.comb(size, slots)
    return 0.0


