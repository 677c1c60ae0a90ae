"""Tests of harmony.suggest.curation: the file's validation, and curation applied to rows and feeds.

The rows here are hand-made FeedRows with invented scores: the checks are about what curation does
to a ranked list (which rows go, where pins land), not about colour.
"""

import json

import pytest
from click.testing import CliRunner

from harmony.suggest.curation import (
    CurationError,
    category_pair_allowed,
    curate,
    limit_partner_categories,
    parse_curation,
    removal_reason,
    set_allowed,
    unknown_product_warnings,
)
from harmony.suggest.feed import FeedRow

EXAMPLE = """\
format = 1
min_score = 0.2
max_partner_categories = 2

[[pin]]
product = "S1"
partner = "R9"
rank = 1

[[block]]
product = "S1"
partner = "R1"

[[block]]
product = "D1"
category = "Cushion"

[[category_pair]]
categories = ["desk", "armchair"]
blocked = true

[[category_pair]]
categories = ["rug", "sofa"]
min_score = 0.5
"""


def rows(product, category, partner_category, scored):
    return [FeedRow(product, category, pid, partner_category, rank, score, "r")
            for rank, (pid, score) in enumerate(scored, start=1)]


def test_example_parses():
    c = parse_curation(EXAMPLE, "cur.toml")
    assert [(p.product, p.partner, p.rank, p.line) for p in c.pins] == [("S1", "R9", 1, 5)]
    assert [(b.product, b.partner, b.category, b.line) for b in c.blocks] == [
        ("S1", "R1", None, 10), ("D1", None, "cushion", 14)]
    assert c.min_score == 0.2 and c.max_partner_categories == 2
    assert not category_pair_allowed(c, "armchair", "desk")  # unordered
    assert category_pair_allowed(c, "sofa", "rug") and category_pair_allowed(None, "a", "b")


@pytest.mark.parametrize("extra, message", [
    ('[[pin]]\nproduct = "S1"\npartner = "R9"\nrank = 3\n', r"cur.toml:26: pin\[2\]: pin S1 -> R9 is given twice \(first on line 5\)"),
    ('[[block]]\nproduct = "R1"\npartner = "S1"\n', r"cur.toml:26: block\[3\]: this block is given twice \(first on line 10\)"),
    ('[[category_pair]]\ncategories = ["sofa", "rug"]\n', r"cur.toml:26: category_pair\[3\]: category pair rug \+ sofa is given twice"),
    ('[[pin]]\nproduct = "S1"\npartner = "R1"\n', r"cur.toml:26: pin\[2\]: pins S1 -> R1, which the block on line 10 forbids"),
    ('[[block]]\nproduct = "S1"\n', r"cur.toml:26: block\[3\]: give either partner"),
    ('[[category_pair]]\ncategories = ["sofa", "bed"]\nmin_score = 1.5\n', r"cur.toml:28: category_pair\[3\]\.min_score: must be a number from 0 to 1"),
    ('[[pin]]\nproduct = "S2"\npartner = "R2"\nrnak = 2\n', r"cur.toml:29: pin\[2\]\.rnak: unknown key \(did you mean 'rank'\?\)"),
])
def test_errors_name_file_line_and_key(extra, message):
    with pytest.raises(CurationError, match=message):
        parse_curation(EXAMPLE + "\n" + extra, "cur.toml")


def test_not_toml_is_one_error():
    with pytest.raises(CurationError, match=r"cur.toml: not valid TOML"):
        parse_curation("[[pin]\n", "cur.toml")


def test_unknown_products_are_warnings_with_lines():
    c = parse_curation(EXAMPLE, "cur.toml")
    out = unknown_product_warnings(c, ["S1", "R1", "D1"], ["sofa", "rug", "desk"])
    assert out == [
        "cur.toml:5: pin names unknown product 'R9'; ignored",
        "cur.toml:14: block names category 'cushion', which the store has none of",
        "cur.toml:18: category_pair names category 'armchair', which the store has none of",
    ]
    # With each product's category known, a pin inside one category is named: the feed only
    # pairs different categories.
    out = unknown_product_warnings(c, {"S1": "sofa", "R9": "sofa", "R1": "rug", "D1": "desk"},
                                   ["sofa", "rug", "desk", "armchair", "cushion"])
    assert out == ["cur.toml:5: pin S1 -> R9: both are sofa; the feed pairs products of different categories, "
                   "so the pin is ignored"]
    # A category misspelt (the store says "desks"): the closest name is offered (difflib).
    out = unknown_product_warnings(c, ["S1", "R1", "R9", "D1"], ["sofa", "rug", "desks", "armchair", "cushion"])
    assert out == ["cur.toml:18: category_pair names category 'desk', which the store has none of "
                   "(did you mean 'desks'?)"]


