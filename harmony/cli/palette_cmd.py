"""``harmony palette IMAGE...``: the palette of each photo as a table, JSON lines or a swatch."""

import functools
import sys

import click

from harmony.errors import HarmonyError
from harmony.fileio import is_stdout

from . import main

__all__ = ["palette", "format_table"]


def format_table(pal, name, blocks=False):
    """Human-readable lines for one palette: a heading, then hex, share, J', M', hue per colour."""
    from harmony import colour
    from harmony.photo.palette import neutrality
    from harmony.photo.swatch import ansi_block
    kind = "room scene (low confidence)" if pal.scene else "studio shot"
    if pal.background_jab is not None:
        back = f"background {colour.jab_to_hex(pal.background_jab)} {pal.background_share:.0%}"
    else:
        back = f"background removed {pal.background_share:.0%}" if pal.background_share > 0 else "no background"
    lines = [
        f"{name}  {pal.width}x{pal.height}  {kind}  confidence {pal.confidence:.2f}  {back}",
        f"  {'':2} {'hex':7}  {'share':>6}  {'J′':>5}  {'M′':>5}  {'hue':>5}",
    ]
    m = colour.colourfulness(pal.jab)
    hue = colour.hue_deg(pal.jab)
    neutral = neutrality(pal.jab) >= 0.5
    for code, w, jab, mm, hh, nn in zip(pal.hex, pal.weights, pal.jab, m, hue, neutral):
        block = ansi_block(code) if blocks else "  "
        hue_text = "  —  " if nn else f"{hh:5.0f}"
        lines.append(f"  {block} {code}  {w:6.1%}  {jab[0]:5.1f}  {mm:5.1f}  {hue_text}")
    return lines


@main.command("palette")
@click.argument("images", nargs=-1, required=True, type=click.Path(dir_okay=True))
@click.option("--colours", "-k", type=click.IntRange(1, 64), default=10, show_default=True,
              help="Largest number of palette colours (k of the k-means step).")
@click.option("--json", "as_json", is_flag=True, help="One JSON object per image, one per line.")
@click.option("--swatch", type=click.Path(dir_okay=False), default=None,
              help="Also write a PNG strip per image whose segment widths are the weights.")
def palette(images, colours, as_json, swatch):
    """Extract the colour palette of each product photo IMAGE.

    Studio backdrops and soft shadows are left out; room scenes are flagged. A bad image is
    reported as an error and the others are still processed; the exit status is then 2.
    """
    from harmony.photo.palette import PaletteSettings, extract_palette
    from harmony.photo.swatch import terminal_has_colour, write_swatch
    settings = PaletteSettings(colours=colours)
    # With --swatch - the picture is standard output, so the palettes go to stderr.
    echo = functools.partial(click.echo, err=swatch is not None and is_stdout(swatch))
    blocks = not as_json and terminal_has_colour(sys.stdout)
    done = []
    failed = 0
    for name in images:
        try:
            pal = extract_palette(name, settings)
        except HarmonyError as exc:
            click.echo(f"error: {exc}", err=True)
            failed += 1
            continue
        done.append(pal)
        if as_json:
            echo(pal.to_json(image=name))
        else:
            if len(done) > 1:
                echo("")
            echo("\n".join(format_table(pal, name, blocks=blocks)))
    if swatch is not None and done:
        try:
            write_swatch(done, swatch)
        except HarmonyError as exc:
            click.echo(f"error: {exc}", err=True)
            failed += 1
    if failed:
        sys.exit(2)
