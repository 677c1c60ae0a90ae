"""Bad catalogue rows, full disks, closed and full standard output, damaged and read-only stores,
odd output paths, hostile numbers and formulas: each ends in one line, and nothing is lost."""

import csv
import errno
import io
import json
import os
import socket
import sqlite3
import stat
import subprocess
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from faultkit import error_lines, make_shop, run_cli, store_state

from harmony.cli import main
from harmony.errors import HarmonyError
from harmony.fileio import write_text_whole
from harmony.shop.engine import run_extraction
from harmony.shop.store import Store


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """A shop of 10 generated photos and its store."""
    folder = tmp_path_factory.mktemp("shop")
    csv_path = make_shop(folder, n=10)
    run_extraction(csv_path, folder / "shop.db", workers=1, progress=False)
    return folder, csv_path, folder / "shop.db"


def _copy_store(built, tmp_path, name="s.db"):
    folder, csv_path, db = built
    target = tmp_path / name
    src, dst = sqlite3.connect(db), sqlite3.connect(target)
    try:
        src.backup(dst)
    finally:
        src.close()
        dst.close()
    return target


def _invoke(args):
    result = CliRunner().invoke(main, [str(a) for a in args])
    assert "Traceback" not in result.output
    return result


# -- 2. bad CSV rows; mass removal ---------------------------------------------------------


def test_an_oversized_field_and_a_stray_quote_never_end_the_catalogue(built, tmp_path):
    folder, csv_path, db = built
    lines = csv_path.read_text().splitlines()
    # csv.field_size_limit() is 131,072 characters by default (Python documentation, csv module).
    lines.insert(3, "BIG,Huge,Rug,5,1,img/s0.jpg," + "x" * 200_000)
    lines.insert(6, 'Q1,"Bad" quote,Rug,5,1,img/s0.jpg')
    lines.insert(8, 'Q2,"open,Rug,5,1,img/s0.jpg')
    bad = folder / "bad.csv"
    bad.write_text("\n".join(lines) + "\n")
    store = _copy_store(built, tmp_path)
    result = _invoke(["extract", bad, "--db", store, "--workers", "1"])
    assert result.exit_code == 0, result.output
    assert f"warning: {bad}:4: row: not valid CSV: field larger than field limit (131072)" in result.stderr
    assert f"warning: {bad}:7: row: not valid CSV: ',' expected after '\"'" in result.stderr
    assert f"warning: {bad}:9: row: not valid CSV: unexpected end of data" in result.stderr
    assert result.stdout.startswith("10 products") and " 0 removed" in result.stdout
    assert store_state(store) == store_state(db)  # every product of the file is still there


def test_a_cut_short_catalogue_is_refused_with_the_count(built, tmp_path):
    folder, csv_path, db = built
    cut = folder / "cut.csv"
    cut.write_text("\n".join(csv_path.read_text().splitlines()[:8]) + "\n")  # 7 of 10 rows
    store = _copy_store(built, tmp_path)
    result = _invoke(["extract", cut, "--db", store, "--workers", "1"])
    assert result.exit_code == 2
    assert error_lines(result.stderr) == [
        f"error: {store}: the catalogue cut.csv would remove 3 of the store's 10 products (30 %, over the "
        f"limit of 20 %); store left unchanged (a cut-short export? if the removal is meant, raise the "
        f"limit with --max-removal PERCENT)"
    ]
    assert store_state(store) == store_state(db)
    meant = _invoke(["extract", cut, "--db", store, "--workers", "1", "--max-removal", "30"])
    assert meant.exit_code == 0 and "3 removed" in meant.stdout


def test_a_stock_past_64_bits_is_a_row_problem(built, tmp_path):
    folder, csv_path, db = built
    lines = csv_path.read_text().splitlines()
    lines[1] = lines[1].rsplit(",", 2)[0] + f",{2**63},img/s0.jpg"
    lines[2] = lines[2].rsplit(",", 2)[0] + f",{2**63 - 1},img/s1.jpg"
    big = folder / "big.csv"
    big.write_text("\n".join(lines) + "\n")
    store = _copy_store(built, tmp_path)
    result = _invoke(["extract", big, "--db", store, "--workers", "1", "--max-removal", "10"])
    assert result.exit_code == 0, result.output
    assert (f"warning: {big}:2: stock: stock {2**63} is larger than {2**63 - 1} "
            f"(the store keeps 64-bit whole numbers)") in result.stderr
    with Store(store) as s:
        assert s.product("S01").stock == 2**63 - 1 and len(s) == 10
        assert s.product("S00").stock == 0  # its row skipped: kept as stored, with its old stock


