"""The ``harmony`` command line: a thin layer that parses options, calls the library and prints.

Each command lives in a module ``*_cmd.py`` of this package and registers itself on :data:`main`
with ``@main.command``; every such module is imported when the package loads. Errors derived from :class:`harmony.errors.HarmonyError`
become one line ``error: ...`` on stderr and exit status 2; no traceback reaches the user.
"""

import importlib
import pkgutil
import sys

import click

from harmony.errors import HarmonyError

__all__ = ["main", "fail", "COMMAND_MODULES"]



def fail(message, code=2):
    """Print ``error: message`` on stderr and exit with ``code``."""
    click.echo(f"error: {message}", err=True)
    sys.exit(code)


class _Group(click.Group):
    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        """As click's, but a usage error (bad option, missing argument) is one ``error:`` line too."""
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode, **extra)
        try:
            code = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.UsageError as exc:
            where = f" (see '{exc.ctx.command_path} --help')" if exc.ctx is not None else ""
            fail(f"{exc.format_message()}{where}", code=exc.exit_code)
        except click.ClickException as exc:
            fail(exc.format_message(), code=exc.exit_code)
        except click.Abort:
            fail("aborted", code=1)
        sys.exit(code if isinstance(code, int) else 0)

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except HarmonyError as exc:
            fail(str(exc))
        except KeyboardInterrupt:
            fail("interrupted", code=130)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="harmony")
def main():
    """Colour palettes from product photos, cross-category harmony, and room sets under a budget."""


#: Modules of this package that define commands, in name order.
COMMAND_MODULES = tuple(sorted(m.name for m in pkgutil.iter_modules(__path__) if m.name.endswith("_cmd")))

for _name in COMMAND_MODULES:
    importlib.import_module(f"{__name__}.{_name}")
