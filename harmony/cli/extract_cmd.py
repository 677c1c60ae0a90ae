"""``harmony extract CATALOGUE``: bring the palette store up to date; ``harmony palettes``: export it."""

import csv
import io
import json
from pathlib import Path

import click

from harmony.errors import HarmonyError
from harmony.fileio import is_stdout, spreadsheet_safe_row
from harmony.shop import DEFAULT_DB_NAME, ENGINES, MAX_REMOVAL

from . import FiniteRange, fail, main, refuse_other_suffix

__all__ = ["extract", "palettes", "PALETTE_CSV_COLUMNS", "SHOWN_FAILURES"]

#: Images without a palette listed after ``harmony extract`` (the store keeps them all).
SHOWN_FAILURES = 10

#: Columns of ``harmony palettes --format csv``: one row per palette colour.
PALETTE_CSV_COLUMNS = (
    "product", "category", "image", "sha256", "scene", "confidence",
    "rank", "hex", "share", "J", "a", "b", "M", "hue", "lrv", "neutral",
)


@main.command("extract")
@click.argument("catalogue", type=click.Path(dir_okay=False))
@click.option("--db", "db_path", type=click.Path(dir_okay=False), default=None,
              help=f"Store file (SQLite); default {DEFAULT_DB_NAME} beside the catalogue.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Worker processes; default all cores.")
@click.option("--engine", type=click.Choice(ENGINES), default="local", show_default=True,
              help="Local process pool, or a Dask cluster.")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Dask scheduler address (tcp://host:8786); without it --engine dask starts a local cluster.")
@click.option("--strict", is_flag=True,
              help="Any catalogue problem is an error and nothing is written; any product left without "
                   "a palette exits with status 1 after the run is stored.")
@click.option("--max-removal", "max_removal", type=FiniteRange(0.0, 100.0), default=100.0 * MAX_REMOVAL,
              show_default=True, metavar="PERCENT",
              help="Refuse a catalogue that would remove more than this percentage of the store's products "
                   "(a cut-short export is likelier than a real clear-out); 100 allows any removal.")
def extract(catalogue, db_path, workers, engine, scheduler, strict, max_removal):
    """Read CATALOGUE (CSV or JSONL), extract the palettes of new or changed images into the store.

    Exit status: 0 done; 2 an error, nothing changed (with --strict: any catalogue problem);
    1 with --strict only: the run is stored in full but some products have no palette.
    """
    from harmony.shop.catalogue import read_catalogue
    from harmony.shop.engine import run_extraction
    from harmony.shop.store import Store
    if scheduler and engine != "dask":
        raise HarmonyError("--scheduler needs --engine dask")
    cat = read_catalogue(catalogue)
    level = "error" if strict else "warning"
    for problem in cat.problems:
        click.echo(f"{level}: {problem}", err=True)
    if strict and cat.problems:
        fail(f"{cat.path}: {len(cat.problems)} problem(s) in {cat.skipped_rows} row(s); nothing written (--strict)")
    summary = run_extraction(cat, db_path, workers=workers, engine=engine, scheduler=scheduler,
                             max_removal=max_removal / 100.0)
    with Store(summary.db_path) as store:
        failures = store.failures()
    for product_id, _image, reason in failures[:SHOWN_FAILURES]:
        click.echo(f"warning: product {product_id}: no palette from {reason}", err=True)
    if len(failures) > SHOWN_FAILURES:
        click.echo(f"warning: ... and {len(failures) - SHOWN_FAILURES} more image(s) without a palette", err=True)
    click.echo(summary.line())
    if strict and summary.no_palette:
        fail(
            f"{summary.no_palette} product(s) without a palette (--strict); the store is up to date, "
            f"the warnings above say why",
            code=1,
        )


def _palette_rows(store):
    """(product, image as written, Palette) for every product with a chosen palette."""
    chosen = store.palettes()
    images = store.chosen_images()
    for product in store.products():
        if product.id in chosen:
            yield product, images[product.id], chosen[product.id]


def _jsonl(rows, out):
    for product, image, palette in rows:
        record = {"product": product.id, "category": product.category}
        record.update(palette.to_dict(image=image))
        out.write(json.dumps(record, separators=(",", ":")) + "\n")


def _csv(rows, out):
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(PALETTE_CSV_COLUMNS)
    for product, image, palette in rows:
        data = palette.to_dict(image=image)
        for rank, c in enumerate(data["colours"], start=1):
            writer.writerow(spreadsheet_safe_row([
                product.id, product.category, image, data["sha256"], int(data["scene"]), data["confidence"],
                rank, c["hex"], c["share"], c["J"], c["a"], c["b"], c["M"], c["hue"], c["lrv"], int(c["neutral"]),
            ]))


@main.command("palettes")
@click.option("--db", "db_path", type=click.Path(dir_okay=False), required=True, help="Store file.")
@click.option("--format", "fmt", type=click.Choice(("jsonl", "csv")), default=None,
              help="Output format; default from the --out suffix, else jsonl.")
@click.option("--out", "out_path", type=click.Path(dir_okay=False), default=None,
              help="Output file (written whole or not at all); default, or -, standard output.")
def palettes(db_path, fmt, out_path):
    """Export every product's chosen palette: JSONL (one product a line) or CSV (one colour a row).

    In CSV, text cells beginning with = + - @ (or a tab or carriage return) get a leading
    apostrophe, so a spreadsheet shows them instead of running them as formulas.
    """
    from harmony.fileio import write_text_whole
    from harmony.shop.store import Store
    if fmt is None:
        refuse_other_suffix(out_path, (".jsonl", ".ndjson", ".csv"), "palettes written without --format")
        fmt = "csv" if out_path and Path(out_path).suffix.lower() == ".csv" else "jsonl"
    writer = _csv if fmt == "csv" else _jsonl
    with Store(db_path) as store:
        missing = len(store) - len(store.palettes())
        buffer = io.StringIO()
        writer(_palette_rows(store), buffer)
    if out_path is None or is_stdout(out_path):
        click.echo(buffer.getvalue(), nl=False)
    else:
        write_text_whole(Path(out_path), buffer.getvalue(), what="palette export")
    if missing:
        click.echo(f"note: {missing} product(s) without a palette left out (harmony extract lists why)", err=True)


