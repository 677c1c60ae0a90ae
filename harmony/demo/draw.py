"""Drawing the demo shop's photos with numpy and Pillow: studio shots with soft shadows, and room scenes."""

import io
from dataclasses import dataclass

import numpy as np
from PIL import Image, ImageChops, ImageDraw
from scipy import ndimage

from harmony.demo.products import IMAGE_SIZE, JPEG_QUALITY, Look

__all__ = ["draw_photo", "encode_jpeg"]

# --------------------------------------------------------------------------------------------
# Drawing
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Frame:
    """A box on the canvas; (u, v) in [0, 1] map to pixels, v downwards."""

    x: float
    y: float
    w: float
    h: float

    def px(self, u, v):
        return (self.x + u * self.w, self.y + v * self.h)


def _unit_noise(rng, shape, sigma):
    """Gaussian noise smoothed with ``sigma`` pixels and rescaled to unit standard deviation."""
    field = rng.standard_normal(shape)
    if sigma > 0:
        field = ndimage.gaussian_filter(field, sigma, mode="wrap")
    field = field - field.mean()
    std = field.std()
    return field / std if std > 1e-6 else np.zeros(shape)


def _texture(kind, yy, xx, along, rng):
    """Multiplicative shading field (about 1) of a material over the pixel grid ``yy, xx``."""
    h, w = yy.shape
    u = (xx - xx[0, 0]) if along == "x" else (yy - yy[0, 0])  # along the grain / brush
    v = (yy - yy[0, 0]) if along == "x" else (xx - xx[0, 0])  # across it
    fine = rng.standard_normal((h, w))
    if kind == "wood":
        period = rng.uniform(7.0, 13.0)
        p1, p2 = rng.uniform(0, 2 * np.pi, 2)
        length = max(u.max(), 1.0)
        phase = v / period + 0.9 * np.sin(u / length * rng.uniform(2, 5) + p1) + 0.3 * np.sin(u / 23.0 + p2)
        rings = np.sin(2 * np.pi * phase)
        rings = np.sign(rings) * np.abs(rings) ** 0.5
        n_across = int(v.max()) + 1
        streak = ndimage.gaussian_filter1d(rng.standard_normal(n_across), 0.7)
        streak = streak / (streak.std() or 1.0)
        return 1.0 + 0.055 * rings + 0.04 * streak[v.astype(int)] + 0.015 * fine
    if kind == "metal":
        across = v / max(v.max(), 1.0)
        n_across = int(v.max()) + 1
        brush = ndimage.gaussian_filter1d(rng.standard_normal(n_across), 0.6)[v.astype(int)]
        sheen = 0.72 + 0.55 * np.exp(-(((across - 0.3) / 0.13) ** 2)) - 0.2 * across
        return sheen + 0.02 * brush + 0.01 * fine
    if kind == "weave":
        weave = np.sin(xx * 2.2) * np.sin(yy * 2.2)
        rows = ndimage.gaussian_filter1d(rng.standard_normal(h), 0.5)[:, None]
        cols = ndimage.gaussian_filter1d(rng.standard_normal(w), 0.5)[None, :]
        return 1.0 + 0.045 * weave + 0.022 * rows + 0.018 * cols + 0.02 * fine
    if kind == "velvet":
        return 1.0 + 0.03 * _unit_noise(rng, (h, w), 18.0) + 0.05 * (0.5 - u / max(u.max(), 1.0)) + 0.012 * fine
    if kind == "boucle":
        return 1.0 + 0.075 * _unit_noise(rng, (h, w), 0.9) + 0.01 * fine
    if kind == "leather":
        return 1.0 + 0.05 * _unit_noise(rng, (h, w), 12.0) + 0.03 * _unit_noise(rng, (h, w), 1.2) + 0.008 * fine
    if kind == "wool":
        rows = ndimage.gaussian_filter1d(rng.standard_normal(h), 0.6)[:, None]
        return 1.0 + 0.06 * _unit_noise(rng, (h, w), 0.7) + 0.02 * rows + 0.01 * fine
    if kind == "jute":
        weave = np.sign(np.sin(xx * 1.6)) * np.sign(np.sin(yy * 1.6))
        rows = ndimage.gaussian_filter1d(rng.standard_normal(h), 0.6)[:, None]
        return 1.0 + 0.07 * weave + 0.05 * rows + 0.04 * fine
    if kind == "rattan":
        weave = np.sin(xx * 1.1 + np.sin(yy * 0.6)) * np.sin(yy * 1.1)
        return 1.0 + 0.14 * np.sign(weave) * np.abs(weave) ** 0.5 + 0.03 * fine
    if kind == "lacquer":
        across = v / max(v.max(), 1.0)
        return 1.0 + 0.05 * (0.5 - across) + 0.08 * np.exp(-(((across - 0.25) / 0.1) ** 2)) + 0.006 * fine
    if kind == "glass":
        cy, cx = yy.mean(), xx.mean()
        r = np.hypot((yy - cy) / max(h, 1), (xx - cx) / max(w, 1))
        spot = np.hypot((yy - (cy - 0.2 * h)) / max(h, 1), (xx - (cx - 0.18 * w)) / max(w, 1))
        return 1.02 - 0.35 * r + 0.3 * np.exp(-((spot / 0.12) ** 2)) + 0.006 * fine
    if kind == "wall":
        return 1.0 + 0.02 * _unit_noise(rng, (h, w), 25.0) + 0.008 * fine
    if kind == "plain":
        return 1.0 + 0.01 * fine
    raise ValueError(f"unknown texture {kind!r}")


def _apply(srgb, field):
    """Shade a flat colour by ``field``: below 1 darkens, above 1 moves towards white."""
    base = np.asarray(srgb, dtype=float)[None, None, :]
    f = field[..., None]
    dark = base * np.minimum(f, 1.0)
    return dark + (1.0 - dark) * np.clip(f - 1.0, 0.0, 1.0)


