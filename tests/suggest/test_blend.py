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


def test_candidate_columns_and_keys_are_read_without_case(tmp_path):
    # A recommender's export with capitalised names reads as the lowercase one.
    (tmp_path / "c.csv").write_text("Product,PARTNER,Score,Partner_Category\nA,B,0.5,Rug\n")
    (tmp_path / "c.jsonl").write_text('{"Product": "A", "Partner": "B", "SCORE": 0.5, "partner_category": "Rug"}\n')
    for name in ("c.csv", "c.jsonl"):
        (c,) = read_candidates(tmp_path / name)
        assert (c.product, c.partner, c.score, c.partner_category) == ("A", "B", 0.5, "rug")


def test_blends_of_several_weights_share_their_ranks_and_keep_their_numbers():
    # One BlendRanks for every weight (as blend_methods_factory makes them) gives each weight the
    # numbers of a blend of its own, asked the same queries, then other ones.
    from harmony.suggest.blend import BlendRanks

    rng = np.random.default_rng(4)
    anchors = [SimpleNamespace(id=a) for a in "ABC"]
    cands = {a.id: [SimpleNamespace(id=f"{a.id}{i}") for i in range(int(rng.integers(1, 9)))] for a in anchors}
    raw = {a.id: rng.integers(0, 4, len(cands[a.id])).astype(float) for a in anchors}
    theirs = {(a.id, c.id): float(rng.integers(0, 3)) for a in anchors for c in cands[a.id] if rng.random() < 0.5}
    rules = lambda anchor, cs: raw[anchor.id]  # noqa: E731
    shared = BlendRanks(rules, theirs)
    for asked in ([(a, cands[a.id]) for a in anchors], [(anchors[1], cands["B"])], [(a, cands[a.id]) for a in anchors]):
        for w in (0.0, 0.3, 1.0):
            got = BlendMethod(rules, theirs, w, ranks=shared).score_queries(asked)
            alone = BlendMethod(rules, theirs, w).score_queries(asked)
            assert len(got) == len(asked)
            for x, y in zip(got, alone):
                np.testing.assert_array_equal(x, y)


def _dict_reader_rows(text):
    # Reference: the standard library's csv.DictReader (blank lines skipped, short rows padded with
    # None, the fields of a long row beyond the header under the key None), with the line each
    # row ends on.
    import csv
    import io

    reader = csv.DictReader(io.StringIO(text))
    return [(reader.line_num, row) for row in reader]


def test_candidate_csv_reads_as_the_standard_dict_reader(tmp_path):
    text = ('score,product,partner,partner_category,note\n'
            'A,B,0.5,rug,x\n'  # columns in another order: a bad score
            '\n'
            '0.25,A,C," Dining\tChair ",y\n'
            '"0.75",A,"D\nE",lamp\n'  # a quoted field over two lines
            '0.5,B\n'  # short: no partner
            '1,B,A,,,extra\n'  # one field more than the header: refused, as a shifted row
            '2,A,C\n')  # the pair of line 4 again
    path = tmp_path / "c.csv"
    path.write_text(text)
    want = []
    for line, row in _dict_reader_rows(text):
        fields = {k: (row.get(k) or "").strip() for k in ("product", "partner", "score")}
        if None in row:
            want.append(f"{path}:{line}: {len(row) - 1 + len(row[None])} fields, the header has {len(row) - 1}")
        elif not fields["partner"]:
            want.append(f"{path}:{line}: partner: missing")
        elif line == 2:
            want.append(f"{path}:{line}: score: not a finite number: {fields['score']!r}")
    want.append(f"{path}:9: partner: 'C' is given twice for 'A' (line 4)")
    with pytest.raises(HarmonyError) as info:
        read_candidates(path)
    assert str(info.value) == f"{len(want)} bad row(s): " + "; ".join(want)
    good = "".join(line for i, line in enumerate(text.splitlines(keepends=True)) if i not in (1, 6, 7, 8))
    path.write_text(good)
    got = read_candidates(path)
    rows = _dict_reader_rows(good)
    assert [c.line for c in got] == [line for line, _ in rows]
    assert [(c.product, c.partner, c.score) for c in got] == [
        (r["product"].strip(), r["partner"].strip(), float(r["score"])) for _, r in rows]
    assert [c.partner_category for c in got] == ["dining chair", "lamp"]


def test_candidate_csv_column_named_twice_is_refused(tmp_path):
    # Which of two "score" columns an export meant cannot be known (csv.DictReader would keep the
    # last without a word): the header is refused, naming the column.
    path = tmp_path / "c.csv"
    path.write_text("product,partner,score,score\nA,B,oops,0.5\nA,C,1,2\n")
    with pytest.raises(HarmonyError, match=r"c.csv:1: column 'score' appears twice"):
        read_candidates(path)


def test_unreadable_candidate_csv_is_one_line(tmp_path):
    import csv

    path = tmp_path / "c.csv"
    path.write_text("product,partner,score\nA,B,1\n" + "A,\"" + "x" * (csv.field_size_limit() + 1) + "\",1\n")
    with pytest.raises(HarmonyError, match=r"c.csv:3: not a readable CSV row: field larger than field limit") as info:
        read_candidates(path)
    assert "\n" not in str(info.value)


def test_a_binary_or_missing_candidate_list_is_one_line(tmp_path):
    path = tmp_path / "c.csv"
    path.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00")  # a PNG signature (ISO/IEC 15948), not text
    with pytest.raises(HarmonyError, match=r"c.csv: not UTF-8 text \(byte 0\); a candidate list is CSV or JSON Lines"):
        read_candidates(path)
    with pytest.raises(HarmonyError, match=r"nope.csv: cannot read the candidate list: No such file"):
        read_candidates(tmp_path / "nope.csv")
