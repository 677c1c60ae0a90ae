"""Tests of harmony.fileio: whole files or none, one-line errors, and the JSON Lines and CSV input
records."""

import os

import pytest

from harmony.errors import HarmonyError
from harmony.fileio import write_text_whole


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".part"))


def test_writes_utf8_text_exactly_and_makes_folders(tmp_path):
    out = tmp_path / "a" / "b" / "report.html"
    text = "café\r\nline two\n"  # newline="" keeps line endings as given
    assert write_text_whole(out, text) == out
    assert out.read_bytes() == text.encode("utf-8")
    assert _leftovers(out.parent) == []


def test_replaces_an_existing_file_whole(tmp_path):
    out = tmp_path / "feed.jsonl"
    out.write_text("old\n", encoding="utf-8")
    inode = out.stat().st_ino
    write_text_whole(out, "new\n")
    # os.replace swaps in a new file (POSIX rename(2)): a reader holding the old one keeps it.
    assert out.read_text(encoding="utf-8") == "new\n" and out.stat().st_ino != inode


def test_a_failed_write_keeps_the_old_file_and_leaves_no_temporary(tmp_path):
    out = tmp_path / "feed.jsonl"
    out.write_text("old\n", encoding="utf-8")
    with pytest.raises(UnicodeEncodeError):
        write_text_whole(out, "half \udcff")  # a lone surrogate cannot be written as UTF-8
    assert out.read_text(encoding="utf-8") == "old\n"
    assert _leftovers(tmp_path) == []