class _Painter:
    """Paints antialiased, textured shapes onto an sRGB float canvas (supersampled masks)."""

    def __init__(self, rgb, rng, supersample=2):
        self.rgb = rgb
        self.rng = rng
        self.h, self.w = rgb.shape[:2]
        self.ss = supersample

    # masks ------------------------------------------------------------------------------------
    def _mask(self, draw):
        big = Image.new("L", (self.w * self.ss, self.h * self.ss), 0)
        draw(ImageDraw.Draw(big), self.ss)
        return big.resize((self.w, self.h), Image.BOX)

    def poly_px(self, pts):
        return self._mask(lambda d, s: d.polygon([(x * s, y * s) for x, y in pts], fill=255))

    def poly(self, fr, pts):
        return self.poly_px([fr.px(u, v) for u, v in pts])

    def rect(self, fr, u0, v0, u1, v1, r=0.0):
        (x0, y0), (x1, y1) = fr.px(u0, v0), fr.px(u1, v1)
        rad = min(r * fr.w, (x1 - x0) / 2, (y1 - y0) / 2)
        return self._mask(lambda d, s: d.rounded_rectangle(
            [x0 * s, y0 * s, x1 * s, y1 * s], radius=max(rad * s, 0), fill=255))

    def ellipse(self, fr, u0, v0, u1, v1):
        (x0, y0), (x1, y1) = fr.px(u0, v0), fr.px(u1, v1)
        return self._mask(lambda d, s: d.ellipse([x0 * s, y0 * s, x1 * s, y1 * s], fill=255))

    def line(self, fr, pts, width):
        px = [fr.px(u, v) for u, v in pts]
        return self._mask(lambda d, s: d.line([(x * s, y * s) for x, y in px], fill=255,
                                              width=max(int(round(width * s)), 1), joint="curve"))

    # painting ---------------------------------------------------------------------------------
    def fill(self, mask, srgb, tex="plain", along="x", shade=0.12, edge=0.25, blur=2.5):
        """Paint colour ``srgb`` shaded by texture ``tex`` where ``mask`` (a Pillow L image) is set."""
        bbox = mask.getbbox()
        if bbox is None:
            return
        x0, y0, x1, y1 = bbox
        m = np.asarray(mask.crop(bbox), dtype=float) / 255.0
        yy, xx = np.mgrid[y0:y1, x0:x1].astype(float)
        field = _texture(tex, yy, xx, along, self.rng)
        t = (yy - y0) / max(y1 - y0 - 1, 1)
        field = field * (1.0 + shade * (0.5 - t))
        if edge > 0:
            inner = ndimage.gaussian_filter(m, blur, mode="constant")
            field = field * (1.0 - edge * (1.0 - np.clip(inner * 1.15, 0.0, 1.0)))
        region = self.rgb[y0:y1, x0:x1]
        region[:] = region * (1.0 - m[..., None]) + _apply(srgb, field) * m[..., None]

    def darken(self, mask, strength, sigma, tint=(1.0, 1.0, 1.0)):
        """Multiply the canvas by a blurred mask: soft shadows that keep the surface's hue."""
        m = ndimage.gaussian_filter(np.asarray(mask, dtype=float) / 255.0, sigma)
        self.rgb *= 1.0 - strength * m[..., None] * np.asarray(tint)[None, None, :]

    def ground(self, fr, u0, u1, v, depth=0.06, strength=0.35, sigma=7.0):
        """Soft contact shadow under an object standing on the floor at height ``v`` of ``fr``."""
        self.darken(self.ellipse(fr, u0, v - depth, u1, v + depth), strength, sigma, (1.0, 1.0, 0.97))

    def foot(self, fr, u, v, size=0.03, strength=0.45):
        self.darken(self.ellipse(fr, u - size, v - size * 0.4, u + size, v + size * 0.4), strength, 2.0)


def _scaled(srgb, k):
    return tuple(float(min(max(c * k, 0.0), 1.0)) for c in srgb)


def _pillow_pts(cx, cy, half_w, half_h, bow, angle, n=10):
    """Outline of a pillow: a rectangle whose sides bow inwards, rotated by ``angle`` radians."""
    corners = [(-1, -1), (1, -1), (1, 1), (-1, 1)]
    pts = []
    for k in range(4):
        (ax, ay), (bx, by) = corners[k], corners[(k + 1) % 4]
        for t in np.linspace(0.0, 1.0, n, endpoint=False):
            x, y = ax + (bx - ax) * t, ay + (by - ay) * t
            pull = bow * np.sin(np.pi * t)
            x, y = x * (1 - pull * abs(by - ay) / 2), y * (1 - pull * abs(bx - ax) / 2)
            pts.append((x * half_w, y * half_h))
    c, s = np.cos(angle), np.sin(angle)
    return [(cx + x * c - y * s, cy + x * s + y * c) for x, y in pts]


def _leg(p, fr, look, u, v0, v1, top=0.018, bottom=0.01):
    p.fill(p.poly(fr, [(u - top, v0), (u + top, v0), (u + bottom, v1), (u - bottom, v1)]),
           look.frame, look.frame_tex, along="y", edge=0.0, shade=0.1)


def _throw_cushion(p, fr, look, u, v, size, angle, colour=None):
    cx, cy = fr.px(u, v)
    half = size * fr.w
    pts = _pillow_pts(cx, cy, half, half * 0.92, 0.12, angle)
    p.fill(p.poly_px(pts), colour or look.accent, "weave", shade=0.25, edge=0.35, blur=3.0)


