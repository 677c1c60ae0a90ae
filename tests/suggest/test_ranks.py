"""harmony.suggest.ranks against scipy.stats.rankdata, list by list."""

import numpy as np
from scipy.stats import rankdata

from harmony.suggest.ranks import mid_ranks, tie_groups


def test_mid_ranks_are_scipy_average_ranks_list_by_list_to_the_bit():
    # Reference: scipy.stats.rankdata(method="average") on each list on its own; average ranks
    # are half-integers, so equality is exact.
    rng = np.random.default_rng(11)
    sizes = rng.integers(1, 30, size=200)
    s = rng.integers(0, 6, size=int(sizes.sum())).astype(float)  # many ties
    s[::7] = rng.normal(size=s[::7].size)
    want = np.concatenate([rankdata(part) for part in np.split(s, np.cumsum(sizes)[:-1])])
    assert np.array_equal(mid_ranks(s, sizes), want)


def test_tie_groups_sort_each_list_descending_and_keep_ties_in_input_order():
    # Reference: numpy's stable argsort of the negated scores, list by list.
    s = np.array([0.5, 0.9, 0.5, 0.1, 0.3, 0.3, 0.3])
    sizes = np.array([4, 0, 3])
    t = tie_groups(s, sizes)
    assert t.order.tolist() == [1, 0, 2, 3, 4, 5, 6]
    assert np.array_equal(t.order[:4], np.argsort(-s[:4], kind="stable"))
    assert t.counts.tolist() == [1, 2, 1, 3] and t.group_list.tolist() == [0, 0, 0, 2]
    assert t.local_start.tolist() == [0, 1, 3, 0] and t.first_group.tolist() == [0, 3, 3, 4]
    assert t.mid_rank.tolist() == [4.0, 2.5, 1.0, 2.0]  # rankdata([0.5, 0.9, 0.5, 0.1]) holds 4, 2.5, 1
