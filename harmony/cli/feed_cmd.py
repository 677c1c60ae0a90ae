"""``harmony feed`` (the cross-sell feed file) and ``harmony suggest`` (partners for a stylist)."""

import json
import sys

import click

from harmony.errors import HarmonyError
from harmony.fileio import is_stdout
from harmony.resources import DEFAULT_RULES

from . import FiniteRange, main

__all__ = ["feed", "suggest_cmd", "colour_blocks", "warn_unmatched_pairs", "load_curation_for", "STRIP_CELLS",
           "CURATION_HELP"]

#: Help of the ``--curation`` option of feed, suggest, bundle and report.
CURATION_HELP = "Curation file (TOML): pinned partners, blocked pairs and categories, score floors."


def load_curation_for(path, store):
    """The curation file at ``path`` (None for no file), its unknown product ids warned of."""
    if path is None:
        return None
    from harmony.suggest.curation import load_curation, unknown_product_warnings

    curation = load_curation(path)
    for message in unknown_product_warnings(curation, {p.id: p.category_key for p in store.products()},
                                            store.categories()):
        _warn(message)
    return curation


#: Terminal cells of one palette strip in ``harmony suggest``.
STRIP_CELLS = 20


def colour_blocks(palette, colour=True, cells=STRIP_CELLS):
    """The palette as a strip of terminal colour blocks, each colour as wide as its weight
    (24-bit ANSI backgrounds); without colour, the hex codes heaviest first."""
    from harmony.photo.swatch import ansi_block, segment_widths
    if not colour:
        return " ".join(palette.hex)
    spans = segment_widths(palette.weights, cells)
    return "".join(ansi_block(code, int(span)) for code, span in zip(palette.hex, spans) if span > 0)


def _warn(message):
    click.echo(f"warning: {message}", err=True)


def warn_unmatched_pairs(rule_sets, categories):
    """Warn on stderr, one line each, of the pair sections of ``rule_sets`` (one RuleSet or
    several) that name a category absent from ``categories`` (the store's)."""
    from harmony.rules import unmatched_pair_warnings
    for message in unmatched_pair_warnings(rule_sets, categories):
        _warn(message)


@main.command("feed")
@click.option("--db", "db", required=True, type=click.Path(dir_okay=False), help="The palette store.")
@click.option("--rules", "rules_path", type=click.Path(dir_okay=False), default=str(DEFAULT_RULES),
              show_default="rules/default.toml", help="Harmony rules file.")
@click.option("--top", type=click.IntRange(1, 1000), default=10, show_default=True,
              help="Partners per product and target category.")
@click.option("--targets", default=None, metavar="CAT,...",
              help="Partner categories to list, comma-separated (default: all).")
@click.option("--diversity", type=FiniteRange(0.0, 1.0), default=0.0, show_default=True,
              help="0 = best scores; higher spreads near-identical partners apart (maximal marginal relevance).")
@click.option("--format", "fmt", type=click.Choice(["jsonl", "csv", "parquet"]), default=None,
              help="Output format (default: from the --out suffix).")
@click.option("--out", required=True, type=click.Path(dir_okay=False), help="The feed file to write (- for standard output).")
@click.option("--progress/--no-progress", default=None, help="Progress bar on stderr (default: when it is a terminal).")
# --- issue 18: blend and look-alike options ---
@click.option("--blend", "blend", default=None, type=click.Path(dir_okay=False),
              help="Candidate list of another system (CSV/JSONL: product, partner, score) to blend in.")
@click.option("--blend-weight", "blend_weight", type=FiniteRange(0.0, 1.0), default=0.5, show_default=True,
              help="Weight of the candidate list's rank-normalised score (0 = harmony alone).")
