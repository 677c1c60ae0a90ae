"""Files a running server reads again when they are edited: the rules file and the curation file.

A :class:`WatchedFile` notices an edit by the file's device, inode, modification time and size
(an editor saves in place or writes a new file and renames it) and then compares the SHA-256 of the
bytes with the version in force, so a file touched but not changed is not loaded again. A version
that fails to load leaves the last good one in force; its one-line error is logged once and kept
in :attr:`WatchedFile.error` until a later edit loads.
"""

import hashlib
import logging
import os
from dataclasses import dataclass
from pathlib import Path

from harmony.errors import HarmonyError

__all__ = ["WatchedFile", "FileVersion", "file_version"]

log = logging.getLogger("harmony.serve")


@dataclass(frozen=True)
class FileVersion:
    """What a :class:`WatchedFile` knows of a file's bytes: ``token`` (device, inode, modification
    time, size) and ``sha256`` (hex; None when unreadable). Taken *before* a caller loads the file,
    it makes an edit that lands during the load count as an edit."""

    token: tuple
    sha256: str | None


def _token(path):
    try:
        st = os.stat(path)
    except OSError as exc:
        return ("unreadable", exc.errno)
    return st.st_dev, st.st_ino, st.st_mtime_ns, st.st_size


def _digest(path):
    try:
        return hashlib.sha256(Path(path).read_bytes()).hexdigest()
    except OSError:
        return None


def file_version(path):
    """The :class:`FileVersion` of ``path`` now (the token first, then the bytes)."""
    token = _token(path)
    return FileVersion(token, _digest(path))


class WatchedFile:
    """One file, its loaded value and what became of its last edit.

    Parameters
    ----------
    path : str or pathlib.Path
    kind : str
        What the file is, for messages ("rules file").
    load : callable
        ``load(path) -> value``; raises :class:`harmony.errors.HarmonyError` on a bad file.
    value : object
        The version in force (already loaded by the caller, who reported its problems).
    version : FileVersion, optional
        :func:`file_version` taken before the caller loaded ``value``; by default taken now, so an
        edit between the caller's load and this call would go unnoticed until the next edit.

    Attributes
    ----------
    value : object
    sha256 : str
        Hex SHA-256 of the bytes of the version in force.
    error : str or None
        Why the file's current bytes are not in force, naming the file by its name only (the
        message may reach HTTP clients); None when they are.
    """

    def __init__(self, path, kind, load, value, version=None):
        self.path = Path(path)
        self.kind = kind
        self._load = load
        self.value = value
        self.error = None
        version = file_version(self.path) if version is None else version
        self._token, self.sha256 = version.token, version.sha256

    def _fail(self, message):
        message = message.replace(str(self.path), self.path.name)
        if message != self.error:
            log.warning("%s not reloaded, the last good version stays in force: %s", self.kind, message)
        self.error = message

    def poll(self):
        """Look once. Returns True when an edit was loaded and is now :attr:`value`."""
        token = _token(self.path)
        if token == self._token:
            return False
        self._token = token
        digest = _digest(self.path)
        if digest is None:
            self._fail(f"{self.path}: cannot read the {self.kind}")
            return False
        if digest == self.sha256:
            self.error = None
            return False
        try:
            value = self._load(self.path)
        except HarmonyError as exc:
            self._fail(str(exc))
            return False
        except Exception as exc:  # a loader's own failure must not stop the server's watcher
            self._fail(f"{self.path}: cannot load the {self.kind}: {type(exc).__name__}: {exc}")
            return False
        self.value, self.sha256, self.error = value, digest, None
        log.info("%s reloaded: %s (sha256 %s)", self.kind, self.path.name, digest[:12])
        return True