def _draw_sofa(p, fr, look, seats):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.0, 1.0, 0.97, depth=0.07)
    for u in (0.07, 0.93):
        _leg(p, fr, look, u, 0.86, 0.99)
        p.foot(fr, u, 0.99)
    arm_r = 0.05 if look.variant % 2 == 0 else 0.02
    p.fill(p.rect(fr, 0.05, 0.04, 0.95, 0.62, r=0.05), _scaled(m, 0.9), tex, shade=0.2)
    p.fill(p.rect(fr, 0.08, 0.58, 0.92, 0.88, r=0.02), _scaled(m, 0.88), tex, shade=0.15)
    a, b = 0.13, 0.87
    step = (b - a) / seats
    for i in range(seats):
        u0, u1 = a + i * step, a + (i + 1) * step
        p.fill(p.rect(fr, u0 + 0.004, 0.1, u1 - 0.004, 0.57, r=0.05), m, tex, shade=0.22, edge=0.35, blur=4.0)
    for i in range(seats):
        u0, u1 = a + i * step, a + (i + 1) * step
        p.fill(p.rect(fr, u0 + 0.003, 0.54, u1 - 0.003, 0.71, r=0.03), _scaled(m, 1.04), tex,
               shade=0.25, edge=0.35, blur=3.0)
    p.fill(p.rect(fr, 0.0, 0.3, 0.14, 0.88, r=arm_r), _scaled(m, 0.96), tex, shade=0.2, edge=0.3, blur=3.5)
    p.fill(p.rect(fr, 0.86, 0.3, 1.0, 0.88, r=arm_r), _scaled(m, 0.96), tex, shade=0.2, edge=0.3, blur=3.5)
    if look.variant != 3:
        _throw_cushion(p, fr, look, 0.24, 0.42, 0.085, -0.12)
    if seats > 2 and look.variant in (0, 1):
        _throw_cushion(p, fr, look, 0.77, 0.42, 0.08, 0.14, colour=look.second)


def _draw_armchair(p, fr, look):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.02, 0.98, 0.97, depth=0.06)
    leg_top = 0.74 if look.variant % 2 else 0.82
    for u in (0.12, 0.88):
        _leg(p, fr, look, u, leg_top, 0.985, top=0.025, bottom=0.013)
        p.foot(fr, u, 0.985)
    p.fill(p.rect(fr, 0.1, 0.0, 0.9, 0.6, r=0.12 if look.variant < 2 else 0.04), _scaled(m, 0.92), tex,
           shade=0.22, edge=0.3, blur=4.0)
    p.fill(p.rect(fr, 0.12, 0.52, 0.88, leg_top + 0.02, r=0.03), _scaled(m, 0.88), tex, shade=0.15)
    p.fill(p.rect(fr, 0.16, 0.47, 0.84, 0.64, r=0.04), _scaled(m, 1.04), tex, shade=0.25, edge=0.35, blur=3.0)
    for u0 in (0.0, 0.81):
        p.fill(p.rect(fr, u0, 0.3, u0 + 0.19, leg_top + 0.03, r=0.06), _scaled(m, 0.97), tex,
               shade=0.2, edge=0.3, blur=3.5)
    if look.variant == 0:
        _throw_cushion(p, fr, look, 0.5, 0.36, 0.14, 0.08)


def _draw_open_shelf(p, fr, look, levels):
    """An open frame: four posts and ``levels`` shelves, the backdrop showing between them."""
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.02, 0.98, 0.985, depth=0.04, strength=0.28, sigma=6.0)
    for u in (0.03, 0.2, 0.8, 0.97):
        back_post = u in (0.2, 0.8)
        p.fill(p.rect(fr, u - 0.02, 0.02 if not back_post else 0.05, u + 0.02, 0.975),
               _scaled(m, 0.85 if back_post else 1.0), tex, along="y", edge=0.0)
        p.foot(fr, u, 0.975, size=0.03)
    for k in range(levels):
        v = 0.02 + k * (0.93 / max(levels - 1, 1))
        p.fill(p.poly(fr, [(0.05, v - 0.035), (0.95, v - 0.035), (1.0, v), (0.0, v)]), _scaled(m, 1.05), tex,
               along="x", edge=0.0)
        p.fill(p.rect(fr, 0.0, v, 1.0, v + 0.045), _scaled(m, 0.85), tex, along="x", edge=0.0)


def _draw_table(p, fr, look, top_v, leg_v, round_top, shelf):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.02, 0.98, 0.985, depth=0.05, strength=0.25, sigma=6.0)
    edge_v = top_v + 0.07
    if round_top:
        _leg(p, fr, look, 0.5, edge_v, 0.97, top=0.05, bottom=0.035)
        p.fill(p.ellipse(fr, 0.3, 0.93, 0.7, 1.0), look.frame, look.frame_tex, along="x", edge=0.1)
        p.foot(fr, 0.5, 0.985, size=0.2, strength=0.3)
        thick = edge_v - top_v
        p.fill(p.ellipse(fr, 0.0, top_v - 0.14 + thick, 1.0, top_v + thick), _scaled(m, 0.78), tex, edge=0.0)
        p.fill(p.ellipse(fr, 0.0, top_v - 0.14, 1.0, top_v), m, tex, shade=0.1, edge=0.15)
        return
    for u in (0.13, 0.87):
        _leg(p, fr, look, u, edge_v, leg_v - 0.05, top=0.02, bottom=0.014)
    if shelf:
        p.fill(p.rect(fr, 0.08, 0.7, 0.92, 0.76), _scaled(look.second, 0.9), look.second_tex, edge=0.05)
    for u in (0.06, 0.94):
        _leg(p, fr, look, u, edge_v, leg_v, top=0.024, bottom=0.016)
        p.foot(fr, u, leg_v, size=0.025)
    p.fill(p.poly(fr, [(0.05, top_v - 0.09), (0.95, top_v - 0.09), (1.0, top_v), (0.0, top_v)]),
           _scaled(m, 1.05), tex, along="x", shade=0.1, edge=0.05)
    p.fill(p.rect(fr, 0.0, top_v, 1.0, edge_v), _scaled(m, 0.82), tex, along="x", shade=0.0, edge=0.05)


