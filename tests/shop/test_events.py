import json
from datetime import datetime, timezone

import pytest

from harmony.errors import EventsError
from harmony.shop.events import DEFAULT_EVENT_WEIGHTS, parse_event_weights, read_events


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def test_csv_with_session_column(tmp_path):
    log = read_events(
        write(
            tmp_path / "log.csv",
            "session,product,event,timestamp\n"
            "s1,A,view,2026-03-01T10:00:00Z\n"
            "s1,B,Purchase,2026-03-01T10:05:00Z\n"
            "s1,A,cart,\n"
            "s2,B,view,1772359200\n",
        )
    )
    assert log.rows == 4
    assert [e.event for e in log.events] == ["view", "purchase", "cart", "view"]
    assert [e.line for e in log.events] == [2, 3, 4, 5]
    # 2026-03-01T10:00:00Z as POSIX seconds, computed independently by the standard library.
    assert log.events[0].timestamp == datetime(2026, 3, 1, 10, 0, tzinfo=timezone.utc).timestamp()
    assert log.events[2].timestamp is None
    assert log.events[3].timestamp == 1772359200.0
    # Strongest event per product and session: A was viewed, then carted.
    assert log.sessions() == {"s1": {"A": 3.0, "B": 5.0}, "s2": {"B": 1.0}}
    assert log.counts() == {"view": 2, "purchase": 1, "cart": 1}


def test_jsonl_with_user_field_and_numbers(tmp_path):
    lines = [
        {"user": 7, "product": 101, "event": "view"},
        {"user": 7, "product": "102", "event": "cart", "timestamp": 10.5},
    ]
    path = write(tmp_path / "log.jsonl", "\n".join(json.dumps(x) for x in lines) + "\n\n")
    log = read_events(path)
    assert [(e.session, e.product, e.weight) for e in log.events] == [("7", "101", 1.0), ("7", "102", 3.0)]


def test_unknown_products_are_counted_not_fatal(tmp_path):
    path = write(tmp_path / "log.csv", "user,product,event\nu,A,view\nu,Z,view\nv,Z,cart\nv,Y,view\n")
    log = read_events(path, known_products={"A"})
    assert [e.product for e in log.events] == ["A"]
    assert log.unknown == (("Z", 2), ("Y", 1))
    assert log.unknown_rows == 3


def test_custom_weights_and_zero_weight_ignores(tmp_path):
    path = write(tmp_path / "log.csv", "session,product,event\ns,A,view\ns,B,purchase\n")
    weights = parse_event_weights(["view=0", "purchase=2.5"])
    assert weights == {"view": 0.0, "cart": DEFAULT_EVENT_WEIGHTS["cart"], "purchase": 2.5}
    log = read_events(path, weights=weights)
    assert [(e.product, e.weight) for e in log.events] == [("B", 2.5)]
    assert log.ignored == 1


@pytest.mark.parametrize(
    "items, match",
    [
        (["view"], r"expected KIND=WEIGHT, got 'view'"),
        (["=1"], r"no event kind before '=' in '=1'"),
        (["wishlist=-2"], r"weight of 'wishlist' must be a finite number >= 0"),
        (["view=x"], r"weight of 'view' is not a number"),
        (["view=-1"], r"weight of 'view' must be a finite number >= 0"),
        (["view=nan"], r"weight of 'view' must be a finite number >= 0"),
        (["view=0", "cart=0", "purchase=0"], r"every event weight is 0"),
    ],
)
def test_bad_weights(items, match):
    with pytest.raises(EventsError, match=match):
        parse_event_weights(items)


