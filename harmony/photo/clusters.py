"""Clustering of a photo's colour bins: weighted k-means with a k-means++ start, and the merge of
colours closer than a just-noticeable difference (the palette steps of
:func:`harmony.photo.palette.palette_from_decoded`)."""

import math
from functools import lru_cache

import numpy as np

__all__ = ["weighted_kmeans", "merge_close", "sq_dist", "sq_dist_planes", "SeededDraws"]


def _coordinate_order(d):
    """The order in which squared coordinate differences are added: J', b', a' for three (the
    order numpy's ``einsum("nkc,nkc->nk")`` adds them, which earlier versions used, so distances
    keep their bits), index order otherwise."""
    return (0, 2, 1) if d == 3 else tuple(range(d))


def sq_dist_planes(planes, centres):
    """Squared Euclidean distances of points given as coordinate planes, shape (d, n), to
    ``centres`` (k, d): shape (k, n), each row a contiguous run over the points."""
    order = _coordinate_order(planes.shape[0])
    out = planes[order[0]] - centres[:, order[0], None]
    out *= out
    step = np.empty_like(out)
    for c in order[1:]:
        np.subtract(planes[c], centres[:, c, None], out=step)
        step *= step
        out += step
    return out


def sq_dist(points, centres):
    """Squared Euclidean distances of ``points`` (n, d) to ``centres`` (k, d), shape (n, k)."""
    return np.ascontiguousarray(sq_dist_planes(np.ascontiguousarray(points.T), centres).T)


def _kmeans_once(points, weights, k, rng, max_iter, inertia=True):
    n = points.shape[0]
    # Distances run over coordinate planes, point by point along each row (k, n): the values of
    # _sq_dist, laid out so that numpy's loops run long.
    planes = np.ascontiguousarray(points.T)
    cum = np.cumsum(weights)
    chosen = [min(int(np.searchsorted(cum, rng.random() * cum[-1], side="right")), n - 1)]
    closest = sq_dist_planes(planes, points[chosen])[0]
    trials = 2 + int(np.log(k))
    for _ in range(1, k):
        cum = np.cumsum(weights * closest)
        total = cum[-1]
        if not total > 0.0:
            break
        cand = np.minimum(np.searchsorted(cum, rng.random(trials) * total, side="right"), n - 1)
        d_cand = sq_dist_planes(planes, points[cand])
        np.minimum(d_cand, closest, out=d_cand)
        # Each candidate's potential summed point by point in order (cumsum adds in order), as
        # the compiled start (harmony.photo.kernels) adds it.
        best = int(np.argmin(np.cumsum(d_cand * weights, axis=1)[:, -1]))
        chosen.append(int(cand[best]))
        closest = d_cand[best]
    centres = points[chosen].copy()
    m, d = centres.shape
    assignment = None
    # The mass and the weighted coordinates of each cluster by one bincount: row r of the sums
    # collects row r of ``weighted`` (the weight, then each coordinate times it), point by point.
    weighted = np.concatenate([weights[None, :], weights * planes])
    shift = (m * np.arange(d + 1))[:, None]
    for _ in range(max_iter):
        d2 = sq_dist_planes(planes, centres)
        new = np.argmin(d2, axis=0)
        if assignment is not None and np.array_equal(new, assignment):
            break
        assignment = new
        sums = np.bincount((assignment + shift).ravel(), weights=weighted.ravel(), minlength=(d + 1) * m)
        sums = sums.reshape(d + 1, m)
        mass = sums[0]
        used = mass > 0
        centres[used] = sums[1:, used].T / mass[used, None]
    score = float(weights @ sq_dist_planes(planes, centres)[assignment, np.arange(n)]) if inertia else 0.0
    used = np.bincount(assignment, minlength=m) > 0
    remap = np.cumsum(used) - 1
    return score, centres[used], remap[assignment]


class SeededDraws:
    """The uniform draws of ``numpy.random.default_rng(seed).random`` in order, one or a few at a
    time, which is all :func:`weighted_kmeans` asks of its generator (one start of ``k``
    centres). The run is made once per seed and k and kept: a fresh generator costs more than the
    k-means on a small photo."""

    def __init__(self, seed, k):
        self._seed = seed
        self._values = _uniform_run(seed, 1 + (k - 1) * (2 + int(np.log(k))))
        self._at = 0

    def random(self, size=None):
        at = self._at
        end = at + (1 if size is None else int(size))
        if end > len(self._values):  # more than one start asks for: a longer run of the same draws
            self._values = _uniform_run(self._seed, 2 * end)
        self._at = end
        if size is None:
            return float(self._values[at])
        return self._values[at:end].copy()


