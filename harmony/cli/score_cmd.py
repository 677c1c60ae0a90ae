"""``harmony score A B``: the exact harmony score of two products, with its reason."""

import difflib
import json
import math
from pathlib import Path

import click

from harmony.errors import HarmonyError
from harmony.resources import DEFAULT_RULES

from . import main


def read_palette(path):
    """A palette from palette JSON (as ``harmony palette --json`` writes) or from an image file."""
    from harmony.photo.palette import Palette
    path = Path(path)
    if path.suffix.lower() in (".json", ".jsonl"):
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise HarmonyError(f"{path}: cannot read: {getattr(exc, 'strerror', None) or exc}") from None
        lines = [line for line in text.splitlines() if line.strip()]
        if len(lines) > 1 and all(line.lstrip().startswith("{") for line in lines):
            raise HarmonyError(f"{path}: holds {len(lines)} palettes; give a file with one")
        return Palette.from_json(text, where=str(path))
    try:
        from harmony.photo.palette import extract_palette
    except ImportError:
        raise HarmonyError(f"{path}: reading images needs harmony.photo.palette.extract_palette; give palette JSON") from None
    return extract_palette(path)


@main.command("score")
@click.argument("a", type=click.Path(dir_okay=False))
@click.argument("b", type=click.Path(dir_okay=False))
@click.option("--rules", "rules_file", default=str(DEFAULT_RULES), show_default="rules/default.toml",
              type=click.Path(dir_okay=False), help="Rules file (TOML).")
@click.option("--categories", default=None, metavar="CAT_A,CAT_B",
              help="Categories of A and B, e.g. 'rug,sofa'; without them the [default] rules apply.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
def score(a, b, rules_file, categories, as_json):
    """Score how well product A goes with product B (images or palette JSON files)."""
    from harmony.rules import load_rules
    from harmony.rules.score import pair_score
    rule_set = load_rules(rules_file)
    if categories is None:
        pair_rules = rule_set.default_rules()
    else:
        parts = [p.strip() for p in categories.split(",")]
        if len(parts) != 2 or not all(parts):
            raise HarmonyError(f"--categories: expected two names separated by a comma, got {categories!r}")
        pair_rules = rule_set.for_pair(*parts)
        known = rule_set.categories
        for name in pair_rules.categories:  # normalised
            close = difflib.get_close_matches(name, known, n=1) if name not in known else []
            if close:
                click.echo(f"note: {rules_file} has no pair section naming '{name}' (did you mean "
                           f"'{close[0]}'?); the [default] rules apply to it", err=True)
    pal_a = read_palette(a)
    pal_b = read_palette(b)
    result = pair_score(pal_a, pal_b, pair_rules)
    if not math.isfinite(result.score) or not math.isfinite(result.raw):
        raise HarmonyError(f"{a}, {b}: the score is not a finite number; check the palettes' values")
    if not pair_rules.scored:
        a_name, b_name = pair_rules.categories
        click.echo(f"note: {rules_file} never scores {a_name} with {b_name} (scored = false); "
                   f"this is what its rules would give", err=True)
    if as_json:
        out = {
            "format": 2,  # format 1 (before harmony 0.2) named colour_pairs "pairs"
            "score": result.score,
            "categories": [c or None for c in result.categories],
            "rules_file": str(rules_file),
            "section": result.section,
            "scored": pair_rules.scored,
            "raw": result.raw,
            "contributions": [{"rule": r, "value": v} for r, v in result.contributions],
            "colour_pairs": [{"a": p.hex_a, "b": p.hex_b, "rule": p.rule, "value": p.value} for p in result.pairs],
            "reason": result.reason,
        }
        click.echo(json.dumps(out))
        return
    click.echo(f"score {result.score:.3f}  (raw {result.raw:+.3f}, rules: {result.section})")
    for rule, value in result.contributions:
        click.echo(f"  {rule:<22} {value:+.3f}")
    click.echo(result.reason)