@pytest.mark.parametrize(
    "name, text, match",
    [
        ("log.csv", "", r"log.csv: empty file, expected a header row"),
        ("log.csv", "session,item,event\n", r"log.csv: header lacks column product"),
        ("log.csv", "product,event\n", r"header lacks column session \(or user\)"),
        ("log.csv", "session,product,event\n", r"log.csv: no interactions"),
        ("log.csv", "session,product,event\ns,A,view\ns,A,\n", r"log.csv: 1 bad row: line 3: empty event$"),
        (
            "log.csv",
            "session,product,event,timestamp\ns,A,wishlist,soon\n",
            r"line 2: timestamp 'soon' is neither ISO 8601 nor a number",
        ),
        ("log.csv", "session,product,event\ns,,view\n", r"line 2: empty product"),
        ("log.csv", "session,product,event\n,A,view\n", r"line 2: empty session \(or user\)"),
        ("log.csv", "session,product,event\ns,A,view,extra\n", r"line 2: more fields than the header has"),
        (
            "log.csv",
            "session,product,event,timestamp\ns,A,view,yesterday\n",
            r"line 2: timestamp 'yesterday' is neither ISO 8601 nor a number",
        ),
        ("log.jsonl", '{"session": "s", "product": "A", "event": "view"}\n{oops\n', r"log.jsonl: 1 bad row: line 2: not JSON"),
        ("log.jsonl", "[1, 2]\n", r"line 1: expected a JSON object"),
        ("log.jsonl", '{"product": "A", "event": "view"}\n', r"line 1: empty session"),
        ("log.txt", "session,product,event\n", r"log.txt: unknown log format '.txt'"),
    ],
)
def test_bad_files(tmp_path, name, text, match):
    with pytest.raises(EventsError, match=match):
        read_events(write(tmp_path / name, text))


def test_many_bad_rows_are_summarised_on_one_line(tmp_path):
    rows = "".join(f"s{i},,view\n" for i in range(8))
    with pytest.raises(EventsError, match=r"8 bad rows: line 2: .*; and 3 more$") as info:
        read_events(write(tmp_path / "log.csv", "session,product,event\n" + rows))
    assert "\n" not in str(info.value)


def test_missing_and_binary_files(tmp_path):
    with pytest.raises(EventsError, match=r"nope.csv: no such file"):
        read_events(tmp_path / "nope.csv")
    (tmp_path / "logs.csv").mkdir()
    with pytest.raises(EventsError, match=r"logs.csv: is a folder, expected a log file"):
        read_events(tmp_path / "logs.csv")
    (tmp_path / "bin.csv").write_bytes(b"session,product,event\n\xff\xfe,A,view\n")
    with pytest.raises(EventsError, match=r"bin.csv: not UTF-8 text"):
        read_events(tmp_path / "bin.csv")


def test_any_kind_can_be_weighed(tmp_path):
    weights = parse_event_weights(["Wishlist=2", "click=0"])
    assert weights == {**DEFAULT_EVENT_WEIGHTS, "wishlist": 2.0, "click": 0.0}
    path = write(tmp_path / "log.csv", "session,product,event\ns,A,wishlist\ns,B,click\ns,C,view\n")
    log = read_events(path, weights=weights)
    assert [(e.product, e.event, e.weight) for e in log.events] == [("A", "wishlist", 2.0), ("C", "view", 1.0)]
    assert log.ignored == 1 and log.skipped == ()


def test_kinds_without_a_weight_are_counted_not_fatal(tmp_path):
    path = write(
        tmp_path / "log.jsonl",
        "\n".join(
            json.dumps({"session": "s", "product": p, "event": e})
            for p, e in [("A", "view"), ("B", "click"), ("C", "WISHLIST"), ("D", "wishlist"), ("E", "click"),
                         ("F", "share"), ("G", "wishlist"), ("Z", "click")]
        ),
    )
    log = read_events(path, known_products={"A", "B", "C", "D", "E", "F", "G"})
    assert [e.product for e in log.events] == ["A"]
    # Most frequent first; click and wishlist tie at 3 rows and keep the order they first appear in.
    assert log.skipped == (("click", 3), ("wishlist", 3), ("share", 1))
    assert log.skipped_rows == 7 and log.rows == 8
    # Rows of kinds without a weight are not looked up in the catalogue.
    assert log.unknown == ()


def test_unknown_ids_keep_first_appearance_among_equal_counts(tmp_path):
    path = write(tmp_path / "log.csv", "user,product,event\nu,Q,view\nu,P,view\nu,P,cart\nu,R,view\nu,Q,view\n")
    assert read_events(path, known_products=set()).unknown == (("Q", 2), ("P", 2), ("R", 1))


