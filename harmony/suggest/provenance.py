"""What made a feed: the rules file and curation file, by name and content hash, in a sidecar file.

A feed file holds rows only (a JSONL consumer, a CSV importer and a Parquet reader all expect
uniform rows), so ``harmony feed`` writes what made it beside it, in ``FEED.about.json``::

    {"format": 1, "feed_sha256": "...", "rules": {"file": "default.toml", "sha256": "..."},
     "curation": {"file": "curation.toml", "sha256": "..."} | null}

``feed_sha256`` ties the sidecar to the feed's bytes: a sidecar left beside a feed that was later
rewritten by something else is recognised and ignored. The report reads it to say which rules
made the feed and to warn when it draws the feed with other rules.
"""

import hashlib
import json
from pathlib import Path

from harmony.fileio import write_text_whole

__all__ = ["SIDECAR_SUFFIX", "file_sha256", "file_identity", "sidecar_path", "write_provenance",
           "read_provenance"]

#: Added to a feed's file name to name its sidecar.
SIDECAR_SUFFIX = ".about.json"


def file_sha256(path):
    """Hex SHA-256 of a file's bytes."""
    with open(path, "rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()


def file_identity(path):
    """``{"file": name, "sha256": hash}`` of a file, or None for no file."""
    if path is None:
        return None
    return {"file": Path(path).name, "sha256": file_sha256(path)}


def sidecar_path(feed_path):
    feed_path = Path(feed_path)
    return feed_path.with_name(feed_path.name + SIDECAR_SUFFIX)


def write_provenance(feed_path, rules_path, curation_path=None):
    """Write the sidecar of a feed just written; returns its path."""
    data = {"format": 1, "feed_sha256": file_sha256(feed_path), "rules": file_identity(rules_path),
            "curation": file_identity(curation_path)}
    return write_text_whole(sidecar_path(feed_path), json.dumps(data, indent=2) + "\n", "feed sidecar")


def read_provenance(feed_path):
    """The sidecar of a feed as a dict, or None when there is none, it is unreadable, or it
    describes other bytes than the feed's (``feed_sha256`` differs)."""
    path = sidecar_path(feed_path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("feed_sha256") != file_sha256(feed_path):
        return None
    return data
