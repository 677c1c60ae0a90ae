"""Exact transportation problems, many small ones at once: the network simplex in lockstep.

The earth mover's distance between two palettes is the optimum of a transportation problem
(Hitchcock 1941; Rubner, Tomasi & Guibas 2000). An evaluation or a look-alike search asks for
thousands of them, each of a few colours against a few. A compiled solver called once per
problem would do the work in microseconds, but importing one costs a second or more before the
first problem is solved. Here every problem of a batch advances together and each step is one
numpy operation over all the problems still pivoting.

Method: the primal network simplex on the bipartite graph of supplies (rows) and demands
(columns), its basis a spanning tree rooted at row 0 and kept as parent pointers:

- start: the north-west corner rule (Dantzig 1963, the transportation chapters), which gives a spanning tree
  (a staircase) in ``n + m - 1`` steps;
- entering arc: the most negative reduced cost ``c_ij - u_i - v_j`` (Dantzig's rule);
- leaving arc: the last blocking arc met when going round the cycle in the entering arc's
  direction from the cycle's apex, which keeps the tree *strongly feasible* and so rules out
  cycling on degenerate problems (Cunningham 1976; Ahuja, Magnanti & Orlin 1993, chapter 11;
  chapter and page numbers here are from memory);
- the tree's ancestor sets as bit masks and its depths, rebuilt after each pivot by pointer
  jumping (Wyllie 1979);
- stop: when no reduced cost is below ``-tau``. The potentials less ``tau`` are then a feasible
  dual, so the cost found exceeds the optimum by at most ``tau`` times the total mass (weak
  duality); ``tau`` is ``1e-12`` of the problem's largest cost by default, the rounding of the
  sums themselves.

References
----------
F. L. Hitchcock (1941). The distribution of a product from several sources to numerous
    localities. Journal of Mathematics and Physics 20:224-230.
G. B. Dantzig (1963). Linear Programming and Extensions. Princeton University Press.
W. H. Cunningham (1976). A network simplex method. Mathematical Programming 11(1):105-116.
J. C. Wyllie (1979). The complexity of parallel computations. PhD thesis, Cornell University.
R. K. Ahuja, T. L. Magnanti, J. B. Orlin (1993). Network Flows: Theory, Algorithms, and
    Applications. Prentice Hall.
Y. Rubner, C. Tomasi, L. J. Guibas (2000). The Earth Mover's Distance as a metric for image
    retrieval. International Journal of Computer Vision 40(2):99-121.
"""

import math

import numpy as np

__all__ = ["transport_costs", "padded_transport_costs", "RELATIVE_TOLERANCE", "BALANCE_TOLERANCE", "MAX_NODES"]

#: Optimality tolerance on reduced costs, relative to a problem's largest cost: the rounding of
#: a few dozen sums of float64 costs (machine epsilon 2.2e-16 times the tree's depth and more).
RELATIVE_TOLERANCE = 1e-12

#: Largest difference of a problem's supply and demand totals, relative to the larger: room for
#: the rounding of normalised weights (a few ulps), far below any real imbalance, which has no
#: plan that moves every unit and would otherwise come out as a silent wrong cost.
BALANCE_TOLERANCE = 1e-9

#: Rows plus columns a problem may have here: the ancestor sets are bits of one int64. Larger
#: problems go to the linear-programming solver of scipy (HiGHS), one by one.
MAX_NODES = 62


