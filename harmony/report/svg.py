"""Small inline SVG drawings of palettes for the HTML report.

Two drawings, both plain SVG text with every label escaped, no scripts and no external resources:

- :func:`palette_strip_svg`: one bar whose segment widths are the palette weights;
- :func:`hue_wheel_svg`: the colours of two palettes as dots on a CAM02-UCS hue wheel, hue as the
  angle and colourfulness M' as the radius, neutrals gathered in the centre, and the colour pairs
  that a rule linked drawn as curved chords between their dots.

Geometry follows the usual screen convention (y grows downwards), so the hue angle is drawn
counter-clockwise from the positive a' axis, as on a printed a'b' diagram.
"""

from dataclasses import dataclass
from html import escape

import numpy as np

from harmony import colour
from harmony.colour.neutral import NEUTRAL_COLOURFULNESS, NEUTRAL_FADE, neutrality

__all__ = [
    "WheelLink",
    "WHEEL_MAX_COLOURFULNESS",
    "palette_strip_svg",
    "hue_wheel_svg",
    "wheel_position",
]

#: Colourfulness M' drawn at the rim of the wheel. Saturated sRGB primaries reach M' of about
#: 35-45 under the default viewing conditions, but furniture colours rarely exceed 30, so the rim
#: sits at 30 to spread them out. Colours beyond the rim are drawn on it.
WHEEL_MAX_COLOURFULNESS = 30.0


@dataclass(frozen=True)
class WheelLink:
    """A colour pair to draw on a hue wheel: colour ``a`` of the first palette, ``b`` of the second.

    Attributes
    ----------
    a, b : int
        Indices into the first and the second palette.
    label : str
        Name of the rule that linked the two colours (escaped when drawn).
    value : float
        The pair's signed contribution; positive links are drawn solid, negative ones dashed.
    """

    a: int
    b: int
    label: str = ""
    value: float = 1.0


def _attr(text):
    return escape(str(text), quote=True)


def _num(x):
    return f"{float(x):.2f}".rstrip("0").rstrip(".")


def palette_strip_svg(palette, width=240, height=24, label=None, codes=None):
    """An SVG bar whose segments are the palette colours, each as wide as its weight.

    Parameters
    ----------
    palette : harmony.photo.palette.Palette
    width, height : float
        Size of the drawing in CSS pixels.
    label : str, optional
        Accessible name of the drawing (escaped); defaults to the colour codes and shares.
    codes : list of str, optional
        The palette's ``palette.hex``, when the caller has them already.

    Returns
    -------
    str
        An ``<svg>`` element. Each segment carries ``data-weight`` and a ``<title>`` tooltip.
    """
    if width <= 0 or height <= 0:
        raise ValueError(f"width and height must be positive, got {width!r} x {height!r}")
    weights = np.asarray(palette.weights, dtype=float)
    edges = np.concatenate([[0.0], np.cumsum(weights) / weights.sum()]) * width
    codes = palette.hex if codes is None else codes
    parts = []
    for i, code in enumerate(codes):
        x0, x1 = edges[i], edges[i + 1]
        tip = f"{code} {weights[i] * 100:.0f} %"
        parts.append(
            f'<rect x="{_num(x0)}" y="0" width="{_num(x1 - x0)}" height="{_num(height)}" '
            f'fill="{code}" data-weight="{weights[i]:.4f}"><title>{_attr(tip)}</title></rect>'
        )
    if label is None:
        label = "palette: " + ", ".join(f"{c} {w * 100:.0f} %" for c, w in zip(codes, weights))
    return (
        f'<svg class="strip" xmlns="http://www.w3.org/2000/svg" width="{_num(width)}" '
        f'height="{_num(height)}" viewBox="0 0 {_num(width)} {_num(height)}" role="img" '
        f'aria-label="{_attr(label)}" preserveAspectRatio="none">{"".join(parts)}</svg>'
    )


