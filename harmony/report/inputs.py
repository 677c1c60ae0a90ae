"""What the report reads besides the store: feeds in every format ``harmony feed`` writes, and the
JSON of ``harmony evaluate --json``.
"""

import csv
import io
import json
import math
from pathlib import Path

from harmony.errors import HarmonyError
from harmony.fileio import json_objects

__all__ = ["FEED_KEYS", "read_feed", "read_evaluation"]

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
    reader = csv.DictReader(io.StringIO(text, newline=""))
    for row in reader:
        yield f"{path}:{reader.line_num}", row


def _parquet_records(path):
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise HarmonyError("reading a Parquet feed needs pyarrow: pip install 'harmony[parquet]'") from None
    try:
        table = pq.read_table(path)
    except (OSError, ValueError) as exc:
        raise HarmonyError(f"{path}: not a readable Parquet feed: {exc}") from None
    for n, row in enumerate(table.to_pylist(), start=1):
        yield f"{path}: row {n}", row


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
        ``FILE:LINE: reason`` (``FILE: row N`` for Parquet) for a row that lacks a key or whose
        score or rank is not a number; an unreadable file or unknown suffix.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".jsonl", ".ndjson", ".csv", ".parquet"):
        raise HarmonyError(f"{path}: cannot tell the feed format from the suffix (use .jsonl, .csv or .parquet)")
    if suffix == ".parquet":
        records = _parquet_records(path)
    else:
        try:
            text = path.read_text(encoding="utf-8-sig")
        except OSError as exc:
            raise HarmonyError(f"{path}: cannot read feed: {exc.strerror or exc}") from None
        except UnicodeDecodeError as exc:
            raise HarmonyError(f"{path}: not UTF-8 text (byte {exc.start})") from None
        records = _csv_records(path, text) if suffix == ".csv" else _jsonl_records(path, text)
    rows = []
    for where, row in records:
        missing = [k for k in FEED_KEYS if k not in row or row[k] is None]
        if missing:
            raise HarmonyError(f"{where}: feed row lacks key {missing[0]!r}")
        try:
            score = float(row["score"])
            rank = int(row["rank"])
        except (TypeError, ValueError):
            raise HarmonyError(f"{where}: score and rank must be numbers") from None
        if not math.isfinite(score):
            raise HarmonyError(f"{where}: score must be finite")
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
