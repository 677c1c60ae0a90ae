"""The earth mover's distance between weighted palettes in CAM02-UCS (Rubner, Tomasi & Guibas 2000)."""

from dataclasses import dataclass

import numpy as np

__all__ = ["emd_one_to_many", "emd", "Signature", "signature", "emd_signatures"]

# --------------------------------------------------------------------------------------------
# Earth mover's distance between weighted palettes
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Signature:
    """A palette as the EMD takes it (:func:`signature`): colours (k, 3), weights summing to 1,
    and those weights divided by their own sum once more (``balanced``), which times the other
    palette's total gives two sums equal to the last bit, as the solver checks."""

    jab: np.ndarray
    weights: np.ndarray
    balanced: np.ndarray


def signature(jab, weights, name="palette"):
    """A palette checked and normalised for the EMD: a :class:`Signature`.

    Raises ValueError naming ``name`` for bad shapes, negative weights or a zero total.
    """
    jab = np.asarray(jab, dtype=float)
    w = np.asarray(weights, dtype=float)
    if jab.ndim != 2 or jab.shape[1] != 3 or w.shape != (jab.shape[0],) or jab.shape[0] == 0:
        raise ValueError(f"{name}: colours must have shape (k, 3) with weights (k,), got {jab.shape} and {w.shape}")
    total = w.sum()
    if np.any(w < 0) or not total > 0:
        raise ValueError(f"{name}: weights must be >= 0 with a positive sum")
    w = w / total
    return Signature(jab, w, w / w.sum())


def emd_one_to_many(jab_a, weights_a, others, chunk=None):
    """Earth mover's distance from one weighted palette to each of several (Rubner et al. 2000).

    Parameters
    ----------
    jab_a : array_like, shape (n, 3)
        CAM02-UCS colours of the first palette.
    weights_a : array_like, shape (n,)
        Their weights (normalised to sum 1 here).
    others : sequence of (jab (m, 3), weights (m,))
        The palettes to compare with.
    chunk : None
        Kept for callers of the earlier linear-programming version; unused.

    Returns
    -------
    ndarray, shape (len(others),)
        Minimum cost, in CAM02-UCS ΔE, of moving the first palette's weight onto each other's,
        with Euclidean ground distance.

    Notes
    -----
    Both signatures are normalised to total weight 1, so every unit of weight moves and the EMD
    is a metric (Rubner et al. 2000, section 4.1). Each transportation problem is solved exactly
    by the network simplex of POT (``ot.emd2``, Flamary et al. 2021; the algorithm of Bonneel et
    al. 2011), tens of microseconds for palettes of ten colours; the ground distances of all
    palettes come from one broadcast.

    References
    ----------
    R. Flamary et al. (2021). POT: Python Optimal Transport. JMLR 22(78):1-8.
    N. Bonneel, M. van de Panne, S. Paris, W. Heidrich (2011). Displacement interpolation using
        Lagrangian mass transport. ACM Trans. Graphics 30(6):158.
    """
    first = signature(jab_a, weights_a, "first palette")
    return emd_signatures(first, [signature(j, w, f"palette {i}") for i, (j, w) in enumerate(others)])


def emd_signatures(first, others):
    """:func:`emd_one_to_many` on palettes already made :class:`Signature` (no checks again)."""
    out = np.empty(len(others))
    if not others:
        return out
    solve = _solver()
    a, wa = first.jab, first.weights
    every = np.concatenate([s.jab for s in others]).T.copy()
    # The ground distances to every colour at once, sqrt((d0**2 + d1**2) + d2**2): the order in
    # which a sum over an axis of three adds, so the same bits as that sum.
    d0, d1, d2 = (a[:, k, None] - every[k] for k in range(3))
    cost = np.sqrt((d0 * d0 + d1 * d1) + d2 * d2)
    wb = np.concatenate([s.balanced for s in others]) * wa.sum()
    at = 0
    for t, s in enumerate(others):
        m = s.jab.shape[0]
        out[t] = solve(wa, wb[at : at + m], np.ascontiguousarray(cost[:, at : at + m]))
        at += m
    return out


#: Iteration cap of the network simplex (POT's default for ``ot.emd``).
MAX_ITERATIONS = 100_000


def _solver():
    """POT's network simplex: its compiled core when present (``ot.emd2`` spends most of its
    time for a 10 x 10 problem checking its arguments), else ``ot.emd2`` itself.

    Importing it imports all of POT, 1.4-2 s on the project's 2-core machine: POT 0.9 loads
    scipy.stats and scipy.optimize, and scikit-learn and networkx when they are installed (as here);
    its ``POT_BACKEND_DISABLE_*`` variables only skip torch, jax, cupy and tensorflow."""
    try:
        from ot.lp.emd_wrap import emd_c
    except ImportError:  # a POT that moved its core: the public function gives the same optimum
        import ot

        return lambda wa, wb, cost: float(ot.emd2(wa, wb, cost, numItermax=MAX_ITERATIONS))

    def solve(wa, wb, cost):
        _, value, _, _, code = emd_c(wa, wb, cost, MAX_ITERATIONS, 1)
        if code != 1:  # 1 is OPTIMAL; a balanced transport problem always has an optimum
            raise RuntimeError(f"transport problem not solved (network simplex code {code})")
        return float(value)

    return solve


def emd(jab_a, weights_a, jab_b, weights_b):
    """Earth mover's distance between two weighted palettes in CAM02-UCS (Rubner et al. 2000).

    See :func:`emd_one_to_many`.

    >>> round(emd([[50, 0, 0], [50, 10, 0]], [0.6, 0.4], [[50, 0, 0], [50, 0, 10]], [0.3, 0.7]), 4)
    8.6569
    """
    return float(emd_one_to_many(jab_a, weights_a, [(jab_b, weights_b)])[0])