# -- 4. full disks, closed and full standard output, damaged stores --------------------------


def test_a_full_disk_during_a_store_write_is_one_line(built, tmp_path):
    # SQLite's max_page_count makes a write fail with SQLITE_FULL, the error of a full disk
    # (SQLite documentation, "PRAGMA max_page_count").
    store_path = _copy_store(built, tmp_path)
    with Store(store_path) as store:
        before = store.counts()
        pages = store._db.execute("PRAGMA page_count").fetchone()[0]
        store._db.execute(f"PRAGMA max_page_count = {pages}")
        shas = [row[0] for row in store._db.execute("SELECT sha256 FROM images")]
        payload = [(sha, None, "x" * 100_000) for sha in shas]  # far more than one free page
        with pytest.raises(HarmonyError) as caught:
            store.record(payload, "another-key")
        message = str(caught.value)
        assert "cannot rollback" not in message and "\n" not in message
        assert message == f"{store_path}: cannot write: the disk is full; nothing of this step was stored"
        assert store.counts() == before
        store.record([(shas[0], None, "short")], "another-key")  # a step that fits still works (the store is usable)
        assert store.counts()["failures"] == before["failures"] + 1


@pytest.mark.slow
def test_a_real_full_disk_on_a_small_tmpfs(built, tmp_path):
    folder, csv_path, db = built
    mount = tmp_path / "tiny"
    mount.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=512k", "tmpfs", str(mount)], capture_output=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.decode().strip()}")
    try:
        (mount / "fill").write_bytes(b"\0" * (512 - 24) * 1024)  # 24 KiB left: less than a store needs
        code, out, err = run_cli(["extract", str(csv_path), "--db", str(mount / "s.db"), "--workers", "1"],
                                 tmp_path / "run")
        lines = error_lines(err)
        assert code == 2 and len(lines) == 1 and lines[0].startswith("error: "), err
        assert ("the disk is full" in lines[0] or "disk I/O error (a full disk" in lines[0]
                or "No space left on device" in lines[0]), err
        os.unlink(mount / "fill")
        code, out, err = run_cli(["extract", str(csv_path), "--db", str(mount / "s.db"), "--workers", "1"],
                                 tmp_path / "again")
        assert code == 0, err
        assert store_state(mount / "s.db") == store_state(db)
    finally:
        subprocess.run(["umount", str(mount)], check=False)


class _FillingFile:
    """A text file whose writes stop with ENOSPC after ``room`` characters, as on a full disk."""

    def __init__(self, handle, room=10):
        self._handle, self._room = handle, room

    def write(self, text):
        self._handle.write(text[: self._room])
        self._handle.flush()
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._handle.close()
        return False


def _full_disk(monkeypatch, command):
    import harmony.fileio as fileio

    if command == "rules show":
        real = Path.write_bytes

        def write_bytes(self, data):
            real(self, data[:10])
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

        monkeypatch.setattr(Path, "write_bytes", write_bytes)
    else:
        import harmony.suggest.feedwriter as feedwriter

        monkeypatch.setattr(fileio, "open", lambda *a, **kw: _FillingFile(open(*a, **kw)), raising=False)
        # The feed streams its rows through its own writer (one category pair at a time).
        monkeypatch.setattr(feedwriter, "open", lambda *a, **kw: _FillingFile(open(*a, **kw)), raising=False)


@pytest.mark.parametrize("command", ["palettes", "feed", "rules show"])
def test_enospc_while_writing_an_output_keeps_the_old_file_and_no_temp(built, tmp_path, monkeypatch, command):
    folder, csv_path, db = built
    out = tmp_path / {"palettes": "p.jsonl", "feed": "f.jsonl", "rules show": "w.png"}[command]
    out.write_text("the old content\n")
    args = {
        "palettes": ["palettes", "--db", db, "--out", out],
        "feed": ["feed", "--db", db, "--out", out],
        "rules show": ["rules", "show", str(Path(__file__).parents[2] / "rules" / "default.toml"), "--out", out],
    }[command]
    _full_disk(monkeypatch, command)
    result = _invoke(args)
    assert result.exit_code == 2
    assert len(error_lines(result.stderr)) == 1 and "No space left on device" in result.stderr
    assert out.read_text() == "the old content\n"
    assert [p.name for p in tmp_path.iterdir()] == [out.name]


