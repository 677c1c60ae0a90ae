"""Writing the feed as it is made: JSON lines, CSV or Parquet, one category pair at a time.

A :class:`FeedChunk` holds the rows of one ordered category pair as columns. The writers add each
chunk to a temporary file as it arrives (Parquet: one row group per chunk), and the file takes its
name only when the last chunk is in (:func:`harmony.fileio.write_whole`), so memory holds one
category pair at a time and a reader never sees half a feed.
"""

import csv
import io
import json
from dataclasses import dataclass
from pathlib import Path

from harmony.errors import HarmonyError
from harmony.fileio import spreadsheet_safe, write_whole

__all__ = ["FeedChunk", "FEED_COLUMNS", "FEED_FORMATS", "feed_format", "chunk_text", "write_chunks"]

#: Feed columns, in file order (the JSONL keys, CSV header and Parquet schema).
FEED_COLUMNS = ("product", "category", "partner", "partner_category", "rank", "score", "reason", "pinned")

#: Output formats, by file suffix.
FEED_FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".csv": "csv", ".parquet": "parquet"}


@dataclass(frozen=True, eq=False)
class FeedChunk:
    """The rows of one ordered category pair, as columns, sorted by product then rank.

    Attributes
    ----------
    category, partner_category : str
        Normalised categories, the same for every row.
    product, partner, reason : list of str
    rank : list of int
    score : list of float
    pinned : list of bool
        Whether a curation file placed the partner.
    text : tuple of (str, str), optional
        ``(format, text)``: the chunk already written out as :func:`chunk_text` writes it in that
        format (made by a worker process of the local engine, so the parent only copies it).
    """

    category: str
    partner_category: str
    product: list
    partner: list
    rank: list
    score: list
    reason: list
    pinned: list
    text: tuple = None

    def __len__(self):
        return len(self.product)

    def records(self):
        """The rows as dicts in column order (for small uses; the writers do not build them)."""
        for p, q, r, s, t, u in zip(self.product, self.partner, self.rank, self.score, self.reason, self.pinned):
            yield {"product": p, "category": self.category, "partner": q,
                   "partner_category": self.partner_category, "rank": r, "score": s, "reason": t, "pinned": u}


def feed_format(path, fmt=None):
    """The format name of a feed file: ``fmt`` if given, else from the suffix of ``path``."""
    if fmt is not None:
        if fmt not in ("jsonl", "csv", "parquet"):
            raise HarmonyError(f"unknown feed format '{fmt}' (use jsonl, csv or parquet)")
        return fmt
    suffix = Path(path).suffix.lower()
    if suffix not in FEED_FORMATS:
        raise HarmonyError(f"{path}: cannot tell the feed format from the suffix (use .jsonl, .csv or .parquet, or --format)")
    return FEED_FORMATS[suffix]


def _jsonl(chunk):
    # The same text as json.dumps(record, ensure_ascii=False) per row, without building dicts;
    # each id is encoded once.
    enc = {}

    def js(text):
        out = enc.get(text)
        if out is None:
            out = enc[text] = json.dumps(text, ensure_ascii=False)
        return out

    head = f', "category": {js(chunk.category)}, "partner": '
    mid = f', "partner_category": {js(chunk.partner_category)}, "rank": '
    # What json.dumps(text, ensure_ascii=False) returns for a str, without its per-call set-up.
    dumps = json.encoder.encode_basestring
    return "".join(
        f'{{"product": {js(p)}{head}{js(q)}{mid}{r}, "score": {s!r}, "reason": {dumps(t)}, '
        f'"pinned": {"true" if u else "false"}}}\n'
        for p, q, r, s, t, u in zip(chunk.product, chunk.partner, chunk.rank, chunk.score, chunk.reason, chunk.pinned)
    )


def _csv(chunk, header):
    buf = io.StringIO()
    writer = csv.writer(buf)
    if header:
        writer.writerow(FEED_COLUMNS)
    cat, pcat = chunk.category, chunk.partner_category
    # Text a spreadsheet would run as a formula gets a leading apostrophe (harmony.fileio).
    safe = spreadsheet_safe
    cat, pcat = safe(cat), safe(pcat)
    writer.writerows(
        (safe(p), cat, safe(q), pcat, r, s, safe(t), u)
        for p, q, r, s, t, u in zip(chunk.product, chunk.partner, chunk.rank, chunk.score, chunk.reason, chunk.pinned)
    )
    return buf.getvalue()


def chunk_text(chunk, fmt, header=False):
    """One chunk as JSON lines or CSV text (``header``: start with the CSV header row)."""
    if not header and chunk.text is not None and chunk.text[0] == fmt:
        return chunk.text[1]
    return _jsonl(chunk) if fmt == "jsonl" else _csv(chunk, header)


def _schema():
    import pyarrow as pa

    return pa.schema([
        ("product", pa.string()), ("category", pa.string()), ("partner", pa.string()),
        ("partner_category", pa.string()), ("rank", pa.int32()), ("score", pa.float64()),
        ("reason", pa.string()), ("pinned", pa.bool_()),
    ])


def _arrow_table(chunk, schema):
    import pyarrow as pa

    n = len(chunk)
    return pa.table({
        "product": chunk.product, "category": [chunk.category] * n, "partner": chunk.partner,
        "partner_category": [chunk.partner_category] * n, "rank": chunk.rank, "score": chunk.score,
        "reason": chunk.reason, "pinned": chunk.pinned,
    }, schema=schema)


def write_chunks(chunks, path, fmt=None):
    """Write feed chunks to ``path`` as they come, whole (temporary file, then rename).

    Parameters
    ----------
    chunks : iterable of FeedChunk
        Consumed once; each is written and dropped before the next is asked for.
    path : str or pathlib.Path
    fmt : {"jsonl", "csv", "parquet"}, optional
        Default: from the suffix.

    Returns
    -------
    (pathlib.Path, int)
        The path and the number of rows written.

    Raises
    ------
    HarmonyError
        Unknown format, pyarrow missing for Parquet, or a file that cannot be written.
    """
    path = Path(path)
    fmt = feed_format(path, fmt)
    if fmt == "parquet":
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise HarmonyError("Parquet output needs pyarrow: pip install 'harmony[parquet]'") from None
    count = 0

    def fill(tmp):
        nonlocal count
        if fmt == "parquet":
            schema = _schema()
            with pq.ParquetWriter(tmp, schema) as out:
                for chunk in chunks:
                    if len(chunk):
                        out.write_table(_arrow_table(chunk, schema))
                        count += len(chunk)
            return
        with open(tmp, "w", encoding="utf-8", newline="") as out:
            if fmt == "csv":
                out.write(_csv(FeedChunk("", "", [], [], [], [], [], []), header=True))
            for chunk in chunks:
                out.write(chunk_text(chunk, fmt))
                count += len(chunk)

    write_whole(path, fill, what="feed")
    return path, count