@pytest.mark.parametrize("text, empty", [
    ("", True),
    ("# pins go here\nformat = 1\n", True),
    ("min_score = 0.0\nonly_listed_category_pairs = false\n", True),
    ("min_score = 0.05\n", False),
    ("max_partner_categories = 3\n", False),
    ("only_listed_category_pairs = true\n", False),
    ('[[pin]]\nproduct = "S1"\npartner = "R1"\nrank = 1\n', False),
])
def test_a_file_that_changes_nothing_is_warned_of(text, empty):
    # Both sides: an empty or all-comment file (most likely not the one meant) gets one warning;
    # any one rule, floor or limit is a file that changes something.
    c = parse_curation(text, where="c.toml")
    assert c.empty is empty
    out = unknown_product_warnings(c, ["S1", "R1"], ["sofa", "rug"])
    assert [m for m in out if "the feed is as it would be without this file" in m] == (
        ["c.toml: no pin, block, category pair, min_score or limit; the feed is as it would be without this file"]
        if empty else [])


def test_curate_blocks_floors_and_pins():
    c = parse_curation(EXAMPLE, "cur.toml")
    ranked = rows("S1", "sofa", "rug", [("R1", 0.9), ("R2", 0.8), ("R3", 0.6), ("R4", 0.45)])
    pinned = FeedRow("S1", "sofa", "R9", "rug", 0, 0.1, "pinned one")
    out = curate(c, "S1", "rug", ranked, lambda pid: pinned if pid == "R9" else None, top=3)
    # R1 blocked, R4 under the sofa-rug floor 0.5, R9 pinned at rank 1 whatever its score.
    assert [(r.partner, r.rank, r.pinned) for r in out] == [("R9", 1, True), ("R2", 2, False), ("R3", 3, False)]
    assert removal_reason(c, ranked[0]) == "blocked (cur.toml:10)"
    assert removal_reason(c, ranked[3]) == "score 0.45 under the floor 0.50 (cur.toml:22)"
    assert removal_reason(c, ranked[1]) is None


def test_pin_cuts_the_last_plain_row_and_stays_at_the_end_when_rank_is_past_the_list():
    c = parse_curation('[[pin]]\nproduct = "A"\npartner = "Z"\nrank = 9\n', "c.toml")
    ranked = rows("A", "sofa", "rug", [("X", 0.9), ("Y", 0.8)])
    z = FeedRow("A", "sofa", "Z", "rug", 0, 0.3, "z")
    out = curate(c, "A", "rug", ranked, lambda pid: z, top=2)
    assert [(r.partner, r.pinned) for r in out] == [("X", False), ("Z", True)]
    # A pin of another category is not placed among these rows.
    assert [r.partner for r in curate(c, "A", "lamp", ranked, lambda pid: z, top=2)] == ["X", "Y"]


def test_limit_partner_categories_keeps_pinned_then_best():
    c = parse_curation("max_partner_categories = 2\n", "c.toml")
    rs = (rows("A", "sofa", "rug", [("R", 0.5)]) + rows("A", "sofa", "lamp", [("L", 0.9)])
          + rows("A", "sofa", "cushion", [("C", 0.7)]))
    assert {r.partner_category for r in limit_partner_categories(c, rs)} == {"lamp", "cushion"}
    import dataclasses

    rs[0] = dataclasses.replace(rs[0], pinned=True)
    assert {r.partner_category for r in limit_partner_categories(c, rs)} == {"rug", "lamp"}


def test_only_listed_pairs():
    c = parse_curation('only_listed_category_pairs = true\n[[category_pair]]\ncategories = ["sofa", "rug"]\n', "c.toml")
    assert category_pair_allowed(c, "rug", "sofa") and not category_pair_allowed(c, "sofa", "lamp")


