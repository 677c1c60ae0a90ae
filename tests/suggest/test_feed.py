"""The feed, maximal marginal relevance and suggestions, on small stores built in the test."""

import csv
import json

import numpy as np
import pytest

from harmony import colour
from harmony.errors import HarmonyError, StoreError
from harmony.photo.palette import Palette
from harmony.rules import load_rules
from harmony.rules.score import pair_score
from harmony.shop.catalogue import read_catalogue
from harmony.shop.store import FileHash, Store
from harmony.suggest.feed import (
    FEED_COLUMNS,
    mmr_select,
    palette_similarity,
    similarity_matrix,
    suggest,
    write_feed,
)
from harmony.suggest.feed_run import build_feed


def make_store(tmp_path, items):
    """A store holding ``items``: (id, category, stock or None, Palette or None) each.

    The image files are stand-ins (their bytes are never decoded); palettes are recorded directly.
    """
    (tmp_path / "img").mkdir(exist_ok=True)
    with open(tmp_path / "catalogue.csv", "w", newline="", encoding="utf-8") as fh:
        out = csv.writer(fh)
        out.writerow(["id", "title", "category", "price", "currency", "stock", "image"])
        for pid, cat, stock, _ in items:
            (tmp_path / "img" / f"{pid}.jpg").write_bytes(pid.encode())
            out.writerow([pid, f"Item {pid}", cat, "100", "EUR", "" if stock is None else stock, f"img/{pid}.jpg"])
    catalogue = read_catalogue(tmp_path / "catalogue.csv")
    assert not catalogue.problems
    hashes = {}
    for pid, *_ in items:
        path = str(catalogue.image_path(f"img/{pid}.jpg"))
        hashes[path] = FileHash(path, f"sha-{pid}", 3, 0)
    db = tmp_path / "harmony.db"
    with Store.create(db) as store:
        store.sync_catalogue(catalogue, hashes, "test")
        store.record([(f"sha-{pid}", pal, None if pal else "unreadable") for pid, _, _, pal in items], "test")
    return db


def random_palettes(n, rng, k=6):
    srgb1 = rng.random((n, k, 3))
    weights = rng.dirichlet(np.ones(k), n)
    jab = colour.srgb1_to_jab(srgb1)
    return [Palette(jab[i], weights[i]) for i in range(n)]


@pytest.fixture(scope="module")
def rules():
    return load_rules()


@pytest.fixture()
def shop(tmp_path):
    rng = np.random.default_rng(21)
    pals = random_palettes(24, rng)
    items = [(f"S{i}", "Sofa", None, pals[i]) for i in range(6)]
    items += [(f"R{i}", "rug", 0 if i in (2, 5) else 3, pals[6 + i]) for i in range(10)]
    items += [(f"L{i}", "Floor Lamp", None, pals[16 + i]) for i in range(7)]
    items += [("S9", "sofa", None, None)]
    return make_store(tmp_path, items), dict(zip([it[0] for it in items], [it[3] for it in items]))


def test_feed_lists_the_exact_best_in_stock_partners(shop, rules):
    db, pals = shop
    with Store(db) as store:
        rows = build_feed(store, rules, top=3, targets=["RUG"], warn=lambda m: None)
    assert {r.partner_category for r in rows} == {"rug"}
    assert "R2" not in {r.partner for r in rows} and "R5" not in {r.partner for r in rows}
    # Brute force over every in-stock rug with the exact score (harmony.rules.score) is the reference.
    in_stock = [f"R{i}" for i in range(10) if i not in (2, 5)]
    pr = rules.for_pair("sofa", "rug")
    for sofa in ("S0", "S3"):
        scores = sorted(((pair_score(pals[sofa], pals[r], pr).score, r) for r in in_stock), key=lambda t: -t[0])
        got = [(r.partner, r.rank) for r in rows if r.product == sofa]
        assert got == [(name, i + 1) for i, (_, name) in enumerate(scores[:3])]
        best = next(r for r in rows if r.product == sofa and r.rank == 1)
        assert best.score == pytest.approx(scores[0][0]) and best.reason
    # Lamps get rug rows too; the palette-less sofa gets none.
    assert any(r.category == "floor lamp" for r in rows)
    assert "S9" not in {r.product for r in rows}


