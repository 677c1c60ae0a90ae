"""Output names whose suffix says another format than the one written are refused in one line,
before any work: a page named .pdf, a picture named .jpg."""

import pytest
from click.testing import CliRunner

from harmony.cli import main
from harmony.resources import DEFAULT_RULES

CASES = [
    (["rules", "show", str(DEFAULT_RULES), "--out", "w.jpg"], "w.jpg: .jpg is not a name for the picture (use .png)"),
    (["report", "--db", "x.db", "--out", "r.pdf"], "r.pdf: .pdf is not a name for the report (use .html or .htm)"),
    (["evaluate", "--db", "x.db", "--events", "e.csv", "--out", "e.txt"], "e.txt: .txt is not a name for the evaluation page (use .html or .htm)"),
    (["clicks", "--impressions", "i.csv", "--out", "c.png"], "c.png: .png is not a name for the page (use .html or .htm)"),
]


@pytest.mark.parametrize("args, message", CASES, ids=[c[0][0] for c in CASES])
def test_an_output_named_for_another_format_is_refused(tmp_path, monkeypatch, args, message):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "x.db").write_bytes(b"")
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 2 and len(res.output.strip().splitlines()) == 1, res.output
    assert res.output.startswith(f"error: {message}"), res.output
    assert not (tmp_path / args[-1]).exists()


def test_the_right_suffix_or_none_passes_the_check(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("w.png", "W.PNG", "wheels"):
        res = CliRunner().invoke(main, ["rules", "show", str(DEFAULT_RULES), "--out", name])
        assert res.exit_code == 0, res.output
        assert (tmp_path / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
