"""Draw the hue rules of a rules file around a hue wheel, so a stylist sees what the file means.

A key on top says how to read the picture. One panel per hue rule, plus one panel per section
(default first) for the sum of its weighted hue rules. In each panel a ring of hues starts at a reference hue at the top and turns clockwise
by hue difference; bars point outwards (green) where the rule rewards a second colour of that hue
and inwards (red) where it penalises it.
"""

import io
import math
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw, ImageFont

from harmony import colour

__all__ = ["HEADER_HEIGHT", "hue_ring_srgb1", "wheel_geometry", "draw_hue_rules"]

#: Lightness J' and colourfulness M' of the ring's colours: a mid-light, clearly chromatic
#: colour that stays inside the sRGB gamut at every hue under harmony.colour.VIEWING_CONDITIONS
#: (checked in tests).
RING_LIGHTNESS = 65.0
RING_COLOURFULNESS = 20.0

_POSITIVE = (46, 125, 50)
_NEGATIVE = (198, 40, 40)
_BACKGROUND = (255, 255, 255)
_INK = (40, 40, 40)


def hue_ring_srgb1(hues_deg, lightness=RING_LIGHTNESS, colourfulness=RING_COLOURFULNESS):
    """sRGB in [0, 1] of CAM02-UCS colours of the given hues at fixed J' and M', shape (n, 3)."""
    h = np.radians(np.asarray(hues_deg, dtype=float))
    jab = np.stack([np.full_like(h, lightness), colourfulness * np.cos(h), colourfulness * np.sin(h)], axis=-1)
    return np.clip(colour.jab_to_srgb1(jab), 0.0, 1.0)


def wheel_geometry(panel):
    """Radii of one panel of side ``panel`` px: (centre, base, bar amplitude, ring inner, ring outer)."""
    c = panel / 2.0
    ring_outer = panel * 0.46
    ring_inner = panel * 0.40
    base = panel * 0.22
    amplitude = panel * 0.15
    return c, base, amplitude, ring_inner, ring_outer


def _point(c, radius, theta_deg, top):
    # theta 0 at the top, clockwise on screen.
    a = math.radians(theta_deg - 90.0)
    return (c + radius * math.cos(a), top + c + radius * math.sin(a))


#: Height in pixels of the key above the wheels.
HEADER_HEIGHT = 48

_KEY = (
    "Each wheel: the first colour's hue is at the mark on top; the ring turns clockwise by hue difference.",
    "Green outwards: a second colour of that hue is rewarded; red inwards: penalised. One scale for all wheels.",
)


def _draw_key(img, source):
    draw = ImageDraw.Draw(img)
    font = ImageFont.load_default()
    draw.text((6, 4), f"Hue rules of {source}"[:150], fill=_INK, font=font)
    for k, line in enumerate(_KEY):
        draw.text((6, 18 + 13 * k), line, fill=_INK, font=font)
    draw.line([(0, HEADER_HEIGHT - 2), (img.width, HEADER_HEIGHT - 2)], fill=(200, 200, 200), width=1)


