"""``harmony demo``: the whole job on the invented demo shop, ending in the HTML report.

Stages, each timed: the shop's photos are extracted into ``OUT/harmony.db``; a cross-sell feed
is written to ``OUT/feed.jsonl``; the best sets of every room template ``demo_room_sets/*.toml``
go to ``OUT/bundles/<room>.json``; when the shop has an interaction log, the rules are evaluated
against it (beside the blends of harmony with the shop's own candidate list, ``candidates.csv``,
when there is one); when it has an impression log (``impressions.csv``), a position-based click
model is fitted to it and ``OUT/clicks.html`` shows the result; and ``OUT/report.html`` shows it
all, linking to the clicks page. Nothing needs the network: when the committed
demo shop is missing, its generator draws it into ``OUT/shop`` first.
"""

import json
import sys
import time
from dataclasses import dataclass
from pathlib import Path

from harmony.errors import HarmonyError
from harmony.report.page import gather_from_store, read_bundles, read_feed, write_report
from harmony.resources import DEFAULT_RULES, DEMO_DIR

__all__ = ["DEFAULT_OUT", "DemoResult", "run_demo", "demo_catalogue"]

#: Where ``harmony demo`` writes when ``--out`` is not given (relative to the working directory).
DEFAULT_OUT = Path("harmony-demo")

#: Suggested partners per product and target category in the demo feed.
FEED_TOP = 5
#: Maximal-marginal-relevance weight of the demo feed, so near-identical partners are spread out.
FEED_DIVERSITY = 0.3
#: Sets kept per room template.
BUNDLES_PER_ROOM = 3
#: Bootstrap resamples of the demo evaluation (fewer than the command's default: the demo is a tour).
EVAL_RESAMPLES = 200
#: Weights of the shop's candidate list compared in the demo evaluation (``harmony evaluate --blend``).
BLEND_WEIGHTS = "0,0.25,0.5,0.75,1"
#: Bootstrap resamples of the demo's click model (``harmony clicks`` uses 200; 50 keeps the demo's
#: run short, at the price of rougher interval ends).
CLICK_RESAMPLES = 50


@dataclass(frozen=True)
class DemoResult:
    """What a demo run wrote, and how long each stage took (``stages``: (name, seconds))."""

    out_dir: Path
    db_path: Path
    feed_path: Path
    bundle_paths: tuple
    report_path: Path
    evaluated: bool
    clicks_path: Path | None
    seconds: float
    stages: tuple


def demo_catalogue(out_dir, progress=False):
    """The demo shop's catalogue: the committed one, or one drawn into ``out_dir/shop``."""
    committed = DEMO_DIR / "shop" / "catalogue.csv"
    if committed.is_file():
        return committed
    from harmony.demo.shop import write_shop

    return write_shop(Path(out_dir) / "shop", progress=progress).catalogue


def _bundle_json(store, rules, room_path, curation=None):
    """The ``harmony bundle --json`` object of one room template over the store."""
    from harmony.suggest.bundle import result_to_dict, search_bundles
    from harmony.suggest.room import load_room

    result = search_bundles(store, load_room(room_path), rules, top=BUNDLES_PER_ROOM, curation=curation)
    return result_to_dict(result)


def _evaluation_tables(db_path, events_path, rules_path, progress, candidates_path=None):
    from harmony.evaluation import result_table
    from harmony.evaluation.run import collection_paused, run_evaluation

    extra = None
    with collection_paused():
        if candidates_path is not None:
            from harmony.suggest.blend import blend_methods_factory

            extra = blend_methods_factory(candidates_path, BLEND_WEIGHTS)
        result, _inputs = run_evaluation(db_path, events_path, [str(rules_path)], resamples=EVAL_RESAMPLES,
                                         progress=progress, extra_methods=extra)
    header, rows = result_table(result)
    heading = (f"Ranking real partners of the demo shoppers' log: {result.events} events, "
               f"{result.query_products} query products")
    if candidates_path is not None:
        heading += f"; blend W = weight of the shop's own candidate list ({candidates_path.name})"
    return ((heading, (tuple(header), tuple(tuple(r) for r in rows))),)


def _clicks_page(impressions_path, db_path, out_path, progress):
    """Fit the click model to the demo's impression log and write its page; returns the report."""
    import numpy as np

    from harmony.demo.impressions import PLANTED_EXAMINATION
    from harmony.evaluation.clicks import analyse_clicks, read_impressions
    from harmony.fileio import write_text_whole
    from harmony.report.clicks import render_clicks_page

    report = analyse_clicks(read_impressions(impressions_path), rng=np.random.default_rng(0),
                            resamples=CLICK_RESAMPLES, progress=progress)
    # The demo log is simulated: its planted examination curve is drawn beside the fitted one.
    html = render_clicks_page(report, db=db_path, source=impressions_path.name, planted=PLANTED_EXAMINATION)
    write_text_whole(out_path, html, "clicks page")
    return report


