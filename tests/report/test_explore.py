"""The report as a working tool: every feed format, the evaluation table, the product finder (in a
real browser), what made the report, plurals, and downloaded photos embedded for offline use."""

import json
import re

import pytest
from click.testing import CliRunner

from harmony.cli import main
from harmony.errors import HarmonyError
from harmony.report.explore import made_by, plural
from harmony.report.inputs import read_evaluation, read_feed
from harmony.resources import DEFAULT_RULES
from harmony.suggest.feed import FeedRow, write_feed
from harmony.suggest.provenance import read_provenance, write_provenance

ROWS = [FeedRow("S1", "sofa", "R1", "rug", 1, 0.75, "Because.", True),
        FeedRow("S1", "sofa", "R2", "rug", 2, 0.5, "Also, \"quoted\".", False)]


@pytest.mark.parametrize("suffix", [".jsonl", ".csv", ".parquet"])
def test_every_feed_format_reads_back_the_same_rows(tmp_path, suffix):
    if suffix == ".parquet":
        pytest.importorskip("pyarrow")
    path = write_feed(ROWS, tmp_path / f"feed{suffix}")
    assert read_feed(path) == [r.to_dict() for r in ROWS]


def test_a_feed_without_the_pinned_column_still_reads(tmp_path):
    path = tmp_path / "old.csv"
    path.write_text("product,category,partner,partner_category,rank,score,reason\nS1,sofa,R1,rug,1,0.5,x\n")
    assert read_feed(path)[0]["pinned"] is False
    path.write_text("product,category,partner,partner_category,rank,score,reason\nS1,sofa,R1,rug,one,0.5,x\n")
    with pytest.raises(HarmonyError, match=r"old.csv:2: rank must be a whole number from 1, got .one."):
        read_feed(path)


def test_evaluation_table_from_evaluate_json(tmp_path):
    data = {"events": 40, "anchors": 7, "confidence_level": 0.95, "results": [
        {"name": "harmony", "auc": 0.71, "auc_ci": [0.6, 0.8], "ndcg_at_10": 0.4, "ndcg_at_10_ci": [0.3, 0.5],
         "hit_at_10": 0.5, "hit_at_10_ci": [0.4, 0.6]}]}
    path = tmp_path / "eval.json"
    path.write_text(json.dumps(data))
    ((heading, (header, rows)),) = read_evaluation(path)
    assert header == ("method", "AUC", "AUC 95 % CI", "NDCG@10", "NDCG@10 95 % CI", "hit@10", "hit@10 95 % CI")
    assert rows == (("harmony", "0.710", "0.600-0.800", "0.400", "0.300-0.500", "0.500", "0.400-0.600"),)
    assert "40 events" in heading
    path.write_text(json.dumps({"results": [{"name": "x"}]}))
    with pytest.raises(HarmonyError, match=r"eval.json: results\[0\].auc: missing or not a number"):
        read_evaluation(path)


def test_plurals():
    assert plural(1, "more rug") == "1 more rug" and plural(2, "more rug") == "2 more rugs"
    assert plural(0, "bench") == "0 benches"
    assert plural(3, "partner category", "partner categories") == "3 partner categories"


def test_made_by_warns_when_the_feed_records_other_rules(tmp_path):
    feed = write_feed(ROWS, tmp_path / "feed.jsonl")
    other = tmp_path / "other.toml"
    other.write_bytes(DEFAULT_RULES.read_bytes() + b"\n# tuned\n")
    write_provenance(feed, other)
    meta = read_provenance(feed)
    lines, warnings = made_by(DEFAULT_RULES, None, meta, True)
    assert any(line.startswith("feed made with rules other.toml") for line in lines)
    assert len(warnings) == 1 and "other rules (other.toml" in warnings[0]
    write_provenance(feed, DEFAULT_RULES)
    assert made_by(DEFAULT_RULES, None, read_provenance(feed), True)[1] == ()
    # A feed rewritten after its sidecar: the sidecar no longer describes it.
    feed.write_text(feed.read_text() + "\n")
    assert read_provenance(feed) is None
    assert "does not record the rules" in made_by(DEFAULT_RULES, None, None, True)[1][0]


# -- a whole report from the command, over downloaded photos -----------------------------------------


