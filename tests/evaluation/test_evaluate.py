import importlib
import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import ndcg_score, roc_auc_score

from harmony.colour.emd import emd
from harmony.errors import EventsError, HarmonyError
from harmony.evaluation import (
    ColourAttributeMethod,
    RandomMethod,
    RulesMethod,
    SameColoursMethod,
    auc,
    auc_table,
    build_queries,
    evaluate,
    hit_at_k,
    ideal_dcgs,
    metric_table,
    ndcg_at_k,
    standard_methods,
)
from harmony.photo.palette import Palette
from harmony.rules import load_rules
from harmony.shop.catalogue import Product
from harmony.shop.events import read_events

DATA = Path(__file__).parent.parent / "data" / "eval"


def random_lists(seed, n_lists=60):
    """Score lists with many ties and graded gains, each with a positive and a negative."""
    rng = np.random.default_rng(seed)
    out = []
    while len(out) < n_lists:
        n = int(rng.integers(2, 40))
        scores = rng.integers(0, 6, n).astype(float)
        gains = rng.integers(1, 4, n) * (rng.random(n) < 0.3)
        if 0 < np.count_nonzero(gains) < n:
            out.append((scores, gains.astype(float)))
    return out


# ---- metrics against scikit-learn -------------------------------------------------------------


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_auc_matches_scikit_learn(seed):
    # Reference: sklearn.metrics.roc_auc_score, ties included.
    for scores, gains in random_lists(seed):
        assert auc(scores, gains > 0) == pytest.approx(roc_auc_score(gains > 0, scores), abs=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("k", [1, 3, 10])
def test_ndcg_matches_scikit_learn(seed, k):
    # Reference: sklearn.metrics.ndcg_score (ignore_ties=False averages tied gains, as we do).
    for scores, gains in random_lists(seed):
        assert ndcg_at_k(scores, gains, k) == pytest.approx(ndcg_score([gains], [scores], k=k), abs=1e-12)


def test_ndcg_worked_example():
    # Worked by hand: gains 3, 0, 2 in score order; DCG = 3/log2(2) + 0 + 2/log2(4) = 4;
    # ideal 3, 2, 0: 3 + 2/log2(3).
    assert ndcg_at_k([0.9, 0.5, 0.1], [3, 0, 2], k=10) == pytest.approx(4.0 / (3.0 + 2.0 / math.log2(3.0)))


def test_hit_at_k_matches_enumeration_of_tie_orders():
    # Reference: the definition, averaged over every order of the tied candidates (exhaustive).
    rng = np.random.default_rng(5)
    for _ in range(40):
        n = int(rng.integers(2, 8))
        scores = rng.integers(0, 3, n).astype(float)
        labels = rng.random(n) < 0.3
        if not labels.any():
            labels[0] = True
        k = int(rng.integers(1, n + 1))
        hits = []
        for perm in itertools.permutations(range(n)):
            # A permutation is a tie order: sort by score, then by position in the permutation.
            rank = sorted(range(n), key=lambda i: (-scores[i], perm.index(i)))
            hits.append(any(labels[i] for i in rank[:k]))
        assert hit_at_k(scores, labels, k) == pytest.approx(np.mean(hits), abs=1e-12)


def test_metrics_undefined_and_bad_input():
    assert math.isnan(auc([1, 2], [1, 1]))
    assert math.isnan(ndcg_at_k([1, 2], [0, 0]))
    assert math.isnan(hit_at_k([1, 2], [0, 0]))
    with pytest.raises(ValueError, match="same length"):
        auc([1, 2, 3], [1, 0])
    with pytest.raises(ValueError, match="gains must be >= 0"):
        ndcg_at_k([1, 2], [-1, 1])
    with pytest.raises(ValueError, match="scores must be finite"):
        hit_at_k([np.nan, 1], [1, 0])


# ---- earth mover's distance -----------------------------------------------------------------


def test_same_colours_solves_each_pair_once_with_the_right_distance(tmp_path, monkeypatch):
    ev = importlib.import_module("harmony.evaluation.methods")

    products, palettes, _ = known_relation_shop(tmp_path, n=6)
    sofas = [p for p in products if p.category == "Sofa"]
    cushions = [p for p in products if p.category == "Cushion"]
    solved = []
    real = ev.emd_pairs
    monkeypatch.setattr(ev, "emd_pairs", lambda firsts, seconds: solved.append(len(firsts)) or real(firsts, seconds))
    method = SameColoursMethod(palettes)
    first = method(sofas[0], cushions)
    swapped = method(cushions[2], sofas)  # (sofa 0, cushion 2) is already known
    assert solved == [len(cushions), len(sofas) - 1]
    # Many queries at once: each new pair solved once, and the very numbers of one query at a time.
    solved.clear()
    asked = [(sofas[1], cushions), (cushions[0], sofas), (sofas[1], cushions[:2])]
    together = SameColoursMethod(palettes).score_queries(asked)
    assert sum(solved) == len(cushions) + len(sofas) - 1
    one_by_one = SameColoursMethod(palettes)
    for got, (product, cands) in zip(together, asked):
        np.testing.assert_array_equal(got, one_by_one(product, cands))
    # Reference: each distance solved alone, in the direction the query asks (EMD is symmetric).
    want = [emd(palettes[sofas[0].id].jab, palettes[sofas[0].id].weights, palettes[c.id].jab, palettes[c.id].weights) for c in cushions]
    np.testing.assert_allclose(-first, want, atol=1e-7)
    want = [emd(palettes[cushions[2].id].jab, palettes[cushions[2].id].weights, palettes[s.id].jab, palettes[s.id].weights) for s in sofas]
    np.testing.assert_allclose(-swapped, want, atol=1e-7)


# ---- a log generated from a known colour relation ------------------------------------------------


def chromatic(hue_deg, j=60.0, m=25.0):
    h = math.radians(hue_deg)
    return [j, m * math.cos(h), m * math.sin(h)]


def known_relation_shop(tmp_path, seed=0, n=24):
    """Sofas and cushions of evenly spread hues; each shopper pairs a sofa with a near-opposite cushion.

    Invented test data: the relation is the ground truth the rules files are checked against.
    """
    rng = np.random.default_rng(seed)
    products, palettes = [], {}
    hues = {}
    for cat in ("sofa", "cushion"):
        offset = rng.uniform(0, 360)
        for i in range(n):
            pid = f"{cat[:2]}{i:02d}"
            hue = (offset + 360.0 * i / n) % 360.0
            hues[pid] = hue
            products.append(Product(id=pid, category=cat.title(), price=100.0, stock=None if i % 5 else 3))
            # A dominant chromatic colour and a light neutral share (legs, seams).
            palettes[pid] = Palette(jab=[chromatic(hue), [85.0, 1.0, 1.0]], weights=[0.8, 0.2])
    cushions = [p.id for p in products if p.category == "Cushion"]
    rows = ["session,product,event"]
    for s in range(60):
        sofa = f"so{int(rng.integers(n)):02d}"
        target = (hues[sofa] + 180.0 + rng.normal(0, 10)) % 360.0
        gap = [abs((hues[c] - target + 180.0) % 360.0 - 180.0) for c in cushions]
        cushion = cushions[int(np.argmin(gap))]
        rows += [f"s{s},{sofa},view", f"s{s},{cushion},view", f"s{s},{cushion},purchase"]
    path = tmp_path / "log.csv"
    path.write_text("\n".join(rows) + "\n")
    return products, palettes, read_events(path, known_products={p.id for p in products})


def test_known_relation_ranks_above_random_and_inverse_below(tmp_path):
    products, palettes, log = known_relation_shop(tmp_path)
    queries = build_queries(log, products, palettes)
    right = load_rules(DATA / "complementary_only.toml")
    wrong = load_rules(DATA / "complementary_inverted.toml")
    methods = [
        RulesMethod(right, palettes, name="right"),
        RulesMethod(wrong, palettes, name="wrong"),
        SameColoursMethod(palettes),
        RandomMethod(),
    ]
    result = evaluate(queries, methods, products, np.random.default_rng(0), resamples=300)
    by = {r.name: r for r in result.results}
    assert by["right"].auc > 0.85 and by["right"].auc_ci[0] > 0.6
    assert by["wrong"].auc < 0.2 and by["wrong"].auc_ci[1] < 0.5
    assert by["right"].ndcg_at_10 > by["random order"].ndcg_at_10 > by["wrong"].ndcg_at_10
    # Random order: every candidate tied, so AUC is exactly one half with a zero-width interval.
    assert by["random order"].auc == pytest.approx(0.5) and by["random order"].auc_ci == pytest.approx((0.5, 0.5))
    # Opposite hues are far apart: palette likeness ranks the real partners low here.
    assert by["same colours (EMD)"].auc < 0.5
    for r in result.results:
        assert r.auc_ci[0] <= r.auc <= r.auc_ci[1]
        assert r.hit_ci[0] <= r.hit_at_10 <= r.hit_ci[1]


def test_bootstrap_is_reproducible_with_the_generator(tmp_path):
    products, palettes, log = known_relation_shop(tmp_path)
    queries = build_queries(log, products, palettes)
    methods = [RulesMethod(load_rules(DATA / "complementary_only.toml"), palettes, name="r")]
    one = evaluate(queries, methods, products, np.random.default_rng(42), resamples=200)
    two = evaluate(queries, methods, products, np.random.default_rng(42), resamples=200)
    three = evaluate(queries, methods, products, np.random.default_rng(43), resamples=200)
    assert one.results == two.results
    assert one.results[0].auc == three.results[0].auc
    assert one.results[0].auc_ci != three.results[0].auc_ci


def test_chunks_of_queries_change_no_number(tmp_path, monkeypatch):
    # Queries are scored in chunks of at most CHUNK_CANDIDATES candidates (every method, then the
    # next chunk); any chunk size gives the same evaluation, bit for bit.
    from harmony.evaluation import core
    from harmony.suggest.blend import BlendMethod

    products, palettes, log = known_relation_shop(tmp_path)
    queries = build_queries(log, products, palettes)

    def run():
        rules = RulesMethod(load_rules(DATA / "complementary_only.toml"), palettes, name="r")
        theirs = {(q.product, c): float(i % 3) for i, q in enumerate(queries.queries) for c in q.candidates[::2]}
        methods = [rules, SameColoursMethod(palettes), BlendMethod(rules, theirs, 0.5, name="b"), RandomMethod()]
        return evaluate(queries, methods, products, np.random.default_rng(1), resamples=100)

    whole = run()
    for budget in (1, 50):
        monkeypatch.setattr(core, "CHUNK_CANDIDATES", budget)
        assert run() == whole
    assert list(core._chunks([3, 4, 5, 1, 9], 7)) == [(0, 2), (2, 4), (4, 5)]  # 9 alone: one query at least


def test_rules_method_ranks_as_the_exact_pair_score(tmp_path):
    # The bilinear contract: raw score ranks exactly as harmony.rules.score.pair_score's score.
    from harmony.rules.score import pair_score

    products, palettes, _ = known_relation_shop(tmp_path)
    rules = load_rules()
    by_id = {p.id: p for p in products}
    query = by_id["so03"]
    cands = [p for p in products if p.category == "Cushion"]
    method = RulesMethod(rules, palettes)
    got = method(query, cands)
    pair = rules.for_pair("sofa", "cushion")
    want = [pair_score(palettes["so03"], palettes[c.id], pair).raw for c in cands]
    np.testing.assert_allclose(got, want, atol=1e-9)
    # Asked again (as the blends do), the query's scores are remembered, read-only.
    assert method(query, cands) is got and not got.flags.writeable


@pytest.mark.parametrize("block", [1, 40, 250_000])
def test_rules_method_many_queries_give_each_querys_own_bits(monkeypatch, block):
    # Many queries at once, their kernel evaluated in blocks of any size, give the very bits of
    # each query scored alone as the bilinear contract writes it (query colours x candidate colours,
    # weighted), and the exact pair score's raw value (harmony.rules.score) to rounding.
    from harmony.evaluation import methods as ev
    from harmony.rules.score import pair_score

    monkeypatch.setattr(ev, "KERNEL_BLOCK", block)
    rng = np.random.default_rng(block)
    products, palettes = [], {}
    for i in range(30):
        cat = ("Sofa", "Rug", "Lamp")[i % 3]
        k = int(rng.integers(1, 9))
        products.append(Product(id=f"p{i:02d}", category=cat, price=10.0))
        palettes[f"p{i:02d}"] = Palette(jab=np.c_[rng.uniform(20, 90, k), rng.normal(0, 20, (k, 2))],
                                        weights=rng.dirichlet(np.ones(k)))
    rules = load_rules()
    by_cat = {c: [p for p in products if p.category == c] for c in ("Sofa", "Rug", "Lamp")}
    asked = [(p, [c for c in by_cat[cat] if rng.random() < 0.8] or by_cat[cat][:1])
             for p in products for cat in by_cat if cat != p.category]
    got = RulesMethod(rules, palettes).score_queries(asked)
    for scores, (p, cands) in zip(got, asked):
        pair = rules.for_pair(p.category, cands[0].category)
        pa = palettes[p.id]
        jab = np.concatenate([palettes[c.id].jab for c in cands])
        w = np.concatenate([palettes[c.id].weights for c in cands])
        starts = np.cumsum([0] + [len(palettes[c.id]) for c in cands[:-1]])
        alone = np.add.reduceat((pa.weights @ pair.kernel(pa.jab, jab)) * w, starts)
        assert np.array_equal(scores, alone)
        raw = [pair_score(pa, palettes[c.id], pair).raw for c in cands]
        np.testing.assert_allclose(scores, raw, atol=1e-9)


# ---- queries --------------------------------------------------------------------------------


def test_positives_negatives_and_coverage(tmp_path):
    products = [
        Product("S1", "Sofa", 1.0),
        Product("S2", "sofa ", 1.0),
        Product("R1", "Rug", 1.0),
        Product("R2", "Rug", 1.0, stock=0),  # out of stock: never a negative
        Product("R3", "Rug", 1.0),
        Product("R4", "Rug", 1.0),
        Product("L1", "Lamp", 1.0),
    ]
    path = tmp_path / "log.csv"
    path.write_text(
        "session,product,event\n"
        "a,S1,purchase\na,R1,view\na,S2,view\n"  # S1-R1 and S2-R1 positives; S1-S2 same category
        "b,S1,cart\nb,R1,cart\nb,R2,purchase\n"  # S1-R1 again; R2 positive though out of stock
        "c,L1,view\nc,GHOST,view\n"  # L1 alone: no query
    )
    log = read_events(path, known_products={p.id for p in products})
    q = build_queries(log, products)
    got = {(x.product, x.category): (x.candidates, list(x.gains)) for x in q.queries}
    # S1-R1: min(5, 1) in session a + min(3, 3) in b = 4; S1-R2: min(3, 5) = 3.
    assert got[("S1", "rug")] == (("R1", "R2", "R3", "R4"), [4.0, 3.0, 0.0, 0.0])
    assert got[("S2", "rug")] == (("R1", "R3", "R4"), [1.0, 0.0, 0.0])
    assert ("R1", "sofa") not in got  # both sofas are positives: no negative left
    assert got[("R2", "sofa")] == (("S1", "S2"), [3.0, 0.0])
    assert q.query_products == 3 and q.products_seen == 5  # S1, S2, R1, R2, L1
    assert q.coverage == pytest.approx(3 / 5)
    assert log.unknown == (("GHOST", 1),)


def test_products_without_palette_take_no_part(tmp_path):
    products, palettes, log = known_relation_shop(tmp_path, n=8)
    dropped = dict(palettes)
    del dropped["cu03"]
    q = build_queries(log, products, dropped)
    assert all("cu03" not in x.candidates and x.product != "cu03" for x in q.queries)


def test_nothing_to_evaluate_is_a_clear_error(tmp_path):
    path = tmp_path / "log.csv"
    path.write_text("session,product,event\na,S1,view\n")
    products = [Product("S1", "Sofa", 1.0), Product("R1", "Rug", 1.0)]
    q = build_queries(read_events(path), products)
    with pytest.raises(EventsError, match="nothing to evaluate"):
        evaluate(q, [RandomMethod()], products, np.random.default_rng(0))


@pytest.mark.parametrize(
    "rows, palettes, match",
    [
        # Every id unknown: the count of distinct ids and the most frequent one are named.
        ("a,X9,view\na,X7,view\nb,X7,cart\nb,X8,view\n", None,
         r"^nothing to evaluate: all 3 product ids in the log are unknown to the store \(most frequent: X7\)$"),
        ("a,X9,view\n", None, r"^nothing to evaluate: the only product id in the log is unknown to the store \(most frequent: X9\)$"),
        # Known products, but the store has no palette for any of them.
        ("a,S1,view\na,R1,view\n", {},
         r"^nothing to evaluate: no known product of the log has a palette in the store \(2 without one, first: R1\)$"),
        # Every row of a kind without a weight.
        ("a,S1,like\na,R1,like\nb,R1,share\n", None,
         r"^nothing to evaluate: no row of the log is an event with a weight above 0 \(kinds without a weight: like 2, share 1\)$"),
    ],
)
def test_nothing_to_evaluate_says_why(tmp_path, rows, palettes, match):
    path = tmp_path / "log.csv"
    path.write_text("session,product,event\n" + rows)
    products = [Product("S1", "Sofa", 1.0), Product("R1", "Rug", 1.0), Product("R2", "Rug", 1.0)]
    log = read_events(path, known_products={p.id for p in products})
    q = build_queries(log, products, palettes)
    with pytest.raises(EventsError, match=match):
        evaluate(q, [RandomMethod()], products, np.random.default_rng(0), unknown=log.unknown, skipped=log.skipped)


def test_shared_method_names_are_named_alone(tmp_path):
    products, palettes, log = known_relation_shop(tmp_path, n=8)
    q = build_queries(log, products, palettes)
    rules = load_rules(DATA / "complementary_only.toml")
    methods = [RulesMethod(rules, palettes, name="a"), RulesMethod(rules, palettes, name="b"),
               RulesMethod(rules, palettes, name="a"), RandomMethod()]
    with pytest.raises(HarmonyError, match=r"^more than one method is named 'a'$"):
        evaluate(q, methods, products, np.random.default_rng(0))


def test_skipped_kinds_reach_the_json(tmp_path):
    products, palettes, log = known_relation_shop(tmp_path, n=8)
    q = build_queries(log, products, palettes)
    result = evaluate(q, [RandomMethod()], products, np.random.default_rng(0), resamples=5,
                      skipped=(("wishlist", 4), ("click", 1)))
    assert result.to_dict()["skipped_events"] == {"wishlist": 4, "click": 1}


def test_colour_attribute_overlap_and_standard_methods(tmp_path):
    a = Product("A", "Sofa", 1.0, attributes={"colour": "Light Grey"})
    cands = [
        Product("B", "Rug", 1.0, attributes={"colour": "grey"}),
        Product("C", "Rug", 1.0, attributes={"colour": "light grey"}),
        Product("D", "Rug", 1.0, attributes={"colour": "ochre"}),
        Product("E", "Rug", 1.0),
    ]
    np.testing.assert_allclose(ColourAttributeMethod()(a, cands), [0.5, 1.0, 0.0, 0.0])
    # Many queries at once, word sets first met after others were scored: each score is the
    # Jaccard index |A & B| / |A | B| of the two word sets (Jaccard 1901), worked here with sets.
    more = [Product("F", "Rug", 1.0, attributes={"colour": "grey/ochre"}), Product("G", "Rug", 1.0)]
    method = ColourAttributeMethod()
    method(a, cands[:2])
    asked = [(a, cands + more), (more[0], [a, *cands]), (more[1], cands), (cands[3], more)]
    words = {p.id: set(str(p.attributes.get("colour", "")).lower().replace("/", " ").split()) for p in [a, *cands, *more]}
    for (anchor, others), got in zip(asked, method.score_queries(asked)):
        want = [len(words[anchor.id] & words[o.id]) / len(words[anchor.id] | words[o.id])
                if words[anchor.id] and words[o.id] else 0.0 for o in others]
        assert got.tolist() == want
    rules = [load_rules(DATA / "complementary_only.toml"), load_rules(DATA / "complementary_inverted.toml")]
    names = [m.name for m in standard_methods(rules, {}, [a, *cands])]
    assert names == ["complementary_only", "complementary_inverted", "same colours (EMD)", "colour attribute", "random order"]
    names = [m.name for m in standard_methods(rules[:1], {}, [Product("X", "Sofa", 1.0)])]
    assert "colour attribute" not in names


@pytest.mark.parametrize("seed", range(5))
def test_auc_is_the_mann_whitney_statistic_to_the_last_bit(seed):
    # Reference: scipy.stats.mannwhitneyu's U of the positives against the negatives (mid-ranks for
    # ties) over n_pos * n_neg (Hanley & McNeil 1982). Mid-ranks are half-integers, so the sums
    # are exact and the two agree to the last bit, one list at a time and many at once.
    from scipy.stats import mannwhitneyu

    lists = random_lists(seed)
    table = auc_table(np.concatenate([s for s, _ in lists]), np.concatenate([g for _, g in lists]),
                      [len(s) for s, _ in lists])
    for (scores, gains), got in zip(lists, table):
        pos = gains > 0
        u = mannwhitneyu(scores[pos], scores[~pos], method="asymptotic").statistic
        assert got == auc(scores, pos) == u / (pos.sum() * (~pos).sum())


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("k", [1, 3, 10, 50])
def test_metric_table_of_many_lists_is_each_list_alone(seed, k):
    # Many lists at once give, list by list, the bits of the one-list functions (no list leaks into
    # its neighbours), and those agree with scikit-learn's roc_auc_score and ndcg_score; hit@k is
    # checked against the enumeration of tie orders above. Edge lists: empty, no positive, one item.
    lists = random_lists(seed) + [(np.zeros(0), np.zeros(0)), (np.array([2.0, 2.0]), np.zeros(2)),
                                  (np.array([1.0]), np.array([3.0]))]
    rng = np.random.default_rng(seed)
    lists = [lists[i] for i in rng.permutation(len(lists))]
    scores = np.concatenate([s for s, _ in lists])
    gains = np.concatenate([g for _, g in lists])
    table = metric_table(scores, gains, [len(s) for s, _ in lists], k)
    assert table.shape == (len(lists), 3)
    # The ideal DCGs worked out once (as the evaluation does for all its methods) change no bit.
    ideal = ideal_dcgs(gains, [len(s) for s, _ in lists], k)
    np.testing.assert_array_equal(metric_table(scores, gains, [len(s) for s, _ in lists], k, ideal), table)
    for (s, g), row in zip(lists, table):
        alone = [auc(s, g > 0), ndcg_at_k(s, g, k), hit_at_k(s, g > 0, k)]
        np.testing.assert_array_equal(row, alone)  # NaN where undefined, equal bits elsewhere
        if 0 < np.count_nonzero(g) < len(g):
            assert row[0] == pytest.approx(roc_auc_score(g > 0, s), abs=1e-12)
            assert row[1] == pytest.approx(ndcg_score([g], [s], k=k), abs=1e-12)
    with pytest.raises(ValueError, match="sum to the"):
        metric_table(scores, gains, [len(scores) - 1], k)


def test_collection_paused_restores_the_collector():
    # The standard library's gc switch: off inside the block, as it was after it, errors included.
    import gc

    from harmony.evaluation.run import collection_paused

    assert gc.isenabled()
    with collection_paused():
        inside = gc.isenabled()
    assert not inside and gc.isenabled()
    with pytest.raises(RuntimeError), collection_paused():
        raise RuntimeError
    assert gc.isenabled()
    gc.disable()
    try:
        with collection_paused():
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()