def test_out_of_stock_never_appears_in_any_feed(shop, rules):
    db, _ = shop
    with Store(db) as store:
        for diversity in (0.0, 0.7):
            rows = build_feed(store, rules, top=8, diversity=diversity, warn=lambda m: None)
            assert rows
            assert not {"R2", "R5"} & {r.partner for r in rows}
            assert all(list(r.to_dict()) == list(FEED_COLUMNS) for r in rows)


def test_mmr_reduces_near_duplicates(tmp_path, rules):
    # One sofa; five near-identical copies of one rug (shade jitter under 1 dE) and five
    # different rugs. Plain ranking fills the list with the copies; MMR spreads it out.
    rng = np.random.default_rng(22)
    sofa = Palette(colour.srgb1_to_jab([[0.2, 0.3, 0.6], [0.9, 0.9, 0.85]]), [0.7, 0.3])
    base = colour.srgb1_to_jab([[0.85, 0.55, 0.2], [0.95, 0.93, 0.9]])
    copies = [Palette(base + rng.normal(0, 0.3, base.shape), [0.6, 0.4]) for _ in range(5)]
    others = random_palettes(5, rng)
    items = [("S0", "sofa", None, sofa)] + [(f"C{i}", "rug", None, p) for i, p in enumerate(copies)]
    items += [(f"O{i}", "rug", None, p) for i, p in enumerate(others)]
    db = make_store(tmp_path, items)
    with Store(db) as store:
        plain = build_feed(store, rules, top=3, targets=["rug"], warn=lambda m: None)
        spread = build_feed(store, rules, top=3, targets=["rug"], diversity=0.6, warn=lambda m: None)
        pals = store.palettes()

    def redundancy(rows):
        chosen = [pals[r.partner] for r in rows if r.product == "S0"]
        sim = similarity_matrix(chosen)
        return sim[np.triu_indices(len(chosen), 1)].max()

    assert sum(r.partner.startswith("C") for r in plain if r.product == "S0") >= 2
    assert sum(r.partner.startswith("C") for r in spread if r.product == "S0") == 1
    assert redundancy(spread) < redundancy(plain)


def test_mmr_worked_example():
    # Hand-worked with the MMR rule of Carbonell & Goldstein (1998), lambda = 0.5: items 0 and 1
    # are duplicates. Pick 0 (relevance 0.9); then 1 scores 0.5*0.85 - 0.5*1.0 = -0.075 and
    # 2 scores 0.5*0.6 - 0.5*0.1 = 0.25, so 2 comes before 1.
    rel = [0.9, 0.85, 0.6]
    sim = [[1.0, 1.0, 0.1], [1.0, 1.0, 0.1], [0.1, 0.1, 1.0]]
    assert mmr_select(rel, sim, 3, 0.5) == [0, 2, 1]
    assert mmr_select(rel, sim, 3, 0.0) == [0, 1, 2]
    with pytest.raises(ValueError, match="diversity must lie in"):
        mmr_select(rel, sim, 2, 1.5)


def test_palette_similarity_is_one_for_identical_and_small_for_distant_palettes():
    rng = np.random.default_rng(23)
    p, q = random_palettes(2, rng)
    assert palette_similarity(p, p) == pytest.approx(1.0)
    assert palette_similarity(p, q) == pytest.approx(palette_similarity(q, p))
    black = Palette([[0.0, 0.0, 0.0]], [1.0])
    white = Palette(colour.srgb1_to_jab([[1.0, 1.0, 1.0]]), [1.0])
    assert palette_similarity(black, white) < 1e-6


def test_warnings_for_a_target_without_stock_and_missing_palettes(tmp_path, rules):
    rng = np.random.default_rng(24)
    pals = random_palettes(3, rng)
    db = make_store(tmp_path, [("S0", "sofa", None, pals[0]), ("R0", "rug", 0, pals[1]),
                               ("L0", "floor lamp", None, pals[2]), ("L1", "floor lamp", None, None)])
    said = []
    with Store(db) as store:
        rows = build_feed(store, rules, top=2, warn=said.append)
    assert any("target category 'rug' has no in-stock product" in m for m in said)
    assert any("1 product(s) have no palette" in m for m in said)
    assert {r.partner_category for r in rows} <= {"sofa", "floor lamp"}


