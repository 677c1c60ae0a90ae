"""``harmony demo``: extract, feed, room sets, evaluation and the report on the invented demo shop."""

import click

from . import main

__all__ = ["demo"]


@main.command("demo")
@click.option("--out-dir", "out_dir", default="harmony-demo", show_default=True, metavar="DIR",
              help="Folder for the store, the feed, the sets and the report.")
@click.option("--workers", type=click.IntRange(min=1), default=None, help="Extraction processes (default: all cores).")
@click.option("--progress/--no-progress", default=None, help="Progress bars on stderr (default: when it is a terminal).")
def demo(out_dir, workers, progress):
    """Run the whole job on the demo shop and write an HTML report."""
    from harmony.demo.run import run_demo

    result = run_demo(out_dir, workers=workers, progress=progress, log=lambda line: click.echo(line, err=True))
    click.echo(f"done in {result.seconds:.1f} s")
    click.echo(f"report: {result.report_path.resolve()}")
