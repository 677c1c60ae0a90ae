"""``harmony clicks``, ``harmony feed --blend/--similar`` through click's test runner."""

import json

import numpy as np
import pytest
from click.testing import CliRunner
from test_cli_feed import db  # noqa: F401  (the same small store of sofas, rugs and lamps)

from harmony.cli import main


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])




def test_feed_blend_and_similar_rows(db, tmp_path):
    cands = tmp_path / "cands.csv"
    cands.write_text("product,partner,partner_category,score\nS0,R3,rug,5\nS0,R2,rug,1\nS0,R9,rug,9\nS0,R1,rug,8\n")
    out = tmp_path / "feed.csv"
    res = run("feed", "--db", db, "--top", 3, "--blend", cands, "--blend-weight", 1, "--similar", "--out", out)
    assert res.exit_code == 0, res.output
    import csv

    rows = list(csv.DictReader(out.open()))
    s0_rugs = [r for r in rows if r["product"] == "S0" and r["partner_category"] == "rug" and r["relation"] == "partner"]
    # W = 1: the candidate list's order; R9 is not in the store and keeps its own score; R1 is out of stock.
    # (R2, proposed last, ties at 0 with the partners only harmony proposed; ties go by id.)
    assert [r["partner"] for r in s0_rugs][:2] == ["R9", "R3"]
    assert s0_rugs[0]["source"] == "not in store"
    similar = [r for r in rows if r["relation"] == "similar"]
    assert similar and all(r["category"] == r["partner_category"] for r in similar)
    assert "R1" not in {r["partner"] for r in similar}


def test_feed_blend_keeps_the_targets_and_the_curation_file(db, tmp_path):
    # The candidate list proposes what the stylist's file forbids; the blended feed must still
    # obey it as the plain feed does (curation rules as the README's curation section states them).
    cands = tmp_path / "cands.csv"
    cands.write_text("product,partner,partner_category,score\n"
                     "S0,R3,rug,9\nS0,R0,rug,8\nS0,R2,rug,7\nS0,R9,rug,6\nS0,L0,floor lamp,9\nS1,L1,floor lamp,5\n")
    out = tmp_path / "t.jsonl"
    res = run("feed", "--db", db, "--top", 3, "--blend", cands, "--targets", "Rug", "--out", out)
    assert res.exit_code == 0, res.output
    rows = [json.loads(line) for line in out.read_text().splitlines()]
    assert rows and {r["partner_category"] for r in rows} == {"rug"}

    cur = tmp_path / "cur.toml"
    cur.write_text('format = 1\n\n[[pin]]\nproduct = "S0"\npartner = "R4"\nrank = 1\n\n'
                   '[[block]]\nproduct = "S0"\npartner = "R3"\n\n'
                   '[[category_pair]]\ncategories = ["sofa", "floor lamp"]\nblocked = true\n\n'
                   '[[category_pair]]\ncategories = ["sofa", "rug"]\nmin_score = 0.6\n')
    res = run("feed", "--db", db, "--top", 4, "--blend", cands, "--blend-weight", 1, "--curation", cur, "--out", out)
    assert res.exit_code == 0, res.output
    rows = [json.loads(line) for line in out.read_text().splitlines()]
    s0 = [r for r in rows if r["product"] == "S0"]
    assert s0[0]["partner"] == "R4" and s0[0]["rank"] == 1 and s0[0]["pinned"] is True
    assert "R3" not in {r["partner"] for r in s0}  # blocked, though the list ranks it first
    assert not [r for r in rows if r["category"] == "sofa" and r["partner_category"] == "floor lamp"]
    floor = [r for r in rows if r["category"] == "sofa" and r["partner_category"] == "rug" and not r["pinned"]]
    assert floor and all(r["harmony_score"] is None or r["harmony_score"] >= 0.6 for r in floor)
    assert "R2" not in {r["partner"] for r in s0}  # proposed, but harmony scores it 0.58: under the floor
    assert "R9" in {r["partner"] for r in s0}  # not in the store: harmony cannot judge it, so it stays

    cands.write_text("product,partner,score\nS0,R0,1\nS0,S0,2\n")
    res = run("feed", "--db", db, "--blend", cands, "--out", out)
    assert res.exit_code == 2 and "cands.csv:3: partner: 'S0' is the product itself" in res.output


