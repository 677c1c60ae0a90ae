"""The earth mover's distance between weighted palettes in CAM02-UCS (Rubner, Tomasi & Guibas 2000)."""

from dataclasses import dataclass

import numpy as np

from harmony.colour.transport import padded_transport_costs

__all__ = ["emd_one_to_many", "emd", "Signature", "signature", "emd_pairs", "BATCH"]

#: Transport problems solved together, at most: the solver's arrays stay a few megabytes (its
#: results do not depend on the batch: tests/colour/test_transport.py).
BATCH = 4096

# --------------------------------------------------------------------------------------------
# Earth mover's distance between weighted palettes
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Signature:
    """A palette as the EMD takes it (:func:`signature`): colours (k, 3) from darkest to
    lightest and their weights, each positive, summing to 1."""

    jab: np.ndarray
    weights: np.ndarray


def signature(jab, weights, name="palette"):
    """A palette checked and normalised for the EMD: a :class:`Signature`.

    Colours of zero weight are left out (they move nothing) and the rest sorted by lightness
    J', which leaves the distance as it is and starts the solver's search next to the optimum:
    about 3 pivots per demo problem against 13 in palette order.

    Raises ValueError naming ``name`` for bad shapes, weights that are negative or not finite, a
    zero total, or colours that are not finite.
    """
    jab = np.asarray(jab, dtype=float)
    w = np.asarray(weights, dtype=float)
    if jab.ndim != 2 or jab.shape[1] != 3 or w.shape != (jab.shape[0],) or jab.shape[0] == 0:
        raise ValueError(f"{name}: colours must have shape (k, 3) with weights (k,), got {jab.shape} and {w.shape}")
    total = w.sum()
    if not np.all(np.isfinite(w)) or np.any(w < 0) or not total > 0:
        raise ValueError(f"{name}: weights must be finite and >= 0 with a positive sum")
    if not np.all(np.isfinite(jab)):
        raise ValueError(f"{name}: colours must be finite")
    keep = np.flatnonzero(w > 0)
    keep = keep[np.argsort(jab[keep, 0], kind="stable")]
    return Signature(jab[keep], w[keep] / total)


def emd_one_to_many(jab_a, weights_a, others):
    """Earth mover's distance from one weighted palette to each of several (Rubner et al. 2000).

    Parameters
    ----------
    jab_a : array_like, shape (n, 3)
        CAM02-UCS colours of the first palette.
    weights_a : array_like, shape (n,)
        Their weights (normalised to sum 1 here).
    others : sequence of (jab (m, 3), weights (m,))
        The palettes to compare with.

    Returns
    -------
    ndarray, shape (len(others),)
        Minimum cost, in CAM02-UCS ΔE, of moving the first palette's weight onto each other's,
        with Euclidean ground distance.

    Notes
    -----
    Both signatures are normalised to total weight 1, so every unit of weight moves and the EMD
    is a metric (Rubner et al. 2000, section 4.1). The transportation problems are solved
    exactly, all at once, by :func:`harmony.colour.transport.padded_transport_costs` (a network
    simplex in lockstep); a test checks them against POT's network simplex (Flamary et al.
    2021) and scipy's linear programming.

    References
    ----------
    R. Flamary et al. (2021). POT: Python Optimal Transport. JMLR 22(78):1-8.
    """
    first = signature(jab_a, weights_a, "first palette")
    return emd_pairs([first] * len(others), [signature(j, w, f"palette {i}") for i, (j, w) in enumerate(others)])


def emd_pairs(firsts, seconds):
    """The EMD of each pair ``(firsts[t], seconds[t])`` of :class:`Signature`, solved together."""
    count = len(firsts)
    if len(seconds) != count:
        raise ValueError(f"emd_pairs: {count} first and {len(seconds)} second signatures; they pair one to one")
    if count == 0:
        return np.empty(0)
    index = {}  # id of a signature -> its row in the tables below
    distinct = []
    rows = np.empty((2, count), dtype=np.intp)
    for side, sigs in enumerate((firsts, seconds)):
        for t, sig in enumerate(sigs):
            k = index.get(id(sig))
            if k is None:
                k = index[id(sig)] = len(distinct)
                distinct.append(sig)
            rows[side, t] = k
    sizes = np.array([s.weights.size for s in distinct])
    most = int(sizes.max())
    colours = np.zeros((len(distinct), most, 3))
    weights = np.ones((len(distinct), most))
    for k, sig in enumerate(distinct):
        colours[k, : sig.weights.size] = sig.jab
        weights[k, : sig.weights.size] = sig.weights
    out = np.empty(count)
    for lo in range(0, count, BATCH):
        first, second = rows[:, lo : lo + BATCH]
        x, y = colours[first], colours[second]
        # The ground distances, sqrt((d0**2 + d1**2) + d2**2): the order in which a sum over an
        # axis of three adds, so the same bits as that sum.
        d0, d1, d2 = (x[:, :, None, k] - y[:, None, :, k] for k in range(3))
        cost = np.sqrt((d0 * d0 + d1 * d1) + d2 * d2)
        out[lo : lo + BATCH] = padded_transport_costs(weights[first], weights[second], cost, sizes[first], sizes[second])
    return out


def emd(jab_a, weights_a, jab_b, weights_b):
    """Earth mover's distance between two weighted palettes in CAM02-UCS (Rubner et al. 2000).

    See :func:`emd_one_to_many`.

    >>> round(emd([[50, 0, 0], [50, 10, 0]], [0.6, 0.4], [[50, 0, 0], [50, 0, 10]], [0.3, 0.7]), 4)
    8.6569
    """
    return float(emd_one_to_many(jab_a, weights_a, [(jab_b, weights_b)])[0])
