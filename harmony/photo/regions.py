"""Operations on boolean pixel masks for :mod:`harmony.photo.mask`: growing a set through the
pixels it may take, labelling regions, finding those that touch the edge. Growth runs on a whole
mask as one Python integer, a bit per pixel, where a step is a few shifts and bitwise operations
over all pixels at once; the results are those of the ``scipy.ndimage`` calls each function
names."""

import numpy as np
from scipy import ndimage

__all__ = [
    "CROSS",
    "dilate_cross",
    "to_bits",
    "from_bits",
    "grow_within",
    "grow_along",
    "label_cross",
    "label_box",
    "connected_to_edge",
]

#: The 4-neighbour cross, ``scipy.ndimage.generate_binary_structure(2, 1)`` (the default of
#: ``label`` and ``binary_dilation`` in two dimensions), made once.
CROSS = ndimage.generate_binary_structure(2, 1)


def dilate_cross(mask, times=1):
    """``scipy.ndimage.binary_dilation(mask, iterations=times)`` with its default cross (4-neighbour)
    structure and a False border: the pixels within city-block distance ``times`` of ``mask``."""
    out = mask
    for _ in range(times):
        grown = out.copy()
        grown[1:] |= out[:-1]
        grown[:-1] |= out[1:]
        grown[:, 1:] |= out[:, :-1]
        grown[:, :-1] |= out[:, 1:]
        out = grown
    return out


def to_bits(mask, stride):
    """A boolean (h, w) array as one integer, bit ``r * stride + c`` for pixel (r, c); columns
    from ``w`` to ``stride - 1`` are zero (a guard, so that shifts by one do not wrap rows)."""
    h, w = mask.shape
    padded = np.zeros((h, stride), dtype=bool)
    padded[:, :w] = mask
    return int.from_bytes(np.packbits(padded, axis=None, bitorder="little").tobytes(), "little")


def from_bits(value, shape, stride):
    """The inverse of :func:`to_bits`."""
    h, w = shape
    raw = np.frombuffer(value.to_bytes((h * stride + 7) // 8, "little"), dtype=np.uint8)
    return np.unpackbits(raw, count=h * stride, bitorder="little").reshape(h, stride)[:, :w].astype(bool)


def grow_within(seed, allowed, steps, kernels=None):
    """``scipy.ndimage.binary_dilation(seed, iterations=steps, mask=seed | allowed)`` (the 4-neighbour
    cross, nothing beyond the edge), run only on the bounding box of the pixels it may add (plus
    one pixel): every path of the growth runs through those pixels, so the result is the same.

    The box is grown as one integer, a bit per pixel (:func:`to_bits`): each step is a handful of
    shifts, or-s and one and over the whole box, where ``binary_dilation`` visits pixel by
    pixel. ``kernels``: :mod:`harmony.photo.kernels`, the same growth compiled."""
    if kernels is not None:
        grown, free = kernels.grow_within(seed, allowed, steps)
        return grown if free else seed
    free = allowed & ~seed
    rows = np.flatnonzero(free.any(axis=1))
    if rows.size == 0:
        return seed
    cols = np.flatnonzero(free.any(axis=0))
    h, w = seed.shape
    box = np.s_[max(rows[0] - 1, 0): min(rows[-1] + 2, h), max(cols[0] - 1, 0): min(cols[-1] + 2, w)]
    inside = seed[box]
    stride = inside.shape[1] + 1
    grown = to_bits(inside, stride)
    within = to_bits(inside | allowed[box], stride)
    for _ in range(steps):
        step = (grown | grown << 1 | grown >> 1 | grown << stride | grown >> stride) & within
        if step == grown:
            break
        grown = step
    out = seed.copy()
    out[box] = from_bits(grown, inside.shape, stride)
    return out


def grow_along(seed, free, close_x, close_y, steps, kernels=None):
    """``steps`` rounds of adding the ``free`` pixels beside the grown set across a neighbour
    pair marked close, as bit operations (:func:`to_bits`). ``close_x`` (h, w - 1) marks the pair
    of a pixel and its right neighbour, ``close_y`` (h - 1, w) that of a pixel and the one below.
    Returns ``seed`` itself when nothing is added. ``kernels``: :mod:`harmony.photo.kernels`, the
    same growth compiled."""
    if kernels is not None:
        grown, added = kernels.grow_along(seed, free, close_x, close_y, steps)
        return grown if added else seed
    h, w = seed.shape
    stride = w + 1
    close = np.zeros((2, h, w), dtype=bool)
    close[0, :, :-1] = close_x
    close[1, :-1, :] = close_y
    across, down = to_bits(close[0], stride), to_bits(close[1], stride)
    start = grown = to_bits(seed, stride)
    allowed = to_bits(free, stride)
    for _ in range(steps):
        reached = ((grown & down) << stride | (grown >> stride) & down
                   | (grown & across) << 1 | (grown >> 1) & across)
        new = reached & allowed & ~grown
        if not new:
            break
        grown |= new
    return seed if grown == start else from_bits(grown, (h, w), stride)


def label_cross(mask):
    """``scipy.ndimage.label(mask)`` with the 4-neighbour cross: the labels and their number."""
    return ndimage.label(mask, CROSS)


def label_box(mask, label=label_cross):
    """``scipy.ndimage.label(mask)`` (4-connected), run on the bounding box of ``mask`` only: the
    box keeps the raster order, so the labels are the same. Returns the labels of the box, their
    number and the box (slices). ``label``: the labelling, :func:`label_cross` or its compiled
    twin (:func:`harmony.photo.kernels.label_cross`)."""
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return np.zeros((0, 0), dtype=np.int32), 0, np.s_[0:0, 0:0]
    cols = np.flatnonzero(mask.any(axis=0))
    box = np.s_[rows[0]: rows[-1] + 1, cols[0]: cols[-1] + 1]
    labels, n = label(mask[box])
    return labels, n, box


def connected_to_edge(labels, count):
    """Which of the ``count`` labels touch the image edge, a lookup by label (0 never does)."""
    edge = np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]])
    keep = np.zeros(count + 1, dtype=bool)
    keep[edge] = True
    keep[0] = False
    return keep
