"""Blending with another system's candidates: rank normalisation, a group worked by hand, the
not-in-store rule, the evaluation method at W = 0, and the candidate reader's errors."""

from types import SimpleNamespace

import numpy as np
import pytest
from scipy.stats import rankdata

from harmony.errors import HarmonyError
from harmony.suggest.blend import (
    BlendMethod,
    Candidate,
    blend_feed,
    blend_group,
    parse_weights,
    rank_normalise,
    read_candidates,
)
from harmony.suggest.feed import FeedRow


def test_rank_normalise_matches_scipy_average_ranks():
    # Reference: scipy.stats.rankdata's average ranks for ties, rescaled to [0, 1].
    s = [3.0, 1.0, 3.0, 7.0, -2.0]
    np.testing.assert_allclose(rank_normalise(s), (rankdata(s) - 1) / 4)
    assert rank_normalise([5.0]).tolist() == [1.0]


@pytest.mark.parametrize("seed", range(5))
def test_rank_normalise_is_scipy_average_ranks_to_the_last_bit(seed):
    # Reference: scipy.stats.rankdata(method="average"); average ranks are half-integers, so the
    # numpy ranking must give the very same bits, with many ties.
    s = np.random.default_rng(seed).integers(0, 6, 40).astype(float)
    assert np.array_equal(rank_normalise(s), (rankdata(s) - 1.0) / 39.0)
    assert np.array_equal(rank_normalise(-s), (rankdata(-s) - 1.0) / 39.0)


def test_blend_group_worked_by_hand():
    # harmony ranks a > b > c: 1, 0.5, 0. The other system ranks b > c > x: 1, 0.5, 0; it did not
    # propose a (0). x is not in the store. W = 0.5:
    # a = 0.5*1 + 0.5*0 = 0.5; b = 0.5*0.5 + 0.5*1 = 0.75; c = 0 + 0.5*0.5 = 0.25; x keeps 0.
    got = blend_group({"a": 0.9, "b": 0.5, "c": 0.1}, {"b": 20.0, "c": 10.0, "x": 5.0}, 0.5)
    assert got == {"a": (0.5, "harmony"), "b": (0.75, "both"), "c": (0.25, "both"), "x": (0.0, "not in store")}


def test_weight_zero_and_one_give_each_system_alone():
    h, o = {"a": 0.9, "b": 0.5, "c": 0.1}, {"a": 1.0, "b": 3.0, "c": 2.0}
    by = lambda d: sorted(d, key=lambda k: -d[k][0])
    assert by(blend_group(h, o, 0.0)) == ["a", "b", "c"]
    assert by(blend_group(h, o, 1.0)) == ["b", "c", "a"]


def test_blend_ignores_the_scale_of_the_other_system():
    # Rank normalisation: a strictly increasing transform of one system's scores changes nothing.
    h, o = {"a": 0.9, "b": 0.5, "c": 0.1, "d": 0.3}, {"a": 1.0, "b": 3.0, "d": 2.0}
    assert blend_group(h, o, 0.4) == blend_group(h, {k: np.exp(10 * v) for k, v in o.items()}, 0.4)


def test_blend_weight_outside_the_unit_interval_is_refused():
    with pytest.raises(HarmonyError, match=r"blend weight must lie in \[0, 1\]"):
        blend_group({"a": 1.0}, {}, 1.5)
    with pytest.raises(HarmonyError, match="outside"):
        parse_weights("0,2")


def test_blend_feed_keeps_absent_candidates_and_leaves_out_of_stock_ones():
    rows = [FeedRow("S1", "sofa", "R1", "rug", 1, 0.8, "why R1"), FeedRow("S1", "sofa", "R2", "rug", 2, 0.6, "why R2")]
    cands = [Candidate("S1", "R2", 0.9), Candidate("S1", "R3", 0.5), Candidate("S1", "GONE", 0.99, "rug")]
    out = blend_feed(rows, cands, 0.5, top=10, extra={("S1", "R3"): (0.7, "why R3")},
                     categories={"S1": "sofa", "R1": "rug", "R2": "rug", "R3": "rug", "R4": "rug"}, excluded={"R3"})
    by = {r.partner: r for r in out}
    assert "R3" not in by  # out of stock
    assert by["GONE"].source == "not in store" and "not in the store" in by["GONE"].reason
    assert by["GONE"].score == 1.0 and by["GONE"].candidate_score == 0.99
    assert by["R2"].source == "both" and by["R1"].source == "harmony"
    assert [r.rank for r in out] == [1, 2, 3]