def test_full_and_closed_standard_output(built, tmp_path):
    folder, csv_path, db = built
    with open("/dev/full", "w") as full:
        code, out, err = run_cli(["palettes", "--db", str(db)], tmp_path / "full", stdout_fd=full.fileno())
    assert code == 2
    assert error_lines(err) == ["error: cannot write to standard output: No space left on device"]
    # A reader that went away (`| head`): quiet, the status of a process ended by SIGPIPE.
    read_end, write_end = os.pipe()
    os.close(read_end)
    try:
        code, out, err = run_cli(["palettes", "--db", str(db)], tmp_path / "pipe", stdout_fd=write_end)
    finally:
        os.close(write_end)
    assert (code, err) == (141, "")


def test_head_of_a_long_output_ends_quietly(built, tmp_path):
    folder, csv_path, db = built
    harmony = Path(os.sys.executable).parent / "harmony"
    if not harmony.exists():
        pytest.skip("the harmony script is not installed beside this Python")
    done = subprocess.run(f"'{harmony}' palettes --db '{db}' --format csv | head -n 2; exit ${{PIPESTATUS[0]}}",
                          shell=True, executable="/bin/bash", capture_output=True, text=True)
    assert len(done.stdout.splitlines()) == 2 and done.stderr == ""
    assert done.returncode in (0, 141)


def _damage(db, tmp_path):
    """A copy of the store with its later pages overwritten (the first, the schema, kept)."""
    damaged = tmp_path / "damaged.db"
    damaged.write_bytes(Path(db).read_bytes())
    with sqlite3.connect(damaged) as conn:
        page = conn.execute("PRAGMA page_size").fetchone()[0]
        pages = conn.execute("PRAGMA page_count").fetchone()[0]
    data = bytearray(damaged.read_bytes())
    rng = np.random.default_rng(1)
    for p in range(2, pages):
        data[p * page: (p + 1) * page] = rng.integers(0, 256, page, dtype=np.uint8).tobytes()
    damaged.write_bytes(bytes(data))
    return damaged


@pytest.mark.parametrize("args", [
    ["palettes", "--db", "{db}"],
    ["feed", "--db", "{db}", "--out", "{tmp}/f.jsonl"],
    ["suggest", "S00", "--db", "{db}"],
    ["bundle", "--db", "{db}", "--room", "{room}"],
    ["report", "--db", "{db}", "--out", "{tmp}/r.html"],
    ["evaluate", "--db", "{db}", "--events", "{events}"],
    ["extract", "{csv}", "--db", "{db}", "--workers", "1"],
])
def test_every_reading_command_reports_a_damaged_store_in_one_line(built, tmp_path, args):
    folder, csv_path, db = built
    damaged = _damage(db, tmp_path)
    events = tmp_path / "events.csv"
    events.write_text("session,product,event\n1,S00,view\n1,S01,view\n")
    room = Path(__file__).parents[2] / "demo_room_sets" / "dining_corner.toml"
    args = [a.format(db=damaged, tmp=tmp_path, csv=csv_path, room=room, events=events) for a in args]
    result = _invoke(args)
    assert result.exit_code == 2, result.output
    lines = error_lines(result.stderr)
    assert len(lines) == 1 and lines[0].startswith(f"error: {damaged}: "), result.stderr
    assert "damaged" in lines[0] or "not a palette store" in lines[0], lines


def test_a_store_in_a_read_only_folder_is_called_read_only(built, tmp_path):
    folder, csv_path, db = built
    ro = tmp_path / "ro"
    ro.mkdir()
    if os.geteuid() == 0:  # root ignores permissions: a read-only mount is the way
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(ro)], capture_output=True)
        if done.returncode != 0:
            pytest.skip("root, and cannot mount a tmpfs to make a read-only folder")
        _copy_store(built, ro)
        subprocess.run(["mount", "-o", "remount,ro", str(ro)], check=True)
    else:
        _copy_store(built, ro)
        ro.chmod(0o555)
    try:
        result = _invoke(["palettes", "--db", ro / "s.db"])
    finally:
        if os.geteuid() == 0:
            subprocess.run(["umount", str(ro)], check=False)
        else:
            ro.chmod(0o755)
    assert result.exit_code == 2
    [line] = error_lines(result.stderr)
    assert "read-only" in line and "not a palette store" not in line


# -- 3, 5. output paths: links, special files, stale temporary files ---------------------------


def test_an_output_symlink_is_written_through_to_its_target(tmp_path):
    target = tmp_path / "real" / "feed.jsonl"
    target.parent.mkdir()
    target.write_text("old\n")
    link = tmp_path / "feed.jsonl"
    link.symlink_to(target)
    write_text_whole(link, "new\n", "feed")
    assert link.is_symlink() and target.read_text() == "new\n"
    assert sorted(p.name for p in target.parent.iterdir()) == ["feed.jsonl"]