def _draw_rug(p, fr, look):
    field, border, motif, tex = look.main, look.second, look.accent, look.main_tex
    shadow = p.rect(_Frame(fr.x + 2, fr.y + 3, fr.w, fr.h), 0.0, 0.0, 1.0, 1.0)
    p.darken(shadow, 0.25, 3.0)
    p.fill(p.rect(fr, 0.0, 0.0, 1.0, 1.0), border, tex, shade=0.04, edge=0.08, blur=1.5)
    p.fill(p.rect(fr, 0.08, 0.06, 0.92, 0.94), field, tex, shade=0.04, edge=0.0)
    inner = p.rect(fr, 0.1, 0.075, 0.9, 0.925)
    if look.variant == 0:  # diamond lattice
        lines = []
        for k in np.linspace(-1.0, 2.0, 13):
            lines.append(p.line(fr, [(k, 0.0), (k + 1.0, 1.0)], 2.0))
            lines.append(p.line(fr, [(k + 1.0, 0.0), (k, 1.0)], 2.0))
        mask = lines[0]
        for extra in lines[1:]:
            mask = ImageChops.lighter(mask, extra)
        p.fill(ImageChops.multiply(mask, inner), motif, tex, shade=0.0, edge=0.0)
    elif look.variant == 1:  # bands
        for v0 in np.arange(0.16, 0.86, 0.12):
            p.fill(p.rect(fr, 0.08, v0, 0.92, v0 + 0.045), motif, tex, shade=0.0, edge=0.0)
    elif look.variant == 2:  # medallion
        p.fill(p.poly(fr, [(0.5, 0.25), (0.8, 0.5), (0.5, 0.75), (0.2, 0.5)]), motif, tex, shade=0.0, edge=0.0)
        p.fill(p.poly(fr, [(0.5, 0.36), (0.66, 0.5), (0.5, 0.64), (0.34, 0.5)]), border, tex, shade=0.0, edge=0.0)
    else:  # inner frame and corner squares
        for u0, v0, u1, v1 in ((0.14, 0.1, 0.86, 0.12), (0.14, 0.88, 0.86, 0.9), (0.14, 0.1, 0.16, 0.9),
                               (0.84, 0.1, 0.86, 0.9)):
            p.fill(p.rect(fr, u0, v0, u1, v1), motif, tex, shade=0.0, edge=0.0)
        for u, v in ((0.2, 0.16), (0.8, 0.16), (0.2, 0.84), (0.8, 0.84)):
            p.fill(p.rect(fr, u - 0.03, v - 0.02, u + 0.03, v + 0.02), motif, tex, shade=0.0, edge=0.0)
    fringe = _scaled(look.second, 1.1)
    for v0, v1 in ((-0.035, 0.0), (1.0, 1.035)):
        strands = [p.line(fr, [(u, v0), (u, v1)], 1.0) for u in np.linspace(0.02, 0.98, 28)]
        mask = strands[0]
        for extra in strands[1:]:
            mask = ImageChops.lighter(mask, extra)
        p.fill(mask, fringe, "plain", shade=0.0, edge=0.0)


def _draw_floor_lamp(p, fr, look):
    p.ground(fr, 0.15, 0.85, 0.985, depth=0.02, strength=0.3, sigma=5.0)
    if look.variant % 2:  # tripod
        for top, bottom in ((0.5, 0.12), (0.5, 0.88), (0.5, 0.55)):
            p.fill(p.line(fr, [(top, 0.45), (bottom, 0.99)], 4.0 if bottom != 0.55 else 3.0),
                   look.frame, look.frame_tex, along="y", edge=0.0, shade=0.1)
            p.foot(fr, bottom, 0.99, size=0.05)
        p.fill(p.rect(fr, 0.485, 0.3, 0.515, 0.47), look.frame, look.frame_tex, along="y", edge=0.0)
    else:
        p.fill(p.rect(fr, 0.485, 0.3, 0.515, 0.965), look.frame, look.frame_tex, along="y", edge=0.0)
        p.fill(p.ellipse(fr, 0.25, 0.95, 0.75, 1.0), look.frame, look.frame_tex, along="x", edge=0.1)
    p.fill(p.ellipse(fr, 0.14, 0.28, 0.86, 0.35), _scaled(look.main, 1.25), "plain", edge=0.0)
    p.fill(p.poly(fr, [(0.26, 0.0), (0.74, 0.0), (0.88, 0.32), (0.12, 0.32)]), look.main, look.main_tex,
           along="y", shade=-0.1, edge=0.15, blur=2.0)


def _draw_pendant(p, fr, look):
    cord = _scaled(look.frame, 0.7)
    p.fill(p.rect(fr, 0.44, 0.0, 0.56, 0.03), look.frame, look.frame_tex, along="y", edge=0.0)
    p.fill(p.rect(fr, 0.495, 0.03, 0.505, 0.4), cord, "plain", edge=0.0)
    shade_tex = look.main_tex
    if look.variant == 4:  # wire cage around a bare bulb
        p.fill(p.ellipse(fr, 0.42, 0.62, 0.58, 0.8), (1.0, 0.97, 0.88), "glass", edge=0.0)
        wires = [p.line(fr, [(0.5, 0.4), (0.5 + 0.4 * np.cos(t), 0.85 - 0.42 * np.sin(t)), (0.5 + 0.4 * np.cos(t), 0.88)], 2.0)
                 for t in np.linspace(0.15, np.pi - 0.15, 6)]
        wires.append(p.line(fr, [(0.1, 0.88), (0.9, 0.88)], 2.5))
        wires.append(p.line(fr, [(0.16, 0.62), (0.84, 0.62)], 2.0))
        mask = wires[0]
        for extra in wires[1:]:
            mask = ImageChops.lighter(mask, extra)
        p.fill(mask, look.frame, "plain", edge=0.0)
        return
    if look.variant == 2:
        d = 0.56 * fr.w / fr.h  # a round globe whatever the frame's aspect
        glow = p.ellipse(fr, 0.22, 0.41, 0.78, 0.41 + d)
        p.fill(glow, look.main if shade_tex != "weave" else _scaled(look.main, 1.05), "glass", edge=0.0)
        p.fill(p.rect(fr, 0.46, 0.38, 0.54, 0.42), look.frame, "metal", along="y", edge=0.0)
        return
    p.darken(p.ellipse(fr, 0.35, 0.5, 0.95, 1.0), 0.08, 12.0)
    if look.variant == 0:  # dome
        p.fill(p.ellipse(fr, 0.1, 0.8, 0.9, 0.9), (1.0, 0.96, 0.85), "plain", edge=0.0)
        arc = [(0.5 + 0.4 * np.cos(t), 0.85 - 0.45 * np.sin(t)) for t in np.linspace(0.0, np.pi, 24)]
        p.fill(p.poly(fr, arc), look.main, shade_tex, along="y", edge=0.1)
    elif look.variant == 1:  # cone
        p.fill(p.ellipse(fr, 0.16, 0.8, 0.84, 0.88), (1.0, 0.96, 0.85), "plain", edge=0.0)
        p.fill(p.poly(fr, [(0.45, 0.4), (0.55, 0.4), (0.84, 0.84), (0.16, 0.84)]), look.main, shade_tex,
               along="y", edge=0.1)
    else:  # drum
        p.fill(p.ellipse(fr, 0.12, 0.82, 0.88, 0.9), (1.0, 0.96, 0.85), "plain", edge=0.0)
        p.fill(p.rect(fr, 0.12, 0.5, 0.88, 0.86), look.main, shade_tex, along="y", edge=0.12)