@lru_cache(maxsize=16)
def _uniform_run(seed, count):
    values = np.random.default_rng(seed).random(count)
    values.setflags(write=False)
    return values


def weighted_kmeans(points, weights, k, rng, max_iter=100, n_init=3, kernels=None):
    """Lloyd's k-means with point weights and a greedy k-means++ start; best of ``n_init`` starts.

    Parameters
    ----------
    points : ndarray, shape (n, d)
    weights : ndarray, shape (n,), non-negative, positive sum
    k : int
    rng : numpy.random.Generator
        Drives the k-means++ seeding; the same generator state gives the same result.
    max_iter : int
        Lloyd iterations per start (stops earlier once the assignment no longer changes).
    n_init : int
        Independent starts; the one with the lowest weighted inertia wins (the first on ties).
    kernels : module, optional
        :mod:`harmony.photo.kernels`: one start of three-dimensional points drawn by
        :class:`SeededDraws` then runs compiled, with the same result.

    Returns
    -------
    centres : ndarray, shape (m, d), m <= k
        Weighted means of the points of each non-empty cluster.
    assignment : ndarray, shape (n,), int
        Index of each point's centre.

    Notes
    -----
    A small numpy loop rather than ``sklearn.cluster.KMeans``: the points here are a few hundred
    to a few thousand occupied colour bins, where scikit-learn's per-call validation and thread
    set-up cost more than the clustering itself (measured on this machine: several ms per call
    against well under 1 ms here). Seeding follows Arthur & Vassilvitskii (2007), "k-means++: the
    advantages of careful seeding", Proc. 18th ACM-SIAM SODA, 1027-1035, with 2 + ln k local
    trials per centre as in scikit-learn's greedy variant. Several starts guard against the local
    minima that few, heavy, well-separated points (a colour chart) make likely.
    """
    points = np.asarray(points, dtype=float)
    weights = np.asarray(weights, dtype=float)
    if points.shape[0] <= k:
        return points.copy(), np.arange(points.shape[0])
    if kernels is not None and n_init <= 1 and points.shape[1] == 3 and isinstance(rng, SeededDraws):
        trials = 2 + int(np.log(k))
        return kernels.kmeans_once(np.ascontiguousarray(points.T), weights, k, rng.random(1 + (k - 1) * trials),
                                   trials, max_iter)
    best = None
    for _ in range(max(1, n_init)):
        run = _kmeans_once(points, weights, k, rng, max_iter, inertia=n_init > 1)
        if best is None or run[0] < best[0]:
            best = run
    return best[1], best[2]


def merge_close(centres, masses, limit):
    """Merge the closest pair of colours while they are closer than ``limit`` (weighted means).

    The distances are computed once; a merge recomputes only the merged colour's row (the same
    numbers a full recomputation gives) and retires the other colour's row and column. The
    matrix is kept as Python lists with each row's minimum, so the closest pair is the one
    ``argmin`` over the whole matrix finds (the first in row-major order) without a pass over
    every distance per merge."""
    inf = math.inf
    points = np.array(centres, dtype=float)
    masses = [float(m) for m in masses]
    m = len(masses)
    d = np.sqrt(sq_dist(points, points))
    np.fill_diagonal(d, inf)
    d = d.tolist()
    points = points.tolist()
    live = [True] * m
    row_min = [min(row) for row in d]
    for _ in range(m - 1):
        best = min(row_min)
        if not best < limit:
            break
        i = row_min.index(best)
        j = d[i].index(best)
        i, j = min(i, j), max(i, j)
        mi, mj = masses[i], masses[j]
        total = mi + mj
        points[i] = [(mi * a + mj * b) / total for a, b in zip(points[i], points[j])]
        masses[i] = total
        live[j] = False
        d[j] = [inf] * m
        row_min[j] = inf
        row = [_distance(points[i], p) if ok else inf for p, ok in zip(points, live)]
        row[i] = inf
        d[i] = row
        row_min[i] = min(row)
        for r in range(m):
            if r == i or not live[r]:
                continue
            dr = d[r]
            was = dr[i], dr[j]
            dr[i], dr[j] = row[r], inf
            if row_min[r] in was:
                row_min[r] = min(dr)
            elif row[r] < row_min[r]:
                row_min[r] = row[r]
    keep = np.flatnonzero(live)
    return np.array(points, dtype=float).reshape(np.shape(centres))[keep], np.array(masses)[keep]


def _distance(a, b):
    """Euclidean distance of two J'a'b' triples, with the products added in the order
    :func:`sq_dist` adds them: J', b', then a'."""
    dj, da, db = a[0] - b[0], a[1] - b[1], a[2] - b[2]
    return math.sqrt(dj * dj + db * db + da * da)