def _special_files(tmp_path):
    fifo = tmp_path / "fifo"
    os.mkfifo(fifo)
    sock_path = tmp_path / "sock"
    sock = socket.socket(socket.AF_UNIX)
    sock.bind(str(sock_path))
    found = [(fifo, "a FIFO (named pipe)"), (sock_path, "a socket")]
    try:  # a character device of our own (the null device's numbers), where mknod is allowed
        os.mknod(tmp_path / "chr", 0o600 | stat.S_IFCHR, os.makedev(1, 3))
        found.append((tmp_path / "chr", "a character device"))
    except (OSError, AttributeError):
        pass
    return found, sock


@pytest.mark.parametrize("command", ["palettes", "feed", "rules show"])
def test_special_files_are_refused_and_left_alone(built, tmp_path, command):
    folder, csv_path, db = built
    found, sock = _special_files(tmp_path)
    try:
        for path, kind in found:
            link = tmp_path / f"link-to-{path.name}"
            link.symlink_to(path)
            for out in (path, link):
                args = {
                    "palettes": ["palettes", "--db", db, "--out", out],
                    "feed": ["feed", "--db", db, "--out", out, "--format", "jsonl"],
                    "rules show": ["rules", "show", Path(__file__).parents[2] / "rules" / "default.toml", "--out", out],
                }[command]
                mode = os.lstat(path).st_mode
                result = _invoke(args)
                assert result.exit_code == 2
                assert error_lines(result.stderr)[-1].endswith(f"it is {kind}, not a regular file"), result.stderr
                assert os.lstat(path).st_mode == mode and link.is_symlink()
    finally:
        sock.close()


def test_a_killed_writers_temp_file_is_swept_by_the_next_write(tmp_path):
    dead = subprocess.Popen(["true"])
    dead.wait()  # its pid is now free
    from harmony.fileio import _host_tag

    stale = tmp_path / f".feed.jsonl.{dead.pid}~{_host_tag()}.abc123.part"
    live = tmp_path / f".feed.jsonl.{os.getppid()}~{_host_tag()}.def456.part"
    other = tmp_path / ".feed.jsonl.tmp-of-someone-else"
    for p in (stale, live, other):
        p.write_text("half")
    write_text_whole(tmp_path / "feed.jsonl", "whole\n")
    assert not stale.exists() and live.exists() and other.exists()
    assert (tmp_path / "feed.jsonl").read_text() == "whole\n"


# -- 6. bounds on a rules file ----------------------------------------------------------------


def test_rules_files_past_the_bounds_are_refused_in_one_line(tmp_path):
    from harmony.rules.fileformat import MAX_PAIR_SECTIONS, MAX_RULES, MAX_RULES_BYTES

    head = 'format = 1\n[neutral]\nthreshold = 7.0\nfade = 4.0\n[default]\nrules = { r0 = 1.0 }\n'
    rule = '[rule.r{i}]\nkind = "hue"\ncentre = 180.0\nspread = 20.0\nweight = 0.5\n'
    many_rules = tmp_path / "rules.toml"
    many_rules.write_text(head + "".join(rule.format(i=i) for i in range(MAX_RULES + 1)))
    pair = '[[pair]]\ncategories = ["a{i}", "b{i}"]\nrules = {{ r0 = 1.0 }}\n'
    many_pairs = tmp_path / "pairs.toml"
    many_pairs.write_text(head + rule.format(i=0) + "".join(pair.format(i=i) for i in range(MAX_PAIR_SECTIONS + 1)))
    huge = tmp_path / "huge.toml"
    huge.write_text(head + rule.format(i=0) + "#" * MAX_RULES_BYTES + "\n")
    within = tmp_path / "within.toml"
    within.write_text(head + "".join(rule.format(i=i) for i in range(MAX_RULES)))
    for path, text in [(many_rules, f"{MAX_RULES + 1} rules (at most {MAX_RULES})"),
                       (many_pairs, f"{MAX_PAIR_SECTIONS + 1} pair sections (at most {MAX_PAIR_SECTIONS})"),
                       (huge, f"larger than {MAX_RULES_BYTES // 1024} KiB")]:
        result = _invoke(["rules", "check", path])
        [line] = error_lines(result.stderr)
        assert result.exit_code == 2 and line.startswith(f"error: {path}: ") and text in line
    ok = _invoke(["rules", "check", within])
    assert ok.exit_code == 0, ok.output  # the bound itself is allowed


