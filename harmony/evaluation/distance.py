"""The earth mover's distance between weighted palettes in CAM02-UCS (Rubner, Tomasi & Guibas 2000)."""

import numpy as np
from scipy import sparse
from scipy.optimize import linprog

__all__ = ["emd_one_to_many", "emd"]

# --------------------------------------------------------------------------------------------
# Earth mover's distance between weighted palettes
# --------------------------------------------------------------------------------------------


def _signature(jab, weights, name):
    jab = np.asarray(jab, dtype=float)
    w = np.asarray(weights, dtype=float)
    if jab.ndim != 2 or jab.shape[1] != 3 or w.shape != (jab.shape[0],) or jab.shape[0] == 0:
        raise ValueError(f"{name}: colours must have shape (k, 3) with weights (k,), got {jab.shape} and {w.shape}")
    total = w.sum()
    if np.any(w < 0) or not total > 0:
        raise ValueError(f"{name}: weights must be >= 0 with a positive sum")
    return jab, w / total


def emd_one_to_many(jab_a, weights_a, others, chunk=64):
    """Earth mover's distance from one weighted palette to each of several (Rubner et al. 2000).

    Parameters
    ----------
    jab_a : array_like, shape (n, 3)
        CAM02-UCS colours of the first palette.
    weights_a : array_like, shape (n,)
        Their weights (normalised to sum 1 here).
    others : sequence of (jab (m, 3), weights (m,))
        The palettes to compare with.
    chunk : int
        Palettes solved together in one linear programme.

    Returns
    -------
    ndarray, shape (len(others),)
        Minimum cost, in CAM02-UCS ΔE, of moving the first palette's weight onto each other's,
        with Euclidean ground distance.

    Notes
    -----
    Both signatures are normalised to total weight 1, so every unit of weight moves and the EMD
    is a metric (Rubner et al. 2000, section 4.1). Each transportation problem is solved exactly
    by the HiGHS solver through ``scipy.optimize.linprog``; several problems share one call as
    independent blocks of one programme, whose optimum is the sum of the blocks' optima, so each
    block's cost is its own optimum.
    """
    a, wa = _signature(jab_a, weights_a, "first palette")
    sigs = [_signature(j, w, f"palette {i}") for i, (j, w) in enumerate(others)]
    out = np.empty(len(sigs))
    n = a.shape[0]
    for lo in range(0, len(sigs), max(1, int(chunk))):
        block = sigs[lo : lo + max(1, int(chunk))]
        costs, rows, cols, rhs, owners = [], [], [], [], []
        var = con = 0
        for j, (b, wb) in enumerate(block):
            m = b.shape[0]
            cost = np.sqrt(((a[:, None, :] - b[None, :, :]) ** 2).sum(axis=-1)).ravel()
            idx = var + np.arange(n * m)
            # Row sums: flow leaving colour i of the first palette equals its weight.
            rows.append(con + np.repeat(np.arange(n), m))
            cols.append(idx)
            # Column sums: flow arriving at colour l of the other palette equals its weight.
            rows.append(con + n + np.tile(np.arange(m), n))
            cols.append(idx)
            rhs += [wa, wb]
            costs.append(cost)
            owners.append(np.full(n * m, j))
            var += n * m
            con += n + m
        r = np.concatenate(rows)
        c = np.concatenate(cols)
        a_eq = sparse.csr_array((np.ones(r.size), (r, c)), shape=(con, var))
        objective = np.concatenate(costs)
        result = linprog(objective, A_eq=a_eq, b_eq=np.concatenate(rhs), bounds=(0, None), method="highs")
        if result.status != 0:  # cannot happen for balanced transport problems; never return a guess
            raise RuntimeError(f"transport problem not solved: {result.message}")
        out[lo : lo + len(block)] = np.bincount(np.concatenate(owners), weights=objective * result.x, minlength=len(block))
    return out


def emd(jab_a, weights_a, jab_b, weights_b):
    """Earth mover's distance between two weighted palettes in CAM02-UCS (Rubner et al. 2000).

    See :func:`emd_one_to_many`.

    >>> round(emd([[50, 0, 0], [50, 10, 0]], [0.6, 0.4], [[50, 0, 0], [50, 0, 10]], [0.3, 0.7]), 4)
    8.6569
    """
    return float(emd_one_to_many(jab_a, weights_a, [(jab_b, weights_b)])[0])


