"""The clicks page: the fitted examination curve and the most under- and over-rated suggestions.

One static HTML file (autoescaped jinja2, inline CSS and SVG, photos embedded as ``data:`` URIs), made
from a :class:`harmony.evaluation.clicks.ClickReport`. Photos come from the store when one is given.
"""

from html import escape
from pathlib import Path

import jinja2

from harmony.report.page import thumbnail_data_uri

__all__ = ["examination_curve_svg", "render_clicks_page"]

_TEMPLATE_DIR = Path(__file__).resolve().parent / "templates"


def _num(x):
    return f"{float(x):.1f}"


def examination_curve_svg(theta, theta_ci, planted=None, width=520, height=300):
    """The examination curve by slot with its interval band, as an SVG element.

    Parameters
    ----------
    theta : sequence of float
        Examination of slots 1..K (slot 1 = 1).
    theta_ci : sequence of (lo, hi)
    planted : sequence of float, optional
        A known curve to draw beside it (a simulation's), dashed.
    """
    k = len(theta)
    left, right, top, bottom = 56, 16, 16, 44
    pw, ph = width - left - right, height - top - bottom
    x = lambda i: left + (pw * i / max(k - 1, 1))
    y = lambda v: top + ph * (1.0 - min(max(float(v), 0.0), 1.05) / 1.05)
    parts = [f'<rect x="{left}" y="{top}" width="{pw}" height="{ph}" fill="#fafafa" stroke="#ccc"/>']
    for v in (0.0, 0.25, 0.5, 0.75, 1.0):
        parts.append(f'<line x1="{left}" x2="{left + pw}" y1="{_num(y(v))}" y2="{_num(y(v))}" stroke="#e4e4e4"/>')
        parts.append(f'<text x="{left - 6}" y="{_num(y(v) + 4)}" text-anchor="end" font-size="12">{v:.2f}</text>')
    band = [f"{_num(x(i))},{_num(y(hi))}" for i, (_, hi) in enumerate(theta_ci)]
    band += [f"{_num(x(i))},{_num(y(lo))}" for i, (lo, _) in reversed(list(enumerate(theta_ci)))]
    parts.append(f'<polygon points="{" ".join(band)}" fill="#7aa6d8" fill-opacity="0.35" stroke="none"/>')
    line = " ".join(f"{_num(x(i))},{_num(y(t))}" for i, t in enumerate(theta))
    parts.append(f'<polyline points="{line}" fill="none" stroke="#1f4e8c" stroke-width="2.5"/>')
    for i, t in enumerate(theta):
        parts.append(f'<circle cx="{_num(x(i))}" cy="{_num(y(t))}" r="4" fill="#1f4e8c">'
                     f'<title>slot {i + 1}: {t:.3f} ({theta_ci[i][0]:.3f}-{theta_ci[i][1]:.3f})</title></circle>')
        parts.append(f'<text x="{_num(x(i))}" y="{top + ph + 18}" text-anchor="middle" font-size="12">{i + 1}</text>')
    if planted is not None:
        pl = " ".join(f"{_num(x(i))},{_num(y(t))}" for i, t in enumerate(planted))
        parts.append(f'<polyline points="{pl}" fill="none" stroke="#c0392b" stroke-width="2" stroke-dasharray="6 4"/>')
    parts.append(f'<text x="{left + pw / 2}" y="{height - 6}" text-anchor="middle" font-size="13">slot</text>')
    parts.append(f'<text x="14" y="{top + ph / 2}" text-anchor="middle" font-size="13" '
                 f'transform="rotate(-90 14 {top + ph / 2})">examination (slot 1 = 1)</text>')
    label = "examination by slot: " + ", ".join(f"{i + 1}: {t:.2f}" for i, t in enumerate(theta))
    return (f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
            f'viewBox="0 0 {width} {height}" role="img" aria-label="{escape(label, quote=True)}">{"".join(parts)}</svg>')


def _photos(db, ids):
    """{product id: thumbnail data URI} from the store (empty without one)."""
    if db is None:
        return {}
    from harmony.shop.store import Store

    out = {}
    with Store(db) as store:
        for pid in ids:
            try:
                path = store.image_path(pid)
            except Exception:  # an id the store does not know: the page shows no photo for it
                path = None
            out[pid] = thumbnail_data_uri(path) if path else ""
    return out


def render_clicks_page(report, db=None, top=10, source="", planted=None):
    """The clicks page as one HTML string.

    Parameters
    ----------
    report : harmony.evaluation.clicks.ClickReport
    db : path, optional
        Palette store whose photos to show beside the suggestions.
    top : int
        Under- and over-rated suggestions shown each.
    source : str
        The impression log's name, shown on the page.
    planted : sequence of float, optional
        A known examination curve to draw beside the fitted one (a simulation's).
    """
    rated = [r for r in report.ratings if r.ratio is not None]
    under = [r for r in rated if r.verdict == "under-rated"][:top]
    over = [r for r in reversed(rated) if r.verdict == "over-rated"][:top]
    ids = sorted({pid for r in under + over for pid in (r.product, r.partner)})
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(_TEMPLATE_DIR)), autoescape=True,
                             undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    template = env.get_template("clicks.html.j2")
    return template.render(
        r=report, source=source, under=under, over=over, photos=_photos(db, ids),
        curve=jinja2.utils.markupsafe.Markup(examination_curve_svg(report.theta, report.theta_ci, planted)),
        too_few=len(report.ratings) - len(rated), planted=planted is not None,
    )
