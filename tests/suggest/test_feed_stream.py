"""The streamed feed: the same rows, scores and reasons as the exact path pair by pair, files
written one category pair at a time, and the Dask engine writing the same bytes."""

import json

import numpy as np
import pytest

from harmony import colour
from harmony.photo.palette import Palette
from harmony.rules import load_rules
from harmony.rules.score import pair_score, to_unit
from harmony.rules.screen import exact_raw
from harmony.shop.store import Store
from harmony.suggest import feed as feed_module
from harmony.suggest.feed import FeedRow, mmr_select, plan_feed, similarity_matrix
from harmony.suggest.feed_run import build_feed, write_feed_stream

from test_feed import make_store


def synthetic_palettes(n, rng, k_max=10):
    """Random palettes of 3..k_max colours from uniform sRGB (no photos: test inputs only)."""
    out = []
    for _ in range(n):
        k = int(rng.integers(3, k_max + 1))
        jab = colour.srgb1_to_jab(rng.random((k, 3)))
        w = np.sort(rng.dirichlet(np.ones(k)))[::-1]
        out.append(Palette(jab, w))
    return out


CATEGORIES = ("sofa", "rug", "floor lamp")


@pytest.fixture(scope="module")
def rules():
    return load_rules()


@pytest.fixture()
def store_items():
    rng = np.random.default_rng(1414)
    pals = synthetic_palettes(150, rng)
    items = []
    for n, pal in enumerate(pals):
        stock = 0 if n % 17 == 3 else None
        items.append((f"P{n:03d}", CATEGORIES[n % 3], stock, None if n == 7 else pal))
    return items


def old_exact_feed(items, rules, top, diversity):
    """The feed as the code before streaming made it on small stores: every in-stock partner
    scored exactly, the best ``pool`` kept, MMR or the plain order, then each listed pair
    scored and explained on its own by :func:`harmony.rules.score.pair_score`."""
    pool = top if diversity == 0 else 3 * top
    cats = sorted({c for _, c, _, _ in items})
    rows = []
    for a in cats:
        for b in cats:
            if a == b or not rules.pairs_with(a, b):
                continue
            pr = rules.for_pair(a, b)
            side_a = sorted((pid, pal) for pid, c, _, pal in items if c == a and pal is not None)
            side_b = sorted((pid, pal) for pid, c, st, pal in items if c == b and pal is not None and st != 0)
            pals_b = [pal for _, pal in side_b]
            for pid, pal in side_a:
                raw = exact_raw(pal, pals_b, pr)
                order = np.lexsort((np.arange(len(pals_b)), -raw))[:pool]
                if diversity > 0 and len(order) > 1:
                    sim = similarity_matrix([pals_b[j] for j in order])
                    chosen = [int(order[c]) for c in mmr_select(to_unit(raw[order], pr), sim, top, diversity)]
                else:
                    chosen = [int(j) for j in order[:top]]
                for rank, j in enumerate(chosen, start=1):
                    ps = pair_score(pal, pals_b[j], pr)
                    rows.append(FeedRow(pid, a, side_b[j][0], b, rank, float(ps.score), ps.reason))
    rows.sort(key=lambda r: (r.product, r.partner_category, r.rank))
    return rows


@pytest.mark.parametrize("diversity", [0.0, 0.3])
@pytest.mark.parametrize("screened", [False, True])
def test_rows_scores_and_reasons_equal_the_exact_path(tmp_path, store_items, rules, monkeypatch, diversity, screened):
    # The reference is the old exact path, re-implemented above; "screened" forces the screen and
    # its exact re-rank on every category pair (50 x 47 pairs would otherwise be scored exactly).
    if screened:
        monkeypatch.setattr(feed_module, "EXACT_PAIRS", 0)
    db = make_store(tmp_path, store_items)
    with Store(db) as store:
        rows = build_feed(store, rules, top=4, diversity=diversity, warn=lambda m: None)
    want = old_exact_feed(store_items, rules, 4, diversity)
    assert len(rows) == len(want) > 0
    assert rows == want  # every field, scores to the last bit, reasons to the letter


def test_stream_writes_chunks_by_category_pair_in_every_format(tmp_path, store_items, rules):
    db = make_store(tmp_path, store_items)
    with Store(db) as store:
        rows = build_feed(store, rules, top=3, warn=lambda m: None)
        path, count, products = write_feed_stream(store, rules, tmp_path / "f.jsonl", top=3, warn=lambda m: None)
        csv_path, csv_count, _ = write_feed_stream(store, rules, tmp_path / "f.csv", top=3, warn=lambda m: None)
        pq_path, pq_count, _ = write_feed_stream(store, rules, tmp_path / "f.parquet", top=3, warn=lambda m: None)
    lines = path.read_text(encoding="utf-8").splitlines()
    assert count == csv_count == pq_count == len(rows) == len(lines)
    assert products == len({r.product for r in rows})
    records = [json.loads(line) for line in lines]
    # Each line is exactly json.dumps of its record (the writer formats rows without dicts).
    assert lines == [json.dumps(rec, ensure_ascii=False) for rec in records]
    assert sorted(map(tuple, (r.values() for r in records))) == sorted(tuple(r.to_dict().values()) for r in rows)
    pairs = [(r["category"], r["partner_category"]) for r in records]
    # Grouped by category pair: each pair's rows are contiguous.
    starts = [p for n, p in enumerate(pairs) if n == 0 or pairs[n - 1] != p]
    assert len(starts) == len(set(starts))
    import csv as csv_module

    with open(csv_path, newline="", encoding="utf-8") as fh:
        got = list(csv_module.DictReader(fh))
    assert [(g["product"], g["partner"], g["reason"]) for g in got] == [
        (r["product"], r["partner"], r["reason"]) for r in records
    ]
    pq = pytest.importorskip("pyarrow.parquet")
    meta = pq.ParquetFile(pq_path).metadata
    assert meta.num_row_groups == len(starts)
    table = pq.read_table(pq_path).to_pylist()
    assert table == records


