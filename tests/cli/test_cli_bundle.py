"""``harmony bundle`` on the demo shop: the JSON, its consistency with the exact pair score, bad input."""

import json

import pytest
from click.testing import CliRunner

from harmony.cli import main
from harmony.report.page import read_bundles
from harmony.resources import DEFAULT_RULES, DEMO_DIR
from harmony.rules import load_rules
from harmony.rules.score import pair_score
from harmony.shop.engine import run_extraction
from harmony.shop.store import Store
from harmony.suggest.room import load_room


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("store") / "shop.db"
    run_extraction(DEMO_DIR / "shop" / "catalogue.csv", path, workers=1, progress=False)
    return path


def run(*args):
    return CliRunner().invoke(main, ["bundle", *map(str, args)])


def test_json_shape_and_consistency(db):
    res = run("--db", db, "--room", DEMO_DIR / "dining_corner.toml", "--top", 3, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert set(data) == {"format", "room", "budget", "currency", "exact", "pool_sizes", "eligible_sizes", "bundles"}
    assert data["format"] == 2
    assert data["room"] == "Dining corner" and data["currency"] == "EUR" and data["exact"] is True
    room = load_room(DEMO_DIR / "dining_corner.toml")
    assert set(data["pool_sizes"]) == {s.name for s in room.slots}
    assert 1 <= len(data["bundles"]) <= 3
    rules = load_rules(DEFAULT_RULES)
    scores = [b["score"] for b in data["bundles"]]
    assert scores == sorted(scores, reverse=True)
    with Store(db) as store:
        for b in data["bundles"]:
            assert set(b) == {"score", "total_price", "items", "slot_pairs", "proportions"}
            total = sum(i["quantity"] * i["price"] for i in b["items"])
            assert b["total_price"] == pytest.approx(total) and total <= data["budget"]
            slots = {i["slot"]: i for i in b["items"]}
            assert {"table", "chairs", "rug"} <= set(slots)  # the required slots
            assert slots["chairs"]["quantity"] == 4
            # Each pair score equals harmony.rules.score.pair_score on the stored palettes.
            value = 0.0
            for p in b["slot_pairs"]:
                a, c = slots[p["a"]], slots[p["b"]]
                pa, pc = store.product(a["id"]), store.product(c["id"])
                exact = pair_score(store.palette(pa.id), store.palette(pc.id), rules.for_pair(pa.category, pc.category))
                assert p["score"] == pytest.approx(exact.score, abs=1e-6)
                assert p["weight"] == room.pair_weight(p["a"], p["b"])
                value += p["weight"] * p["score"]
            assert b["score"] == pytest.approx(value, abs=1e-5)
            prop = b["proportions"]
            assert prop["dominant"] >= prop["secondary"]
            assert prop["dominant"] + prop["secondary"] + prop["accent"] == pytest.approx(1.0)
            assert prop["hue_template"]["name"] in set("iVLITYXN")


def test_report_reads_the_json(db, tmp_path):
    out = tmp_path / "sets.json"
    res = run("--db", db, "--room", "bedroom", "--json")
    assert res.exit_code == 0, res.output
    out.write_text(res.output, encoding="utf-8")
    assert read_bundles(out)["room"] == "Bedroom"


def test_anchor_exclude_and_difference(db):
    first = json.loads(run("--db", db, "--room", "home_office", "--json").output)["bundles"][0]
    desk = next(i["id"] for i in first["items"] if i["slot"] == "desk")
    chair = next(i["id"] for i in first["items"] if i["slot"] == "chair")
    res = run("--db", db, "--room", "home_office", "--exclude", f"{desk}, {chair}", "--anchor", desk,
              "--json")
    assert res.exit_code != 0 and "anchor" in res.output and "also excluded" in res.output
    data = json.loads(run("--db", db, "--room", "home_office", "--exclude", chair, "--top", 4,
                          "--min-difference", 2, "--json").output)
    chosen = [{i["slot"]: i["id"] for i in b["items"]} for b in data["bundles"]]
    assert all(c.get("chair") != chair for c in chosen)
    for i, a in enumerate(chosen):
        for b in chosen[:i]:
            assert sum(a.get(s) != b.get(s) for s in set(a) | set(b)) >= 2
    with Store(db) as store:
        rug = min((p for p in store.products("rug") if p.in_stock()), key=lambda p: (p.price, p.id)).id
    res = run("--db", db, "--room", "home_office", "--anchor", rug, "--top", 2, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert all(any(i["id"] == rug for i in b["items"]) for b in data["bundles"])
    assert data["pool_sizes"]["rug"] == 1


def test_text_output(db):
    res = run("--db", db, "--room", "living_room", "--top", 1)
    assert res.exit_code == 0, res.output
    assert "Living room: budget 3,200.00 EUR" in res.output and "exact over the pools" in res.output
    assert "hue template" in res.output and "1. score" in res.output


def test_budget_below_cheapest_names_the_total(db):
    res = run("--db", db, "--room", "dining_corner", "--budget", 50)
    assert res.exit_code == 2
    assert res.output.startswith("error: budget 50.00 EUR is below the cheapest complete set")
    total = float(res.output.split("': ")[1].split(" EUR")[0].replace(",", ""))
    with Store(db) as store:
        # Cheapest table + 4 x cheapest in-stock chair + cheapest rug, computed here independently.
        want = sum(min(p.price for p in store.products(c) if p.in_stock(q)) * q
                   for c, q in (("dining table", 1), ("dining chair", 4), ("rug", 1)))
    assert total == pytest.approx(want)


def test_slot_category_without_products(db, tmp_path):
    room = tmp_path / "hall.toml"
    room.write_text('name = "Hall"\nbudget = 900\ncurrency = "EUR"\n'
                    '[[slot]]\nname = "bench"\ncategory = "hall bench"\n'
                    '[[slot]]\nname = "rug"\ncategory = "rug"\n', encoding="utf-8")
    res = run("--db", db, "--room", room)
    assert res.exit_code == 2
    assert "error: room 'Hall': slot 'bench': no products of category 'hall bench' in the store" in res.output


def test_anchor_from_another_room(db):
    with Store(db) as store:
        bed = store.products("bed")[0].id
    res = run("--db", db, "--room", "dining_corner", "--anchor", bed)
    assert res.exit_code == 2
    assert f"error: anchor '{bed}' is a bed, which has no slot in room 'Dining corner'" in res.output


@pytest.mark.parametrize("option", ["--anchor", "--exclude"])
def test_unknown_id(db, option):
    res = run("--db", db, "--room", "dining_corner", option, "NO-SUCH-ID")
    assert res.exit_code == 2
    assert "unknown product id 'NO-SUCH-ID'" in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1


def test_bad_room_file_and_options(db, tmp_path):
    res = run("--db", db, "--room", tmp_path / "none.toml")
    assert res.exit_code == 2 and "no such room template" in res.output
    res = run("--db", db, "--room", "dining_corner", "--top", 0)
    assert res.exit_code == 2 and "top must be at least 1" in res.output
    res = run("--db", db, "--room", "dining_corner", "--budget", "nan")
    assert res.exit_code == 2 and "budget must be a positive number" in res.output
    res = run("--db", tmp_path / "missing.db", "--room", "dining_corner")
    assert res.exit_code == 2 and "no palette store here" in res.output


def test_pool_limit_keeps_the_best_partners_and_says_so(db):
    # Independent potential: every product's best exact pair_score (harmony.rules.score) with each
    # partner slot's eligible pool, weighted as in the template; the kept pool is the top 3 by it
    # (or the top 2 and the cheapest product, which is always kept).
    from harmony.suggest.bundle import build_problem

    room = load_room(DEMO_DIR / "dining_corner.toml")
    rules = load_rules(DEFAULT_RULES)
    with Store(db) as store:
        problem, eligible, _ = build_problem(store, room, rules, pool_limit=3)
        full, _, _ = build_problem(store, room, rules, pool_limit=1000)
        for s, slot in enumerate(room.slots):
            pool = full.pools[s]
            assert dict(eligible)[slot.name] == len(pool)
            potential = {}
            for c in pool:
                total = 0.0
                for t, other in enumerate(room.slots):
                    w = room.pair_weight(slot.name, other.name)
                    if t == s or w == 0 or not rules.pairs_with(slot.category, other.category):
                        continue
                    pr = rules.for_pair(slot.category, other.category)
                    total += w * max(pair_score(store.palette(c.id), store.palette(o.id), pr).score
                                     for o in full.pools[t])
                potential[c.id] = total
            ranked = sorted(pool, key=lambda c: -potential[c.id])
            cheapest = min(pool, key=lambda c: c.price).id
            kept = {c.id for c in problem.pools[s]}
            want = {c.id for c in ranked[:3]}
            if cheapest not in want:
                want = {c.id for c in ranked[:2]} | {cheapest}
            assert kept == want, slot.name
    res = run("--db", db, "--room", "dining_corner", "--pool-limit", 3, "--json")
    data = json.loads(res.output)
    assert data["pool_sizes"] == {s.name: 3 for s in room.slots}
    assert data["eligible_sizes"] == dict(eligible)
    res = run("--db", db, "--room", "dining_corner", "--pool-limit", 3, "--top", 1)
    assert "table 3 of " in res.output and "raise --pool-limit" in res.output
    res = run("--db", db, "--room", "dining_corner", "--pool-limit", 0)
    assert res.exit_code == 2 and res.output == "error: pool limit must be at least 1, got 0\n"


def test_anchor_with_an_empty_optional_slot(db):
    # Every pendant excluded: the optional pendant slot has an empty pool behind the anchored table.
    with Store(db) as store:
        pendants = ",".join(p.id for p in store.products("pendant lamp"))
        table = store.products("dining table")[0].id
    res = run("--db", db, "--room", "dining_corner", "--anchor", table, "--exclude", pendants, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["pool_sizes"]["pendant"] == 0 and data["pool_sizes"]["table"] == 1
    for b in data["bundles"]:
        assert {i["slot"] for i in b["items"]} == {"table", "chairs", "rug"}


def test_invalid_room_file_is_one_error_line(db):
    from pathlib import Path

    bad = Path(__file__).parent.parent / "data" / "rooms" / "many_problems.toml"
    res = run("--db", db, "--room", bad)
    assert res.exit_code == 2 and "Traceback" not in res.output
    assert res.output.count("\n") == 1 and res.output.startswith(f"error: {bad}:4: colour: unknown key")
    assert res.output.count(f"{bad}:") == 11


def test_pair_sections_are_checked_against_the_store(db, tmp_path):
    # The shipped rules name only categories of the demo shop: no warning.
    res = run("--db", db, "--room", "dining_corner", "--top", 1)
    assert res.exit_code == 0, res.output
    assert "warning:" not in res.stderr
    # A typo in a pair section is warned about with its line and the closest category; the run goes on.
    text = DEFAULT_RULES.read_text(encoding="utf-8")
    assert text.count('categories = ["dining table", "rug"]') == 1
    mine = tmp_path / "mine.toml"
    mine.write_text(text.replace('categories = ["dining table", "rug"]', 'categories = ["dining table", "rugs"]'),
                    encoding="utf-8")
    line = text.splitlines().index('categories = ["dining table", "rug"]') + 1
    res = run("--db", db, "--room", "dining_corner", "--top", 1, "--rules", mine, "--json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["bundles"]
    assert res.stderr.splitlines() == [
        f"warning: {mine}:{line}: pair dining table / rugs: no products of category 'rugs' in the store "
        "(did you mean 'rug'?)"
    ]


def test_a_budget_in_another_currency_than_the_prices_is_refused(db, tmp_path):
    # The demo catalogue prices in EUR; a template budget in USD (ISO 4217) cannot be compared.
    room = tmp_path / "usd.toml"
    room.write_text((DEMO_DIR / "dining_corner.toml").read_text().replace('currency = "EUR"', 'currency = "USD"'))
    assert 'currency = "USD"' in room.read_text()
    res = run("--db", db, "--room", room)
    assert res.exit_code == 2 and len(res.output.strip().splitlines()) == 1
    assert "the budget is in USD but" in res.output and "priced in EUR" in res.output
