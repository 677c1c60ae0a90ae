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
def grid_basis(h, w, dtype=np.float64):
    """:func:`basis` at every pixel of an (h, w) image, transposed: shape (6, h * w), read-only
    (one row per basis function, so the surface comes out as channel planes)."""
    y = np.linspace(-0.5, 0.5, h)[:, None] * np.ones((1, w))
    x = np.ones((h, 1)) * np.linspace(-0.5, 0.5, w)[None, :]
    grid = np.ascontiguousarray(basis(y, x).reshape(-1, 6).T, dtype=dtype)
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


def median_rows(x, dtype=None):
    """``np.median(x, axis=-1)`` of finite values through one partition (the same bits: the mean
    of the middle pair is their sum, plus 0.0 as numpy's sum starts from it, halved). With
    ``dtype``, the middle values are taken in that type first (float32 values partitioned as
    stored, averaged in float64: the median of their float64 copies)."""
    n = x.shape[-1]
    half = n // 2
    if n % 2:
        return np.partition(x, half, axis=-1)[..., half].astype(dtype or x.dtype) + 0.0
    part = np.partition(x, (half - 1, half), axis=-1)
    lo, hi = part[..., half - 1], part[..., half]
    if dtype is not None:
        lo, hi = lo.astype(dtype), hi.astype(dtype)
    return (lo + hi + 0.0) / 2


_RIDGE = {cols: 1e-9 * np.eye(cols) for cols in (3, 6)}  # keeps the normal equations regular


def fit_surface(planes, index, design, tolerance, iterations):
    """The fit of :func:`backdrop_model` on the ring pixels ``index`` (flat) with basis rows
    ``design``; returns the surface as planes, shape (3, h, w), float like ``planes``.

    The ring colours sit beside their basis rows in one matrix, so one product of its inlier
    rows gives both sides of the normal equations. The median start is the constant itself."""
    h, w = planes.shape[1:]
    stored = planes.reshape(3, -1).take(index, axis=1)
    pts_planes = stored.astype(float)
    joined = np.empty((len(index), 9))
    joined[:, :6] = design
    joined[:, 6:] = pts_planes.T
    design_planes = np.ascontiguousarray(design.T)
    coef = np.zeros((6, 3))
    coef[0] = median_rows(stored, float)
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
        rows = joined if inlier.all() else joined[inlier]
        normal = rows.T @ rows
        coef = np.zeros((6, 3))
        coef[:cols] = np.linalg.solve(normal[:cols, :cols] + _RIDGE[cols], normal[:cols, 6:])
        if cols == 6:
            fitted = inlier
    dtype = planes.dtype if planes.dtype in (np.float32, np.float64) else np.float64
    surface = np.dot(coef.T.astype(dtype), grid_basis(h, w, dtype)).astype(planes.dtype, copy=False)
    return surface.reshape(3, h, w), residual, inlier


def ring_index(h, w, width, usable):
    index, design = ring_basis(h, w, width)
    if usable is not None:
        ok = usable.ravel()[index]
        index, design = index[ok], design[ok]
    return index, design
