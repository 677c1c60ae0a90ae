"""``harmony report``: one self-contained HTML file from a store, a feed and bundle results."""

from pathlib import Path

import click

from harmony.fileio import is_stdout

from . import FiniteRange, main, refuse_other_suffix

__all__ = ["report"]


@main.command("report")
@click.option("--db", "db_path", required=True, metavar="PATH", help="The palette store (made by 'harmony extract').")
@click.option("--feed", "feed_path", metavar="FILE", help="A feed from 'harmony feed' (JSONL, CSV or Parquet).")
@click.option("--evaluation", "evaluation_path", metavar="FILE",
              help="The JSON of 'harmony evaluate --json', shown as the evaluation table.")
@click.option("--curation", "curation_path", metavar="FILE",
              help="The curation file the feed was made with; the report lists what it changed.")
@click.option("--bundles", "bundle_paths", multiple=True, metavar="FILE",
              help="A bundle result in JSON (from 'harmony bundle --json'); repeat for several rooms.")
@click.option("--rules", "rules_path", metavar="FILE", help="Rules file the scores used (default: the bundled rules).")
@click.option("--title", default=None, help="Heading of the report (default: from the catalogue's name).")
@click.option("--floor-lrv", type=FiniteRange(0.0, 100.0), default=None, metavar="LRV",
              help="LRV (0-100) of the floor the rugs will lie on, from a measured sample; each rug is checked against it.")
@click.option("--lux", "illuminance_lux", type=FiniteRange(min=0.0), default=None, metavar="LUX",
              help="Illuminance on the floor; above 200 lux a rug and the floor need 20 LRV points, not 30.")
@click.option("--out", "out_path", required=True, metavar="FILE.html", help="Where to write the report.")
def report(db_path, feed_path, evaluation_path, curation_path, bundle_paths, rules_path, title, floor_lrv,
           illuminance_lux, out_path):
    """Write a static HTML report: product photos with palettes, pairs, room sets, flags, cautions."""
    from harmony.errors import StoreError
    from harmony.report.page import (
        gather_from_store,
        read_bundles,
        read_feed,
        write_report,
    )
    from harmony.resources import DEFAULT_RULES
    from harmony.rules import load_rules
    from harmony.shop.store import Store

    if not Path(db_path).is_file():
        raise StoreError(f"{db_path}: no such store (run 'harmony extract' first)")
    rules = load_rules(rules_path or DEFAULT_RULES)
    from harmony.report.inputs import read_evaluation
    from harmony.suggest.provenance import read_provenance

    from .feed_cmd import _warn, load_curation_for

    refuse_other_suffix(out_path, (".html", ".htm"), "the report")
    feed_rows = read_feed(feed_path) if feed_path else []
    feed_meta = read_provenance(feed_path) if feed_path else None
    evaluation = read_evaluation(evaluation_path) if evaluation_path else ()
    bundles = [read_bundles(p) for p in bundle_paths]
    with Store(db_path) as store:
        curation = load_curation_for(curation_path, store)
        feed_rows = _rows_of_store(feed_rows, {str(p.id) for p in store.products()}, feed_path, db_path)
        if title is None:
            where = store.catalogue_path
            title = f"harmony report: {Path(where).parent.name}" if where else "harmony report"
        data = gather_from_store(store, feed_rows, bundles, rules, title=title, floor_lrv=floor_lrv,
                                 illuminance_lux=illuminance_lux, evaluation=evaluation, curation=curation,
                                 feed_meta=feed_meta, feed_given=bool(feed_path))
    for message in data.made_warnings:
        _warn(message)
    out = write_report(data, out_path)
    click.echo(err=is_stdout(out_path), message=
        f"wrote {out} ({len(data.products)} products, {len(data.suggestions)} pairs, "
        f"{len(data.bundles)} sets, {len(data.flagged)} flagged, {len(data.cautions) + sum(f.caution is not None for f in data.floors)} contrast cautions)"
    )


def _rows_of_store(rows, known, feed_path, db_path):
    """The feed rows whose products the store has. A blended feed's rows of partners the store
    does not have (``source`` "not in store") are left out with one warning; any other unknown
    id means the feed is not from this store, and is an error naming the row."""
    from harmony.errors import HarmonyError

    from .feed_cmd import _warn

    kept, foreign = [], 0
    for n, row in enumerate(rows, start=1):
        missing = next((row[k] for k in ("product", "partner") if row[k] not in known), None)
        if missing is None:
            kept.append(row)
        elif row.get("source") == "not in store":
            foreign += 1
        else:
            raise HarmonyError(f"{feed_path}: row {n}: product {missing!r} is not in {db_path} (is the feed from this store?)")
    if foreign:
        _warn(f"{feed_path}: {foreign} blended row(s) name partners the store does not have ('not in store'); "
              "the report leaves them out")
    return kept
