"""``harmony rules check FILE...`` and ``harmony rules show FILE --out FILE.png``."""

import click

from harmony.errors import RulesError
from harmony.fileio import is_stdout

from . import FiniteRange, main, refuse_other_suffix

#: Most wheels ``rules show`` draws in one picture (about 240 x 8,000 pixels; this project's
#: choice, to bound the time and memory of a picture a person can still read).
MAX_WHEELS = 120


@main.group("rules")
def rules_group():
    """Validate rules files and draw what their hue rules mean."""


@rules_group.command("check")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False))
def check(files):
    """Validate each rules FILE; print every problem as FILE:LINE: key: reason."""
    from harmony.rules import load_rules
    bad = 0
    for path in files:
        try:
            rule_set = load_rules(path)
        except RulesError as exc:
            bad += 1
            for problem in getattr(exc, "problems", (str(exc),)):
                click.echo(f"error: {problem}", err=True)
            continue
        click.echo(f"{path}: ok ({len(rule_set.rules)} rules, {len(rule_set.pairs)} pair sections)")
    if bad:
        raise SystemExit(2)


@rules_group.command("show")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--out", "out", required=True, type=click.Path(dir_okay=False), help="PNG file to write.")
@click.option("--reference-hue", default=40.0, show_default=True, type=FiniteRange(0.0, 360.0, max_open=True),
              help="CAM02-UCS hue of the first colour, at the top of each wheel.")
def show(file, out, reference_hue):
    """Draw each hue rule of FILE, and each pair section's sum of them, around a hue wheel."""
    from harmony.rules import load_rules
    from harmony.rules.wheel import draw_hue_rules

    refuse_other_suffix(out, (".png",), "the picture")
    rule_set = load_rules(file)
    wheels = sum(1 for r in rule_set.rules.values() if r.kind == "hue") + 1 + len(rule_set.pairs)
    if wheels > MAX_WHEELS:
        raise RulesError(f"{file}: up to {wheels} wheels to draw, more than the {MAX_WHEELS} one picture holds; "
                         f"draw a smaller file (fewer rules or pair sections)")
    panels = draw_hue_rules(rule_set, out, reference_hue=reference_hue)  # written whole
    click.echo(f"{out}: {len(panels)} wheels", err=is_stdout(out))
