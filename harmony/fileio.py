"""Writing output files whole: a reader never sees half a file, a failure leaves the old one.

An output path that is a symbolic link is written through: the new content goes to a temporary
file beside the link's final target and is renamed over that target, so the link stays a link
and the file it points to is replaced whole. A path naming anything but a regular file (a
folder, a character or block device, a FIFO, a socket) is refused with one line; standard
output is asked for with ``-`` by the commands that support it, never through a device path.

Temporary files are named ``.<name>.<pid>~<host>.<random>.part``. A run killed before its
rename leaves one behind; the next write of the same output removes those whose process (on
this host) no longer exists.

CSV written for people may be opened in a spreadsheet, which runs a cell beginning with ``=``,
``+``, ``-`` or ``@`` (or a tab or carriage return) as a formula; :func:`spreadsheet_safe`
neutralises such text cells with a leading apostrophe (common spreadsheet-safety practice, as
the OWASP "CSV Injection" page recommends).

Input files in JSON Lines (one JSON object per line, jsonlines.org) are read line by line with
:func:`json_objects`, and CSV files with a header row with :func:`csv_records`; both name each
line's problem for the caller's one-line error.
"""

import csv
import errno
import json
import os
import re
import socket
import stat
import sys
import tempfile
from pathlib import Path

from harmony.errors import HarmonyError

__all__ = [
    "STDOUT",
    "is_stdout",
    "write_whole",
    "write_text_whole",
    "write_bytes_whole",
    "check_writable",
    "output_target",
    "sweep_stale_parts",
    "spreadsheet_safe",
    "spreadsheet_safe_row",
    "FORMULA_PREFIXES",
    "json_objects",
    "header_names",
    "folded_keys",
    "csv_records",
    "repeated_name",
    "shifted",
]

#: The file name that means standard output, in every command that writes one file.
STDOUT = "-"


def is_stdout(path):
    """True when ``path`` is :data:`STDOUT` (``-``)."""
    return str(path) == STDOUT


#: Bytes per write when a finished output is copied to standard output: a Linux pipe's default
#: capacity, 64 KiB (pipe(7)).
_STDOUT_PIECE = 1 << 16


def _write_stdout(write):
    """Let ``write(tmp_path)`` fill a private temporary file, then copy it to standard output."""
    with tempfile.TemporaryDirectory(prefix="harmony-out-") as folder:
        tmp = Path(folder) / "out"
        write(tmp)
        data = tmp.read_bytes()
    stream = getattr(sys.stdout, "buffer", None)
    if stream is None:  # a text-only stdout (tests): the outputs are UTF-8 text or bytes
        sys.stdout.write(data.decode("utf-8", errors="replace"))
    else:
        # In pieces: one large write to a pipe can end without an error when its reader has
        # already gone (``| head``), so a closed reader is only noticed by the next write.
        for start in range(0, len(data), _STDOUT_PIECE):
            stream.write(data[start: start + _STDOUT_PIECE])
    sys.stdout.flush()


#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")

_SPECIAL_KINDS = (
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISSOCK, "a socket"),
)


def _host_tag():
    return re.sub(r"[^A-Za-z0-9-]", "_", socket.gethostname())[:40] or "host"


def output_target(path, what="file"):
    """The regular file a write to ``path`` must replace: ``path`` itself, or a link's target.

    Raises
    ------
    HarmonyError
        ``path`` (or its target) is a folder, a device, a FIFO or a socket.
    """
    path = Path(path)
    real = Path(os.path.realpath(path)) if path.is_symlink() else path
    try:
        mode = os.stat(real).st_mode
    except FileNotFoundError:
        return real
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot write the {what}: {exc.strerror or exc}") from None
    if stat.S_ISDIR(mode):
        raise HarmonyError(f"{path}: cannot write the {what}: Is a directory")
    for test, kind in _SPECIAL_KINDS:
        if test(mode):
            raise HarmonyError(f"{path}: cannot write the {what}: it is {kind}, not a regular file")
    return real


def _pid_alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # EPERM: it exists, run by someone else
        return True
    return True


