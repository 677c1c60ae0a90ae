"""Number options refuse nan and infinity in one line (IEEE 754: every comparison with nan is
false, so a plain range check lets it through)."""

import pytest
from click.testing import CliRunner

from harmony.cli import main

CASES = [
    (["feed", "--diversity"], ["--db", "x.db", "--out", "f.jsonl"]),
    (["feed", "--blend-weight"], ["--db", "x.db", "--out", "f.jsonl"]),
    (["extract", "--max-removal"], ["c.csv", "--db", "x.db"]),
    (["clicks", "--max-weight"], ["--impressions", "log.csv"]),
    (["rules", "show", "--reference-hue"], ["r.toml", "--out", "w.png"]),
    (["serve", "--room-time-limit"], ["--db", "x.db"]),
    (["report", "--floor-lrv"], ["--db", "x.db", "--out", "r.html"]),
    (["report", "--lux"], ["--db", "x.db", "--out", "r.html"]),
]


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
@pytest.mark.parametrize("head, rest", CASES, ids=[" ".join(h) for h, _ in CASES])
def test_nan_and_infinity_are_refused_by_name(tmp_path, monkeypatch, head, rest, value):
    monkeypatch.chdir(tmp_path)
    res = CliRunner().invoke(main, [*head, value, *rest])
    assert res.exit_code == 2, res.output
    assert f"Invalid value for '{head[-1]}'" in res.output and "Traceback" not in res.output
    assert res.exception is None or isinstance(res.exception, SystemExit)