def _draw_cushion(p, fr, look):
    cx, cy = fr.px(0.5, 0.5)
    pts = _pillow_pts(cx, cy, fr.w * 0.5, fr.h * 0.47, 0.1, 0.0, n=16)
    p.darken(p.poly_px([(x + 3, y + 6) for x, y in pts]), 0.3, 6.0)
    body = p.poly_px(pts)
    p.fill(body, look.main, look.main_tex, shade=0.2, edge=0.45, blur=7.0)
    if look.variant == 1:
        bands = [p.rect(fr, u, 0.0, u + 0.06, 1.0) for u in np.arange(0.12, 0.9, 0.16)]
        mask = bands[0]
        for extra in bands[1:]:
            mask = ImageChops.lighter(mask, extra)
        p.fill(ImageChops.multiply(mask, body), look.accent, "weave", shade=0.2, edge=0.0)
    elif look.variant == 2:
        outline = p._mask(lambda d, s: d.line([(x * s, y * s) for x, y in pts + pts[:1]], fill=255,
                                              width=int(4 * s), joint="curve"))
        p.fill(outline, look.accent, "plain", shade=0.2, edge=0.0)
    elif look.variant == 3:
        p.fill(p.poly(fr, [(0.5, 0.3), (0.7, 0.5), (0.5, 0.7), (0.3, 0.5)]), look.accent, "weave",
               shade=0.1, edge=0.0)


def _draw_dining_chair(p, fr, look):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.05, 0.95, 0.975, depth=0.04, strength=0.3)
    for u in (0.22, 0.78):  # back legs and posts
        p.fill(p.poly(fr, [(u - 0.03, 0.0), (u + 0.03, 0.0), (u + 0.02, 0.93), (u - 0.02, 0.93)]),
               m, tex, along="y", edge=0.0, shade=0.1)
        p.foot(fr, u, 0.93, size=0.04)
    if look.variant == 4:  # ladder back: open horizontal rails
        for v in (0.05, 0.15, 0.25, 0.35):
            p.fill(p.rect(fr, 0.22, v, 0.78, v + 0.045, r=0.01), m, tex, edge=0.0)
    elif look.variant == 5:  # spindles under a top rail
        for u in np.linspace(0.3, 0.7, 7):
            p.fill(p.rect(fr, u - 0.008, 0.08, u + 0.008, 0.47), m, tex, along="y", edge=0.0)
        p.fill(p.rect(fr, 0.2, 0.03, 0.8, 0.09, r=0.02), m, tex, edge=0.0)
    elif look.variant == 6:  # hoop back: a ring of bent wood
        p.fill(ImageChops.subtract(p.ellipse(fr, 0.2, 0.0, 0.8, 0.44), p.ellipse(fr, 0.26, 0.035, 0.74, 0.405)),
               m, tex, edge=0.0)
    elif look.variant == 1:  # slats
        for u in np.linspace(0.3, 0.7, 5):
            p.fill(p.rect(fr, u - 0.018, 0.06, u + 0.018, 0.5), m, tex, along="y", edge=0.0)
        p.fill(p.rect(fr, 0.2, 0.04, 0.8, 0.1), m, tex, edge=0.0)
    elif look.variant == 2:
        p.fill(p.rect(fr, 0.18, 0.03, 0.82, 0.34, r=0.08), look.second, look.second_tex, shade=0.2,
               edge=0.35, blur=3.0)
    else:
        p.fill(p.rect(fr, 0.2, 0.05, 0.8, 0.26, r=0.04), m, tex, edge=0.05)
    for u in (0.12, 0.88):
        p.fill(p.poly(fr, [(u - 0.035, 0.56), (u + 0.035, 0.56), (u + 0.022, 0.985), (u - 0.022, 0.985)]),
               m, tex, along="y", edge=0.0, shade=0.1)
        p.foot(fr, u, 0.985, size=0.045)
    p.fill(p.poly(fr, [(0.18, 0.47), (0.82, 0.47), (0.94, 0.56), (0.06, 0.56)]), _scaled(look.second, 1.05),
           look.second_tex, shade=0.1, edge=0.1)
    p.fill(p.rect(fr, 0.06, 0.56, 0.94, 0.6), _scaled(look.second, 0.8), look.second_tex, shade=0.0, edge=0.0)