def run_demo(out_dir=DEFAULT_OUT, workers=None, progress=None, log=None, catalogue=None, rooms=None):
    """Run every stage on the demo shop; return where everything went.

    Parameters
    ----------
    out_dir : path
        Output folder, created when missing. Re-runs reuse the palettes already in its store.
    workers : int, optional
        Extraction processes (default: all cores).
    progress : bool, optional
        Progress bars on stderr; by default when stderr is a terminal.
    log : callable(str), optional
        Receives one line per finished stage (the CLI prints them on stderr).
    catalogue : path, optional
        Another catalogue to run on instead of the demo shop (an ``events.csv`` beside it is used).
    rooms : iterable of path, optional
        Room templates (default: every ``demo_room_sets/*.toml``).

    Raises
    ------
    HarmonyError
        If a stage fails (its message names the file).
    """
    from harmony.rules import load_rules
    from harmony.shop.engine import run_extraction
    from harmony.shop.store import Store

    start = time.perf_counter()
    out_dir = Path(out_dir)
    if progress is None:
        progress = sys.stderr.isatty()
    say = log or (lambda line: None)
    try:
        (out_dir / "bundles").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise HarmonyError(f"{out_dir}: cannot make the output folder: {exc.strerror or exc}") from None
    stages = []

    def lap(name, t0, detail):
        seconds = time.perf_counter() - t0
        stages.append((name, seconds))
        say(f"{name}: {detail} ({seconds:.1f} s)")

    t0 = time.perf_counter()
    catalogue = Path(catalogue) if catalogue is not None else demo_catalogue(out_dir, progress=progress)
    rooms = sorted(DEMO_DIR.glob("*.toml")) if rooms is None else [Path(r) for r in rooms]
    db_path = out_dir / "harmony.db"
    summary = run_extraction(catalogue, db_path, workers=workers, progress=progress)
    lap("extract", t0, f"{summary.products} products, {summary.images} images ({summary.new} new, "
                       f"{summary.cached} cached, {summary.failed} failed) into {db_path}")

    rules = load_rules(DEFAULT_RULES)
    # The shop's curation file (invented for the demo), beside its catalogue, when it has one.
    curation_path = catalogue.parent / "curation.toml"
    curation = None
    if curation_path.is_file():
        from harmony.suggest.curation import load_curation

        curation = load_curation(curation_path)
    with Store(db_path) as store:
        t0 = time.perf_counter()
        from harmony.suggest.feed import write_feed
        from harmony.suggest.feed_run import build_feed

        feed_rows = build_feed(store, rules, top=FEED_TOP, diversity=FEED_DIVERSITY, warn=say, curation=curation)
        feed_path = out_dir / "feed.jsonl"
        write_feed(feed_rows, feed_path, fmt="jsonl")
        from harmony.suggest.provenance import read_provenance, write_provenance

        write_provenance(feed_path, DEFAULT_RULES, curation_path if curation else None)
        lap("feed", t0, f"{len(feed_rows)} rows in {feed_path}")

        t0 = time.perf_counter()
        bundle_paths = []
        for room_path in rooms:
            data = _bundle_json(store, rules, room_path, curation)
            path = out_dir / "bundles" / f"{room_path.stem}.json"
            path.write_text(json.dumps(data, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
            bundle_paths.append(path)
        lap("bundles", t0, f"{len(bundle_paths)} rooms in {out_dir / 'bundles'}")

    evaluation = ()
    events_path = catalogue.parent / "events.csv"
    if events_path.is_file():
        t0 = time.perf_counter()
        candidates_path = catalogue.parent / "candidates.csv"
        candidates_path = candidates_path if candidates_path.is_file() else None
        evaluation = _evaluation_tables(db_path, events_path, DEFAULT_RULES, progress, candidates_path)
        blends = f" and blends with {candidates_path.name}" if candidates_path else ""
        lap("evaluate", t0, f"rules and baselines{blends} against {events_path.name}")

    clicks_path, pages = None, ()
    impressions_path = catalogue.parent / "impressions.csv"
    if impressions_path.is_file():
        t0 = time.perf_counter()
        clicks_path = out_dir / "clicks.html"
        fitted = _clicks_page(impressions_path, db_path, clicks_path, progress)
        pages = (("Clicks by slot", clicks_path.name),)
        lap("clicks", t0, f"click model of {fitted.impressions} impressions in {clicks_path}")

    t0 = time.perf_counter()
    from harmony.demo.shop import SHOP_NAME

    with Store(db_path) as store:
        data = gather_from_store(
            store, read_feed(feed_path), [read_bundles(p) for p in bundle_paths], rules,
            title=f"{SHOP_NAME}: demo report", evaluation=evaluation, curation=curation,
            feed_meta=read_provenance(feed_path), feed_given=True, pages=pages,
            notes=(f"{SHOP_NAME} is an invented shop: its products, prices and photos were generated "
                   "for this demo.",),
        )
    report_path = write_report(data, out_dir / "report.html")
    lap("report", t0, f"{len(data.products)} products, {len(data.suggestions)} pairs, {len(data.bundles)} sets")
    return DemoResult(
        out_dir=out_dir, db_path=db_path, feed_path=feed_path, bundle_paths=tuple(bundle_paths),
        report_path=report_path, evaluated=bool(evaluation), clicks_path=clicks_path, seconds=time.perf_counter() - start,
        stages=tuple(stages),
    )