def sweep_stale_parts(target):
    """Remove temporary files of ``target`` left by killed writers on this host; returns how many."""
    target = Path(target)
    folder = target.parent if str(target.parent) else Path(".")
    pattern = re.compile(re.escape(f".{target.name}.") + r"(\d+)~" + re.escape(_host_tag()) + r"\.[^.]+\.part")
    removed = 0
    try:
        names = os.listdir(folder)
    except OSError:
        return 0
    for name in names:
        found = pattern.fullmatch(name)
        if found is None:
            continue
        pid = int(found.group(1))
        if pid == os.getpid() or _pid_alive(pid):
            continue
        try:
            (folder / name).unlink()
            removed += 1
        except OSError:
            pass
    return removed


def write_whole(path, write, what="file"):
    """Let ``write(tmp_path)`` fill a temporary file beside ``path``, then rename it to ``path``.

    Creates missing parent folders. A symbolic link is written through to its target (see the
    module notes); a folder, device, FIFO or socket is refused. A new file gets the permissions
    the umask gives; a replaced file keeps its own. Any failure (full disk, an encoding error,
    an interrupt) removes the temporary file and leaves an older file as it was; an ``OSError``
    becomes a :class:`HarmonyError` ``"<path>: cannot write the <what>: <reason>"``. Returns
    the path as given. ``path`` ``-`` writes to standard output instead (and returns ``"-"``).
    """
    if is_stdout(path):
        _write_stdout(write)
        return STDOUT
    given = Path(path)
    target, tmp = _temp_beside(given, what)
    try:
        write(tmp)
        # mkstemp makes the file private (0600); give it the mode a plain open() would have had,
        # or the mode of the file it replaces, so a web server that read the old feed still can.
        os.chmod(tmp, _target_mode(target))
        os.replace(tmp, target)
    except BaseException as exc:
        Path(tmp).unlink(missing_ok=True)
        if isinstance(exc, OSError):
            reason = exc.strerror or str(exc) or errno.errorcode.get(exc.errno, "error")
            raise HarmonyError(f"{given}: cannot write the {what}: {reason}") from None
        raise
    return given


def check_writable(path, what="file"):
    """Fail now, as :func:`write_whole` would at the end, when ``path`` cannot be written (a
    folder that cannot be made, no permission, a full disk): for commands that work long before
    they write. Makes missing parent folders, as the write would; ``-`` always passes."""
    if not is_stdout(path):
        _, tmp = _temp_beside(Path(path), what)
        Path(tmp).unlink(missing_ok=True)


def _temp_beside(given, what):
    """(the file to replace, a new empty temporary file beside it); parent folders made, stale
    temporary files of a killed run removed; a one-line HarmonyError when that fails."""
    target = output_target(given, what)
    folder = target.parent if str(target.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        sweep_stale_parts(target)
        fd, tmp = tempfile.mkstemp(
            prefix=f".{target.name}.{os.getpid()}~{_host_tag()}.", suffix=".part", dir=folder
        )
        os.close(fd)
    except OSError as exc:
        raise HarmonyError(f"{given}: cannot write the {what}: {exc.strerror or exc}") from None
    return target, tmp


def _target_mode(path):
    try:
        return path.stat().st_mode & 0o7777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def write_text_whole(path, text, what="file"):
    """Write ``text`` (UTF-8, newlines as given) to ``path`` whole; see :func:`write_whole`."""

    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)

    return write_whole(path, write, what)


def write_bytes_whole(path, data, what="file"):
    """Write ``data`` to ``path`` whole; see :func:`write_whole`."""
    return write_whole(path, lambda tmp: Path(tmp).write_bytes(data), what)


def spreadsheet_safe(value):
    """``value`` with a leading apostrophe when it is text a spreadsheet would run as a formula.

    Only strings change; numbers stay numbers, so score and rank columns keep their type.

    >>> spreadsheet_safe("=HYPERLINK(1)"), spreadsheet_safe("sofa"), spreadsheet_safe(-0.5)
    ("'=HYPERLINK(1)", 'sofa', -0.5)
    """
    if isinstance(value, str) and value.startswith(FORMULA_PREFIXES):
        return "'" + value
    return value