def transport_costs(supplies, demands, costs, tolerance=RELATIVE_TOLERANCE):
    """Optimal costs of many balanced transportation problems.

    Problem ``t`` moves ``supplies[t]`` (``n_t`` positive amounts) onto ``demands[t]`` (``m_t``
    positive amounts with the same total) at ``costs[t][i, j]`` per unit from ``i`` to ``j``, at
    the least total cost.

    Parameters
    ----------
    supplies, demands : sequence of array_like, shapes (n_t,) and (m_t,)
        Positive and finite; each pair with equal sums up to rounding (within
        :data:`BALANCE_TOLERANCE` of the larger, else ValueError naming the problem).
    costs : sequence of array_like, shape (n_t, m_t)
        Finite costs.
    tolerance : float
        Optimality tolerance on reduced costs, relative to each problem's largest cost.

    Returns
    -------
    ndarray, shape (len(costs),)
        The optimal total costs.

    Examples
    --------
    Worked by hand: 0.6 and 0.4 onto 0.3 and 0.7; the cheapest plan ships 0.3 at cost 0, 0.3 at
    cost 10 and 0.4 at cost 10 * sqrt(2), 8.6569 in all.

    >>> c = [[0.0, 10.0], [10.0, 10.0 * 2 ** 0.5]]
    >>> round(float(transport_costs([[0.6, 0.4]], [[0.3, 0.7]], [c])[0]), 4)
    8.6569
    """
    count = len(costs)
    if not len(supplies) == len(demands) == count:
        raise ValueError("supplies, demands and costs must have the same length")
    sizes = np.zeros((count, 2), dtype=np.intp)
    arrays = []
    for t, (a, b, c) in enumerate(zip(supplies, demands, costs)):
        a, b, c = (np.asarray(x, dtype=float) for x in (a, b, c))
        if a.ndim != 1 or b.ndim != 1 or c.shape != (a.size, b.size) or c.size == 0:
            raise ValueError(f"problem {t}: costs must have shape (len(supplies), len(demands)), "
                             f"got {c.shape} for {a.shape} and {b.shape}")
        sizes[t] = c.shape
        arrays.append((a, b, c))
    big_n, big_m = sizes.max(axis=0) if count else (1, 1)
    a, b = np.ones((count, big_n)), np.ones((count, big_m))
    c = np.zeros((count, big_n, big_m))
    for t, (pa, pb, pc) in enumerate(arrays):
        a[t, : pa.size], b[t, : pb.size], c[t, : pa.size, : pb.size] = pa, pb, pc
    return padded_transport_costs(a, b, c, sizes[:, 0], sizes[:, 1], tolerance)