def test_no_rows_is_said_before_the_file_is_touched(tmp_path, rules):
    rng = np.random.default_rng(5)
    pals = synthetic_palettes(4, rng)
    items = [("S1", "sofa", None, pals[0]), ("S2", "sofa", None, pals[1]), ("R1", "rug", 0, pals[2])]
    db = make_store(tmp_path, items)
    target = tmp_path / "old.jsonl"
    target.write_text("the older feed\n")
    with Store(db) as store:
        with pytest.raises(Exception, match="no feed rows"):
            write_feed_stream(store, rules, target, top=3, targets=["rug"], warn=lambda m: None)
    assert target.read_text() == "the older feed\n"


def test_plan_lists_each_unordered_pair_once(tmp_path, store_items, rules):
    db = make_store(tmp_path, store_items)
    with Store(db) as store:
        plan = plan_feed(store, rules, top=3, warn=lambda m: None)
        only_rugs = plan_feed(store, rules, top=3, targets=["rug"], warn=lambda m: None)
    assert [t[:2] for t in plan.tasks] == [("floor lamp", "rug"), ("floor lamp", "sofa"), ("rug", "sofa")]
    assert all(t[2] and t[3] for t in plan.tasks)
    # With one target category, only the directions into it are listed.
    assert [(a, b, ab, ba) for a, b, ab, ba in only_rugs.tasks] == [
        ("floor lamp", "rug", True, False), ("rug", "sofa", False, True)
    ]


@pytest.mark.slow
def test_dask_engine_writes_the_same_bytes(tmp_path, store_items, rules, monkeypatch):
    pytest.importorskip("distributed")
    db = make_store(tmp_path, store_items)
    with Store(db) as store:
        local, _, _ = write_feed_stream(store, rules, tmp_path / "local.jsonl", top=3, warn=lambda m: None)
        remote, _, _ = write_feed_stream(store, rules, tmp_path / "dask.jsonl", top=3, warn=lambda m: None,
                                         engine="dask", workers=2)
        # Large category pairs forced into blocks of 9 products: several tasks per pair.
        blocked, _, _ = write_feed_stream(store, rules, tmp_path / "blocked.jsonl", top=3, warn=lambda m: None,
                                          engine="dask", workers=2, block=9)
    assert local.read_bytes() == remote.read_bytes() == blocked.read_bytes()
    assert len(local.read_bytes()) > 0


def test_blocks_of_a_category_pair_write_the_same_bytes(tmp_path, store_items, rules, monkeypatch):
    # Blocks of 7 products per task part, with every pair screened: the same bytes as whole
    # category pairs (each block's screen is prepared on every product of both sides).
    monkeypatch.setattr(feed_module, "EXACT_PAIRS", 0)
    db = make_store(tmp_path, store_items)
    with Store(db) as store:
        whole, _, _ = write_feed_stream(store, rules, tmp_path / "whole.jsonl", top=3, warn=lambda m: None)
        plan = plan_feed(store, rules, top=3, warn=lambda m: None, block=7)
        blocked, _, _ = write_feed_stream(store, rules, tmp_path / "blocked.jsonl", top=3, warn=lambda m: None,
                                          block=7)
    parts = feed_module.task_parts(plan, plan.tasks[0])
    sizes = [len(plan.categories[c][0]) for c in plan.tasks[0][:2]]
    assert len(parts) == sum(-(-n // 7) for n in sizes) > 2 and parts[0] == (plan.tasks[0][0], 0, 7)
    assert whole.read_bytes() == blocked.read_bytes()
    assert len(whole.read_bytes()) > 0


def test_local_engine_in_two_processes_writes_the_same_bytes(tmp_path, store_items, rules):
    # The forked workers run the same tasks with the same arithmetic: the file must not change,
    # also with large pairs split into blocks (block=9), nor its order.
    db = make_store(tmp_path, store_items)
    kw = dict(top=3, warn=lambda m: None)
    with Store(db) as store:
        one, rows, _ = write_feed_stream(store, rules, tmp_path / "one.jsonl", workers=1, **kw)
        two, _, _ = write_feed_stream(store, rules, tmp_path / "two.jsonl", workers=2, **kw)
        blocked, _, _ = write_feed_stream(store, rules, tmp_path / "b.jsonl", workers=2, block=9, **kw)
        # The workers also write the text out (JSON lines here, CSV below).
        csv_one, _, _ = write_feed_stream(store, rules, tmp_path / "one.csv", workers=1, **kw)
        csv_two, _, _ = write_feed_stream(store, rules, tmp_path / "two.csv", workers=2, **kw)
    assert rows > 0
    assert one.read_bytes() == two.read_bytes() == blocked.read_bytes()
    assert csv_one.read_bytes() == csv_two.read_bytes()
    assert len(csv_one.read_bytes().splitlines()) == rows + 1


def test_a_dying_worker_is_one_error_and_no_file(tmp_path, store_items, rules, monkeypatch):
    # A worker process that dies (as the kernel's out-of-memory killer would end it) must give
    # one clear error and leave no half-written feed behind.
    import os

    from harmony.errors import HarmonyError
    from harmony.suggest import feed_pool

    db = make_store(tmp_path, store_items)
    monkeypatch.setattr(feed_pool, "_one", lambda plan, rules, job: os._exit(9))
    out = tmp_path / "feed.jsonl"
    with Store(db) as store, pytest.raises(HarmonyError, match="worker process died"):
        write_feed_stream(store, rules, out, top=3, warn=lambda m: None, workers=2)
    assert not out.exists()