@click.option("--similar", is_flag=True, help="Also write same-category look-alike rows (relation 'similar').")
# --- end issue 18 ---
@click.option("--curation", "curation_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help=CURATION_HELP)
@click.option("--engine", type=click.Choice(["local", "dask"]), default="local", show_default=True,
              help="Where the category pairs are scored: this process, or a Dask cluster.")
@click.option("--scheduler", default=None, metavar="ADDR",
              help="Dask scheduler address (tcp://host:8786); without it --engine dask starts a local cluster.")
@click.option("--workers", type=click.IntRange(1, 1024), default=None,
              help="Worker processes: of the local engine (default: the cores, at most 2) or of the local Dask cluster (default 2).")
def feed(db, rules_path, top, targets, diversity, fmt, out, progress, blend, blend_weight, similar,
         curation_path, engine, scheduler, workers):
    """Write the cross-sell feed: each product's best partners in the other categories.

    Out-of-stock partners are left out. Each row holds product, category, partner,
    partner_category, rank, score, a one-sentence reason and whether a curation file pinned it.
    The rules and curation files that made the feed are recorded beside it in FEED.about.json.
    Rows are written one category pair at a time, grouped by category pair, then by product
    and rank (with --blend, --similar or a partner-category limit: by product).
    """
    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.feed_run import build_feed, write_feed_stream

    if scheduler is not None and engine != "dask":
        raise HarmonyError("--scheduler needs --engine dask")
    rules = load_rules(rules_path)
    target_list = None
    if targets is not None:
        target_list = [t.strip() for t in targets.split(",") if t.strip()]
        if not target_list:
            raise HarmonyError("--targets: no category names given")
    with Store(db) as store:
        if progress is None:
            progress = sys.stderr.isatty()
        curation = load_curation_for(curation_path, store)
        extended = blend is not None or similar
        if not extended:
            # The feed as it is made, one category pair at a time (memory: one pair).
            path, count, products = write_feed_stream(
                store, rules, out, fmt, top=top, targets=target_list, diversity=diversity, warn=_warn,
                progress=progress, engine=engine, scheduler=scheduler, workers=workers, curation=curation,
            )
            warn_unmatched_pairs(rules, store.categories())
        else:
            rows = build_feed(store, rules, top=top, targets=target_list, diversity=diversity, warn=_warn,
                              progress=progress, curation=curation)
            warn_unmatched_pairs(rules, store.categories())
            # --- issue 18: blend and look-alike hook ---
            from harmony.suggest.blend import BLEND_COLUMNS, blend_from_store, read_candidates
            from harmony.suggest.lookalike import similar_rows

            if blend is not None:
                rows = blend_from_store(store, rules, rows, read_candidates(blend), blend_weight, top,
                                        targets=target_list, curation=curation)
            if similar:
                rows = list(rows) + similar_rows(store, top=top, progress=progress)[0]
            # --- end issue 18 ---
    if extended:
        if not rows:
            raise HarmonyError(
                f"{db}: no feed rows: the rules pair none of the store's categories with an in-stock target"
            )
        from harmony.suggest.blend import write_records  # issue 18: rows with extra columns

        path = write_records(rows, out, BLEND_COLUMNS, fmt)
        count, products = len(rows), len({r.product for r in rows})
    from harmony.suggest.provenance import write_provenance

    if not is_stdout(out):  # a feed on standard output has no file to sit beside
        write_provenance(path, rules_path, curation_path)
    click.echo(f"wrote {count} rows for {products} products to {path}", err=is_stdout(out))


@main.command("suggest")
@click.argument("product_id")
@click.option("--db", "db", required=True, type=click.Path(dir_okay=False), help="The palette store.")
@click.option("--category", default=None, help="Only partners of this category.")
@click.option("--top", type=click.IntRange(1, 1000), default=5, show_default=True, help="How many partners.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option("--rules", "rules_path", type=click.Path(dir_okay=False), default=str(DEFAULT_RULES),
              show_default="rules/default.toml", help="Harmony rules file.")
@click.option("--curation", "curation_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help=CURATION_HELP)
def suggest_cmd(product_id, db, category, top, as_json, rules_path, curation_path):
    """The best in-stock partners of PRODUCT_ID, with scores, reasons and their colours."""
    from harmony.photo.swatch import terminal_has_colour
    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.feed import suggest
    rules = load_rules(rules_path)
    with Store(db) as store:
        curation = load_curation_for(curation_path, store)
        found = suggest(store, rules, product_id, category=category, n=top, curation=curation)
        warn_unmatched_pairs(rules, store.categories())
        own = store.palette(found[0].row.product)
    if as_json:
        payload = {
            "product": found[0].row.product,
            "category": found[0].row.category,
            "colours": list(own.hex),
            "palette_flags": list(own.flags),
            "suggestions": [
                {**s.row.to_dict(), "raw": s.pair.raw, "colours": list(s.palette.hex),
                 "palette_flags": list(s.palette.flags)} for s in found
            ],
        }
        click.echo(json.dumps(payload, ensure_ascii=False))
        return
    colour = terminal_has_colour(sys.stdout)
    first = found[0].row
    names = [f"{s.row.partner} ({s.row.partner_category})" for s in found]
    width = max(len(n) for n in names)
    click.echo(f"{first.product} ({first.category})  {colour_blocks(own, colour)}{_doubt(own)}")
    for s, name in zip(found, names):
        r = s.row
        pin = "  (pinned)" if r.pinned else ""
        click.echo(f"{r.rank:>3}. {name:<{width}}  score {r.score:.2f}  {colour_blocks(s.palette, colour)}{pin}"
                   f"{_doubt(s.palette)}")
        click.echo(f"     {r.reason}")


def _doubt(palette):
    """'  [palette flagged: near-backdrop, confidence 0.60]' for a flagged palette, else ''."""
    if palette is None or not palette.flags:
        return ""
    return f"  [palette flagged: {', '.join(palette.flags)}, confidence {palette.confidence:.2f}]"