def _draw_desk_chair(p, fr, look):
    m, tex, metal = look.main, look.main_tex, look.frame
    p.ground(fr, 0.05, 0.95, 0.97, depth=0.04, strength=0.3)
    hub = (0.5, 0.9)
    for end in ((0.06, 0.94), (0.27, 0.99), (0.73, 0.99), (0.94, 0.94), (0.5, 0.9)):
        if end != hub:
            p.fill(p.line(fr, [hub, end], 7.0), metal, "metal", along="x", edge=0.0)
        p.fill(p.ellipse(fr, end[0] - 0.045, end[1], end[0] + 0.045, end[1] + 0.05), (0.1, 0.1, 0.1), "plain",
               edge=0.0)
        p.foot(fr, end[0], end[1] + 0.05, size=0.04)
    p.fill(p.rect(fr, 0.475, 0.6, 0.525, 0.9), metal, "metal", along="y", edge=0.0)
    p.fill(p.rect(fr, 0.45, 0.28, 0.55, 0.56), (0.12, 0.12, 0.12), "plain", edge=0.0)
    p.fill(p.rect(fr, 0.16, 0.0, 0.84, 0.45, r=0.12), m, tex, shade=0.2, edge=0.35, blur=4.0)
    p.fill(p.rect(fr, 0.1, 0.5, 0.9, 0.64, r=0.06), _scaled(m, 1.03), tex, shade=0.25, edge=0.35, blur=3.0)
    for u in (0.05, 0.95):
        p.fill(p.line(fr, [(u, 0.42), (u, 0.56)], 5.0), (0.12, 0.12, 0.12), "plain", edge=0.0)
        p.fill(p.rect(fr, u - 0.05, 0.4, u + 0.05, 0.44, r=0.02), (0.14, 0.14, 0.14), "leather", edge=0.0)


def _draw_bed(p, fr, look):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.0, 1.0, 0.975, depth=0.05)
    for u in (0.04, 0.96):
        _leg(p, fr, look, u, 0.9, 0.985, top=0.015, bottom=0.012)
        p.foot(fr, u, 0.985)
    p.fill(p.rect(fr, 0.04, 0.0, 0.96, 0.6, r=0.04 if look.variant % 2 else 0.01), _scaled(m, 0.95), tex,
           shade=0.2, edge=0.3, blur=3.0)
    if look.variant in (1, 3):  # channel tufting
        for u in np.linspace(0.16, 0.84, 7):
            p.darken(p.rect(fr, u - 0.003, 0.03, u + 0.003, 0.58), 0.25, 1.5)
    p.fill(p.poly(fr, [(0.08, 0.44), (0.92, 0.44), (1.0, 0.66), (0.0, 0.66)]), look.second, look.second_tex,
           shade=0.12, edge=0.15)
    pillow = (0.97, 0.96, 0.94)
    for u in (0.3, 0.7):
        _throw_cushion(p, fr, look, u, 0.42, 0.13, 0.0, colour=pillow)
    _throw_cushion(p, fr, look, 0.5, 0.48, 0.07, 0.05)
    p.fill(p.poly(fr, [(0.0, 0.6), (1.0, 0.6), (1.0, 0.68), (0.0, 0.68)]), look.accent, "weave", shade=0.1,
           edge=0.1)
    p.fill(p.rect(fr, 0.0, 0.66, 1.0, 0.9, r=0.01), _scaled(look.second, 0.96), look.second_tex, shade=0.15,
           edge=0.15)
    p.fill(p.rect(fr, 0.0, 0.84, 1.0, 0.92), _scaled(m, 0.9), tex, shade=0.1, edge=0.1)


def _draw_bedside(p, fr, look):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.02, 0.98, 0.98, depth=0.04, strength=0.3)
    for u in (0.08, 0.92):
        _leg(p, fr, look, u, 0.74, 0.985, top=0.03, bottom=0.018)
        p.foot(fr, u, 0.985, size=0.04)
    p.fill(p.rect(fr, 0.02, 0.08, 0.98, 0.78), _scaled(m, 0.92), tex, along="x", shade=0.1, edge=0.05)
    drawers = 2 if look.variant == 1 else 1
    fronts = look.second if look.second_tex == "lacquer" else m
    front_tex = look.second_tex
    height = 0.62 / drawers
    for k in range(drawers):
        v0 = 0.12 + k * height
        p.fill(p.rect(fr, 0.07, v0, 0.93, v0 + height - 0.03), fronts, front_tex, along="x", shade=0.08,
               edge=0.1, blur=1.0)
        p.fill(p.ellipse(fr, 0.46, v0 + height / 2 - 0.04, 0.54, v0 + height / 2 + 0.02), look.frame if
               look.frame_tex == "metal" else (0.72, 0.58, 0.3), "metal", along="x", edge=0.0)
    p.fill(p.poly(fr, [(0.03, 0.0), (0.97, 0.0), (1.0, 0.05), (0.0, 0.05)]), _scaled(m, 1.08), tex, edge=0.0)
    p.fill(p.rect(fr, 0.0, 0.05, 1.0, 0.09), _scaled(m, 0.85), tex, edge=0.0)


def _draw_desk(p, fr, look):
    m, tex = look.main, look.main_tex
    p.ground(fr, 0.0, 1.0, 0.98, depth=0.04, strength=0.28)
    for u in (0.05, 0.95):
        if look.frame_tex == "metal":
            p.fill(p.line(fr, [(u - 0.03, 0.1), (u, 0.98), (u + 0.03, 0.1)], 3.0), look.frame, "metal",
                   along="y", edge=0.0)
        else:
            _leg(p, fr, look, u, 0.1, 0.98, top=0.02, bottom=0.014)
        p.foot(fr, u, 0.98)
    if look.variant in (1, 3):
        p.fill(p.rect(fr, 0.66, 0.1, 0.92, 0.52), look.second, look.second_tex, along="x", edge=0.08, blur=1.0)
        for v0 in (0.14, 0.34):
            p.darken(p.rect(fr, 0.66, v0 + 0.16, 0.92, v0 + 0.17), 0.3, 0.8)
            p.fill(p.rect(fr, 0.75, v0 + 0.06, 0.83, v0 + 0.08, r=0.01), (0.72, 0.72, 0.7), "metal", edge=0.0)
    p.fill(p.poly(fr, [(0.03, 0.0), (0.97, 0.0), (1.0, 0.06), (0.0, 0.06)]), _scaled(m, 1.05), tex, edge=0.0)
    p.fill(p.rect(fr, 0.0, 0.06, 1.0, 0.11), _scaled(m, 0.85), tex, edge=0.0)


