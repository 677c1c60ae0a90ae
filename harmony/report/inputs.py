"""What the report reads besides the store: feeds in every format ``harmony feed`` writes, and the
JSON of ``harmony evaluate --json``.
"""

import io
import json
import math
from pathlib import Path

from harmony.errors import HarmonyError
from harmony.fileio import csv_records, json_objects, repeated_name

__all__ = ["FEED_KEYS", "feed_records", "feed_rank", "read_feed", "read_evaluation"]

#: Keys every feed row must carry (the feed format of ``harmony feed``); ``pinned`` is optional
#: (feeds written before curation existed lack it).
FEED_KEYS = ("product", "category", "partner", "partner_category", "rank", "score", "reason")

_TRUE = {"true", "1", "yes"}
_FALSE = {"false", "0", "no", ""}


def _jsonl_records(path, text):
    for n, row, problem in json_objects(text.splitlines(), not_object="a feed row must be a JSON object"):
        if problem:
            raise HarmonyError(f"{path}:{n}: {problem}")
        yield f"{path}:{n}", row


def _csv_records(path, text):
    header, records = csv_records(io.StringIO(text, newline=""))
    if (twice := repeated_name(header)) is not None:
        raise HarmonyError(f"{path}:1: column {twice!r} appears twice")
    for n, row, problem in records:
        if problem:
            raise HarmonyError(f"{path}:{n}: {problem}")
        yield f"{path}:{n}", row


def _parquet_records(path):
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise HarmonyError("reading a Parquet feed needs pyarrow: pip install 'harmony[parquet]'") from None
    n = 0
    try:
        for batch in pq.ParquetFile(path).iter_batches():  # a row group at a time, not the whole table
            for row in batch.to_pylist():
                n += 1
                yield f"{path}: row {n}", row
    except (OSError, ValueError) as exc:
        raise HarmonyError(f"{path}: not a readable Parquet feed (after row {n}): {exc}") from None


def feed_records(path):
    """``(where, row)`` of each row of a feed file, by suffix: JSON Lines (``.jsonl``,
    ``.ndjson``), CSV with a header (``.csv``) or Parquet (``.parquet``), as ``harmony feed``
    writes them; ``where`` names the file and line (``FILE: row N`` for Parquet) for the caller's
    errors. Rows are dicts as read, not checked.

    Raises
    ------
    HarmonyError
        An unknown suffix, an unreadable file, or a line that is not a JSON object or a CSV row
        of the header's width.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".jsonl", ".ndjson", ".csv", ".parquet"):
        raise HarmonyError(f"{path}: cannot tell the feed format from the suffix (use .jsonl, .csv or .parquet)")
    if suffix == ".parquet":
        return _parquet_records(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot read feed: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise HarmonyError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    return _csv_records(path, text) if suffix == ".csv" else _jsonl_records(path, text)


def feed_rank(value, where):
    """A feed row's rank as an int: a whole number from 1 (``3``, ``"3"``, ``3.0``), else a
    HarmonyError naming ``where``."""
    try:
        number = float(str(value).strip()) if not isinstance(value, bool) else math.nan
    except ValueError:
        number = math.nan
    if not (number >= 1 and number.is_integer()):
        raise HarmonyError(f"{where}: rank must be a whole number from 1, got {value!r}")
    return int(number)


def _pinned(value, where):
    if value is None or isinstance(value, bool):
        return bool(value)
    text = str(value).strip().casefold()
    if text in _TRUE | _FALSE:
        return text in _TRUE
    raise HarmonyError(f"{where}: pinned must be true or false, got {value!r}")


def read_feed(path):
    """Rows of a feed file (JSONL, CSV or Parquet, by suffix) as dicts with :data:`FEED_KEYS`
    and ``pinned``.

    Raises
    ------
    HarmonyError
        ``FILE:LINE: reason`` (``FILE: row N`` for Parquet) for a row that lacks a key, whose
        rank is not a whole number from 1 or whose score is not in [0, 1]; an unreadable file or
        unknown suffix.
    """
    rows = []
    for where, row in feed_records(path):
        missing = [k for k in FEED_KEYS if k not in row or row[k] is None]
        if missing:
            raise HarmonyError(f"{where}: feed row lacks key {missing[0]!r}")
        rank = feed_rank(row["rank"], where)
        try:
            score = float(row["score"])
        except (TypeError, ValueError):
            raise HarmonyError(f"{where}: score must be a number, got {row['score']!r}") from None
        if not 0.0 <= score <= 1.0:  # harmony's scores, plain or blended, lie in [0, 1]
            raise HarmonyError(f"{where}: score must lie in [0, 1], got {row['score']!r}")
        rows.append({**row, "product": str(row["product"]), "partner": str(row["partner"]),
                     "category": str(row["category"]), "partner_category": str(row["partner_category"]),
                     "score": score, "rank": rank, "reason": str(row["reason"]),
                     "pinned": _pinned(row.get("pinned"), where)})
    return rows


def _number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def read_evaluation(path):
    """The report's evaluation table from the JSON of ``harmony evaluate --json``.

    Returns
    -------
    tuple of (heading, (header, rows))
        One table, in the layout of the evaluation page (method, each metric and its interval).

    Raises
    ------
    HarmonyError
        ``FILE: key: reason`` for missing or malformed keys.
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot read the evaluation: {exc.strerror or exc}") from None
    except (ValueError, UnicodeDecodeError) as exc:
        raise HarmonyError(f"{path}: not JSON ({exc})") from None
    if not isinstance(data, dict) or not isinstance(data.get("results"), list) or not data["results"]:
        raise HarmonyError(f"{path}: results: missing or empty (expected the JSON of 'harmony evaluate --json')")
    level = data.get("confidence_level", 0.95)
    pct = f"{float(level) * 100:g} %" if _number(level) else "CI"
    metrics = (("auc", "AUC"), ("ndcg_at_10", "NDCG@10"), ("hit_at_10", "hit@10"))
    header = ["method"]
    for _key, label in metrics:
        header += [label, f"{label} {pct} CI"]
    rows = []
    for i, result in enumerate(data["results"]):
        where = f"{path}: results[{i}]"
        if not isinstance(result, dict) or not isinstance(result.get("name"), str):
            raise HarmonyError(f"{where}.name: missing")
        row = [result["name"]]
        for key, _label in metrics:
            value, ci = result.get(key), result.get(f"{key}_ci")
            if not _number(value):
                raise HarmonyError(f"{where}.{key}: missing or not a number")
            ok = isinstance(ci, list) and len(ci) == 2 and all(_number(v) for v in ci)
            row += [f"{value:.3f}", f"{ci[0]:.3f}-{ci[1]:.3f}" if ok else ""]
        rows.append(tuple(row))
    heading = f"Ranking real partners: {data.get('events', '?')} events, {data.get('anchors', '?')} products ({path.name})"
    return ((heading, (tuple(header), tuple(rows))),)
