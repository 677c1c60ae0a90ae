"""Writing output files whole: a reader never sees half a file, a failure leaves the old one."""

import os
import tempfile
from pathlib import Path

from .errors import HarmonyError

__all__ = ["write_text_whole"]


def write_text_whole(path, text, what="file"):
    """Write ``text`` (UTF-8) to ``path`` through a temporary file in the same folder and a rename.

    Creates missing parent folders. Raises :class:`HarmonyError` naming the path (and ``what`` was
    being written) when the folder or file cannot be written. Returns the path.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot write the {what}: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
        os.replace(tmp, path)
    except BaseException as exc:
        # Any failure (full disk, text that is not encodable, an interrupt) leaves no temporary.
        Path(tmp).unlink(missing_ok=True)
        if isinstance(exc, OSError):
            raise HarmonyError(f"{path}: cannot write the {what}: {exc.strerror or exc}") from None
        raise
    return path
