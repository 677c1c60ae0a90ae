"""Interaction logs: read and validate the sessions in which shoppers looked at and bought products.

A log is a CSV file with a header row, or a JSONL file with one JSON object per line. Each row
holds one interaction:

``session`` (or ``user``)
    who interacted; products that share a session were combined by the same shopper.
``product``
    the product id, as in the catalogue.
``event``
    the kind of interaction, any word (any case): :data:`DEFAULT_EVENT_WEIGHTS` weighs ``view``,
    ``cart`` and ``purchase``, and a caller may weigh other kinds too (``click``, ``wishlist``,
    ...; a weight of 0 ignores that kind). Rows of a kind without a weight are not an error (real
    logs hold more kinds than an evaluation needs): they are left out, counted by kind and reported.
``timestamp`` (optional)
    ISO 8601 (``2026-03-01T10:15:00Z``) or seconds since the Unix epoch; kept for ordering.

Other columns are ignored. Every malformed row (empty session, product or event, bad timestamp)
is reported with the file and line; ids that are not in the catalogue are not an error (logs
outlive products) but are counted and reported.
"""

import csv
import math
from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime, timezone
from operator import itemgetter
from pathlib import Path

from harmony.errors import EventsError
from harmony.fileio import header_names, json_objects, repeated_name, shifted

__all__ = [
    "DEFAULT_EVENT_WEIGHTS",
    "Event",
    "EventLog",
    "read_events",
    "parse_event_weights",
]

#: Weight of each kind of interaction: a purchase says more than a view. A choice of this project,
#: not a published value (common practice is only that deeper funnel steps weigh more); callers
#: override it with ``weights=`` (the CLI with ``--event-weight purchase=5``).
DEFAULT_EVENT_WEIGHTS = {"view": 1.0, "cart": 3.0, "purchase": 5.0}

#: At most this many row problems are named in one error message (the count says how many more).
_MAX_PROBLEMS_SHOWN = 5


@dataclass(frozen=True)
class Event:
    """One interaction of a log, with the line it came from."""

    session: str
    product: str
    event: str
    weight: float
    timestamp: float | None
    line: int


@dataclass(frozen=True)
class EventLog:
    """A validated interaction log.

    Attributes
    ----------
    path : str
        The file read.
    events : tuple of Event
        Every valid interaction whose product is known (all of them when no catalogue was given)
        and whose weight is above 0, in file order.
    rows : int
        Number of data rows in the file.
    unknown : tuple of (str, int)
        Product ids not in the catalogue with the number of rows that named them, most frequent
        first (ties in order of first appearance); their rows are left out of ``events``. Only
        rows that would otherwise have been kept are looked up (a weighted kind of event).
    ignored : int
        Rows left out because their kind of event has weight 0.
    skipped : tuple of (str, int)
        Kinds of event that have no weight, with the number of rows of each, most frequent
        first (ties in order of first appearance); their rows are left out of ``events``.
    weights : dict of str to float
        The weight of each kind of event used.
    """

    path: str
    events: tuple
    rows: int
    unknown: tuple = ()
    ignored: int = 0
    weights: dict = field(default_factory=lambda: dict(DEFAULT_EVENT_WEIGHTS))
    skipped: tuple = ()

    @property
    def unknown_rows(self):
        """Rows that named a product id not in the catalogue."""
        return sum(n for _, n in self.unknown)

    @property
    def skipped_rows(self):
        """Rows left out because their kind of event has no weight."""
        return sum(n for _, n in self.skipped)

    def sessions(self):
        """Each session's products with the strongest weight the session gave each of them.

        Returns
        -------
        dict of str to dict of str to float
            ``{session: {product: weight}}``, sessions and products in order of first appearance.
        """
        out = {}
        for ev in self.events:
            products = out.setdefault(ev.session, {})
            if ev.weight > products.get(ev.product, -math.inf):
                products[ev.product] = ev.weight
        return out

    def counts(self):
        """Number of kept events of each kind, ``{"view": n, ...}``."""
        return dict(Counter(ev.event for ev in self.events))