@pytest.fixture(scope="module")
def url_shop(tmp_path_factory):
    """A store whose photos were downloaded from the test server (which is gone afterwards)."""
    from imageserver import ImageServer

    from harmony.resources import SHOP_DIR
    from harmony.shop.engine import run_extraction
    from harmony.shop.fetch import FetchSettings

    folder = tmp_path_factory.mktemp("urlshop")
    names = {"S1": ("sofa", "SOF-001.jpg"), "S2": ("sofa", "SOF-002.jpg"), "R1": ("rug", "RUG-001.jpg"),
             "R2": ("rug", "RUG-003.jpg"), "L1": ("floor lamp", "FLP-001.jpg")}
    photos = {name: (SHOP_DIR / "images" / name).read_bytes() for _cat, name in names.values()}
    with ImageServer(photos) as server:
        lines = ["id,title,category,price,stock,image"]
        lines += [f"{pid},Item {pid},{cat},100,3,{server.url('/img/' + name)}" for pid, (cat, name) in names.items()]
        (folder / "catalogue.csv").write_text("\n".join(lines) + "\n")
        summary = run_extraction(folder / "catalogue.csv", folder / "s.db", workers=1, progress=False,
                                 fetch_settings=FetchSettings(retries=0))
    assert summary.downloaded == 5 and summary.no_palette == 0
    return folder


def test_report_command_embeds_downloaded_photos_and_lists_curation(url_shop, tmp_path):
    db = url_shop / "s.db"
    cur = tmp_path / "cur.toml"
    cur.write_text('[[pin]]\nproduct = "S1"\npartner = "R2"\n\n[[block]]\nproduct = "S2"\npartner = "R1"\n')
    runner = CliRunner()
    feed = tmp_path / "feed.parquet"
    pytest.importorskip("pyarrow")
    res = runner.invoke(main, ["feed", "--db", str(db), "--out", str(feed), "--curation", str(cur)])
    assert res.exit_code == 0, res.output
    out = tmp_path / "report.html"
    res = runner.invoke(main, ["report", "--db", str(db), "--feed", str(feed), "--curation", str(cur),
                               "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert res.stderr == ""  # the feed records the same rules and curation
    html = out.read_text()
    # Every photo is embedded from the store's copy: five products, five thumbnails, no URL.
    srcs = re.findall(r'<img class="thumb" src="([^"]*)"', html)
    assert len(srcs) >= 5 and all(s.startswith("data:image/jpeg;base64,") for s in srcs)
    assert "127.0.0.1" not in html
    assert "cur.toml:1: pinned R2 as partner 1 of S1" in html
    assert "cur.toml:5: never S2 with R1" in html
    assert "Made with rules: default.toml (sha256 " in html

    # Drawn with other rules: the report says so.
    other = tmp_path / "other.toml"
    other.write_bytes(DEFAULT_RULES.read_bytes() + b"\n# edited\n")
    res = runner.invoke(main, ["report", "--db", str(db), "--feed", str(feed), "--rules", str(other),
                               "--out", str(tmp_path / "r2.html")])
    assert res.exit_code == 0, res.output
    assert "warning: the feed was made with other rules (default.toml" in res.stderr
    assert "warning: the feed was made with curation cur.toml, this report is given none" in res.stderr


def test_finder_shows_one_product_from_the_address(url_shop, tmp_path):
    from test_browser import _chromium, _run

    browser = _chromium()
    db = url_shop / "s.db"
    runner = CliRunner()
    cur = tmp_path / "cur.toml"
    cur.write_text('[[pin]]\nproduct = "S1"\npartner = "R2"\n')
    assert runner.invoke(main, ["feed", "--db", str(db), "--out", str(tmp_path / "f.csv"),
                                "--curation", str(cur)]).exit_code == 0
    out = tmp_path / "report.html"
    assert runner.invoke(main, ["report", "--db", str(db), "--feed", str(tmp_path / "f.csv"),
                                "--curation", str(cur), "--out", str(out)]).exit_code == 0
    done, console = _run(browser, tmp_path / "profile", out.as_uri() + "#product=S1", "--dump-dom")
    assert done.returncode == 0, done.stderr[-2000:]
    assert console == []
    card = re.search(r'<article class="card" id="finder-product" data-product="S1">(.*?)</article>', done.stdout, re.S)
    assert card, "the finder did not show S1"
    text = re.sub(r"<[^>]+>", " ", card.group(1))
    assert "Item S1 (S1)" in text and "rug" in text and "floor lamp" in text
    # The pinned rug is first among the rugs and marked.
    rug_rows = re.search(r"<h3>rug</h3>(.*?)</table>", card.group(1), re.S).group(1)
    first = re.search(r"<tr>(.*?)</tr>", rug_rows, re.S).group(1)
    assert ">R2<" in first and "pinned" in first and "Item R2" in first  # the title found by the id
    assert card.group(1).count('class="pstrip"') == 1
    # An unknown id in the address says so.
    done, _ = _run(browser, tmp_path / "profile", out.as_uri() + "#product=NOPE", "--dump-dom")
    assert "no product NOPE" in done.stdout