def padded_transport_costs(supplies, demands, costs, n, m, tolerance=RELATIVE_TOLERANCE):
    """:func:`transport_costs` of problems laid out in arrays of one size.

    Problem ``t`` is ``supplies[t, :n[t]]`` onto ``demands[t, :m[t]]`` at ``costs[t, :n[t], :m[t]]``;
    what lies beyond is ignored. ``supplies`` (P, N), ``demands`` (P, M), ``costs`` (P, N, M),
    ``n`` and ``m`` (P,) with ``1 <= n[t] <= N`` and ``1 <= m[t] <= M``.
    """
    a, b, c = (np.asarray(x, dtype=float) for x in (supplies, demands, costs))
    n, m = np.asarray(n, dtype=np.intp), np.asarray(m, dtype=np.intp)
    count, big_n, big_m = c.shape
    if a.shape != (count, big_n) or b.shape != (count, big_m) or n.shape != (count,) or m.shape != (count,):
        raise ValueError(f"supplies, demands and sizes must match costs of shape {c.shape}")
    if count == 0:
        return np.empty(0)
    if not ((n >= 1) & (n <= big_n) & (m >= 1) & (m <= big_m)).all():
        raise ValueError("problem sizes must lie between 1 and the padded size")
    row_real = np.arange(big_n) < n[:, None]
    col_real = np.arange(big_m) < m[:, None]
    real = row_real[:, :, None] & col_real[:, None, :]
    total_a, total_b = np.where(row_real, a, 0.0).sum(axis=1), np.where(col_real, b, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore"):  # infinite totals are refused just below
        balanced = (np.isfinite(total_a) & np.isfinite(total_b)
                    & (np.abs(total_a - total_b) <= BALANCE_TOLERANCE * np.maximum(total_a, total_b)))
    for name, bad in (("supplies and demands must be positive", ~(((a > 0) | ~row_real).all(axis=1) & ((b > 0) | ~col_real).all(axis=1))),
                      ("supplies and demands must be finite with equal totals", ~balanced),
                      ("costs must be finite", ~(np.isfinite(c) | ~real).reshape(count, -1).all(axis=1))):
        if bad.any():
            raise ValueError(f"problem {int(np.argmax(bad))}: {name}")
    out = np.empty(count)
    small = n + m <= MAX_NODES
    for t in np.flatnonzero(~small):
        out[t] = _linear_program(a[t, : n[t]], b[t, : m[t]], c[t, : n[t], : m[t]])
    if small.any():
        keep = slice(None) if small.all() else small
        a, b, c, n, m = a[keep], np.where(col_real, b, 1.0)[keep], np.where(real, c, _ABSENT)[keep], n[keep], m[keep]
        out[keep] = _solve(np.where(row_real[keep], a, 1.0), b, c, n, m, tolerance)
    return out


#: The cost of a cell a padded problem does not have: never enters, and times a zero flow is zero.
_ABSENT = 1e300


def _linear_program(a, b, c):
    """One transportation problem as a linear program (HiGHS through scipy), for problems too
    large for the bit masks."""
    from scipy.optimize import linprog

    n, m = c.shape
    rows = np.kron(np.eye(n), np.ones(m))
    cols = np.kron(np.ones(n), np.eye(m))
    result = linprog(c.ravel(), A_eq=np.vstack([rows, cols]), b_eq=np.concatenate([a, b * (a.sum() / b.sum())]),
                     bounds=(0, None), method="highs")
    if result.status != 0:
        raise RuntimeError(f"transportation problem not solved: {result.message}")
    return float(result.fun)


def _solve(a, b, c, n, m, tolerance):
    """:func:`transport_costs` for ``P`` problems padded to one size: ``a`` (P, N), ``b`` (P, M)
    and ``c`` (P, N, M), problem ``t`` using the first ``n[t]`` rows and ``m[t]`` columns."""
    count, big_n, big_m = c.shape
    nodes = big_n + big_m  # rows 0..N-1, then columns N..N+M-1; a padded node stays alone
    is_row = np.arange(nodes) < big_n
    bits = np.left_shift(np.int64(1), np.arange(nodes, dtype=np.int64))
    tol = tolerance * np.where(c < _ABSENT, np.abs(c), 0.0).reshape(count, -1).max(axis=1)
    parent, flow, potential, ancestors, depth = _north_west_corner(a, b, c, n, m)
    out = np.empty(count)
    live = np.arange(count)  # problem numbers of the rows still pivoting
    cost = c.reshape(count, -1)  # the live problems' costs, cut down with the rest of the state
    # Cunningham's rule cannot cycle, so this bound only guards against a fault; what is left
    # after it is solved as a linear program.
    for _ in range(50 * nodes * nodes):
        rows = np.arange(live.size)
        reduced = cost - (potential[:, :big_n, None] + potential[:, None, big_n:]).reshape(live.size, -1)
        enter = reduced.argmin(axis=1)
        r = reduced[rows, enter]
        going = r < -tol
        if not going.all():
            done = ~going
            out[live[done]] = _tree_cost(cost[done].reshape(-1, big_n, big_m), parent[done], flow[done])
            live, cost, tol, parent, flow, potential, ancestors, depth, enter, r = (
                x[going] for x in (live, cost, tol, parent, flow, potential, ancestors, depth, enter, r))
            if live.size == 0:
                return out
            rows = rows[: live.size]
        row_node, col_node = enter // big_m, big_n + enter % big_m
        # The cycle: the tree paths from both ends of the entering arc up to their apex. Going
        # round it in the entering arc's direction (row -> column), an arc points the other way,
        # and so loses flow, where it hangs below a row on the row's side or below a column on
        # the column's side.
        up_i = ancestors[rows, row_node]
        up_j = ancestors[rows, col_node]
        side_i = ((up_i & ~up_j)[:, None] & bits) != 0
        side_j = ((up_j & ~up_i)[:, None] & bits) != 0
        minus = (side_i & is_row) | (side_j & ~is_row)
        plus = (side_i & ~is_row) | (side_j & is_row)
        minus_flow = np.where(minus, flow, np.inf)
        theta = minus_flow.min(axis=1)
        blocking = minus_flow == theta[:, None]
        # The last blocking arc from the apex: nearest the apex on the column's side, else
        # nearest the row on the row's side.
        key = np.where(blocking & side_j, depth, np.where(blocking, 2 * nodes - depth, 4 * nodes))
        leaving = key.argmin(axis=1)
        flow = flow + np.where(plus, theta[:, None], 0.0) - np.where(minus, theta[:, None], 0.0)
        # The subtree cut off below the leaving arc hangs again from the entering arc.
        below = (ancestors & bits[leaving][:, None]) != 0
        row_below = below[rows, row_node]
        inner = np.where(row_below, row_node, col_node)
        outer = np.where(row_below, col_node, row_node)
        shift = np.where(row_below, r, -r)[:, None]
        potential = potential + np.where(below, np.where(is_row, shift, -shift), 0.0)
        path = below & ((ancestors[rows, inner][:, None] & bits) != 0)  # inner .. leaving
        path[rows, leaving] = False
        pr, pc = np.nonzero(path)
        up = parent[pr, pc]
        new_parent, new_flow = parent.copy(), flow.copy()
        new_parent[pr, up] = pc
        new_flow[pr, up] = flow[pr, pc]
        new_parent[rows, inner] = outer
        new_flow[rows, inner] = theta
        parent, flow = new_parent, new_flow
        ancestors, depth = _ancestors(parent, bits)
    for t in live:
        out[t] = _linear_program(a[t, : n[t]], b[t, : m[t]], c[t, : n[t], : m[t]])
    return out


def _north_west_corner(a, b, c, n, m):
    """The north-west corner start: (parent, flow, potential, ancestors, depth), each (P, N + M).

    ``flow[x]`` is the flow on the arc between node ``x`` and its parent; the root (row 0) and
    the padded nodes point to themselves. A tie (a row and a column used up together) moves to
    the next column with a zero flow, an arc pointing away from the root, so the start is
    strongly feasible.
    """
    count, big_n, big_m = c.shape
    nodes = big_n + big_m
    rows = np.arange(count)
    parent = np.broadcast_to(np.arange(nodes), (count, nodes)).copy()
    flow = np.zeros((count, nodes))
    potential = np.zeros((count, nodes))
    ancestors = np.broadcast_to(np.left_shift(np.int64(1), np.arange(nodes, dtype=np.int64)), (count, nodes)).copy()
    depth = np.zeros((count, nodes), dtype=np.intp)
    last = n + m - 2  # the step that places each problem's last arc
    i = np.zeros(count, dtype=np.intp)
    j = np.zeros(count, dtype=np.intp)
    left_a, left_b = a[:, 0].copy(), b[:, 0].copy()
    new, old = np.full(count, big_n, dtype=np.intp), i.copy()  # the node each step adds, and its parent
    for step in range(int(last.max()) + 1):
        k = rows if step == 0 else np.flatnonzero(last >= step)
        nk, ok = new[k], old[k]
        moved = np.minimum(left_a, left_b)
        parent[k, nk] = ok
        flow[k, nk] = moved[k]
        potential[k, nk] = c[k, i[k], j[k]] - potential[k, ok]
        ancestors[k, nk] |= ancestors[k, ok]
        depth[k, nk] = depth[k, ok] + 1
        next_col = (j < m - 1) & ((i == n - 1) | (left_b <= left_a))
        left_a = np.where(next_col, left_a - moved, a[rows, np.minimum(i + 1, big_n - 1)])
        left_b = np.where(next_col, b[rows, np.minimum(j + 1, big_m - 1)], left_b - moved)
        old = np.where(next_col, i, big_n + j)
        i = np.where(next_col, i, np.minimum(i + 1, big_n - 1))
        j = np.where(next_col, np.minimum(j + 1, big_m - 1), j)
        new = np.where(next_col, big_n + j, i)
    return parent, flow, potential, ancestors, depth


def _ancestors(parent, bits):
    """Each node's ancestors (itself included) as bit masks, and its depth, by pointer jumping."""
    count, nodes = parent.shape
    base = (np.arange(count) * nodes)[:, None]
    jump = parent + base
    root = jump == np.arange(nodes) + base
    ancestors = np.broadcast_to(bits, parent.shape).copy()
    depth = (~root).astype(np.intp)
    for _ in range(math.ceil(math.log2(nodes))):
        ancestors |= ancestors.ravel()[jump]
        depth += depth.ravel()[jump]
        jump = jump.ravel()[jump]
    return ancestors, depth


def _tree_cost(c, parent, flow):
    """Total cost of the flows on each tree's arcs, ``sum flow[x] * c[arc of x]``, added node
    by node in one order: a padded node adds an exact zero, so a problem's cost has the same
    bits whatever it was padded to."""
    count, big_n, big_m = c.shape
    x = np.arange(big_n + big_m)
    # The root and the padded nodes point to themselves with no flow: any cell will do.
    row = np.minimum(np.where(x < big_n, x, parent), big_n - 1)
    col = np.clip(np.where(x < big_n, parent - big_n, x - big_n), 0, big_m - 1)
    terms = flow * c[np.arange(count)[:, None], row, col]
    total = np.zeros(count)
    for column in terms.T:
        total += column
    return total