def test_set_allowed():
    c = parse_curation(EXAMPLE, "cur.toml")
    assert not set_allowed(c, [("S1", "sofa"), ("R1", "rug")])
    assert not set_allowed(c, [("D1", "desk"), ("C7", "cushion")])
    assert set_allowed(c, [("S1", "sofa"), ("R2", "rug")]) and set_allowed(None, [("S1", "sofa"), ("R1", "rug")])


# -- through the feed, suggest and bundle commands ---------------------------------------------------


@pytest.fixture()
def shop(tmp_path):
    import numpy as np
    from test_feed import make_store, random_palettes

    pals = random_palettes(14, np.random.default_rng(5))
    items = [(f"S{i}", "sofa", None, pals[i]) for i in range(3)]
    items += [(f"R{i}", "rug", None, pals[3 + i]) for i in range(6)]
    items += [(f"L{i}", "floor lamp", 0 if i == 4 else None, pals[9 + i]) for i in range(5)]
    return make_store(tmp_path, items)


def test_feed_honours_curation_and_records_what_made_it(shop, tmp_path):
    from harmony.cli import main
    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.feed_run import build_feed

    with Store(shop) as store:
        plain = build_feed(store, load_rules(), top=3)
    best = {(r.product, r.partner_category): [x.partner for x in plain
                                              if (x.product, x.partner_category) == (r.product, r.partner_category)]
            for r in plain}
    top_rug, worst_rug = best[("S0", "rug")][0], sorted({f"R{i}" for i in range(6)} - set(best[("S0", "rug")]))[0]
    text = (f'[[block]]\nproduct = "S0"\npartner = "{top_rug}"\n\n'
            f'[[pin]]\nproduct = "S0"\npartner = "{worst_rug}"\nrank = 2\n\n'
            '[[pin]]\nproduct = "S1"\npartner = "NOPE"\n\n'
            '[[category_pair]]\ncategories = ["sofa", "floor lamp"]\nblocked = true\n')
    (tmp_path / "cur.toml").write_text(text, encoding="utf-8")
    out = tmp_path / "feed.jsonl"
    res = CliRunner().invoke(main, ["feed", "--db", str(shop), "--top", "3", "--out", str(out),
                                    "--curation", str(tmp_path / "cur.toml")])
    assert res.exit_code == 0, res.output
    assert f"{tmp_path / 'cur.toml'}:10: pin names unknown product 'NOPE'" in res.stderr
    rows = [json.loads(line) for line in out.read_text().splitlines()]
    s0 = [(r["partner"], r["rank"], r["pinned"]) for r in rows if r["product"] == "S0"]
    assert all(cat == "rug" for cat in {r["partner_category"] for r in rows if r["category"] == "sofa"})
    assert top_rug not in [p for p, _, _ in s0] and (worst_rug, 2, True) in s0 and len(s0) == 3
    assert not any(r["category"] == "floor lamp" and r["partner_category"] == "sofa" for r in rows)
    about = json.loads((tmp_path / "feed.jsonl.about.json").read_text())
    assert about["rules"]["file"] == "default.toml" and about["curation"]["file"] == "cur.toml"
    assert len(about["curation"]["sha256"]) == 64

    res = CliRunner().invoke(main, ["suggest", "S0", "--db", str(shop), "--category", "rug", "--json",
                                    "--curation", str(tmp_path / "cur.toml")])
    assert res.exit_code == 0, res.output
    got = json.loads(res.stdout)["suggestions"]
    assert [(s["partner"], s["pinned"]) for s in got][1] == (worst_rug, True)
    assert top_rug not in [s["partner"] for s in got]


def test_same_rule_twice_is_an_error_from_the_command(shop, tmp_path):
    from harmony.cli import main

    (tmp_path / "cur.toml").write_text('[[block]]\nproduct = "S0"\npartner = "R1"\n'
                                       '[[block]]\nproduct = "R1"\npartner = "S0"\n', encoding="utf-8")
    res = CliRunner().invoke(main, ["feed", "--db", str(shop), "--out", str(tmp_path / "f.csv"),
                                    "--curation", str(tmp_path / "cur.toml")])
    assert res.exit_code == 2
    assert res.stderr.strip().endswith("cur.toml:4: block[2]: this block is given twice (first on line 1)")
    assert not (tmp_path / "f.csv").exists()