#: Width / height of the drawing frame per category.
_ASPECT = {
    "sofa": 2.1, "armchair": 1.0, "coffee table": 1.9, "rug": 0.7, "floor lamp": 0.42, "cushion": 1.0,
    "dining table": 1.7, "dining chair": 0.55, "pendant lamp": 0.8, "bed": 1.45, "bedside table": 0.85,
    "desk": 1.7, "desk chair": 0.62,
}


def _draw_product(p, fr, product):
    look, cat = product.look, product.category
    if cat == "sofa":
        _draw_sofa(p, fr, look, seats=(2, 3, 3, 2)[look.variant])
    elif cat == "armchair":
        _draw_armchair(p, fr, look)
    elif cat == "coffee table" and look.variant == 4:
        _draw_open_shelf(p, fr, look, levels=2)
    elif cat == "bedside table" and look.variant == 4:
        _draw_open_shelf(p, fr, look, levels=3)
    elif cat == "coffee table":
        _draw_table(p, fr, look, top_v=0.3, leg_v=0.98, round_top=look.variant == 1, shelf=look.variant == 2)
    elif cat == "dining table":
        _draw_table(p, fr, look, top_v=0.12, leg_v=0.98, round_top=look.variant == 3, shelf=False)
    elif cat == "rug":
        _draw_rug(p, fr, look)
    elif cat == "floor lamp":
        _draw_floor_lamp(p, fr, look)
    elif cat == "pendant lamp":
        _draw_pendant(p, fr, look)
    elif cat == "cushion":
        _draw_cushion(p, fr, look)
    elif cat == "dining chair":
        _draw_dining_chair(p, fr, look)
    elif cat == "desk chair":
        _draw_desk_chair(p, fr, look)
    elif cat == "bed":
        _draw_bed(p, fr, look)
    elif cat == "bedside table":
        _draw_bedside(p, fr, look)
    elif cat == "desk":
        _draw_desk(p, fr, look)
    else:
        raise ValueError(f"no drawing for category {cat!r}")


def _fit(aspect, max_w, max_h, cx, cy):
    w = min(max_w, max_h * aspect)
    h = w / aspect
    return _Frame(cx - w / 2, cy - h / 2, w, h)