def test_bad_input_errors(shop, tmp_path, rules):
    db, _ = shop
    with Store(db) as store:
        with pytest.raises(StoreError, match=r"unknown category 'rugs' \(did you mean 'rug'\?\)"):
            build_feed(store, rules, targets=["rugs"])
        with pytest.raises(StoreError, match=r"unknown product id 'S77'"):
            suggest(store, rules, "S77")
        with pytest.raises(StoreError, match="'S9' has no palette"):
            suggest(store, rules, "S9")
        with pytest.raises(StoreError, match="'sofa' is the category of 'S0' itself"):
            suggest(store, rules, "S0", category="Sofa")
        with pytest.raises(HarmonyError, match="top must be at least 1"):
            build_feed(store, rules, top=0)
    empty = tmp_path / "empty.db"
    Store.create(empty).close()
    with Store(empty) as store:
        with pytest.raises(StoreError, match="holds no products"):
            build_feed(store, rules)


def test_suggest_returns_exact_best_partners_across_categories(shop, rules):
    db, pals = shop
    with Store(db) as store:
        found = suggest(store, rules, "S1", n=4)
        only = suggest(store, rules, "S1", category="floor lamp", n=2)
    scores = [s.row.score for s in found]
    assert scores == sorted(scores, reverse=True) and len(found) == 4
    assert all(s.row.partner not in ("R2", "R5") for s in found)
    lamps = sorted((pair_score(pals["S1"], pals[f"L{i}"], rules.for_pair("sofa", "floor lamp")).score, f"L{i}")
                   for i in range(7))[::-1]
    assert [s.row.partner for s in only] == [name for _, name in lamps[:2]]


def test_write_feed_formats_round_trip(shop, rules, tmp_path):
    db, _ = shop
    with Store(db) as store:
        rows = build_feed(store, rules, top=2, warn=lambda m: None)
    want = [r.to_dict() for r in rows]
    write_feed(rows, tmp_path / "f.jsonl")
    assert [json.loads(line) for line in (tmp_path / "f.jsonl").read_text().splitlines()] == want
    write_feed(rows, tmp_path / "f.csv")
    with open(tmp_path / "f.csv", newline="", encoding="utf-8") as fh:
        back = list(csv.DictReader(fh))
    assert [b["partner"] for b in back] == [w["partner"] for w in want]
    assert float(back[0]["score"]) == pytest.approx(want[0]["score"])
    pq = pytest.importorskip("pyarrow.parquet")
    write_feed(rows, tmp_path / "f.out", "parquet")
    assert pq.read_table(tmp_path / "f.out").to_pylist() == want
    with pytest.raises(HarmonyError, match="cannot tell the feed format"):
        write_feed(rows, tmp_path / "f.txt")
    (tmp_path / "a-file").write_text("")
    with pytest.raises(HarmonyError, match="cannot write the feed"):
        write_feed(rows, tmp_path / "a-file" / "f.jsonl")


def test_screened_and_exactly_scored_feeds_agree(shop, rules, monkeypatch):
    # Small category pairs are scored exactly; forcing the screen must give the same rows
    # (the screen's re-rank is exact, and here the screened top-c holds the exact top-3).
    import harmony.suggest.feed as feed_module

    db, _ = shop
    with Store(db) as store:
        exact = build_feed(store, rules, top=3, warn=lambda m: None)
        monkeypatch.setattr(feed_module, "EXACT_PAIRS", 0)
        screened = build_feed(store, rules, top=3, warn=lambda m: None)
    assert [(r.product, r.partner, r.rank) for r in screened] == [(r.product, r.partner, r.rank) for r in exact]
    for s, e in zip(screened, exact):
        assert s.score == pytest.approx(e.score, abs=1e-12) and s.reason == e.reason


def test_mmr_first_pick_is_the_most_relevant_even_at_full_diversity():
    # Carbonell & Goldstein (1998): MMR starts from the most relevant item; with lambda = 0
    # (diversity 1) the rule alone would score every item 0 before anything is chosen.
    rel = [0.1, 0.9, 0.5]
    sim = [[1.0, 0.2, 0.9], [0.2, 1.0, 0.1], [0.9, 0.1, 1.0]]
    assert mmr_select(rel, sim, 1, 1.0) == [1]
    # Then the least similar to item 1: item 2 (0.1) before item 0 (0.2).
    assert mmr_select(rel, sim, 3, 1.0) == [1, 2, 0]


