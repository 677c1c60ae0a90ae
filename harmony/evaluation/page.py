"""The evaluation as a text table and as an HTML page with a chart."""

import math
from pathlib import Path

from harmony.fileio import write_text_whole

__all__ = ["METRICS", "READING_NOTE", "result_table", "render_html", "write_html"]

# --------------------------------------------------------------------------------------------
# Tables and the HTML page
# --------------------------------------------------------------------------------------------

#: The three metrics as (attribute of MethodResult, attribute of its interval, label).
METRICS = (("auc", "auc_ci", "AUC"), ("ndcg_at_10", "ndcg_ci", "NDCG@10"), ("hit_at_10", "hit_ci", "hit@10"))

#: How to read the numbers; shown on the terminal (with --explain) and on the HTML page.
READING_NOTE = (
    "Each row ranks, for every product of the log, the products of another category that shoppers "
    "combined with it (positives) among that category's other in-stock products (negatives). "
    "AUC is the chance that a positive outranks a negative (0.5 = random order, below 0.5 = worse "
    "than random); NDCG@10 rewards positives near the top of the first ten, weighted by purchase over "
    "cart over view; hit@10 is the share of products with a positive in the first ten. The interval "
    "is a bootstrap over products: two rows whose intervals do not overlap differ beyond chance."
)


def _fmt(x, digits=3):
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.{digits}f}"


def result_table(evaluation):
    """The comparison as ``(header, rows)`` of strings, for terminals and the HTML report."""
    pct = f"{evaluation.level * 100:g} %"
    header = ("method", "AUC", f"AUC {pct} CI", "NDCG@10", f"NDCG@10 {pct} CI", "hit@10", f"hit@10 {pct} CI")
    rows = []
    for r in evaluation.results:
        row = [r.name]
        for attr, ci, _ in METRICS:
            lo, hi = getattr(r, ci)
            row += [_fmt(getattr(r, attr)), f"{_fmt(lo)}-{_fmt(hi)}"]
        rows.append(tuple(row))
    return header, tuple(rows)


def _chart(evaluation, width=640, row_height=24, label_width=190):
    """Geometry of one horizontal bar chart per metric, with interval whiskers, in SVG units."""
    plot = width - label_width - 50
    charts = []
    for attr, ci, label in METRICS:
        bars = []
        for i, r in enumerate(evaluation.results):
            value = getattr(r, attr)
            lo, hi = getattr(r, ci)
            ok = not math.isnan(value)
            y = 8 + i * row_height
            bars.append(
                {
                    "name": r.name,
                    "kind": r.kind,
                    "y": y,
                    "mid": y + row_height / 2 - 3,
                    "h": row_height - 8,
                    "w": plot * value if ok else 0.0,
                    "lo": label_width + plot * (lo if ok else 0.0),
                    "hi": label_width + plot * (hi if ok else 0.0),
                    "text": _fmt(value),
                    "title": f"{r.name}: {label} {_fmt(value)} ({_fmt(lo)} to {_fmt(hi)})",
                }
            )
        height = 8 + len(bars) * row_height + 26
        ticks = [{"x": label_width + plot * t, "label": f"{t:g}"} for t in (0.0, 0.25, 0.5, 0.75, 1.0)]
        charts.append(
            {
                "label": label,
                "bars": bars,
                "width": width,
                "height": height,
                "x0": label_width,
                "plot": plot,
                "axis_y": height - 20,
                "ticks": ticks,
                # AUC of random order is 0.5: draw it as a reference line.
                "reference": label_width + plot * 0.5 if attr == "auc" else None,
            }
        )
    return charts


def render_html(evaluation, inputs=(), title="Offline evaluation"):
    """The comparison as one self-contained HTML page (autoescaped jinja2, inline CSS and SVG).

    Parameters
    ----------
    evaluation : Evaluation
    inputs : sequence of (label, value)
        What was evaluated (store, log, rules files), shown as written; everything is escaped.
    title : str
    """
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(Path(__file__).parent / "templates")),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    header, rows = result_table(evaluation)
    return env.get_template("evaluate.html.j2").render(
        title=title,
        e=evaluation,
        header=header,
        rows=rows,
        charts=_chart(evaluation),
        inputs=tuple(inputs),
        note=READING_NOTE,
        coverage=_fmt(evaluation.coverage * 100, 0) + " %" if evaluation.products_seen else "n/a",
    )


def write_html(evaluation, out, inputs=(), title="Offline evaluation"):
    """Write :func:`render_html` to ``out`` whole (through a temporary file); returns the path."""
    return write_text_whole(out, render_html(evaluation, inputs=inputs, title=title), what="evaluation page")