def parse_event_weights(items, where="--event-weight"):
    """Turn ``["purchase=5", "wishlist=2"]`` into a weight table: :data:`DEFAULT_EVENT_WEIGHTS` updated.

    An item may name any kind of event (``click=0.5``), not only the default ones; a weight of 0
    ignores that kind. Kinds are compared without case.

    Raises
    ------
    EventsError
        For an item without ``=`` or without a kind, or a weight that is not a finite number >= 0,
        or when every weight is 0.
    """
    weights = dict(DEFAULT_EVENT_WEIGHTS)
    for item in items:
        name, sep, value = str(item).partition("=")
        name = name.strip().casefold()
        if not sep:
            raise EventsError(f"{where}: expected KIND=WEIGHT, got {item!r}")
        if not name:
            raise EventsError(f"{where}: no event kind before '=' in {item!r}")
        try:
            weights[name] = float(value)
        except ValueError:
            raise EventsError(f"{where}: weight of {name!r} is not a number: {value!r}") from None
    _check_weights(weights, where)
    return weights


def _check_weights(weights, where):
    for name, w in weights.items():
        if not isinstance(w, (int, float)) or not math.isfinite(w) or w < 0:
            raise EventsError(f"{where}: weight of {name!r} must be a finite number >= 0, got {w!r}")
    if not any(w > 0 for w in weights.values()):
        raise EventsError(f"{where}: every event weight is 0, nothing would be left to evaluate")


def _parse_timestamp(value):
    """Seconds since the epoch from ISO 8601 text or a number; naive times are taken as UTC."""
    if value is None:
        return None
    if isinstance(value, bool):
        raise ValueError("timestamp must be ISO 8601 text or a number")
    if isinstance(value, (int, float)):
        out = float(value)
    else:
        text = str(value).strip()
        if not text:
            return None
        out = None
        if ":" not in text:  # ISO 8601 times hold a colon, numbers never do
            try:
                out = float(text)
            except ValueError:
                pass
        if out is None:
            try:
                moment = datetime.fromisoformat(text)
            except ValueError:
                raise ValueError(f"timestamp {text!r} is neither ISO 8601 nor a number") from None
            if moment.tzinfo is None:
                moment = moment.replace(tzinfo=timezone.utc)
            out = moment.timestamp()
    if not math.isfinite(out):
        raise ValueError(f"timestamp {value!r} is not finite")
    return out


#: The columns a row is read from, in the order of the tuples of :func:`_csv_rows` and :func:`_jsonl_rows`.
_FIELDS = ("session", "user", "product", "event", "timestamp")


def _csv_rows(path):
    """``(line, (session, user, product, event, timestamp), short)`` of each non-blank row, as
    text stripped at both ends ("" for a missing field; a column named twice is refused), or
    ``(line, error, None)``; ``short`` says how a row with fewer fields than the header falls
    short (a spreadsheet's trimmed empty cells, or a field dropped), else None."""
    with open(path, newline="", encoding="utf-8-sig") as handle:
        reader = csv.reader(handle)
        first = next(reader, None)
        if first is None:
            raise EventsError(f"{path}: empty file, expected a header row")
        header = header_names(first)
        _check_header(path, header)
        width = len(header)
        column = {name: i for i, name in enumerate(header)}
        # Each row is padded with "" to width + 1 fields: a missing column reads the last.
        pick = itemgetter(*(column.get(name, width) for name in _FIELDS))
        for row in reader:
            if shifted(row, width):
                yield reader.line_num, "more fields than the header has", None
            elif row:
                short = f"{len(row)} fields, the header has {width}" if len(row) < width else None
                row += [""] * (width + 1 - len(row))
                yield reader.line_num, tuple(map(str.strip, pick(row))), short


def _jsonl_rows(path):
    """:func:`_csv_rows` of a JSONL log (keys compared without case); the timestamp as given, and
    no row falls short."""
    with open(path, encoding="utf-8-sig") as handle:
        for number, obj, problem in json_objects(handle, not_object="expected a JSON object"):
            if problem:
                yield number, problem, None
                continue
            yield number, (*(_text(obj.get(name)) for name in _FIELDS[:-1]), obj.get("timestamp")), None


def _check_header(path, header):
    if (twice := repeated_name(header)) is not None:
        raise EventsError(f"{path}: header gives column {twice!r} twice")
    missing = []
    if "session" not in header and "user" not in header:
        missing.append("session (or user)")
    missing += [name for name in ("product", "event") if name not in header]
    if missing:
        raise EventsError(f"{path}: header lacks column {', '.join(missing)} (has: {', '.join(header)})")


