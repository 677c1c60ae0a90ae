"""``harmony tune``: fit a rules file's weights to a shop's own log, proven on held-out sessions."""

import os

import click

from . import main

__all__ = ["tune_command"]


def _same_file(a, b):
    return os.path.normcase(os.path.realpath(a)) == os.path.normcase(os.path.realpath(b))


@main.command("tune")
@click.option("--events", "events", required=True, type=click.Path(dir_okay=False),
              help="Interaction log: CSV or JSONL with session (or user), product, event, optional timestamp.")
@click.option("--rules", "rules_in", required=True, type=click.Path(dir_okay=False), help="Rules file to start from (never changed).")
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False), help="The tuned rules file to write ('-': standard output).")
@click.option("--db", default="harmony.db", show_default=True, type=click.Path(dir_okay=False), help="Palette store of the catalogue.")
@click.option("--split", type=click.Choice(["time", "session"]), default="time", show_default=True,
              help="Hold out the later sessions (time) or a random half of them (session).")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed of the session split and the bootstrap.")
@click.option("--resamples", default=1000, show_default=True, type=click.IntRange(min=1), help="Bootstrap resamples.")
@click.option("--progress/--no-progress", default=None, help="Progress bars on stderr (default: when it is a terminal).")
def tune_command(events, rules_in, out, db, split, seed, resamples, progress):
    """Fit the rule weights (and the score map) to an interaction log on a training split.

    Reports AUC, NDCG@10 and hit@10 on the held-out sessions before and after, with bootstrap
    intervals and the paired interval of the difference, and says when the gain is within noise.
    """
    import sys
    from pathlib import Path

    import numpy as np

    from harmony.errors import HarmonyError, StoreError
    from harmony.evaluation.tune import tune_note, tune_rules, tuned_rules_text
    from harmony.fileio import check_writable, write_text_whole
    from harmony.resources import DEFAULT_RULES
    from harmony.rules import load_rules
    from harmony.shop.events import read_events
    from harmony.shop.store import Store

    if out != "-":
        shipped = Path(DEFAULT_RULES).parent
        if _same_file(out, rules_in) or any(_same_file(out, p) for p in shipped.glob("*.toml")):
            raise HarmonyError(f"--out: {out} is the input or a shipped rules file; tune writes a new file and never changes those")
    check_writable(out, "tuned rules file")  # now, not after the fit
    if progress is None:
        progress = sys.stderr.isatty()
    rules = load_rules(rules_in)
    if not Path(db).exists():
        raise StoreError(f"{db}: no such store (run 'harmony extract CATALOGUE --db {db}')")
    with Store(db) as store:
        products, palettes = store.products(), store.palettes()
    if not palettes:
        raise StoreError(f"{db}: the store holds no palettes (run 'harmony extract CATALOGUE --db {db}')")
    log = read_events(events, known_products={p.id for p in products})
    result = tune_rules(rules, log, products, palettes, split=split, rng=np.random.default_rng(seed),
                        resamples=resamples, progress=progress)
    note = tune_note(Path(events).name, split, seed)
    text = tuned_rules_text(Path(rules_in).read_text(encoding="utf-8"), result, note, where=str(out))

    ev = result.evaluation
    click.echo(f"{rules_in} tuned on {events}: split by {split} (seed {seed}), "
               f"{result.train_sessions} training and {result.held_sessions} held-out sessions, "
               f"{ev.query_products} held-out query products ({ev.queries} queries)", err=out == "-")
    say = lambda line: click.echo(line, err=out == "-")
    say("")
    say(f"{'held out':<8}  {'AUC':>5}  {'95 % CI':>11}  {'NDCG@10':>7}  {'95 % CI':>11}  {'hit@10':>6}  {'95 % CI':>11}")
    for label, r in zip(("before", "after"), ev.results):
        say(f"{label:<8}  {r.auc:5.3f}  {r.auc_ci[0]:.3f}-{r.auc_ci[1]:.3f}  {r.ndcg_at_10:7.3f}  "
            f"{r.ndcg_ci[0]:.3f}-{r.ndcg_ci[1]:.3f}  {r.hit_at_10:6.3f}  {r.hit_ci[0]:.3f}-{r.hit_ci[1]:.3f}")
    d = result.difference
    say("change  " + "  ".join(f"{k} {m:+.3f} ({lo:+.3f} to {hi:+.3f})" for k, (m, (lo, hi)) in
                             (("AUC", d["auc"]), ("NDCG@10", d["ndcg_at_10"]), ("hit@10", d["hit_at_10"]))))
    say("")
    for name, (a, b) in result.weights.items():
        if a != b:
            say(f"  rule.{name}.weight {a:g} -> {b:g}")
    (m0, s0), (m1, s1) = result.score_map
    say(f"  score.midpoint {m0:g} -> {m1:g}, score.scale {s0:g} -> {s1:g} (measured; no ranking changes)")
    if result.within_noise:
        say(f"no gain beyond noise: the {ev.level * 100:g} % interval of the held-out AUC difference "
            f"({d['auc'][1][0]:+.3f} to {d['auc'][1][1]:+.3f}) covers 0; keep {rules_in}")
        text = f"# harmony tune found no gain beyond noise on {Path(events).name} (held-out AUC difference {d['auc'][1][0]:+.3f} to {d['auc'][1][1]:+.3f}); {rules_in} ranks as well\n" + text
    else:
        say(f"gain beyond noise: held-out AUC {d['auc'][0]:+.3f} ({d['auc'][1][0]:+.3f} to {d['auc'][1][1]:+.3f})")
    if out == "-":
        click.echo(text, nl=False)
    else:
        write_text_whole(out, text, what="rules file")
        say(f"tuned rules: {out}")
