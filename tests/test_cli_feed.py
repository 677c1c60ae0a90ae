"""``harmony feed`` and ``harmony suggest`` through click's test runner."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from harmony.cli import main
from test_feed import make_store, random_palettes


@pytest.fixture()
def db(tmp_path):
    rng = np.random.default_rng(31)
    pals = random_palettes(12, rng)
    items = [(f"S{i}", "sofa", None, pals[i]) for i in range(4)]
    items += [(f"R{i}", "rug", 0 if i == 1 else 2, pals[4 + i]) for i in range(5)]
    items += [(f"L{i}", "floor lamp", None, pals[9 + i]) for i in range(3)]
    return make_store(tmp_path, items)


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_feed_writes_jsonl_csv_and_parquet(db, tmp_path):
    out = tmp_path / "feed.jsonl"
    res = run("feed", "--db", db, "--top", 2, "--targets", "rug,Floor Lamp", "--out", out)
    assert res.exit_code == 0, res.output
    assert "rows for" in res.output
    rows = [json.loads(line) for line in out.read_text().splitlines()]
    assert rows and set(rows[0]) == {"product", "category", "partner", "partner_category", "rank", "score", "reason"}
    assert "R1" not in {r["partner"] for r in rows}
    res = run("feed", "--db", db, "--diversity", 0.5, "--format", "csv", "--out", tmp_path / "feed.txt")
    assert res.exit_code == 0, res.output
    assert (tmp_path / "feed.txt").read_text().startswith("product,category,partner,partner_category,rank,score,reason")
    pq = pytest.importorskip("pyarrow.parquet")
    res = run("feed", "--db", db, "--out", tmp_path / "feed.parquet")
    assert res.exit_code == 0, res.output
    assert pq.read_table(tmp_path / "feed.parquet").num_rows > 0


def test_feed_errors_are_one_line(db, tmp_path):
    res = run("feed", "--db", db, "--targets", "rugz", "--out", tmp_path / "f.jsonl")
    assert res.exit_code == 2
    assert "error:" in res.output and "did you mean 'rug'" in res.output and "Traceback" not in res.output
    assert not (tmp_path / "f.jsonl").exists()
    res = run("feed", "--db", tmp_path / "nothing.db", "--out", tmp_path / "f.jsonl")
    assert res.exit_code == 2 and "no palette store here" in res.output
    res = run("feed", "--db", db, "--out", tmp_path / "f.xlsx")
    assert res.exit_code == 2 and "cannot tell the feed format" in res.output
    res = run("feed", "--db", db, "--targets", " , ", "--out", tmp_path / "f.jsonl")
    assert res.exit_code == 2 and "no category names" in res.output


def test_feed_warns_about_a_target_without_stock(tmp_path):
    rng = np.random.default_rng(32)
    pals = random_palettes(3, rng)
    db = make_store(tmp_path, [("S0", "sofa", None, pals[0]), ("R0", "rug", 0, pals[1]), ("L0", "floor lamp", None, pals[2])])
    res = run("feed", "--db", db, "--targets", "rug", "--out", tmp_path / "f.jsonl")
    assert res.exit_code == 2
    assert "warning: target category 'rug' has no in-stock product" in res.output
    assert "no feed rows" in res.output


def test_suggest_table_and_json(db):
    res = run("suggest", "S0", "--db", db, "-n", 3)
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    assert lines[0].startswith("S0 (sofa)") and "#" in lines[0]
    assert lines[1].lstrip().startswith("1. ") and "score" in lines[1]
    res = run("suggest", "S0", "--db", db, "--category", "rug", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["product"] == "S0" and len(data["suggestions"]) == 4  # five rugs, one out of stock
    assert all(s["partner_category"] == "rug" and s["partner"] != "R1" for s in data["suggestions"])
    assert all(s["colours"][0].startswith("#") for s in data["suggestions"])


def test_suggest_errors(db):
    res = run("suggest", "S7", "--db", db)
    assert res.exit_code == 2 and "unknown product id 'S7'" in res.output
    res = run("suggest", "S0", "--db", db, "--category", "lamps")
    assert res.exit_code == 2 and "unknown category 'lamps'" in res.output
