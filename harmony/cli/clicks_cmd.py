"""``harmony clicks``: click-through by slider position, and what another order would get."""

import json
import sys

import click

from . import FiniteRange, main, refuse_other_suffix

__all__ = ["clicks_command", "read_feed_order"]


def read_feed_order(path):
    """``{(product, partner): (rank, partner_category)}`` from a feed file (JSONL, CSV or Parquet,
    as ``harmony feed`` writes them, or any such file with product, partner, rank and optionally
    partner_category); only rows of the ``partner`` relation count when the feed has a
    ``relation`` column.

    Raises
    ------
    HarmonyError
        A file that cannot be read, or a row without a whole-number rank (named by line).
    """
    from harmony.errors import HarmonyError
    from harmony.report.inputs import feed_rank, feed_records

    order = {}
    for where, row in feed_records(path):
        if row.get("relation") not in (None, "", "partner"):
            continue
        product, partner = row.get("product"), row.get("partner")
        if product in (None, "") or partner in (None, "") or "rank" not in row:
            raise HarmonyError(f"{where}: needs product, partner and a whole-number rank")
        rank = feed_rank(row["rank"], where)
        key = (str(product), str(partner))
        order.setdefault(key, (rank, str(row.get("partner_category") or "")))
    if not order:
        raise HarmonyError(f"{path}: the feed has no rows")
    return order


def _fmt_ci(ci, digits=2):
    return f"{ci[0]:.{digits}f}-{ci[1]:.{digits}f}"


def _print(report, top):
    click.echo(f"{report.impressions} impressions in {report.requests} requests, {report.clicks} clicks")
    click.echo("examination by slot (slot 1 fixed at 1: the scale of the model), "
               f"{report.level * 100:g} % bootstrap over requests ({report.resamples} resamples):")
    click.echo("slot  examination  interval   impressions")
    for k, (t, ci, n) in enumerate(zip(report.theta, report.theta_ci, report.impressions_by_position), start=1):
        click.echo(f"{k:>4}  {t:>11.3f}  {_fmt_ci(ci, 3):>11}  {n:>11}")
    rated = [r for r in report.ratings if r.ratio is not None]
    few = [r for r in report.ratings if r.ratio is None]
    click.echo("")
    click.echo(f"{len(rated)} suggestions rated; {len(few)} with fewer than {report.min_impressions} impressions "
               "are too few to rate (listed with --json)")
    counts = {v: sum(1 for r in rated if r.verdict == v) for v in ("under-rated", "over-rated", "as expected")}
    click.echo(f"under-rated (move up) {counts['under-rated']}, over-rated {counts['over-rated']}, "
               f"as expected {counts['as expected']}")
    shown = [r for r in rated if r.verdict == "under-rated"][:top] + \
        [r for r in reversed(rated) if r.verdict == "over-rated"][:top]
    if shown:
        click.echo("")
        click.echo("product   partner   impressions  clicks  expected  ratio  interval    mean slot  verdict")
        for r in shown:
            click.echo(f"{r.product:<9} {r.partner:<9} {r.impressions:>11}  {r.clicks:>6}  {r.expected_clicks:>8.1f}  "
                       f"{r.ratio:>5.2f}  {_fmt_ci(r.ratio_ci):>10}  {r.mean_position:>9.1f}  {r.verdict}")
    for o in report.orders:
        click.echo("")
        click.echo(f"{o.name}: {o.estimate:.3f} clicks per request ({_fmt_ci(o.estimate_ci, 3)}) against "
                   f"{o.logged:.3f} logged ({_fmt_ci(o.logged_ci, 3)}); ratio {o.ratio:.2f} ({_fmt_ci(o.ratio_ci)})")
        click.echo(f"  inverse propensity weights clipped at {o.max_weight:g} ({o.clipped * 100:.0f} % of moved clicks); "
                   f"support {o.support * 100:.0f} % of its slots were shown in the log"
                   + (" (the estimate is a lower bound)" if o.support < 1 else ""))


@main.command("clicks")
@click.option("--impressions", "impressions", required=True, type=click.Path(dir_okay=False),
              help="Impression log: CSV or JSONL with request, product, partner, position (1 = first slot), clicked (0/1).")
@click.option("--db", default=None, type=click.Path(dir_okay=False), help="Palette store, for the photos of the page.")
@click.option("--compare-feed", "compare", multiple=True, type=click.Path(dir_okay=False),
              help="A feed (JSONL, CSV or Parquet with product, partner, rank) whose order to estimate from the log; repeatable.")
@click.option("--min-impressions", default=20, show_default=True, type=click.IntRange(min=1),
              help="Suggestions with fewer impressions are not rated.")
@click.option("--max-weight", default=10.0, show_default=True, type=FiniteRange(min=1.0),
              help="Clip of the inverse propensity 1/examination.")
@click.option("--top", default=10, show_default=True, type=click.IntRange(min=1),
              help="Under- and over-rated suggestions shown each.")
@click.option("--resamples", default=200, show_default=True, type=click.IntRange(min=1), help="Bootstrap resamples.")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed of the bootstrap resampling.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of the tables.")
@click.option("--out", default=None, type=click.Path(dir_okay=False), help="Also write an HTML page ('-' = stdout).")
@click.option("--progress/--no-progress", default=None, help="Progress bar on stderr (default: when it is a terminal).")
def clicks_command(impressions, db, compare, min_impressions, max_weight, top, resamples, seed, as_json, out, progress):
    """Fit a position-based click model to an impression log: the examination curve by slot,
    suggestions that do better or worse than their slots predict, and inverse-propensity estimates
    of the clicks another order (--compare-feed) would get."""
    from pathlib import Path

    import numpy as np

    from harmony.evaluation.clicks import analyse_clicks, read_impressions

    refuse_other_suffix(out, (".html", ".htm"), "the page")
    if db is not None and out is None:
        from harmony.errors import warn

        warn(f"--db {db}: the store only adds photos to the page, and without --out there is no page; not read")
    elif db is not None:  # a wrong path is named before the analysis, not after it
        from harmony.shop.store import Store

        Store(db).close()
    log = read_impressions(impressions)
    orders = [(Path(f).name, read_feed_order(f)) for f in compare]
    if progress is None:
        progress = sys.stderr.isatty()
    report = analyse_clicks(log, orders, rng=np.random.default_rng(seed), resamples=resamples,
                            min_impressions=min_impressions, max_weight=max_weight, progress=progress)
    if out is not None:
        from harmony.report.clicks import render_clicks_page

        html = render_clicks_page(report, db=db, top=top, source=str(impressions))
        if out == "-":
            click.echo(html)
        else:
            from harmony.fileio import write_text_whole

            write_text_whole(out, html, "clicks page")
    if as_json:
        click.echo(json.dumps(report.to_dict()))
        return
    if out != "-":
        _print(report, top)
        if out is not None:
            click.echo(f"\npage: {out}")