def test_unwritable_targets_are_one_line_errors(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(HarmonyError, match=r"^.*file/out\.csv: cannot write the palette export: .+$"):
        write_text_whole(blocker / "out.csv", "a", what="palette export")
    folder = tmp_path / "folder"
    folder.mkdir()
    with pytest.raises(HarmonyError, match=r"folder: cannot write the report: .+$"):
        write_text_whole(folder, "a", what="report")  # the target is a folder: rename fails
    assert _leftovers(tmp_path) == [] and os.listdir(folder) == []


def test_bytes_and_callback_writers_share_the_whole_file_rule(tmp_path):
    from harmony.fileio import write_bytes_whole, write_whole

    out = tmp_path / "a" / "b.bin"
    assert write_bytes_whole(out, b"\x00\x01", what="blob") == out
    assert out.read_bytes() == b"\x00\x01"

    def half_then_fail(tmp):
        with open(tmp, "wb") as handle:
            handle.write(b"half")
        raise OSError(28, "No space left on device")

    with pytest.raises(HarmonyError, match=r"b\.bin: cannot write the blob: No space left on device$"):
        write_whole(out, half_then_fail, what="blob")
    assert out.read_bytes() == b"\x00\x01"
    assert sorted(p.name for p in out.parent.iterdir()) == ["b.bin"]


def test_permissions_follow_the_umask_or_the_replaced_file(tmp_path):
    # A feed replaced every night must stay readable by the user that serves it (POSIX umask).
    old = os.umask(0o022)
    try:
        fresh = write_text_whole(tmp_path / "new.jsonl", "{}\n")
        assert fresh.stat().st_mode & 0o777 == 0o644
        served = tmp_path / "served.jsonl"
        served.write_text("old\n")
        served.chmod(0o664)
        write_text_whole(served, "new\n")
        assert served.stat().st_mode & 0o777 == 0o664 and served.read_text() == "new\n"
    finally:
        os.umask(old)


def test_json_objects_numbers_lines_and_names_each_problem():
    # JSON Lines (jsonlines.org): one value per line; the reasons are the standard json module's.
    import json

    from harmony.fileio import json_objects

    lines = ['{"a": 1}', "", "   ", "[1, 2]", "{oops", '{"b": "x"}\n']
    try:
        json.loads("{oops")
    except json.JSONDecodeError as exc:
        reason, col = exc.msg, exc.colno
    assert list(json_objects(lines)) == [
        (1, {"a": 1}, None), (4, None, "not a JSON object"), (5, None, f"not JSON: {reason}"), (6, {"b": "x"}, None)]
    got = list(json_objects(lines, not_object="must be a JSON object", column=True))
    assert got[1:3] == [(4, None, "must be a JSON object"), (5, None, f"not JSON: {reason} (column {col})")]


def test_csv_records_read_as_the_standard_dict_reader_and_refuse_long_rows():
    # Reference: the standard library's csv.DictReader (RFC 4180 quoting, blank lines skipped, a
    # short row lacking its last names, the line number of a row's last physical line), except
    # that a row longer than the header is refused instead of keeping its extra fields under None.
    import csv
    import io

    from harmony.fileio import csv_records

    text = ('a, b ,c\n'  # names are stripped
            '1,2,3\n'
            '\n'
            '4,"x\ny",6\n'  # a quoted field over two lines
            '7\n'  # short
            '8,9,10,11\n'  # long: an unquoted comma shifted the fields
            '12,13,14\n')
    header, records = csv_records(io.StringIO(text, newline=""))
    assert header == ["a", "b", "c"]
    got = list(records)
    reader = csv.DictReader(io.StringIO(text.replace(" b ", "b"), newline=""))
    want = []
    for row in reader:
        if None in row:
            want.append((reader.line_num, None, "4 fields, the header has 3"))
        else:
            want.append((reader.line_num, {k: v for k, v in row.items() if v is not None}, None))
    assert got == want
    assert got[3] == (7, None, "4 fields, the header has 3")  # line 7: the quoted field spans two
    assert csv_records(io.StringIO(""))[0] == []


def test_csv_records_name_an_unreadable_row_and_stop():
    # The csv module's own limit on one field (csv.field_size_limit(), 131,072 characters by
    # default) makes a row unreadable; the problem names its line.
    import csv
    import io

    from harmony.fileio import csv_records

    big = "x" * (csv.field_size_limit() + 1)
    _, records = csv_records(io.StringIO(f"a,b\n1,2\n3,{big}\n5,6\n", newline=""))
    got = list(records)
    assert got[0] == (2, {"a": "1", "b": "2"}, None)
    assert got[1][0] == 3 and got[1][1] is None and got[1][2].startswith("not readable CSV: field larger")
    assert len(got) == 2


def test_check_writable_fails_early_and_leaves_nothing(tmp_path):
    # The same one-line error write_text_whole gives at the end; nothing is left behind.
    from harmony.fileio import check_writable

    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    with pytest.raises(HarmonyError, match=r"a-file/t.toml: cannot write the tuned rules file: "):
        check_writable(blocker / "t.toml", "tuned rules file")
    with pytest.raises(HarmonyError, match=r"a-file/t.toml: cannot write the tuned rules file: "):
        write_text_whole(blocker / "t.toml", "x", "tuned rules file")
    check_writable(tmp_path / "new" / "t.toml", "tuned rules file")
    assert sorted(p.name for p in tmp_path.rglob("*")) == ["a-file", "new"]  # the folder made, no file
    check_writable("-")  # standard output


def test_repeated_name_finds_a_column_given_twice_and_lets_empty_ones_be():
    # Both sides: a repeated name is found; the empty names of a spreadsheet's trailing empty
    # columns ("a,b,,") are never read, and do not make the header refused.
    from harmony.fileio import repeated_name

    assert repeated_name(["product", "rank", "score", "rank"]) == "rank"
    assert repeated_name(["product", "rank", "", ""]) is None
    assert repeated_name(["product", "rank"]) is None


def test_csv_records_let_trailing_empty_cells_be_and_refuse_text_past_the_header():
    # Both sides of the shifted-row check: a spreadsheet's trailing empty cells past the header
    # carry nothing and are read as the row without them; any text past the header is refused.
    import io

    from harmony.fileio import csv_records

    _, records = csv_records(io.StringIO("a,b\n1,2,,\n3,4, \n5,6,x\n", newline=""))
    assert list(records) == [(2, {"a": "1", "b": "2"}, None), (3, {"a": "3", "b": "4"}, None),
                             (4, None, "3 fields, the header has 2")]


def test_names_and_keys_are_read_without_case_and_a_fold_collision_is_refused():
    # Shop exports capitalise headers ("ID", "Price"); a JSON object whose keys fold alike
    # ("id" and "ID") cannot say which value it means: that line is a problem, the others read.
    import io

    from harmony.fileio import csv_records, header_names, json_objects, repeated_name

    assert header_names([" Product ", "PARTNER", "rank", "Straße"]) == ["product", "partner", "rank", "strasse"]
    header, records = csv_records(io.StringIO("Product,Partner\nA,B\n", newline=""))
    assert header == ["product", "partner"] and [r for _, r, _ in records] == [{"product": "A", "partner": "B"}]
    assert repeated_name(header_names(["id", "ID"])) == "id"
    lines = ['{"Product": "A", "RANK": 1}', '{"id": "B", "ID": "C"}', '{"id": "D"}']
    assert list(json_objects(lines)) == [
        (1, {"product": "A", "rank": 1}, None),
        (2, None, "key 'id' is given twice (keys are read without case)"),
        (3, {"id": "D"}, None),
    ]
