"""The ``harmony`` command line: a thin layer that parses options, calls the library and prints.

Each command lives in a module ``*_cmd.py`` of this package and registers itself on :data:`main`
with ``@main.command``; every such module is imported when the package loads. Errors derived from :class:`harmony.errors.HarmonyError`
become one line ``error: ...`` on stderr and exit status 2; no traceback reaches the user.

What reaches the user besides the command's own output, and the exit status:

- SIGTERM (what schedulers send) stops the command cleanly: work already committed stays,
  no output file is half-written, one line ``error: stopped by SIGTERM ...``, status 143.
- Standard output closed by its reader (``| head``): the command ends quietly, status 141
  (as a process killed by SIGPIPE would).
- Standard output full or failing (``> /dev/full``): one line ``error: cannot write to
  standard output: ...``, status 2.
- Python warnings (from Pillow, numpy, ...) become one ``warning:`` line each.
"""

import errno
import importlib
import math
import os
import pkgutil
import signal
import sys
import threading
import warnings

import click

from harmony.errors import HarmonyError, warn

__all__ = ["main", "fail", "COMMAND_MODULES", "Terminated", "EXIT_TERMINATED", "EXIT_PIPE_CLOSED", "FiniteRange",
           "refuse_other_suffix"]

#: Exit status after SIGTERM: 128 + 15, as shells report a process ended by that signal.
EXIT_TERMINATED = 128 + signal.SIGTERM
#: Exit status when standard output's reader went away: 128 + 13 (SIGPIPE), quietly.
EXIT_PIPE_CLOSED = 128 + signal.SIGPIPE


class Terminated(BaseException):
    """Raised in the main thread by SIGTERM; a BaseException so no ``except Exception`` keeps it."""


class FiniteRange(click.FloatRange):
    """A finite number within a range: ``click.FloatRange`` lets ``nan`` through (every comparison
    with it is false) and ``inf`` past a range open at the top."""

    def convert(self, value, param, ctx):
        rv = super().convert(value, param, ctx)
        if not math.isfinite(rv):
            self.fail(f"{value!r} is not a finite number.", param, ctx)
        return rv


def refuse_other_suffix(path, suffixes, what):
    """Refuse an output name whose suffix says another format than ``what`` is written in (a page
    named ``.pdf``, a picture ``.jpg``); no suffix, one of ``suffixes`` and ``-`` pass."""
    if path is None or str(path) == "-":
        return
    suffix = os.path.splitext(str(path))[1].lower()
    if suffix and suffix not in suffixes:
        raise HarmonyError(f"{path}: {suffix} is not a name for {what} (use {' or '.join(suffixes)})")


def _on_sigterm(signum, frame):
    raise Terminated()


def _say(message):
    try:
        click.echo(message, err=True)
    except (OSError, ValueError):  # stderr closed too: nothing more can be said
        pass


def fail(message, code=2):
    """Print ``error: message`` on stderr and exit with ``code``."""
    _say(f"error: {message}")
    sys.exit(code)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    warn(f"{message}")


def _silence_stdout():
    """Point standard output at the null device, so the interpreter's last flush cannot fail."""
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
        os.close(null)
    except (OSError, ValueError, AttributeError):  # io.UnsupportedOperation is both of the first
        pass


def _stdout_failed(exc):
    """Handle an OSError from writing standard output; never returns."""
    _silence_stdout()
    if isinstance(exc, BrokenPipeError) or getattr(exc, "errno", None) == errno.EPIPE:
        sys.exit(EXIT_PIPE_CLOSED)
    fail(f"cannot write to standard output: {exc.strerror or exc}")


def _is_stdout_error(exc):
    """Whether an OSError came from writing standard output (not from a file the command opened)."""
    if isinstance(exc, BrokenPipeError):
        return True
    try:
        sys.stdout.flush()
    except OSError:
        return True
    except ValueError:  # closed
        return True
    return False


class _Group(click.Group):
    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        """As click's, but a usage error (bad option, missing argument) is one ``error:`` line too;
        SIGTERM, warnings and a closed or full standard output are handled as the module says."""
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode, **extra)
        if sys.stdout is None:  # started with standard output closed (>&-)
            fail("standard output is closed; give the command somewhere to write (e.g. >/dev/null)")
        old_term = None
        if threading.current_thread() is threading.main_thread():
            old_term = signal.signal(signal.SIGTERM, _on_sigterm)
        old_show = warnings.showwarning
        warnings.showwarning = _show_warning
        try:
            code = self._run(args, prog_name, complete_var, **extra)
            try:
                sys.stdout.flush()
            except OSError as exc:
                _stdout_failed(exc)
            except ValueError:  # standard output closed by the command itself
                pass
        finally:
            warnings.showwarning = old_show
            if old_term is not None:
                signal.signal(signal.SIGTERM, old_term)
        sys.exit(code)

    def _run(self, args, prog_name, complete_var, **extra):
        """Run the command; return its exit status (a SystemExit's code included)."""
        try:
            code = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
            return code if isinstance(code, int) else 0
        except SystemExit as exc:
            return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        except click.UsageError as exc:
            where = f" (see '{exc.ctx.command_path} --help')" if exc.ctx is not None else ""
            message, code = f"{exc.format_message()}{where}", exc.exit_code
        except click.ClickException as exc:
            message, code = exc.format_message(), exc.exit_code
        except click.Abort:
            message, code = "aborted", 1
        except Terminated:
            message = "stopped by SIGTERM; finished work is kept and no output file is half-written"
            code = EXIT_TERMINATED
        except OSError as exc:  # a write to standard output outside the command (see invoke)
            _stdout_failed(exc)
        _say(f"error: {message}")
        return code

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except HarmonyError as exc:
            fail(str(exc), code=getattr(exc, "exit_code", 2))
        except KeyboardInterrupt:
            fail("interrupted", code=130)
        except OSError as exc:
            # A stream write (standard output) names no file; a file the command opened does.
            if exc.filename is None or _is_stdout_error(exc):
                _stdout_failed(exc)
            fail(f"{exc.filename}: {exc.strerror or exc}")


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="harmony")
def main():
    """Colour palettes from product photos, cross-category harmony, and room sets under a budget."""


#: Modules of this package that define commands, in name order.
COMMAND_MODULES = tuple(sorted(m.name for m in pkgutil.iter_modules(__path__) if m.name.endswith("_cmd")))

for _name in COMMAND_MODULES:
    importlib.import_module(f"{__name__}.{_name}")