def _draw_panel(img, x0, y0, panel, values, scale, title, subtitle, reference_hue):
    draw = ImageDraw.Draw(img)
    font = ImageFont.load_default()
    c, base, amplitude, ring_inner, ring_outer = wheel_geometry(panel)
    label_h = 30
    top = y0 + label_h
    thetas = np.arange(360)
    ring = np.rint(hue_ring_srgb1((reference_hue + thetas) % 360.0) * 255).astype(int)
    box = [x0 + c - ring_outer, top + c - ring_outer, x0 + c + ring_outer, top + c + ring_outer]
    for t, rgb in zip(thetas, ring):
        draw.pieslice(box, start=t - 90.5, end=t - 89.0 + 0.5, fill=tuple(int(v) for v in rgb))
    inner = [x0 + c - ring_inner, top + c - ring_inner, x0 + c + ring_inner, top + c + ring_inner]
    draw.ellipse(inner, fill=_BACKGROUND)
    # One filled wedge per degree of hue difference, between the base circle and the value.
    for t, v in zip(thetas, values):
        length = amplitude * float(v) / scale if scale > 0 else 0.0
        if abs(length) < 0.5:
            continue
        corners = [_point(c, base, t - 0.5, top), _point(c, base + length, t - 0.5, top),
                   _point(c, base + length, t + 0.5, top), _point(c, base, t + 0.5, top)]
        draw.polygon([(x0 + x, y) for x, y in corners], fill=_POSITIVE if v > 0 else _NEGATIVE)
    basebox = [x0 + c - base, top + c - base, x0 + c + base, top + c + base]
    draw.ellipse(basebox, outline=_INK, width=1)
    # Hue differences 90 and 180 degrees marked on the ring (both sides: the rules are unsigned).
    for t, text in ((90.0, "90"), (180.0, "180"), (270.0, "90")):
        inner_tick, outer_tick = _point(c, ring_inner - 6, t, top), _point(c, ring_inner, t, top)
        draw.line([(x0 + inner_tick[0], inner_tick[1]), (x0 + outer_tick[0], outer_tick[1])], fill=_INK, width=1)
        lx, ly = _point(c, ring_inner - 20, t, top)
        draw.text((x0 + lx, ly), text, fill=_INK, font=font, anchor="mm", stroke_width=2, stroke_fill=_BACKGROUND)
    # reference mark at the top of the ring
    mark = _point(c, ring_outer + 4, 0.0, top)
    draw.polygon([(x0 + mark[0], mark[1]), (x0 + mark[0] - 4, mark[1] - 6), (x0 + mark[0] + 4, mark[1] - 6)], fill=_INK)
    draw.text((x0 + 6, y0 + 2), title, fill=_INK, font=font)
    draw.text((x0 + 6, y0 + 15), subtitle, fill=_INK, font=font)


def draw_hue_rules(rule_set, path, *, panel=240, reference_hue=40.0, columns=4):
    """Write a PNG with one hue-wheel panel per hue rule and per section's combined hue kernel.

    Parameters
    ----------
    rule_set : harmony.rules.RuleSet
    path : str or Path
        The PNG to write.
    panel : int
        Side of one wheel in pixels.
    reference_hue : float
        CAM02-UCS hue (degrees) of the first colour, shown at the top of every ring (40: a rust).
    columns : int

    Returns
    -------
    panels : list of str
        The panel titles, in drawing order.

    Notes
    -----
    Bar lengths share one scale across the picture: the largest absolute value of any panel
    reaches the full bar amplitude, so panels can be compared with each other.
    """
    thetas = np.arange(360.0)
    items = []
    for name, rule in rule_set.rules.items():
        if rule.kind != "hue":
            continue
        centres = ", ".join(f"{c:g}" for c in rule.centres)
        items.append((f"rule {name}", f"centre {centres}, spread {rule.spread:g}, weight {rule.weight:g}",
                      rule.weight * rule.profile(thetas)))
    sections = [("default", rule_set.default_rules())]
    sections += [(f"{a} / {b}", rule_set.for_pair(a, b)) for a, b in rule_set.pairs]
    for label, pair_rules in sections:
        if not pair_rules.scored or not pair_rules.hue_rules:
            continue
        total = sum(w * rule.profile(thetas) for rule, w in pair_rules.hue_rules)
        items.append((label, "sum of its hue rules", total))
    if not items:
        from harmony.errors import RulesError

        raise RulesError(f"{rule_set.path}: the file has no hue rules to draw")
    scale = max(float(np.max(np.abs(v))) for _, _, v in items) or 1.0
    columns = max(1, min(columns, len(items)))
    rows = math.ceil(len(items) / columns)
    cell_h = panel + 30
    img = Image.new("RGB", (columns * panel, HEADER_HEIGHT + rows * cell_h), _BACKGROUND)
    _draw_key(img, rule_set.path)
    for k, (title, subtitle, values) in enumerate(items):
        x0 = (k % columns) * panel
        y0 = HEADER_HEIGHT + (k // columns) * cell_h
        _draw_panel(img, x0, y0, panel, values, scale, title[:38], subtitle[:38], reference_hue)
    from harmony.fileio import write_bytes_whole

    buf = io.BytesIO()
    img.save(buf, format="PNG")
    write_bytes_whole(Path(path), buf.getvalue(), what="picture")
    return [title for title, _, _ in items]