# -- 7. palette JSON numbers ------------------------------------------------------------------


@pytest.mark.parametrize("value, reason", [
    ("NaN", "colours[0].J: not a finite number (nan)"),
    ("Infinity", "colours[0].J: not a finite number (inf)"),
    ("1e308", "colours[0].J: 1e+308 is outside [0, 120]"),
    # J' past 242.9 has no CAM02-UCS J to invert to: it once scored with numpy warnings.
    ("500", "colours[0].J: 500 is outside [0, 120]"),
    ("-1", "colours[0].J: -1 is outside [0, 120]"),
])
def test_palette_json_with_nan_inf_or_huge_numbers_is_one_line_naming_the_key(built, tmp_path, value, reason):
    folder, csv_path, db = built
    good = tmp_path / "good.json"
    result = _invoke(["palettes", "--db", db])
    good.write_text(result.stdout.splitlines()[0])
    data = json.loads(good.read_text())
    bad = tmp_path / "bad.json"
    text = json.dumps(data).replace(f'"J": {json.dumps(data["colours"][0]["J"])}', f'"J": {value}', 1)
    bad.write_text(text)
    scored = _invoke(["score", bad, good])
    assert scored.exit_code == 2
    assert error_lines(scored.stderr) == [f"error: {bad}: {reason}"]
    assert "nan" not in scored.stdout


def test_palette_json_at_the_ends_of_the_lightness_range_scores_without_warnings(built, tmp_path):
    # Both ends of JSON_J_RANGE are read: J' 0 (black) and 120 score, with no warning line.
    folder, csv_path, db = built
    good = tmp_path / "good.json"
    good.write_text(_invoke(["palettes", "--db", db]).stdout.splitlines()[0])
    data = json.loads(good.read_text())
    for value in (0, 120):
        for c in data["colours"]:
            c["J"] = value
        edge = tmp_path / f"edge{value}.json"
        edge.write_text(json.dumps(data))
        scored = _invoke(["score", edge, good])
        assert scored.exit_code == 0 and scored.stdout.startswith("score ") and not scored.stderr.strip(), scored.stderr


# -- 9. formulas in CSV -----------------------------------------------------------------------


def test_csv_cells_that_a_spreadsheet_would_run_get_an_apostrophe(tmp_path):
    make_shop(tmp_path, n=4)
    hostile = tmp_path / "hostile.csv"
    rows = (tmp_path / "shop.csv").read_text().splitlines()
    ids = ["=1+1", "+cmd", "-2+3", "@SUM(A1)"]
    rows = [rows[0]] + [f"{pid},{r.split(',', 1)[1]}" for pid, r in zip(ids, rows[1:])]
    hostile.write_text("\n".join(rows) + "\n")
    db = tmp_path / "h.db"
    assert _invoke(["extract", hostile, "--db", db, "--workers", "1"]).exit_code == 0
    feed = tmp_path / "feed.csv"
    assert _invoke(["feed", "--db", db, "--out", feed]).exit_code == 0
    exported = _invoke(["palettes", "--db", db, "--format", "csv"])
    for text in (feed.read_text(), exported.stdout):
        table = list(csv.DictReader(io.StringIO(text)))
        assert table
        for row in table:
            for key, cell in row.items():
                assert not cell.startswith(("=", "+", "@", "\t", "\r")), (key, cell)
                if cell.startswith("-"):
                    float(cell)  # only numbers may start with a minus
        ids_seen = {row.get("product") for row in table}
        assert ids_seen <= {"'" + i for i in ids}
    scores = [row["score"] for row in csv.DictReader(io.StringIO(feed.read_text()))]
    assert all(0.0 <= float(s) <= 1.0 for s in scores)  # numeric columns stay numeric


# -- 11. warnings -----------------------------------------------------------------------------


def test_python_warnings_become_one_warning_line(built, monkeypatch, tmp_path):
    folder, csv_path, db = built
    import harmony.photo.palette as palette_module  # the command imports it when it runs

    real = palette_module.extract_palette

    def noisy(path, *args, **kwargs):
        warnings.warn("Possibly corrupted\nEXIF data", UserWarning)
        with np.errstate(over="warn"):
            np.float64(1e308) * 10.0
        return real(path, *args, **kwargs)

    monkeypatch.setattr(palette_module, "extract_palette", noisy)
    result = _invoke(["palette", folder / "img" / "s0.jpg"])
    assert result.exit_code == 0, result.output
    assert result.stderr.splitlines() == [
        "warning: Possibly corrupted EXIF data",
        "warning: overflow encountered in scalar multiply",
    ]