@pytest.mark.parametrize("diversity", [0.0, 0.7])
def test_every_row_is_the_exact_score_and_its_explanation_on_both_paths(shop, rules, monkeypatch, diversity):
    # The screen path (EXACT_PAIRS = 0 forces it) and the exact small-category path must both
    # leave out the out-of-stock rugs and give each row the exact pair score with its reason.
    import harmony.suggest.feed as feed_module

    db, pals = shop
    for exact_pairs in (feed_module.EXACT_PAIRS, 0):
        monkeypatch.setattr(feed_module, "EXACT_PAIRS", exact_pairs)
        with Store(db) as store:
            rows = build_feed(store, rules, top=4, diversity=diversity, warn=lambda m: None)
        assert len({r.product for r in rows}) == 23  # every product with a palette
        assert not {"R2", "R5"} & {r.partner for r in rows}
        for r in rows:
            ps = pair_score(pals[r.product], pals[r.partner], rules.for_pair(r.category, r.partner_category))
            assert r.score == pytest.approx(ps.score, abs=1e-12)
            assert r.reason == ps.reason


def test_a_failed_write_leaves_the_older_feed_whole(shop, rules, tmp_path, monkeypatch):
    import harmony.fileio as fileio

    db, _ = shop
    with Store(db) as store:
        rows = build_feed(store, rules, top=2, warn=lambda m: None)
    for name in ("old.jsonl", "old.csv"):
        target = tmp_path / name
        target.write_text("the older feed\n")

        def full_disk(src, dst):
            raise OSError(28, "No space left on device")

        monkeypatch.setattr(fileio.os, "replace", full_disk)
        with pytest.raises(HarmonyError, match=f"{name}: cannot write the feed: No space left"):
            write_feed(rows, target)
        monkeypatch.undo()
        assert target.read_text() == "the older feed\n"
    pq = pytest.importorskip("pyarrow.parquet")
    target = tmp_path / "old.parquet"
    target.write_bytes(b"the older feed")

    def half_then_fail(self, table, *args, **kwargs):
        # The writer has its temporary file open and half written when the disk fills.
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(pq.ParquetWriter, "write_table", half_then_fail)
    with pytest.raises(HarmonyError, match="old.parquet: cannot write the feed: No space left"):
        write_feed(rows, target)
    assert target.read_bytes() == b"the older feed"
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_write_feed_creates_missing_folders_and_names_an_unwritable_one(shop, rules, tmp_path):
    db, _ = shop
    with Store(db) as store:
        rows = build_feed(store, rules, top=1, warn=lambda m: None)
    write_feed(rows, tmp_path / "new" / "nested" / "f.csv")
    assert (tmp_path / "new" / "nested" / "f.csv").read_text().startswith("product,category,partner")
    (tmp_path / "plain").write_text("a file, not a folder")
    for name in ("f.jsonl", "f.parquet"):
        if name.endswith("parquet"):
            pytest.importorskip("pyarrow")
        with pytest.raises(HarmonyError, match=f"plain/{name}: cannot write the feed"):
            write_feed(rows, tmp_path / "plain" / name)


def test_a_requested_target_that_nothing_pairs_with_is_a_warning(shop, rules):
    from harmony.resources import DEFAULT_RULES
    from harmony.rules import parse_rules

    # The default rules with unlisted pairs unscored and the sofa / floor lamp pair unscored too:
    # the shop's floor lamps then pair with nothing (the shop has sofas, rugs and floor lamps).
    text = DEFAULT_RULES.read_text(encoding="utf-8")
    lamp = 'categories = ["sofa", "floor lamp"]\n'
    assert "\nscored = true\n" in text and lamp in text
    text = text.replace("\nscored = true\n", "\nscored = false\n", 1).replace(lamp, lamp + "scored = false\n")
    only_listed = parse_rules(text, "listed.toml")
    assert only_listed.pairs_with("sofa", "rug") and not only_listed.pairs_with("sofa", "floor lamp")
    assert not only_listed.pairs_with("rug", "floor lamp")
    db, _ = shop
    said = []
    with Store(db) as store:
        rows = build_feed(store, only_listed, top=2, targets=["rug", "floor lamp"], warn=said.append)
    assert any("listed.toml: the rules pair target category 'floor lamp' with no other category" in m for m in said)
    assert rows and {r.partner_category for r in rows} == {"rug"}
