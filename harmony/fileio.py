"""Writing output files whole: a reader never sees half a file, a failure leaves the old one."""

import os
import sys
import tempfile
from pathlib import Path

from harmony.errors import HarmonyError

__all__ = ["STDOUT", "is_stdout", "write_whole", "write_text_whole", "write_bytes_whole"]

#: The file name that means standard output, in every command that writes one file.
STDOUT = "-"


def is_stdout(path):
    """True when ``path`` is :data:`STDOUT` (``-``)."""
    return str(path) == STDOUT


def _write_stdout(write):
    """Let ``write(tmp_path)`` fill a private temporary file, then copy it to standard output."""
    with tempfile.TemporaryDirectory(prefix="harmony-out-") as folder:
        tmp = Path(folder) / "out"
        write(tmp)
        data = tmp.read_bytes()
    stream = getattr(sys.stdout, "buffer", None)
    if stream is None:  # a text-only stdout (tests): the outputs are UTF-8 text or bytes
        sys.stdout.write(data.decode("utf-8", errors="replace"))
    else:
        stream.write(data)
    sys.stdout.flush()


def write_whole(path, write, what="file"):
    """Let ``write(tmp_path)`` fill a temporary file in ``path``'s folder, then rename it to ``path``.

    Creates missing parent folders. A new file gets the permissions the umask gives; a replaced
    file keeps its own. Any failure (full disk, an encoding error, an interrupt)
    removes the temporary file and leaves an older ``path`` as it was; an ``OSError`` becomes a
    :class:`HarmonyError` ``"<path>: cannot write the <what>: <reason>"``. Returns the path.
    ``path`` ``-`` writes to standard output instead (and returns ``"-"``).
    """
    if is_stdout(path):
        _write_stdout(write)
        return STDOUT
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
        os.close(fd)
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot write the {what}: {exc.strerror or exc}") from None
    try:
        write(tmp)
        # mkstemp makes the file private (0600); give it the mode a plain open() would have had,
        # or the mode of the file it replaces, so a web server that read the old feed still can.
        os.chmod(tmp, _target_mode(path))
        os.replace(tmp, path)
    except BaseException as exc:
        Path(tmp).unlink(missing_ok=True)
        if isinstance(exc, OSError):
            raise HarmonyError(f"{path}: cannot write the {what}: {exc.strerror or exc}") from None
        raise
    return path


def _target_mode(path):
    try:
        return path.stat().st_mode & 0o7777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def write_text_whole(path, text, what="file"):
    """Write ``text`` (UTF-8, newlines as given) to ``path`` whole; see :func:`write_whole`."""

    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)

    return write_whole(path, write, what)


def write_bytes_whole(path, data, what="file"):
    """Write ``data`` to ``path`` whole; see :func:`write_whole`."""
    return write_whole(path, lambda tmp: Path(tmp).write_bytes(data), what)