def test_blend_method_at_weight_zero_orders_like_harmony():
    rng = np.random.default_rng(0)
    raw = rng.random(12)
    rules = lambda anchor, cands: raw
    cands = [SimpleNamespace(id=f"c{i}") for i in range(12)]
    m = BlendMethod(rules, {("A", "c3"): 1.0, ("A", "c5"): 2.0}, 0.0)
    got = m(SimpleNamespace(id="A"), cands)
    np.testing.assert_array_equal(np.argsort(got), np.argsort(raw))
    m1 = BlendMethod(rules, {("A", "c3"): 1.0, ("A", "c5"): 2.0}, 1.0)
    assert np.argmax(m1(SimpleNamespace(id="A"), cands)) == 5


def _scipy_rank_normalise(values):
    # Reference: scipy.stats.rankdata's average ranks, rescaled to [0, 1] as the module notes say.
    values = np.asarray(values, dtype=float)
    return np.ones(1) if values.size == 1 else (rankdata(values) - 1.0) / (values.size - 1.0)


def test_blend_method_ranks_many_queries_at_once_as_one_at_a_time():
    rng = np.random.default_rng(7)
    anchors = [SimpleNamespace(id=a) for a in "ABCD"]
    sizes = {"A": 12, "B": 1, "C": 7, "D": 9}
    raw = {a: rng.integers(0, 4, n).astype(float) for a, n in sizes.items()}  # ties on purpose
    cands = {a: [SimpleNamespace(id=f"{a}{i}") for i in range(n)] for a, n in sizes.items()}
    theirs = {(a, c.id): float(rng.integers(0, 3)) for a in "ACD" for c in cands[a] if rng.random() < 0.6}
    theirs[("C", "C0")] = 5.0
    asked = [(x, cands[x.id]) for x in anchors]
    method = BlendMethod(lambda anchor, cs: raw[anchor.id], theirs, 0.25)
    together = method.score_queries(asked)
    for got, (anchor, cs) in zip(together, asked):
        proposed = np.array([(anchor.id, c.id) in theirs for c in cs])
        o = np.zeros(len(cs))
        if proposed.any():
            o[proposed] = _scipy_rank_normalise([theirs[(anchor.id, c.id)] for c, p in zip(cs, proposed) if p])
        want = 0.75 * _scipy_rank_normalise(raw[anchor.id]) + 0.25 * o
        assert np.array_equal(got, want)
        assert np.array_equal(method(anchor, cs), want)
    s = np.concatenate(list(raw.values()))
    assert np.array_equal(rank_normalise(s, list(sizes.values())),
                          np.concatenate([_scipy_rank_normalise(v) for v in raw.values()]))


@pytest.mark.parametrize(
    "text, message",
    [
        ("product,partner\n", r"missing column\(s\) score"),
        ("product,partner,score\nA,B,high\n", r"c.csv:2: score: not a finite number"),
        ("product,partner,score\nA,,1\n", r"c.csv:2: partner: missing"),
        ("product,partner,score\nA,B,1\nA,B,2\n", r"c.csv:3: partner: 'B' is given twice"),
        ("product,partner,score\n", "no rows"),
    ],
)
def test_bad_candidate_rows_are_named(tmp_path, text, message):
    path = tmp_path / "c.csv"
    path.write_text(text)
    with pytest.raises(HarmonyError, match=message):
        read_candidates(path)


def test_candidates_jsonl(tmp_path):
    path = tmp_path / "c.jsonl"
    path.write_text('{"product": "A", "partner": "B", "score": 0.5, "partner_category": "Rug"}\n')
    (c,) = read_candidates(path)
    assert (c.product, c.partner, c.score, c.partner_category) == ("A", "B", 0.5, "rug")