def spreadsheet_safe_row(row):
    """:func:`spreadsheet_safe` over a CSV row: a dict (by value) or a sequence."""
    if isinstance(row, dict):
        return {key: spreadsheet_safe(value) for key, value in row.items()}
    return [spreadsheet_safe(value) for value in row]


def json_objects(lines, not_object="not a JSON object", column=False):
    """``(line number, object, problem)`` of each non-blank line of JSON Lines text.

    ``lines`` is any iterable of lines (``text.splitlines()``, an open file); numbers start at 1.
    ``object`` is the line's JSON object, its keys case-folded (:func:`folded_keys`), and
    ``problem`` None, or ``object`` is None and ``problem`` says why: ``"not JSON: <reason>"``
    (with ``" (column N)"`` when ``column``), ``not_object`` for JSON that is not an object, or
    two keys that fold alike.
    """
    for number, text in enumerate(lines, start=1):
        if not text.strip():
            continue
        try:
            obj = json.loads(text)
        except json.JSONDecodeError as exc:
            yield number, None, f"not JSON: {exc.msg}" + (f" (column {exc.colno})" if column else "")
            continue
        if isinstance(obj, dict):
            obj, twice = folded_keys(obj)
            if twice is None:
                yield number, obj, None
            else:
                yield number, None, f"key {twice!r} is given twice (keys are read without case)"
        else:
            yield number, None, not_object


def csv_records(lines):
    """The header and the records of CSV text whose first row names the columns (RFC 4180).

    ``lines`` is any iterable of lines (an open file, ``io.StringIO(text, newline="")``). Returns
    ``(header, records)``: the header's names (:func:`header_names`; [] for empty text), and an iterator of
    ``(line number, record, problem)`` for each non-blank row, like :func:`json_objects`.
    ``record`` maps each name to its field (a row shorter than the header lacks the last names;
    callers refuse a header naming a column twice, see :func:`repeated_name`) and ``problem`` is
    None, or ``record`` is None
    and ``problem`` says why: a row with text past the header's columns (:func:`shifted`: an
    unquoted comma shifts every later field, so no field of it can be trusted) or one the csv
    module cannot read,
    after which reading stops. The line number is the row's last physical line.
    """
    reader = csv.reader(lines)
    try:
        header = header_names(next(reader, None) or ())
    except csv.Error as exc:
        return [], iter([(reader.line_num, None, f"not readable CSV: {exc}")])

    def records():
        width = len(header)
        try:
            for row in reader:
                if shifted(row, width):
                    yield reader.line_num, None, f"{len(row)} fields, the header has {width}"
                elif row:
                    yield reader.line_num, dict(zip(header, row)), None
        except csv.Error as exc:
            yield reader.line_num, None, f"not readable CSV: {exc}"

    return header, records()


def header_names(row):
    """A CSV header's column names, stripped and case-folded: shop exports often capitalise them
    (``ID``, ``Price``), and ``Price`` and ``price`` name one column (two that fold alike are a
    name given twice, see :func:`repeated_name`)."""
    return [str(name).strip().casefold() for name in row]


def folded_keys(obj):
    """A JSON object with its keys case-folded, as :func:`header_names` folds a CSV header, and
    the first folded key two of its keys share (None when none do): which value to take cannot be
    known, so callers refuse such a row."""
    out, twice = {}, None
    for key, value in obj.items():
        name = str(key).casefold()
        if name in out and twice is None:
            twice = name
        out[name] = value
    return out, twice


def shifted(row, width):
    """Whether a CSV row holds text past the header's ``width`` columns: an unquoted comma has
    shifted its fields. Empty fields past it (a spreadsheet's trailing empty cells) do not count."""
    return len(row) > width and any(field.strip() for field in row[width:])


def repeated_name(header):
    """The first name a CSV header gives twice, or None: which of the two columns a reader should
    take cannot be known (an export that repeats a column by mistake), so callers refuse it.
    Empty names are never read (a spreadsheet's trailing empty columns) and may repeat."""
    seen = set()
    for name in header:
        if not name:
            continue
        if name in seen:
            return name
        seen.add(name)
    return None