def wheel_position(jab, radius, max_colourfulness=WHEEL_MAX_COLOURFULNESS):
    """Offsets (dx, dy) from the wheel centre for colours ``jab`` of shape (..., 3).

    The angle is the CAM02-UCS hue h (counter-clockwise on screen), the distance is
    ``radius * min(M', max_colourfulness) / max_colourfulness``.

    Returns
    -------
    ndarray, shape (..., 2)
    """
    jab = np.asarray(jab, dtype=float)
    m = np.minimum(colour.colourfulness(jab), max_colourfulness)
    h = np.radians(colour.hue_deg(jab))
    r = radius * m / max_colourfulness
    return np.stack([r * np.cos(h), -r * np.sin(h)], axis=-1)


def _neutral_spots(count, radius):
    """Evenly spread spots inside a small central disc for ``count`` neutral colours."""
    if count == 1:
        return np.zeros((1, 2))
    angles = np.linspace(0.0, 2.0 * np.pi, count, endpoint=False) + np.pi / 2.0
    return np.stack([radius * np.cos(angles), -radius * np.sin(angles)], axis=-1)


def _hue_ring(cx, cy, r_in, r_out, steps=36):
    """Ring segments coloured by hue at a mid lightness, so readers see where each hue lies."""
    segs = []
    jab = []
    for k in range(steps):
        h = np.radians((k + 0.5) * 360.0 / steps)
        jab.append([62.0, 22.0 * np.cos(h), 22.0 * np.sin(h)])
    codes = colour.jab_to_hex(np.array(jab))
    for k, code in enumerate(codes):
        a0 = np.radians(k * 360.0 / steps)
        a1 = np.radians((k + 1) * 360.0 / steps)
        p = [
            (cx + r_out * np.cos(a0), cy - r_out * np.sin(a0)),
            (cx + r_out * np.cos(a1), cy - r_out * np.sin(a1)),
            (cx + r_in * np.cos(a1), cy - r_in * np.sin(a1)),
            (cx + r_in * np.cos(a0), cy - r_in * np.sin(a0)),
        ]
        d = (
            f"M{_num(p[0][0])},{_num(p[0][1])} A{_num(r_out)},{_num(r_out)} 0 0 0 "
            f"{_num(p[1][0])},{_num(p[1][1])} L{_num(p[2][0])},{_num(p[2][1])} "
            f"A{_num(r_in)},{_num(r_in)} 0 0 1 {_num(p[3][0])},{_num(p[3][1])} Z"
        )
        segs.append(f'<path d="{d}" fill="{code}"/>')
    return "".join(segs)


