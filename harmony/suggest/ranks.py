"""Ranks within many lists laid end to end, with runs of equal scores (*tie groups*) found once.

The feed's blend ranks each list's scores (ties share the mean of their ranks, as the "average"
method of ``scipy.stats.rankdata``), and the evaluation's metrics read each list in descending
order with its tie groups; both come from :func:`tie_groups`.
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["TieGroups", "tie_groups", "mid_ranks"]


@dataclass(frozen=True, eq=False)
class TieGroups:
    """Lists laid end to end, each sorted by descending score (ties keep their input order), and
    the tie groups in that order."""

    sizes: np.ndarray  # items per list
    owner: np.ndarray  # list of each item (the same before and after sorting: lists stay in place)
    order: np.ndarray  # the sorting permutation of all items
    starts: np.ndarray  # index of each group's first item, in sorted order
    counts: np.ndarray  # items per group
    group_list: np.ndarray  # list of each group
    local_start: np.ndarray  # position of each group's first item within its list
    first_group: np.ndarray  # index of each list's first group (len(sizes) + 1 entries)

    @property
    def local_end(self):
        return self.local_start + self.counts

    @property
    def mid_rank(self):
        """Each group's ascending rank (1 = lowest score of its list), the mean over its items: a
        group at descending positions [a, b) of a list of n holds ranks n - b + 1 .. n - a, whose
        mean is a half-integer, exact in floating point."""
        return (2 * self.sizes[self.group_list] - 2 * self.local_start - self.counts + 1) / 2.0


def tie_groups(scores, sizes):
    """:class:`TieGroups` of ``scores`` (1-d, finite), split into lists of ``sizes`` items."""
    s = np.asarray(scores, dtype=float)
    sizes = np.asarray(sizes, dtype=np.int64)
    n_lists = sizes.size
    owner = np.repeat(np.arange(n_lists), sizes)
    order = np.lexsort((-s, owner))  # stable: as argsort(-s, kind="stable") list by list
    sorted_s = s[order]
    new = np.ones(s.size, dtype=bool)
    new[1:] = (sorted_s[1:] != sorted_s[:-1]) | (owner[1:] != owner[:-1])
    starts = np.flatnonzero(new)
    counts = np.diff(np.append(starts, s.size))
    group_list = owner[starts]
    list_start = np.cumsum(sizes) - sizes
    first_group = np.searchsorted(group_list, np.arange(n_lists + 1))
    return TieGroups(sizes, owner, order, starts, counts, group_list, starts - list_start[group_list], first_group)


def mid_ranks(scores, sizes):
    """Ranks 1..n ascending within each list of ``sizes`` items, ties sharing the mean of their
    ranks: the "average" ranks of ``scipy.stats.rankdata``, to the last bit (half-integers),
    without its per-call cost; in input order."""
    t = tie_groups(scores, sizes)
    ranks = np.empty(t.order.size)
    ranks[t.order] = np.repeat(t.mid_rank, t.counts)
    return ranks
