"""``harmony feed`` and ``harmony suggest`` through click's test runner."""

import json

import numpy as np
import pytest
from click.testing import CliRunner
from test_feed import make_store, random_palettes

from harmony.cli import main


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
    assert rows and set(rows[0]) == {"product", "category", "partner", "partner_category", "rank", "score", "reason", "pinned"}
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
    res = run("suggest", "S0", "--db", db, "--top", 3)
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert lines[0].startswith("S0 (sofa)") and "#" in lines[0]
    assert lines[1].lstrip().startswith("1. ") and "score" in lines[1]
    res = run("suggest", "S0", "--db", db, "--category", "rug", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["product"] == "S0" and len(data["suggestions"]) == 4  # five rugs, one out of stock
    assert all(s["partner_category"] == "rug" and s["partner"] != "R1" for s in data["suggestions"])
    assert all(s["colours"][0].startswith("#") for s in data["suggestions"])


def test_suggest_errors(db):
    res = run("suggest", "S7", "--db", db)
    assert res.exit_code == 2 and "unknown product id 'S7'" in res.output
    res = run("suggest", "S0", "--db", db, "--category", "lamps")
    assert res.exit_code == 2 and "unknown category 'lamps'" in res.output


def one_error_line(res):
    # Warnings about pair sections the small fixture store cannot match may come first.
    lines = [line for line in res.output.splitlines() if line.strip() and not line.startswith("warning: ")]
    assert len(lines) == 1 and lines[0].startswith("error: "), res.output
    assert "Traceback" not in res.output
    return lines[0]


@pytest.mark.parametrize(
    "args, says",
    [
        (["--top", 0], "Invalid value for '--top': 0 is not in the range"),
        (["--diversity", 1.5], "Invalid value for '--diversity': 1.5 is not in the range"),
        (["--diversity", -0.1], "Invalid value for '--diversity': -0.1 is not in the range"),
        (["--format", "xml"], "Invalid value for '--format': 'xml' is not one of"),
        (["--targets", "rugz"], "unknown category 'rugz' (did you mean 'rug'?)"),
    ],
)
def test_feed_bad_options_are_one_error_line_and_keep_the_older_feed(db, tmp_path, args, says):
    out = tmp_path / "feed.jsonl"
    out.write_text("the older feed\n")
    res = run("feed", "--db", db, *args, "--out", out)
    assert res.exit_code == 2
    assert says in one_error_line(res)
    assert out.read_text() == "the older feed\n"


def test_feed_out_in_an_unwritable_folder_and_an_empty_store(db, tmp_path):
    (tmp_path / "plain").write_text("a file where a folder should be")
    res = run("feed", "--db", db, "--out", tmp_path / "plain" / "feed.jsonl")
    assert res.exit_code == 2
    assert "plain/feed.jsonl: cannot write the feed" in one_error_line(res)
    res = run("feed", "--db", db, "--out", tmp_path / "new" / "feed.csv")
    assert res.exit_code == 0 and (tmp_path / "new" / "feed.csv").exists()
    from harmony.shop.store import Store

    Store.create(tmp_path / "empty.db").close()
    res = run("feed", "--db", tmp_path / "empty.db", "--out", tmp_path / "f.jsonl")
    assert res.exit_code == 2
    assert "empty.db: the store holds no products" in one_error_line(res)
    assert not (tmp_path / "f.jsonl").exists()


def test_suggest_draws_weighted_colour_blocks_in_a_terminal_only(db, monkeypatch):
    import harmony.cli.feed_cmd as feed_cmd

    plain = run("suggest", "S0", "--db", db, "--top", 2)
    assert plain.exit_code == 0 and "\x1b[" not in plain.output  # not a terminal: hex codes
    monkeypatch.setattr("harmony.photo.swatch.terminal_has_colour", lambda stream: True)
    # color=True: click's runner would otherwise strip escape codes as for a pipe.
    res = CliRunner().invoke(main, ["suggest", "S0", "--db", str(db), "--top", "2"], color=True)
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert len(lines) == 5  # the product, then a score line and a reason line per partner
    for line in (lines[0], lines[1], lines[3]):
        # 24-bit background colour blocks (SGR 48;2;r;g;b, ISO/IEC 8613-6), one strip per palette
        # of STRIP_CELLS cells shared out by weight.
        assert "\x1b[48;2;" in line and line.endswith("\x1b[0m")
        cells = sum(len(part.split("m", 1)[1].split("\x1b")[0]) for part in line.split("\x1b[48;2;")[1:])
        assert cells == feed_cmd.STRIP_CELLS
    # Score columns line up whatever the partner name's length.
    assert lines[1].index("score") == lines[3].index("score")


def test_suggest_bad_input_is_one_error_line(db, tmp_path):
    for args, says in [
        (["S7", "--db", db], "unknown product id 'S7'"),
        (["S0", "--db", db, "--category", "sofa"], "'sofa' is the category of 'S0' itself"),
        (["S0", "--db", db, "--top", 0], "Invalid value for '--top'"),
        (["S0", "--db", tmp_path / "none.db"], "no palette store here"),
    ]:
        res = run("suggest", *args)
        assert res.exit_code == 2
        assert says in one_error_line(res)


# ---- pair sections that match no category of the store ---------------------------------------

TYPO_RULES = """format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.near]
kind = "hue"
centre = 0
spread = 20
weight = 1.0
[default]
rules = { near = 1.0 }

[[pair]]
categories = ["sofa", "rugs"]
rules = { near = 2.0 }

[[pair]]
categories = ["sofa", "floor lamp"]
rules = { near = 1.0 }

[[pair]]
categories = ["Sofas", "armchair"]
rules = { near = 1.0 }
"""


def test_feed_and_suggest_warn_of_a_pair_that_matches_no_category(db, tmp_path):
    rules = tmp_path / "mine.toml"
    rules.write_text(TYPO_RULES)
    res = run("feed", "--db", db, "--rules", rules, "--out", tmp_path / "feed.jsonl")
    assert res.exit_code == 0, res.output
    assert "rows for" in res.stdout and (tmp_path / "feed.jsonl").exists()
    warned = [line for line in res.stderr.splitlines() if line.startswith("warning: ")]
    assert warned == [
        f"warning: {rules}:14: pair sofa / rugs: no products of category 'rugs' in the store (did you mean 'rug'?)",
        f"warning: {rules}:22: pair sofas / armchair: no products of categories 'sofas' and 'armchair' "
        f"in the store (did you mean 'sofa' for 'sofas'?)",
    ]
    res = run("suggest", "S0", "--db", db, "--rules", rules, "--json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["product"] == "S0"
    assert res.stderr.count("warning: ") == 2 and "(did you mean 'rug'?)" in res.stderr


def test_no_pair_warning_when_every_category_is_in_the_store(db, tmp_path):
    rules = tmp_path / "fits.toml"
    rules.write_text(TYPO_RULES.replace('"rugs"', '"rug"').replace('"Sofas", "armchair"', '"rug", "floor lamp"'))
    res = run("feed", "--db", db, "--rules", rules, "--out", tmp_path / "feed.jsonl")
    assert res.exit_code == 0, res.output
    assert "pair " not in res.stderr


def test_feed_to_standard_output_keeps_the_summary_off_it(db, tmp_path):
    # "-" means standard output in every command that writes one file; the summary goes to stderr.
    res = CliRunner().invoke(main, ["feed", "--db", str(db), "--top", "2", "--format", "csv", "--out", "-"])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert lines[0].startswith("product,category,partner,partner_category,rank,score")
    assert "wrote" not in res.stdout and "wrote" in res.stderr
    assert not (tmp_path / "-").exists()


def test_palettes_refuse_an_output_name_of_another_format(db, tmp_path):
    # Writing JSON Lines into a file named .parquet or .json would mislead the next reader.
    for name in ("p.parquet", "p.json"):
        res = run("palettes", "--db", db, "--out", tmp_path / name)
        assert res.exit_code == 2 and "is not a name for palettes written without --format (use .jsonl" in res.output
        assert not (tmp_path / name).exists()
    assert run("palettes", "--db", db, "--out", tmp_path / "p.txt", "--format", "csv").exit_code == 0
    assert (tmp_path / "p.txt").read_text().startswith("product,")
    assert run("palettes", "--db", db, "--out", tmp_path / "p.jsonl").exit_code == 0