def _text(value):
    if value is None or isinstance(value, (dict, list, bool)):
        return ""
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    return str(value).strip()


def read_events(path, weights=None, known_products=None):
    """Read and validate an interaction log (CSV, or JSONL for ``.jsonl``/``.ndjson``/``.json``).

    Parameters
    ----------
    path : str or Path
        The log file.
    weights : mapping of str to float, optional
        Weight of each event kind (compared without case). Rows of kinds not in the mapping are
        left out and counted in ``EventLog.skipped``. Default :data:`DEFAULT_EVENT_WEIGHTS`.
    known_products : collection of str, optional
        The catalogue's product ids. Rows naming other ids are counted in ``EventLog.unknown``
        and left out (only rows of a kind with a weight above 0 are looked up).

    Returns
    -------
    EventLog

    Raises
    ------
    EventsError
        When the file is missing or unreadable, lacks a required column, has no data rows, or has
        rows with an empty session, product or event, or a bad timestamp. The
        message names the file and the line of each bad row (the first few, and how many in all).
    """
    path = Path(path)
    weights = {str(k).casefold(): v for k, v in (DEFAULT_EVENT_WEIGHTS if weights is None else weights).items()}
    _check_weights(weights, str(path))
    if path.is_dir():
        raise EventsError(f"{path}: is a folder, expected a log file")
    if not path.is_file():
        raise EventsError(f"{path}: no such file")
    suffix = path.suffix.casefold()
    if suffix == ".csv":
        rows = _csv_rows(path)
    elif suffix in (".jsonl", ".ndjson", ".json"):
        rows = _jsonl_rows(path)
    else:
        raise EventsError(f"{path}: unknown log format {path.suffix!r}, expected .csv or .jsonl")

    known = None if known_products is None else set(known_products)
    events, problems, unknown, skipped = [], [], Counter(), Counter()
    n_rows = ignored = 0
    try:
        for line, row, short in rows:
            n_rows += 1
            if isinstance(row, str):
                problems.append(f"line {line}: {row}")
                continue
            session, user, product, kind, stamp = row
            session = session or user
            kind = kind.casefold()
            if not session:
                problems.append(f"line {line}: empty session (or user)")
                continue
            if not product:
                problems.append(f"line {line}: empty product")
                continue
            if not kind:
                problems.append(f"line {line}: empty event")
                continue
            try:
                stamp = _parse_timestamp(stamp)
            except ValueError as exc:
                problems.append(f"line {line}: {exc}")
                continue
            if kind not in weights:
                if short:  # a dropped field has moved the next one into the event column
                    problems.append(f"line {line}: {short}, and its event {kind!r} is no known kind: "
                                    "a field is missing")
                    continue
                skipped[kind] += 1
                continue
            if weights[kind] <= 0:
                ignored += 1
                continue
            if known is not None and product not in known:
                unknown[product] += 1
                continue
            events.append(Event(session, product, kind, float(weights[kind]), stamp, line))
    except UnicodeDecodeError as exc:
        raise EventsError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except csv.Error as exc:
        raise EventsError(f"{path}: not a readable CSV file: {exc}") from None
    except OSError as exc:
        raise EventsError(f"{path}: cannot read: {exc.strerror or exc}") from None

    if problems:
        shown = "; ".join(problems[:_MAX_PROBLEMS_SHOWN])
        more = len(problems) - _MAX_PROBLEMS_SHOWN
        tail = f"; and {more} more" if more > 0 else ""
        raise EventsError(f"{path}: {len(problems)} bad row{'s' if len(problems) != 1 else ''}: {shown}{tail}")
    if n_rows == 0:
        raise EventsError(f"{path}: no interactions in the file")
    return EventLog(
        path=str(path),
        events=tuple(events),
        rows=n_rows,
        unknown=_by_count(unknown),
        ignored=ignored,
        weights=dict(weights),
        skipped=_by_count(skipped),
    )


def _by_count(counter):
    """``((key, n), ...)`` most frequent first; a stable sort keeps ties in order of first appearance."""
    return tuple(sorted(counter.items(), key=lambda kv: -kv[1]))
