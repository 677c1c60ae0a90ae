"""One whole evaluation from files: a store, an interaction log and rules files (``harmony evaluate``)."""

import difflib
import gc
import os
import sys
from contextlib import contextmanager

import numpy as np

from harmony.errors import HarmonyError, StoreError, warn
from harmony.evaluation.core import evaluate
from harmony.evaluation.methods import standard_methods
from harmony.evaluation.queries import build_queries
from harmony.rules import load_rules, unmatched_pair_warnings
from harmony.shop.events import parse_event_weights, read_events
from harmony.shop.store import Store

__all__ = ["run_evaluation", "collection_paused"]


@contextmanager
def collection_paused():
    """Automatic garbage collection off inside the block, as it was after it.

    An evaluation makes some 10^5 objects (log rows, candidates, queries) and no reference cycles
    of its own (a collection after the demo's found only the few hundred objects that importing
    a library leaves), while each automatic collection of the older generations walks every
    object of the libraries imported before: about 0.2 s of the demo's evaluate stage went to
    collections that freed next to nothing.
    """
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def run_evaluation(db, events, rules_files, weights=(), seed=0, resamples=1000, attribute="colour", progress=None,
                   extra_methods=None):
    """Everything ``harmony evaluate`` computes: ``(Evaluation, inputs)`` for the page.

    ``progress`` None shows a bar when stderr is a terminal. ``extra_methods(methods, palettes,
    products)``, when given, returns more methods to compare (issue 18: blend weights).
    ``attribute`` names a catalogue column, read without case as the catalogue's names are.

    Raises
    ------
    HarmonyError
        When the same rules file is given twice (named), besides the errors of the steps.
    """
    attribute = str(attribute).strip().casefold()
    with collection_paused():
        return _run(db, events, rules_files, weights, seed, resamples, attribute, progress, extra_methods)


def _run(db, events, rules_files, weights, seed, resamples, attribute, progress, extra_methods):
    _check_distinct(rules_files)
    rulesets = [load_rules(path) for path in rules_files]
    event_weights = parse_event_weights(weights)
    with Store(db) as store:
        products = store.products()
        palettes = store.palettes()
    if not products:
        raise StoreError(f"{db}: the store holds no products (run 'harmony extract CATALOGUE --db {db}')")
    if not palettes:
        raise StoreError(f"{db}: the store holds no palettes (run 'harmony extract CATALOGUE --db {db}')")
    log = read_events(events, weights=event_weights, known_products={p.id for p in products})
    present = log.counts()
    given = {str(item).partition("=")[0].strip().casefold() for item in weights}
    for kind in sorted(k for k in given if event_weights[k] > 0 and k not in present):  # misspelt?
        close = difflib.get_close_matches(kind, sorted(present) + [k for k, _ in log.skipped], n=1)
        warn(f"--event-weight {kind}: the log has no kept events of that kind"
             + (f" (did you mean '{close[0]}'?)" if close else f" (kinds: {', '.join(sorted(present))})"))
    queries = build_queries(log, products, palettes)
    methods = standard_methods(rulesets, palettes, products, attribute=attribute)
    if extra_methods is not None:  # issue 18: blend weights side by side
        methods = methods + list(extra_methods(methods, palettes, products))
    if progress is None:
        progress = sys.stderr.isatty()
    result = evaluate(
        queries, methods, products, np.random.default_rng(seed), resamples=resamples,
        unknown=log.unknown, progress=progress, skipped=log.skipped,
    )
    for message in unmatched_pair_warnings(rulesets, [p.category for p in products]):
        warn(message)
    inputs = [("store", str(db)), ("interaction log", f"{events} ({log.rows} rows)")]
    inputs += [("rules file", str(r.path)) for r in rulesets]
    inputs.append(("event weights", ", ".join(f"{k} {v:g}" for k, v in event_weights.items())))
    inputs.append(("bootstrap seed", str(seed)))
    return result, inputs


def _check_distinct(rules_files):
    """Refuse a rules file given twice (the same file under two spellings counts too)."""
    seen = {}
    for path in rules_files:
        key = os.path.normcase(os.path.realpath(path))
        if key in seen:
            same = "" if seen[key] == str(path) else f" (as {seen[key]!r} before)"
            raise HarmonyError(f"--rules: {path} is given twice{same}; each rules file is evaluated once")
        seen[key] = str(path)
