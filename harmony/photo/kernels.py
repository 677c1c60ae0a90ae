"""Compiled loops (numba) for the per-pixel and per-bin steps of a palette.

Each kernel does the arithmetic of the numpy function it names, in the same order and the same
floating-point types, so the palette is the same bit for bit with or without numba
(``tests/photo/test_kernels.py`` holds each kernel to its numpy function, and whole palettes
to the numpy path). The numpy functions stay the reference and the fallback:
:func:`harmony.photo.palette.compiled_kernels` returns this module only once
:func:`harmony.photo.palette.load_kernels` has loaded it (extraction jobs of at least
``COMPILED_MIN_IMAGES`` images do), or always with ``HARMONY_NUMBA=1``; never with ``0``.

The numpy steps are a few dozen calls each over arrays of a few thousand pixels, or a few dozen
colour bins, where the cost of a call outweighs its arithmetic; one loop each does the same work
without it. Importing numba and loading the kernels from its cache takes about half a second,
so small jobs do without them.
"""

import numba
import numpy as np

__all__ = ["pixel_bins", "table_rows", "colour_step_sq", "label_cross", "shadow_found", "region_offsets",
           "grow_within", "grow_along", "bin_sums", "unmix", "kmeans_once", "merge_close"]


def _compiled(fn):
    """``numba.njit`` with its on-disk cache, or without it where no cache folder can be written
    (a read-only install and home directory): each process then compiles once."""
    try:
        return numba.njit(cache=True)(fn)
    except RuntimeError:  # numba: "cannot cache function ...: no locator available"
        return numba.njit(fn)


