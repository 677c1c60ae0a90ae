"""``harmony evaluate``: rules files and baselines ranked against an interaction log."""

import functools
import json

import click

from harmony.errors import HarmonyError
from harmony.fileio import is_stdout
from harmony.resources import DEFAULT_RULES

from . import main, refuse_other_suffix

__all__ = ["evaluate_command"]


def _skipped_line(skipped, limit=5):
    """The warning about rows of event kinds without a weight, e.g. ``wishlist 3, click 1``."""
    rows = sum(n for _, n in skipped)
    kinds = ", ".join(f"{kind} {n}" for kind, n in skipped[:limit]) + (", ..." if len(skipped) > limit else "")
    return (
        f"{rows} row{'s' if rows != 1 else ''} of event kinds without a weight left out ({kinds}); "
        f"weigh a kind with --event-weight KIND=W"
    )


def _print_table(result, echo=click.echo):
    from harmony.evaluation import result_table
    header, rows = result_table(result)
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    line = lambda cells: "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths)))
    echo(line(header))
    echo("  ".join("-" * w for w in widths))
    for row in rows:
        echo(line(row))


@main.command("evaluate")
@click.option("--db", required=True, type=click.Path(dir_okay=False), help="Palette store (SQLite) of the catalogue.")
@click.option("--events", "events", required=True, type=click.Path(dir_okay=False),
              help="Interaction log: CSV or JSONL with session (or user), product, event, optional timestamp.")
@click.option("--rules", "rules_files", multiple=True, type=click.Path(dir_okay=False),
              help="Rules file to evaluate; repeat to compare several. Default rules/default.toml.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of the table.")
@click.option("--out", "out", default=None, type=click.Path(dir_okay=False), help="Also write an HTML page with a chart.")
@click.option("--event-weight", "weights", multiple=True, metavar="KIND=WEIGHT",
              help="Weight (>= 0) of an event kind: view, cart, purchase or any other; 0 ignores it. Rows of "
                   "kinds without a weight are left out and counted. Repeatable.")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed of the bootstrap resampling.")
@click.option("--resamples", default=1000, show_default=True, type=click.IntRange(min=1), help="Bootstrap resamples.")
@click.option("--attribute", default="colour", show_default=True,
              help="Catalogue attribute of the attribute-match baseline (used when products have it).")
@click.option("--progress/--no-progress", default=None, help="Progress bar on stderr (default: when it is a terminal).")
# --- issue 18: blend weights ---
@click.option("--blend", "blend", default=None, type=click.Path(dir_okay=False),
              help="Candidate list of another system (CSV/JSONL: product, partner, score) blended with the first rules file.")
@click.option("--blend-weights", "blend_weights", default="0,0.25,0.5,0.75,1", show_default=True,
              help="Weights of the candidate list to compare, comma-separated (with --blend).")
# --- end issue 18 ---
def evaluate_command(db, events, rules_files, as_json, out, weights, seed, resamples, attribute, progress,
                     blend, blend_weights):
    """Rank, for every product of an interaction log, the partners shoppers combined with it.

    Compares each rules file with baselines (random order, same colours by the earth mover's
    distance, the catalogue's colour attribute): AUC, NDCG@10 and hit@10 with bootstrap intervals.
    """
    from harmony.evaluation import write_html
    from harmony.evaluation.run import collection_paused, run_evaluation
    refuse_other_suffix(out, (".html", ".htm"), "the evaluation page")
    if out is not None and is_stdout(out) and as_json:
        raise HarmonyError("--out - and --json both write to standard output; give --out a file name")
    echo = functools.partial(click.echo, err=out is not None and is_stdout(out))
    rules_files = rules_files or (str(DEFAULT_RULES),)
    extra = None
    with collection_paused():
        if blend is not None:  # issue 18
            from harmony.suggest.blend import blend_methods_factory

            extra = blend_methods_factory(blend, blend_weights)
        result, inputs = run_evaluation(db, events, rules_files, weights, seed, resamples, attribute, progress,
                                        extra_methods=extra)
    if out is not None:
        write_html(result, out, inputs=inputs)
    if as_json:
        echo(json.dumps(result.to_dict(), indent=2))  # --out is not - here
        return
    echo(
        f"{result.events} events, {result.query_products} query products ({result.queries} queries), "
        f"coverage {result.coverage * 100:.0f} % of {result.products_seen} products in the log"
    )
    if result.unknown:
        shown = ", ".join(pid for pid, _ in result.unknown[:5])
        more = ", ..." if len(result.unknown) > 5 else ""
        rows = sum(n for _, n in result.unknown)
        echo(f"{len(result.unknown)} unknown product ids in {rows} rows left out ({shown}{more})")
    if result.skipped:
        echo(_skipped_line(result.skipped))
    if result.no_palette:
        echo(f"{len(result.no_palette)} products of the log have no palette and were left out")
    echo("")
    _print_table(result, echo)
    echo("")
    echo(f"intervals: {result.level * 100:g} % bootstrap over query products ({result.resamples} resamples)")
    if out is not None:
        echo(f"page: {out}")