def _studio(size, rng):
    """Slightly uneven off-white studio background: warm or cool tint, gradient, vignette."""
    base = np.array([0.945, 0.938, 0.92]) + rng.normal(0.0, 0.006, 3)
    yy, xx = np.mgrid[0:size, 0:size].astype(float) / (size - 1)
    gradient = 1.0 + rng.uniform(0.008, 0.018) * (0.5 - yy)
    r2 = ((xx - 0.5) ** 2 + (yy - 0.45) ** 2) / 0.5
    vignette = 1.0 - rng.uniform(0.015, 0.03) * r2
    uneven = 1.0 + 0.004 * _unit_noise(rng, (size // 8, size // 8), 3.0)
    uneven = np.kron(uneven, np.ones((8, 8)))[:size, :size]
    uneven = ndimage.gaussian_filter(uneven, 6.0)
    return np.clip(base[None, None, :] * (gradient * vignette * uneven)[..., None], 0.0, 1.0)


_WALLS = ((0.86, 0.83, 0.77), (0.71, 0.74, 0.68), (0.66, 0.71, 0.76), (0.80, 0.72, 0.64), (0.55, 0.56, 0.57))
_FLOORS = (((0.66, 0.5, 0.34), "wood"), ((0.45, 0.32, 0.22), "wood"), ((0.6, 0.59, 0.57), "plain"))


def _scene(size, product, rng):
    """A busy room with the product in the middle: wall, floor, window, plant, picture, cabinet."""
    rgb = np.zeros((size, size, 3))
    p = _Painter(rgb, rng)
    full = _Frame(0, 0, size, size)
    wall = _WALLS[int(rng.integers(len(_WALLS)))]
    floor_rgb, floor_tex = _FLOORS[int(rng.integers(len(_FLOORS)))]
    horizon = rng.uniform(0.6, 0.68)
    p.fill(p.rect(full, 0, 0, 1, horizon), wall, "wall", shade=0.12, edge=0.0)
    edges = horizon + (1.0 - horizon) * np.linspace(0.0, 1.0, 8) ** 1.3  # planks widen towards the camera
    for k, (v0, v1) in enumerate(zip(edges[:-1], edges[1:])):
        tone = _scaled(floor_rgb, 0.82 + 0.1 * k / 7 + rng.uniform(-0.04, 0.04))
        p.fill(p.rect(full, 0, v0, 1, v1), tone, floor_tex, along="x", shade=0.0, edge=0.0)
        p.darken(p.rect(full, 0, v1 - 0.002, 1, v1 + 0.002), 0.3, 0.5)
    p.fill(p.rect(full, 0, horizon - 0.03, 1, horizon), (0.93, 0.92, 0.9), "lacquer", edge=0.0)
    left = rng.random() < 0.5
    wu = 0.05 if left else 0.67
    p.fill(p.rect(full, wu, 0.06, wu + 0.28, horizon - 0.12), (0.95, 0.95, 0.94), "lacquer", edge=0.0)
    p.fill(p.rect(full, wu + 0.02, 0.08, wu + 0.26, horizon - 0.14), (0.78, 0.88, 0.97), "glass", edge=0.0)
    p.fill(p.rect(full, wu + 0.135, 0.08, wu + 0.145, horizon - 0.14), (0.95, 0.95, 0.94), "plain", edge=0.0)
    p.fill(p.rect(full, wu + 0.02, 0.3, wu + 0.26, 0.31), (0.95, 0.95, 0.94), "plain", edge=0.0)
    au = 0.68 if left else 0.08
    p.fill(p.rect(full, au, 0.12, au + 0.22, 0.32), (0.2, 0.18, 0.16), "plain", edge=0.0)
    p.fill(p.rect(full, au + 0.015, 0.135, au + 0.205, 0.305), (0.93, 0.9, 0.84), "plain", edge=0.0)
    art = tuple(rng.uniform(0.2, 0.8, 3))
    p.fill(p.ellipse(full, au + 0.05, 0.16, au + 0.15, 0.27), art, "weave", edge=0.0)
    # plant in a pot on the window side, cabinet on the other
    pu = 0.04 if left else 0.8
    p.fill(p.poly(full, [(pu, horizon + 0.12), (pu + 0.14, horizon + 0.12), (pu + 0.12, horizon + 0.28),
                         (pu + 0.02, horizon + 0.28)]), (0.75, 0.45, 0.32), "plain", edge=0.1)
    for k in range(12):
        ang = rng.uniform(-2.7, -0.45)
        reach = rng.uniform(0.06, 0.2)
        cx, cy = pu + 0.07 + reach * np.cos(ang), horizon + 0.12 + 1.4 * reach * np.sin(ang)
        p.fill(p.line(full, [(pu + 0.07, horizon + 0.12), (cx, cy)], 1.5), (0.25, 0.35, 0.18), "plain", edge=0.0)
        p.fill(p.ellipse(full, cx - 0.05, cy - 0.025, cx + 0.05, cy + 0.025),
               (0.2 + 0.1 * rng.random(), 0.42 + 0.1 * rng.random(), 0.22), "plain", edge=0.2)
    cu = 0.78 if left else 0.0
    p.fill(p.rect(full, cu, horizon - 0.12, cu + 0.22, horizon + 0.2), (0.3, 0.26, 0.24), "wood", edge=0.1)
    p.fill(p.rect(full, cu + 0.02, horizon - 0.1, cu + 0.2, horizon + 0.04), (0.85, 0.82, 0.76), "lacquer",
           edge=0.0)
    cat = product.category
    cx = size * 0.5
    neutral = Look((0.55, 0.55, 0.53), "weave", (0.8, 0.78, 0.74), "weave", (0.5, 0.5, 0.5),
                   (0.25, 0.2, 0.16), "wood", 3)
    if cat == "rug":
        _draw_sofa(p, _fit(2.1, size * 0.5, size * 0.3, cx, size * (horizon - 0.02)), neutral, seats=3)
        fr = _Frame(size * 0.18, size * (horizon + 0.06), size * 0.64, size * (0.92 - horizon - 0.04))
        _draw_rug(p, fr, product.look)
        return rgb
    if cat == "pendant lamp":
        fr = _fit(_ASPECT[cat], size * 0.28, size * 0.35, cx, size * 0.2)
        fr = _Frame(fr.x, 0.0, fr.w, fr.h + fr.y)
        _draw_pendant(p, fr, product.look)
        return rgb
    if cat == "cushion":
        sofa_fr = _fit(2.1, size * 0.7, size * 0.4, cx, size * (horizon + 0.05))
        _draw_sofa(p, sofa_fr, neutral, seats=3)
        fr = _fit(1.0, size * 0.2, size * 0.2, cx, sofa_fr.y + sofa_fr.h * 0.42)
        _draw_cushion(p, fr, product.look)
        return rgb
    target_h = {"floor lamp": 0.62, "dining chair": 0.42, "desk chair": 0.42, "bedside table": 0.25,
                "armchair": 0.4, "coffee table": 0.22}.get(cat, 0.5)
    fr = _fit(_ASPECT[cat], size * 0.58, size * target_h, cx, 0)
    bottom = size * (horizon + 0.2)
    fr = _Frame(fr.x, bottom - fr.h, fr.w, fr.h)
    _draw_product(p, fr, product)
    return rgb


def _finish(rgb, rng, quality=JPEG_QUALITY):
    """Sensor noise, then 8-bit sRGB as a Pillow image."""
    noisy = rgb + rng.normal(0.0, 0.006, rgb.shape) + rng.normal(0.0, 0.004, rgb.shape[:2])[..., None]
    return Image.fromarray(np.rint(np.clip(noisy, 0.0, 1.0) * 255.0).astype(np.uint8), "RGB")


def draw_photo(product, kind, size=IMAGE_SIZE):
    """Draw one photo of ``product`` as a Pillow RGB image, ``kind`` "studio" or "scene".

    The drawing depends only on the product (its look and ``photo_seed``), the kind and the size,
    so drawing the same photo twice gives the same pixels.
    """
    if kind not in ("studio", "scene"):
        raise ValueError(f"kind must be 'studio' or 'scene', got {kind!r}")
    if size < 64:
        raise ValueError(f"size must be at least 64 pixels, got {size}")
    rng = np.random.default_rng([product.photo_seed, 0 if kind == "studio" else 1, size])
    if kind == "scene":
        return _finish(_scene(size, product, rng), rng)
    rgb = _studio(size, rng)
    p = _Painter(rgb, rng)
    margin = 0.1 * size
    aspect = _ASPECT[product.category]
    cy = size * (0.5 if product.category in ("rug", "cushion", "pendant lamp") else 0.53)
    scale = 0.82 if product.category == "cushion" else 1.0
    fr = _fit(aspect, (size - 2 * margin) * scale, (size - 2.3 * margin) * scale, size / 2, cy)
    _draw_product(p, fr, product)
    return _finish(rgb, rng)


def encode_jpeg(image, quality=JPEG_QUALITY):
    """JPEG bytes of a Pillow image (baseline, no metadata: the same pixels give the same bytes)."""
    buf = io.BytesIO()
    image.save(buf, "JPEG", quality=quality, optimize=False, progressive=False)
    return buf.getvalue()