def hue_wheel_svg(
    palette_a,
    palette_b,
    links=(),
    size=220,
    names=("A", "B"),
    neutral_threshold=NEUTRAL_COLOURFULNESS,
    neutral_fade=NEUTRAL_FADE,
    max_colourfulness=WHEEL_MAX_COLOURFULNESS,
):
    """Two palettes on one CAM02-UCS hue wheel, with the rule links between their colours.

    Parameters
    ----------
    palette_a, palette_b : harmony.photo.palette.Palette
        Colours of ``palette_a`` are drawn as discs, those of ``palette_b`` as diamonds; the area of
        each mark grows with the colour's weight.
    links : iterable of WheelLink
        Colour pairs to join: index ``a`` into ``palette_a``, ``b`` into ``palette_b``.
    size : float
        Width and height in CSS pixels.
    names : (str, str)
        Names of the two palettes for the tooltips (escaped).
    neutral_threshold, neutral_fade : float
        Colours with :func:`harmony.colour.neutral.neutrality` >= 0.5 are gathered in the central disc,
        since their hue carries no meaning; the dashed circle marks ``neutral_threshold``.
    max_colourfulness : float
        M' at the rim.

    Returns
    -------
    str
        An ``<svg class="wheel">`` element.

    Raises
    ------
    ValueError
        If a link's index lies outside its palette.
    """
    links = list(links)
    for link in links:
        if not (0 <= link.a < len(palette_a) and 0 <= link.b < len(palette_b)):
            raise ValueError(
                f"link ({link.a}, {link.b}) lies outside palettes of {len(palette_a)} and {len(palette_b)} colours"
            )
    c = size / 2.0
    ring_out = size / 2.0 - 2.0
    ring_in = ring_out - 7.0
    radius = ring_in - 9.0
    neutral_r = radius * neutral_threshold / max_colourfulness
    spot_r = max(neutral_r * 0.55, 4.0)

    def place(palette):
        pos = wheel_position(palette.jab, radius, max_colourfulness)
        is_neutral = neutrality(palette.jab, neutral_threshold, neutral_fade) >= 0.5
        return pos, is_neutral

    pos_a, neu_a = place(palette_a)
    pos_b, neu_b = place(palette_b)
    # Neutrals of both palettes share the central disc: A's on the left half, B's on the right.
    for pos, neu, side in ((pos_a, neu_a, -1.0), (pos_b, neu_b, 1.0)):
        idx = np.flatnonzero(neu)
        if idx.size:
            spots = _neutral_spots(idx.size, spot_r * 0.6)
            spots[:, 0] = spots[:, 0] * 0.5 + side * spot_r * 0.5
            pos[idx] = spots

    out = [
        f'<svg class="wheel" xmlns="http://www.w3.org/2000/svg" width="{_num(size)}" '
        f'height="{_num(size)}" viewBox="0 0 {_num(size)} {_num(size)}" role="img" '
        f'aria-label="{_attr(f"hue wheel of {names[0]} and {names[1]}")}">',
        _hue_ring(c, c, ring_in, ring_out),
        f'<circle cx="{_num(c)}" cy="{_num(c)}" r="{_num(radius)}" fill="#fbfaf7" stroke="#e4e0d8"/>',
        f'<circle cx="{_num(c)}" cy="{_num(c)}" r="{_num(radius / 2)}" fill="none" stroke="#eeeae3"/>',
        f'<circle cx="{_num(c)}" cy="{_num(c)}" r="{_num(neutral_r)}" fill="#f0eee9" '
        f'stroke="#b9b3a8" stroke-dasharray="2 2"><title>neutral: M&#8242; below '
        f"{_num(neutral_threshold)}</title></circle>",
    ]
    for link in links:
        xa, ya = c + pos_a[link.a]
        xb, yb = c + pos_b[link.b]
        # A quadratic curve bowed towards the centre: straight chords between near-opposite
        # colours would all cross the middle and hide the neutrals.
        mx, my = (xa + xb) / 2.0, (ya + yb) / 2.0
        qx, qy = c + (mx - c) * 0.35, c + (my - c) * 0.35
        dash = "" if link.value >= 0 else ' stroke-dasharray="4 3"'
        tip = f"{link.label} ({link.value:+.3f})" if link.label else f"{link.value:+.3f}"
        out.append(
            f'<path class="link" d="M{_num(xa)},{_num(ya)} Q{_num(qx)},{_num(qy)} {_num(xb)},{_num(yb)}" '
            f'fill="none" stroke="#3b3935" stroke-opacity="0.55" stroke-width="1.6"{dash}>'
            f"<title>{_attr(tip)}</title></path>"
        )
    for palette, pos, name, shape in ((palette_a, pos_a, names[0], "disc"), (palette_b, pos_b, names[1], "diamond")):
        for i, (code, w) in enumerate(zip(palette.hex, palette.weights)):
            x, y = c + pos[i]
            r = 3.5 + 9.5 * float(np.sqrt(w))
            tip = _attr(f"{name}: {code} {w * 100:.0f} %")
            if shape == "disc":
                out.append(
                    f'<circle class="dot-a" cx="{_num(x)}" cy="{_num(y)}" r="{_num(r)}" fill="{code}" '
                    f'stroke="#2b2a27" stroke-width="1"><title>{tip}</title></circle>'
                )
            else:
                d = r * 1.2
                out.append(
                    f'<path class="dot-b" d="M{_num(x)},{_num(y - d)} L{_num(x + d)},{_num(y)} '
                    f'L{_num(x)},{_num(y + d)} L{_num(x - d)},{_num(y)} Z" fill="{code}" '
                    f'stroke="#2b2a27" stroke-width="1"><title>{tip}</title></path>'
                )
    out.append("</svg>")
    return "".join(out)
