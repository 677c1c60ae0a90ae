"""Metrics of ranked lists: AUC, NDCG@k and hit@k, with ties handled exactly (see :mod:`harmony.evaluation`).

:func:`metric_table` scores many lists at once (the evaluation's thousands of queries in a few
array operations); :func:`auc`, :func:`ndcg_at_k` and :func:`hit_at_k` are the same code on one list.
"""

import math
import numpy as np

from harmony.suggest.ranks import tie_groups

__all__ = ["CUTOFF", "auc", "ndcg_at_k", "hit_at_k", "metric_table", "ideal_dcgs", "auc_table"]

CUTOFF = 10

# --------------------------------------------------------------------------------------------
# Many lists, sorted once
# --------------------------------------------------------------------------------------------


def _aucs(t, pos):
    """Mann-Whitney U over mid-ranks / (n_pos * n_neg) per list; ``pos`` in input order."""
    pos = pos[t.order]
    n_lists = t.sizes.size
    n_pos = np.bincount(t.owner[pos], minlength=n_lists)
    n_neg = t.sizes - n_pos
    # Mid-ranks (the "average" rank of scipy.stats.rankdata) are half-integers: the sums are exact.
    rank = np.repeat(t.mid_rank, t.counts)
    u = np.bincount(t.owner[pos], weights=rank[pos], minlength=n_lists) - n_pos * (n_pos + 1) / 2.0
    out = np.full(n_lists, math.nan)
    ok = (n_pos > 0) & (n_neg > 0)
    out[ok] = u[ok] / (n_pos[ok] * n_neg[ok])
    return out


def _discounts(sizes, k):
    """1 / log2(position + 2) on each list's first min(k, n) positions, 0 after (laid end to end)."""
    local = np.arange(int(sizes.sum())) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    top = np.repeat(np.minimum(sizes, k), sizes)
    out = np.zeros(local.size)
    for n_top in np.unique(top).tolist():
        # Each cutoff's discounts from the very expression a single list uses, to the last bit.
        at = (top == n_top) & (local < n_top)
        out[at] = (1.0 / np.log2(np.arange(2, n_top + 2)))[local[at]]
    return out


def _ideal(g, sizes, owner, discount):
    """The DCG of each list in its ideal order (its gains sorted, best first), as a list."""
    bounds = np.append(0, np.cumsum(sizes)).tolist()
    best = g[np.lexsort((g, owner))]
    return [best[a:b][::-1] @ discount[a:b] if b > a else 0.0 for a, b in zip(bounds[:-1], bounds[1:])]


def ideal_dcgs(gains, sizes, k=CUTOFF):
    """The ideal DCG@k of many lists laid end to end (as in :func:`metric_table`), which every
    ranking of the same lists shares: pass it to :func:`metric_table` as ``ideal``."""
    g = np.asarray(gains, dtype=float)
    sizes = np.asarray(sizes, dtype=np.int64).reshape(-1)
    return _ideal(g, sizes, np.repeat(np.arange(sizes.size), sizes), _discounts(sizes, k))


def _ndcgs(t, g, k, ideal=None):
    """DCG@k with tied gains averaged (McSherry & Najork 2008) / the ideal DCG@k, per list."""
    discount = _discounts(t.sizes, k)
    if ideal is None:
        ideal = _ideal(g, t.sizes, t.owner, discount)
    group_gain = np.add.reduceat(g[t.order], t.starts) / t.counts if t.starts.size else np.zeros(0)
    group_discount = np.add.reduceat(discount, t.starts) if t.starts.size else np.zeros(0)
    groups = t.first_group.tolist()
    dcg = np.array([group_gain[a:b] @ group_discount[a:b] for a, b in zip(groups[:-1], groups[1:])], dtype=float)
    ideal = np.asarray(ideal, dtype=float)
    out = np.full(t.sizes.size, math.nan)
    defined = ideal > 0
    out[defined] = dcg[defined] / ideal[defined]
    return out


def _hits(t, pos, k):
    """Chance of a positive in the first k under random orders of ties (hypergeometric), per list."""
    n_lists = t.sizes.size
    group_pos = np.add.reduceat(pos[t.order].astype(np.int64), t.starts) if t.starts.size else np.zeros(0, np.int64)
    inside = t.local_end <= k
    out = (np.bincount(t.group_list[inside & (group_pos > 0)], minlength=n_lists) > 0).astype(float)
    # The tie straddling the cutoff, in lists with no positive above it: `slots` of its `size`
    # candidates make the cut, and P(hit) = 1 - P(none of them is a positive).
    straddle = (t.local_start < k) & ~inside & (out[t.group_list] == 0.0)
    for g in np.flatnonzero(straddle).tolist():
        size, n_pos, slots = int(t.counts[g]), int(group_pos[g]), k - int(t.local_start[g])
        out[t.group_list[g]] = 1.0 - math.comb(size - n_pos, slots) / math.comb(size, slots)
    out[np.bincount(t.owner[pos], minlength=n_lists) == 0] = math.nan
    return out


def metric_table(scores, gains, sizes, k=CUTOFF, ideal=None):
    """AUC, NDCG@k and hit@k of many ranked lists at once, each as :func:`auc`,
    :func:`ndcg_at_k` and :func:`hit_at_k` give it (to the last bit).

    Parameters
    ----------
    scores : array_like, shape (N,)
        The lists' scores laid end to end, higher ranked earlier.
    gains : array_like, shape (N,)
        Graded relevance, >= 0; positives are the items with gain above 0.
    sizes : array_like of int
        Items per list, summing to N.
    k : int
        Rank cutoff of NDCG and hit.
    ideal : list of float, optional
        :func:`ideal_dcgs` of ``gains``, ``sizes`` and ``k``, when known already.

    Returns
    -------
    ndarray, shape (len(sizes), 3)
        Per list: AUC, NDCG@k, hit@k (NaN where undefined, as for one list).
    """
    s, g, sizes = _as_lists(scores, gains, sizes, "gains")
    _check_gains(g)
    _check_cutoff(k)
    t = tie_groups(s, sizes)
    pos = g > 0
    return np.stack([_aucs(t, pos), _ndcgs(t, g, k, ideal), _hits(t, pos, k)], axis=1)


def auc_table(scores, labels, sizes):
    """:func:`auc` of many lists at once (laid end to end as in :func:`metric_table`): shape (len(sizes),)."""
    s, y, sizes = _as_lists(scores, labels, sizes, "labels")
    return _aucs(tie_groups(s, sizes), y > 0)


def _as_lists(scores, values, sizes, name):
    s, v = _as_list(scores, values, name)
    sizes = np.asarray(sizes, dtype=np.int64).reshape(-1)
    if np.any(sizes < 0) or int(sizes.sum()) != s.size:
        raise ValueError(f"sizes must be >= 0 and sum to the {s.size} scores, got {int(sizes.sum())}")
    return s, v, sizes


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


def _check_gains(g):
    if np.any(g < 0):
        raise ValueError("gains must be >= 0")


def _check_cutoff(k):
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")


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
    return float(_aucs(tie_groups(s, [s.size]), y > 0)[0])


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
    _check_gains(g)
    _check_cutoff(k)
    return float(_ndcgs(tie_groups(s, [s.size]), g, k)[0])


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
    _check_cutoff(k)
    return float(_hits(tie_groups(s, [s.size]), y > 0, k)[0])