def test_csv_reads_as_the_standard_dict_reader(tmp_path):
    # Reference: the standard library's csv.DictReader over the same text (blank lines skipped,
    # short rows padded with None, the line a row ends on), with the header trimmed and
    # case-folded as the module notes say; a column that is not read (note) is ignored.
    import csv
    import io

    text = (" Product ,USER,event,note,timestamp,session\n"
            "A,u1,view,s0,2026-03-01T10:00:00Z,s1\n"
            "\n"
            "B,u1,\"pur\nchase\",s0,,s2\n"  # an event over two lines: its own kind
            "C,u2, CART ,s0,1772359200,\n"  # the last session column empty: the user counts
            "D,u3,view\n"  # short: no session column at all
            "\n\n"
            "E,u4,view,s0,  ,s3\n")
    log = read_events(write(tmp_path / "log.csv", text), weights={"view": 1, "cart": 3, "pur\nchase": 5})
    reader = csv.DictReader(io.StringIO(text))
    reader.fieldnames = [h.strip().casefold() for h in reader.fieldnames]
    want = []
    for row in reader:
        session = (row["session"] or "").strip() or (row["user"] or "").strip()
        stamp = (row["timestamp"] or "").strip()
        stamp = None if not stamp else float(stamp) if ":" not in stamp else datetime.fromisoformat(stamp).timestamp()
        want.append((session, row["product"].strip(), row["event"].strip().casefold(), stamp, reader.line_num))
    assert [(e.session, e.product, e.event, e.timestamp, e.line) for e in log.events] == want
    assert [e.line for e in log.events] == [2, 5, 6, 7, 10]


def test_a_column_named_twice_is_refused(tmp_path):
    # Which of the two an export meant cannot be known: the header is refused (case and spaces
    # aside, as the header is read).
    path = write(tmp_path / "log.csv", "session,product,event,Session\ns,A,view,t\n")
    with pytest.raises(EventsError, match=r"log.csv: header gives column 'session' twice"):
        read_events(path)


def test_short_and_long_rows_are_named(tmp_path):
    path = write(tmp_path / "log.csv", "session,product,event\ns,A\ns,B,view,x\n\ns,C,view\n")
    with pytest.raises(EventsError, match=r"2 bad rows: line 2: empty event; line 3: more fields than the header has$"):
        read_events(path)


def test_trailing_empty_cells_past_the_header_are_read_and_text_there_is_refused(tmp_path):
    # Spreadsheets often save empty cells past the last named column ("s,A,view,,"): those rows
    # read as without them; a row with text there has shifted fields and is named.
    path = write(tmp_path / "log.csv", "session,product,event\ns,A,view,,\ns,B,cart, \n")
    assert [(e.product, e.event) for e in read_events(path).events] == [("A", "view"), ("B", "cart")]
    path = write(tmp_path / "log.csv", "session,product,event\ns,A,view,,x\n")
    with pytest.raises(EventsError, match=r"line 2: more fields than the header has"):
        read_events(path)


def test_a_short_row_whose_event_is_no_kind_is_a_missing_field(tmp_path):
    # A dropped middle field moves the next one into the event column: with the row short of the
    # header, an unknown kind there is named as a missing field, not counted as a kind. The other
    # side: a short row of a known kind (a spreadsheet's trimmed empty timestamp) reads, and a
    # full row of an unknown kind is counted as before.
    header = "session,product,event,timestamp\n"
    path = write(tmp_path / "log.csv", header + "s,A,view,2026-03-01T10:00:00Z\ns,B,2026-03-01T10:05:00Z\n")
    with pytest.raises(EventsError, match=r"log.csv: 1 bad row: line 3: 3 fields, the header has 4, and its "
                                          r"event '2026-03-01t10:05:00z' is no known kind: a field is missing$"):
        read_events(path)
    path = write(tmp_path / "log.csv", header + "s,A,view\ns,B,share,2026-03-01T10:05:00Z\n")
    log = read_events(path)
    assert [(e.product, e.event, e.timestamp) for e in log.events] == [("A", "view", None)]
    assert log.skipped == (("share", 1),)