def test_report_reads_a_blended_feed_and_names_a_foreign_row(db, tmp_path):
    cands = tmp_path / "cands.csv"
    cands.write_text("product,partner,partner_category,score\nS0,R3,rug,5\nS0,R9,rug,9\n")  # R9: not in the store
    feed = tmp_path / "blended.jsonl"
    assert run("feed", "--db", db, "--blend", cands, "--out", feed).exit_code == 0
    res = CliRunner().invoke(main, ["report", "--db", str(db), "--feed", str(feed), "--out", str(tmp_path / "r.html")])
    assert res.exit_code == 0, res.output
    assert "blended.jsonl: 1 blended row(s) name partners the store does not have" in res.stderr
    rows = [json.loads(line) for line in feed.read_text().splitlines()]
    rows[0]["partner"], rows[0]["source"] = "X404", "both"  # an id from another store
    feed.write_text("".join(json.dumps(r) + "\n" for r in rows))
    res = run("report", "--db", db, "--feed", feed, "--out", tmp_path / "r.html")
    assert res.exit_code == 2 and "blended.jsonl: row 1: product 'X404' is not in" in res.output


def _click_log(path, rng, requests, theta, alpha):
    """An impression log drawn from the position-based model: each request shows len(theta) of
    the len(alpha) suggestions in random order, slot k examined with probability theta[k]."""
    lines = ["request,product,partner,position,clicked"]
    for r in range(requests):
        for k, q in enumerate(rng.choice(len(alpha), len(theta), replace=False)):
            lines.append(f"r{r},P,X{q},{k + 1},{int(rng.random() < theta[k] * alpha[q])}")
    path.write_text("\n".join(lines) + "\n")
    return path


def test_clicks_command_prints_the_curve_and_writes_the_page(tmp_path):
    rng = np.random.default_rng(4)
    log = _click_log(tmp_path / "log.csv", rng, 600, [1.0, 0.5, 0.33], rng.uniform(0.1, 0.5, 6))
    feed = tmp_path / "other.jsonl"
    feed.write_text("".join(json.dumps({"product": "P", "partner": f"X{q}", "rank": q + 1}) + "\n" for q in range(6)))
    page = tmp_path / "clicks.html"
    res = run("clicks", "--impressions", log, "--compare-feed", feed, "--resamples", 20, "--out", page)
    assert res.exit_code == 0, res.output
    assert "slot 1 fixed at 1" in res.output and "other.jsonl:" in res.output
    assert "<svg" in page.read_text()
    res = run("clicks", "--impressions", log, "--resamples", 5, "--json")
    data = json.loads(res.output)
    assert data["examination"][0]["examination"] == 1.0 and len(data["suggestions"]) == 6


def test_clicks_db_is_checked_before_the_analysis_and_warned_of_without_a_page(db, tmp_path, monkeypatch):
    # With --out, a store path that is no store is one line before any analysis; without --out
    # the store is not read, and one warning says so; a real store with --out is read.
    from harmony.evaluation import clicks as clicks_module

    log = _click_log(tmp_path / "log.csv", np.random.default_rng(6), 200, [1.0, 0.5], [0.3] * 4)
    analysed = []
    real = clicks_module.analyse_clicks
    monkeypatch.setattr(clicks_module, "analyse_clicks", lambda *a, **k: analysed.append(1) or real(*a, **k))
    res = run("clicks", "--impressions", log, "--db", tmp_path / "nope.db", "--out", tmp_path / "p.html")
    assert res.exit_code == 2 and "nope.db: no palette store here" in res.output and not analysed
    assert not (tmp_path / "p.html").exists() and not (tmp_path / "nope.db").exists()
    res = run("clicks", "--impressions", log, "--db", tmp_path / "nope.db", "--resamples", 3)
    assert res.exit_code == 0 and analysed
    assert "warning: --db " in res.output and "without --out there is no page; not read" in res.output
    res = run("clicks", "--impressions", log, "--db", db, "--resamples", 3, "--out", tmp_path / "q.html")
    assert res.exit_code == 0 and "warning" not in res.output and (tmp_path / "q.html").exists()


