"""The exception hierarchy of harmony.

Every error a user can cause derives from :class:`HarmonyError`; the command line turns each into a
one-line ``error: ...`` message and a non-zero exit, never a traceback.
"""

__all__ = [
    "HarmonyError",
    "ImageError",
    "RulesError",
    "CatalogueError",
    "StoreError",
    "RoomError",
    "EventsError",
    "warn",
]


class HarmonyError(ValueError):
    """Base class of every error caused by input (files, options, data)."""


class ImageError(HarmonyError):
    """An image cannot be read, is too large, or has nothing left after masking."""


class RulesError(HarmonyError):
    """A rules file is not valid; the message lists every problem as ``FILE:LINE: key: reason``."""


class CatalogueError(HarmonyError):
    """A catalogue file cannot be read or (in strict mode) has invalid rows."""


class StoreError(HarmonyError):
    """The palette store is missing, of another schema version, or does not hold what was asked."""


class RoomError(HarmonyError):
    """A room template is invalid or a bundle cannot be built as asked."""


class EventsError(HarmonyError):
    """An interaction log cannot be read."""


def warn(message):
    """Print ``warning: message`` on standard error, one line, for the person running the job."""
    import sys

    text = " ".join(str(message).split())
    try:
        print(f"warning: {text}", file=sys.stderr, flush=True)
    except (OSError, ValueError):  # stderr closed: a warning is not worth a traceback
        pass