@_compiled
def pixel_bins(rgb, parts, n_codes, block_cells, n_blocks):
    """:func:`harmony.photo.palette._pixel_codes` and the binning of
    :func:`harmony.photo.palette._bin_colours`: each pixel's table row, its bin among the occupied
    bins (numbered in code order), the number of occupied bins and the table blocks the pixels
    fall in (``block_cells`` rows a block), in order. ``rgb`` has shape (n, 3), uint8."""
    n = rgb.shape[0]
    low = (1 << 24) - 1
    rows = np.empty(n, dtype=np.int64)
    inverse = np.empty(n, dtype=np.int64)
    seen = np.zeros(n_codes, dtype=np.bool_)
    in_block = np.zeros(n_blocks, dtype=np.bool_)
    for i in range(n):
        both = parts[0, rgb[i, 0]] + parts[1, rgb[i, 1]] + parts[2, rgb[i, 2]]
        rows[i] = both >> 24
        inverse[i] = both & low  # the code, for now
        seen[inverse[i]] = True
        in_block[rows[i] // block_cells] = True
    index = np.empty(n_codes, dtype=np.int64)
    m = 0
    for c in range(n_codes):
        if seen[c]:
            index[c] = m
            m += 1
    for i in range(n):
        inverse[i] = index[inverse[i]]
    return rows, inverse, m, np.flatnonzero(in_block)


@_compiled
def table_rows(table, rows):
    """``table.take(rows, axis=1)`` for a table of shape (3, cells)."""
    out = np.empty((3, rows.shape[0]), dtype=table.dtype)
    for c in range(3):
        for i in range(rows.shape[0]):
            out[c, i] = table[c, rows[i]]
    return out


@_compiled
def colour_step_sq(planes):
    """:func:`harmony.photo.mask.colour_step_sq` of channel planes, shape (3, h, w): the squared
    differences summed J', a', then b', in the planes' type; the largest per pixel."""
    _, h, w = planes.shape
    step = np.zeros((h, w), dtype=planes.dtype)
    for y in range(h):
        for x in range(w - 1):
            d0 = planes[0, y, x + 1] - planes[0, y, x]
            d1 = planes[1, y, x + 1] - planes[1, y, x]
            d2 = planes[2, y, x + 1] - planes[2, y, x]
            sq = d0 * d0 + d1 * d1
            sq += d2 * d2
            step[y, x] = max(step[y, x], sq)
            step[y, x + 1] = max(step[y, x + 1], sq)
    for y in range(h - 1):
        for x in range(w):
            d0 = planes[0, y + 1, x] - planes[0, y, x]
            d1 = planes[1, y + 1, x] - planes[1, y, x]
            d2 = planes[2, y + 1, x] - planes[2, y, x]
            sq = d0 * d0 + d1 * d1
            sq += d2 * d2
            step[y, x] = max(step[y, x], sq)
            step[y + 1, x] = max(step[y + 1, x], sq)
    return step


@_compiled
def bin_sums(inverse, n_bins, jab_planes, product, clean, inner):
    """:func:`harmony.photo.palette._bin_sums`: each bin's sums over its product pixels in
    raster order, as bincount adds them."""
    sums = np.zeros((6, n_bins))
    for i in range(inverse.shape[0]):
        p = product[i]
        if p != 0:
            b = inverse[i]
            sums[0, b] += p
            sums[1, b] += np.float64(jab_planes[0, i]) * p
            sums[2, b] += np.float64(jab_planes[1, i]) * p
            sums[3, b] += np.float64(jab_planes[2, i]) * p
            sums[4, b] += clean[i]
            sums[5, b] += inner[i]
    m = 0
    for b in range(n_bins):
        if sums[0, b] > 0:
            m += 1
    jab = np.empty((3, m))
    clean_mass = np.empty(m)
    inner_mass = np.empty(m)
    j = 0
    for b in range(n_bins):
        mass = sums[0, b]
        if mass > 0:
            for c in range(3):
                jab[c, j] = sums[1 + c, b] / mass
            clean_mass[j] = sums[4, b]
            inner_mass[j] = sums[5, b]
            j += 1
    return jab, clean_mass, inner_mass


@_compiled
def unmix(px, back, centres):
    """:func:`harmony.photo.palette._unmix`: per outline pixel the nearest line from the backdrop
    through a centre (the first on ties) and how far along it."""
    n, k = px.shape[1], centres.shape[0]
    nearest = np.empty(n, dtype=np.int64)
    along = np.empty(n)
    for i in range(n):
        b0, b1, b2 = np.float64(back[0, i]), np.float64(back[1, i]), np.float64(back[2, i])
        r0, r1, r2 = px[0, i] - b0, px[1, i] - b1, px[2, i] - b2
        best, best_resid, best_alpha = 0, 0.0, 0.0
        for c in range(k):
            s0, s1, s2 = centres[c, 0] - b0, centres[c, 1] - b1, centres[c, 2] - b2
            dot = r0 * s0 + r1 * s1 + r2 * s2
            norm = s0 * s0 + s1 * s1 + s2 * s2
            alpha = min(max(dot / max(norm, 1e-9), 0.0), 1.0)
            e0, e1, e2 = r0 - alpha * s0, r1 - alpha * s1, r2 - alpha * s2
            resid = e0 * e0 + e1 * e1 + e2 * e2
            if c == 0 or resid < best_resid:
                best, best_resid, best_alpha = c, resid, alpha
        nearest[i] = best
        along[i] = best_alpha
    return nearest, along


@numba.njit(inline="always")
def _sq3(d0, d1, d2):
    """A squared distance from its J', a', b' differences, added as
    :func:`harmony.photo.clusters.sq_dist_planes` adds them: J', b', then a'."""
    out = d0 * d0
    out += d2 * d2
    out += d1 * d1
    return out


@numba.njit(inline="always")
def _sq_dist(planes, p, c0, c1, c2):
    """Squared distance of point ``p`` of ``planes`` (3, n) to the colour (c0, c1, c2)."""
    return _sq3(planes[0, p] - c0, planes[1, p] - c1, planes[2, p] - c2)


@numba.njit(inline="always")
def _draw_index(cum, value, n):
    """``min(np.searchsorted(cum, value, side="right"), n - 1)``."""
    lo, hi = 0, cum.shape[0]
    while lo < hi:
        mid = (lo + hi) // 2
        if cum[mid] <= value:
            lo = mid + 1
        else:
            hi = mid
    return min(lo, n - 1)


@_compiled
def kmeans_once(planes, weights, k, draws, trials, max_iter):
    """One start of :func:`harmony.photo.clusters._kmeans_once` on points given as planes, shape
    (3, n), with the generator's uniform ``draws`` in order; returns the centres of the used
    clusters and each point's cluster."""
    n = planes.shape[1]
    cum = np.cumsum(weights)
    chosen = np.empty(k, dtype=np.int64)
    chosen[0] = _draw_index(cum, draws[0] * cum[n - 1], n)
    at = 1
    closest = np.empty(n)
    for p in range(n):
        closest[p] = _sq_dist(planes, p, planes[0, chosen[0]], planes[1, chosen[0]], planes[2, chosen[0]])
    m = 1
    cand = np.empty(trials, dtype=np.int64)
    d_cand = np.empty((trials, n))
    for _ in range(1, k):
        cum = np.cumsum(weights * closest)
        total = cum[n - 1]
        if not total > 0.0:
            break
        for t in range(trials):
            cand[t] = _draw_index(cum, draws[at + t] * total, n)
        at += trials
        best, best_potential = 0, 0.0
        for t in range(trials):
            q = cand[t]
            potential = 0.0
            for p in range(n):
                d = min(_sq_dist(planes, p, planes[0, q], planes[1, q], planes[2, q]), closest[p])
                d_cand[t, p] = d
                potential += d * weights[p]
            if t == 0 or potential < best_potential:
                best, best_potential = t, potential
        chosen[m] = cand[best]
        m += 1
        closest[:] = d_cand[best]
    centres = np.empty((m, 3))
    for c in range(m):
        for j in range(3):
            centres[c, j] = planes[j, chosen[c]]
    assignment = np.full(n, -1, dtype=np.int64)
    sums = np.empty((4, m))
    for _ in range(max_iter):
        changed = False
        for p in range(n):
            best, best_d = 0, 0.0
            for c in range(m):
                d = _sq_dist(planes, p, centres[c, 0], centres[c, 1], centres[c, 2])
                if c == 0 or d < best_d:
                    best, best_d = c, d
            if best != assignment[p]:
                changed = True
                assignment[p] = best
        if not changed:
            break
        sums[:] = 0.0
        for p in range(n):
            c = assignment[p]
            w = weights[p]
            sums[0, c] += w
            for j in range(3):
                sums[1 + j, c] += w * planes[j, p]
        for c in range(m):
            if sums[0, c] > 0:
                for j in range(3):
                    centres[c, j] = sums[1 + j, c] / sums[0, c]
    used = np.zeros(m, dtype=np.int64)
    for p in range(n):
        used[assignment[p]] = 1
    remap = np.cumsum(used) - 1
    kept = np.empty((remap[m - 1] + 1, 3))
    for c in range(m):
        if used[c]:
            kept[remap[c]] = centres[c]
    out = np.empty(n, dtype=np.int64)
    for p in range(n):
        out[p] = remap[assignment[p]]
    return kept, out


@_compiled
def shadow_found(lightness, dj, coloured, like, flood, edge, curvature, relative):
    """The shadow test of :func:`harmony.photo.mask._shadow`, on the box around the coloured
    pixels outside the ``flood`` (elsewhere False), for float32 J' from 1 to 128: each 3 x 3
    mean is that of ``uniform_filter1d`` down then across (mode "nearest"), whose sums of three
    such values are exact in float64, so a direct sum over the clamped neighbours gives the same
    bits. ``edge``, ``curvature`` and ``relative`` are float32, as numpy casts the Python numbers
    it compares float32 arrays with. Returns the shadow and False when J' is outside that range
    (the numpy step then decides)."""
    h, w = lightness.shape
    found = np.zeros((h, w), dtype=np.bool_)
    outside = 0
    for y in range(h):
        for x in range(w):
            v = lightness[y, x]
            outside += (v < 1.0) | (v >= 128.0) | (v != v)
    if outside:
        return found, False
    top, bottom, left, right = h, -1, w, -1
    for y in range(h):
        first = 0
        while first < w and not (coloured[y, first] and not flood[y, first]):
            first += 1
        if first == w:
            continue
        last = w - 1
        while not (coloured[y, last] and not flood[y, last]):
            last -= 1
        top, bottom = min(top, y), y
        left, right = min(left, first), max(right, last)
    if bottom < 0:
        return found, True
    # The first pass: column means down, on the box and a column either side (clamped).
    x0, x1 = max(left - 1, 0), min(right + 1, w - 1)
    down_w = np.empty((bottom - top + 1, x1 - x0 + 1), dtype=np.float32)
    down_l = np.empty_like(down_w)
    for y in range(top, bottom + 1):
        ys = (max(y - 1, 0), y, min(y + 1, h - 1))
        for x in range(x0, x1 + 1):
            col_w = 0.0
            col_l = 0.0
            for yy in ys:
                if like[yy, x]:
                    col_w += 1.0
                    col_l += np.float64(lightness[yy, x])
            down_w[y - top, x - x0] = np.float32(col_w / 3.0)
            down_l[y - top, x - x0] = np.float32(col_l / 3.0)
    floor = np.float32(1e-6)
    for y in range(top, bottom + 1):
        for x in range(left, right + 1):
            if not coloured[y, x]:
                continue
            # Every neighbour pair where both are like-coloured is within ``edge`` in J'.
            calm = True
            for ny, nx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
                if 0 <= ny < h and 0 <= nx < w and like[y, x] and like[ny, nx]:
                    if not abs(lightness[ny, nx] - lightness[y, x]) < edge:
                        calm = False
            if not calm:
                continue
            # The second pass: the mean across of the column means.
            sum_w = 0.0
            sum_l = 0.0
            for xx in (max(x - 1, 0), x, min(x + 1, w - 1)):
                sum_w += np.float64(down_w[y - top, xx - x0])
                sum_l += np.float64(down_l[y - top, xx - x0])
            weight = np.float32(sum_w / 3.0)
            light = np.float32(sum_l / 3.0)
            local = light / max(weight, floor)
            bend = abs(lightness[y, x] - local)
            found[y, x] = bend < max(curvature, relative * abs(dj[y, x]))
    return found, True


@_compiled
def merge_close(centres, masses, limit):
    """:func:`harmony.photo.clusters.merge_close` of colours (m, 3): the closest pair (the first
    in row-major order) merged while closer than ``limit``, each merged colour's distances
    recomputed as :func:`harmony.photo.clusters.sq_dist` adds them."""
    m = centres.shape[0]
    points = centres.copy()
    mass = masses.copy()
    live = np.ones(m, dtype=np.bool_)
    d = np.empty((m, m))
    for r in range(m):
        for c in range(m):
            d[r, c] = np.inf if r == c else np.sqrt(_sq_dist_points(points, r, c))
    for _ in range(m - 1):
        best, bi, bj = np.inf, 0, 0
        for r in range(m):
            for c in range(m):
                if d[r, c] < best:
                    best, bi, bj = d[r, c], r, c
        if not best < limit:
            break
        i, j = min(bi, bj), max(bi, bj)
        mi, mj = mass[i], mass[j]
        total = mi + mj
        for c in range(3):
            points[i, c] = (mi * points[i, c] + mj * points[j, c]) / total
        mass[i] = total
        live[j] = False
        for r in range(m):
            d[j, r] = d[r, j] = np.inf
        for r in range(m):
            if r != i and live[r]:
                d[i, r] = d[r, i] = np.sqrt(_sq_dist_points(points, i, r))
    n_live = 0
    for r in range(m):
        n_live += live[r]
    out_points = np.empty((n_live, 3))
    out_mass = np.empty(n_live)
    k = 0
    for r in range(m):
        if live[r]:
            out_points[k] = points[r]
            out_mass[k] = mass[r]
            k += 1
    return out_points, out_mass


@numba.njit(inline="always")
def _sq_dist_points(points, a, b):
    """Squared distance of rows ``a`` and ``b`` of ``points`` (m, 3)."""
    return _sq3(points[a, 0] - points[b, 0], points[a, 1] - points[b, 1], points[a, 2] - points[b, 2])


@numba.njit(inline="always")
def _root(parent, a):
    while parent[a] != a:
        parent[a] = parent[parent[a]]
        a = parent[a]
    return a


@_compiled
def label_cross(mask):
    """``scipy.ndimage.label(mask)`` of a 2-D mask with the 4-neighbour cross: regions numbered
    from 1 in the raster order of their first pixel, as scipy numbers them; returns the labels
    (int32) and their number. One pass with union-find, then one renumbering pass."""
    h, w = mask.shape
    labels = np.zeros((h, w), dtype=np.int32)
    parent = np.empty(h * w + 1, dtype=np.int32)
    fresh = 1
    for y in range(h):
        for x in range(w):
            if not mask[y, x]:
                continue
            up = labels[y - 1, x] if y > 0 else 0
            left = labels[y, x - 1] if x > 0 else 0
            if up == 0 and left == 0:
                parent[fresh] = fresh
                labels[y, x] = fresh
                fresh += 1
            elif up == 0 or left == 0 or up == left:
                labels[y, x] = up + left if up == 0 or left == 0 else up
            else:
                a, b = _root(parent, up), _root(parent, left)
                if a < b:
                    parent[b] = a
                elif b < a:
                    parent[a] = b
                labels[y, x] = min(a, b)
    # A set's root is its smallest provisional label, that of its first pixel in raster order:
    # numbering the roots in label order numbers the regions in the order of their first pixel.
    number = np.zeros(fresh, dtype=np.int32)
    count = 0
    for label in range(1, fresh):
        root = _root(parent, label)
        if root == label:
            count += 1
            number[label] = count
        else:
            number[label] = number[root]
    for y in range(h):
        for x in range(w):
            labels[y, x] = number[labels[y, x]]
    return labels, count


@_compiled
def region_offsets(labels, n, near, ringing_zone, diff):
    """The region means of :func:`harmony.photo.mask._enclosed_backdrop`: per region 1..n, the
    number of its pixels within the opening tolerance (``near``) and their mean offset from the
    surface (``diff``, (3, h, w)), then the same for those of them away from strong edges (not
    ``ringing_zone``); sums in raster order, as bincount adds them. The first value says whether
    any labelled pixel is near at all."""
    h, w = labels.shape
    count = np.zeros((2, n + 1), dtype=np.int64)
    sums = np.zeros((2, n + 1, 3))
    found = False
    for y in range(h):
        for x in range(w):
            label = labels[y, x]
            if label == 0 or not near[y, x]:
                continue
            found = True
            for kind in range(2):
                if kind == 1 and ringing_zone[y, x]:
                    break
                count[kind, label] += 1
                for c in range(3):
                    sums[kind, label, c] += np.float64(diff[c, y, x])
    means = np.empty((2, n, 3))
    for kind in range(2):
        for label in range(1, n + 1):
            for c in range(3):
                means[kind, label - 1, c] = sums[kind, label, c] / max(count[kind, label], 1)
    return found, count[0, 1:], means[0], count[1, 1:], means[1]


@numba.njit(inline="always")
def _joined(ny, nx, y, x, close_x, close_y):
    """Whether the neighbour pair (ny, nx), (y, x) is marked close (``close_y`` for a pixel and
    the one below, ``close_x`` for a pixel and its right neighbour); None marks every pair."""
    if close_x is None:
        return True
    if ny != y:
        return close_y[min(y, ny), x]
    return close_x[y, min(x, nx)]


@numba.njit
def _grow(seed, free, steps, close_x, close_y):
    """Layer by layer, ``steps`` rounds of adding the ``free`` pixels beside the grown set (across
    a close pair, when pairs are given). Returns the grown mask and the number of pixels added."""
    h, w = seed.shape
    grown = seed.copy()
    n_free = 0
    for y in range(h):
        for x in range(w):
            if free[y, x] and not seed[y, x]:
                n_free += 1
    layer = np.empty(n_free, dtype=np.int64)
    size = 0
    if n_free and steps > 0:  # the first layer: free pixels beside the seed
        for y in range(h):
            for x in range(w):
                if not free[y, x] or seed[y, x]:
                    continue
                for ny, nx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
                    if 0 <= ny < h and 0 <= nx < w and seed[ny, nx] and _joined(ny, nx, y, x, close_x, close_y):
                        layer[size] = y * w + x
                        size += 1
                        break
    for i in range(size):
        grown.flat[layer[i]] = True
    total, start = size, 0
    for _ in range(1, steps):  # each further layer: free pixels beside the last one
        end = total
        for i in range(start, end):
            y, x = divmod(layer[i], w)
            for ny, nx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
                if (0 <= ny < h and 0 <= nx < w and free[ny, nx] and not grown[ny, nx]
                        and _joined(ny, nx, y, x, close_x, close_y)):
                    grown[ny, nx] = True
                    layer[total] = ny * w + nx
                    total += 1
        if total == end:
            break
        start = end
    return grown, total, n_free


@_compiled
def grow_within(seed, allowed, steps):
    """``scipy.ndimage.binary_dilation(seed, iterations=steps, mask=seed | allowed)`` with the
    4-neighbour cross. Returns the grown mask and whether any pixel was free to take."""
    grown, _, n_free = _grow(seed, allowed, steps, None, None)
    return grown, n_free > 0


@_compiled
def grow_along(seed, free, close_x, close_y, steps):
    """:func:`harmony.photo.regions.grow_along`: ``steps`` rounds of adding the ``free`` pixels
    beside the grown set across a neighbour pair marked close. Returns the grown mask and
    whether it added any pixel."""
    grown, added, _ = _grow(seed, free, steps, close_x, close_y)
    return grown, added > 0