def test_compare_feed_reads_every_feed_format_alike(tmp_path):
    # The same order as JSON Lines, CSV (with the reason's comma quoted, RFC 4180) and Parquet
    # gives the same estimate; a CSV row with a field too many is named, not read by name.
    import pyarrow as pa
    import pyarrow.parquet as pq

    log = _click_log(tmp_path / "log.csv", np.random.default_rng(5), 300, [1.0, 0.6], [0.3] * 4)
    rows = [{"product": "P", "partner": f"X{q}", "rank": 4 - q, "reason": "warm, calm"} for q in range(4)]
    (tmp_path / "f.jsonl").write_text("".join(json.dumps(r) + "\n" for r in rows))
    (tmp_path / "f.csv").write_text("product,partner,rank,reason\n"
                                    + "".join(f'P,X{q},{4 - q},"warm, calm"\n' for q in range(4)))
    pq.write_table(pa.Table.from_pylist(rows), tmp_path / "f.parquet")
    got = []
    for name in ("f.jsonl", "f.csv", "f.parquet"):
        res = run("clicks", "--impressions", log, "--compare-feed", tmp_path / name, "--resamples", 5, "--json")
        assert res.exit_code == 0, res.output
        orders = json.loads(res.output)["orders"]
        assert [o.pop("name") for o in orders] == [name]
        got.append(orders)
    assert got[0] and got[0] == got[1] == got[2]
    (tmp_path / "g.csv").write_text("product,partner,rank,reason\nP,X0,1,warm, calm\n")
    res = run("clicks", "--impressions", log, "--compare-feed", tmp_path / "g.csv")
    assert res.exit_code != 0 and "g.csv:2: 5 fields, the header has 4" in res.output
    assert "Traceback" not in res.output


def test_clicks_bad_row_is_one_line(tmp_path):
    log = tmp_path / "log.csv"
    log.write_text("request,product,partner,position,clicked\nr1,P,X,0,1\n")
    res = run("clicks", "--impressions", log)
    assert res.exit_code == 2 and "log.csv:2: position" in res.output and "Traceback" not in res.output


from test_cli_evaluate import shop  # noqa: E402,F401  (the invented sofas and cushions, and their log)


def test_evaluate_compares_blend_weights(shop, tmp_path):
    db, log = shop
    # An oracle candidate list: each sofa's cushions scored by closeness to the opposite hue, which is
    # how the log was simulated; W = 1 must rank real partners at least as well as W = 0.
    from harmony.shop.store import Store
    from harmony.colour import hue_deg

    with Store(db) as store:
        pals = store.palettes()
    sofas = sorted(p for p in pals if p.startswith("S"))
    cushions = sorted(p for p in pals if p.startswith("C"))
    lines = ["product,partner,score"]
    for s in sofas:
        target = (hue_deg(pals[s].jab[0]) + 180.0) % 360.0
        for c in cushions:
            gap = abs((hue_deg(pals[c].jab[0]) - target + 180.0) % 360.0 - 180.0)
            lines += [f"{s},{c},{-gap:.3f}", f"{c},{s},{-gap:.3f}"]  # both directions: cushions are anchors too
    cands = tmp_path / "oracle.csv"
    cands.write_text("\n".join(lines) + "\n")
    res = run("evaluate", "--db", db, "--events", log, "--blend", cands, "--blend-weights", "0,1",
              "--resamples", 20, "--json")
    assert res.exit_code == 0, res.output
    by = {r["name"]: r for r in json.loads(res.output)["results"]}
    assert by["blend W=0 (default)"]["auc"] == pytest.approx(by["default"]["auc"])
    assert by["blend W=1 (default)"]["auc"] >= by["blend W=0 (default)"]["auc"]
    res = run("evaluate", "--db", db, "--events", log, "--blend", cands, "--blend-weights", "0,x")
    assert res.exit_code == 2 and "not a number: 'x'" in res.output
