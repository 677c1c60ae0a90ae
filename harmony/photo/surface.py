"""The smooth backdrop surface of a studio shot: a quadratic in the pixel position per channel of
CAM02-UCS J'a'b', fitted robustly to the border ring (see :mod:`harmony.photo.mask`)."""

from functools import lru_cache

import numpy as np

__all__ = [
    "border_ring",
    "basis",
    "grid_basis",
    "ring_basis",
    "ring_index",
    "median_rows",
    "fit_surface",
]


def border_ring(shape, width):
    """Boolean mask of the pixels within ``width`` of the image edge, shape ``shape`` (h, w)."""
    h, w = shape
    ring = np.zeros((h, w), dtype=bool)
    ring[:width, :] = ring[-width:, :] = True
    ring[:, :width] = ring[:, -width:] = True
    return ring


def basis(y, x):
    """Quadratic basis in normalised coordinates, shape (..., 6)."""
    return np.stack([np.ones_like(y), x, y, x * x, x * y, y * y], axis=-1)


@lru_cache(maxsize=16)
def grid_basis(h, w):
    """:func:`basis` at every pixel of an (h, w) image, transposed: shape (6, h * w), read-only
    (one row per basis function, so the surface comes out as channel planes)."""
    y = np.linspace(-0.5, 0.5, h)[:, None] * np.ones((1, w))
    x = np.ones((h, 1)) * np.linspace(-0.5, 0.5, w)[None, :]
    grid = np.ascontiguousarray(basis(y, x).reshape(-1, 6).T)
    grid.setflags(write=False)
    return grid


@lru_cache(maxsize=16)
def ring_basis(h, w, width):
    """Flat indices of the ring pixels (raster order) and their :func:`basis` rows, read-only."""
    index = np.flatnonzero(border_ring((h, w), width))
    ys, xs = np.divmod(index, w)
    design = basis(ys / max(h - 1, 1) - 0.5, xs / max(w - 1, 1) - 0.5)
    index.setflags(write=False)
    design.setflags(write=False)
    return index, design


def median_rows(x):
    """``np.median(x, axis=-1)`` of finite values through one partition (the same bits: the mean
    of the middle pair is their sum, plus 0.0 as numpy's sum starts from it, halved)."""
    n = x.shape[-1]
    half = n // 2
    if n % 2:
        return np.partition(x, half, axis=-1)[..., half] + 0.0
    part = np.partition(x, (half - 1, half), axis=-1)
    return (part[..., half - 1] + part[..., half] + 0.0) / 2


_RIDGE = {cols: 1e-9 * np.eye(cols) for cols in (3, 6)}  # keeps the normal equations regular


def fit_surface(planes, index, design, tolerance, iterations):
    """The fit of :func:`backdrop_model` on the ring pixels ``index`` (flat) with basis rows
    ``design``; returns the surface as planes, shape (3, h, w), float like ``planes``.

    The fitted ring colours come from the same matrix products in either orientation (one
    product per element, the same bits), here as planes; the median start is the constant
    itself (``design @ coef`` with only the first row gives it exactly)."""
    h, w = planes.shape[1:]
    pts_planes = planes.reshape(3, -1).take(index, axis=1).astype(float)
    pts = np.ascontiguousarray(pts_planes.T)  # rows, for the solves
    design_planes = np.ascontiguousarray(design.T)
    coef = np.zeros((6, 3))
    coef[0] = median_rows(pts_planes)
    fitted = None  # the inliers of the last full (quadratic) fit
    for it in range(iterations + 1):
        if it == 0:
            sq = pts_planes - coef[0][:, None]
        else:
            sq = pts_planes - np.ascontiguousarray(coef.T) @ design_planes
        sq *= sq
        residual = np.sqrt(sq[0] + sq[1] + sq[2])
        # Widen the first inlier test: a sweep's ring is far from its median colour.
        limit = tolerance if it else max(tolerance, 2.5 * float(median_rows(residual)))
        inlier = residual <= limit
        if it == iterations or np.count_nonzero(inlier) < 12:
            break
        if fitted is not None and np.array_equal(inlier, fitted):
            break  # a fixed point: every further fit gives the same coefficients
        cols = 3 if it == 0 else 6
        rows = np.flatnonzero(inlier)
        a = design.take(rows, axis=0)[:, :cols]
        sol = np.linalg.solve(a.T @ a + _RIDGE[cols], a.T @ pts.take(rows, axis=0))  # normal equations
        coef = np.zeros((6, 3))
        coef[:cols] = sol
        if cols == 6:
            fitted = inlier
    surface = np.empty((3, h * w), dtype=planes.dtype)
    surface[...] = np.dot(np.ascontiguousarray(coef.T), grid_basis(h, w))
    return surface.reshape(3, h, w), residual, inlier


def ring_index(h, w, width, usable):
    index, design = ring_basis(h, w, width)
    if usable is not None:
        ok = usable.ravel()[index]
        index, design = index[ok], design[ok]
    return index, design
