"""Look-alikes: the EMD against POT's network simplex, the centroid bound, the exact top under the
screen, the nearest-colour baseline by hand, and the errors of similar_products."""

import numpy as np
import pytest

from harmony.errors import StoreError
from harmony.colour.emd import emd
from harmony.photo.palette import Palette
from harmony.suggest.lookalike import (
    SIMILAR_DELTA_E,
    centroid_bound,
    nearest_colour_distance,
    similar_products,
    top_similar,
)


def _palettes(rng, n, k=6):
    out = []
    for _ in range(n):
        m = int(rng.integers(1, k + 1))
        jab = np.c_[rng.uniform(20, 90, m), rng.normal(0, 15, (m, 2))]
        out.append(Palette(jab=jab, weights=rng.dirichlet(np.ones(m))))
    return out


def test_emd_agrees_with_pot():
    # Reference: POT's network simplex (ot.emd2; Flamary et al. 2021, JMLR 22(78)) on the same
    # transport problems; the screened search below uses the same EMD, so its bits are emd's.
    ot = pytest.importorskip("ot")
    rng = np.random.default_rng(1)
    pals = _palettes(rng, 12)
    for a, b in zip(pals[:6], pals[6:]):
        cost = np.sqrt(((a.jab[:, None, :] - b.jab[None, :, :]) ** 2).sum(axis=-1))
        ref = ot.emd2(a.weights / a.weights.sum(), b.weights / b.weights.sum(), cost)
        got = emd(a.jab, a.weights, b.jab, b.weights)
        assert got == pytest.approx(ref, rel=1e-12, abs=1e-12)
        _, dist, _ = top_similar(a, [b], 1)  # the search's own distance, to the bit
        assert dist[0] == got


def test_emd_of_a_single_colour_moved_is_its_distance():
    # Rubner et al. (2000): with one colour each, all weight moves the ground distance.
    assert emd([[50, 3, 4]], [1.0], [[50, 0, 0]], [2.0]) == pytest.approx(5.0)


def test_centroid_bound_never_exceeds_the_emd():
    # Rubner et al. (2000), section 4.2: for equal total weights, EMD >= |centroid_a - centroid_b|.
    rng = np.random.default_rng(2)
    pals = _palettes(rng, 40)
    for a, b in zip(pals[:20], pals[20:]):
        assert centroid_bound(a.jab, a.weights, b.jab, b.weights) <= emd(a.jab, a.weights, b.jab, b.weights) + 1e-9


def test_screened_top_is_the_exact_top():
    rng = np.random.default_rng(3)
    pals = _palettes(rng, 120)
    query, rest = pals[0], pals[1:]
    idx, dist, solved = top_similar(query, rest, 10)
    brute = np.array([emd(query.jab, query.weights, p.jab, p.weights) for p in rest])
    np.testing.assert_allclose(dist, np.sort(brute)[:10], atol=1e-9)
    np.testing.assert_allclose(brute[idx], dist, atol=1e-9)  # the indices are the ones measured
    assert solved < len(rest)  # the bound skipped some EMDs (measured in benchmarks/lookalike.py)


def test_nearest_colour_distance_by_hand():
    # One colour against two: a -> nearest b is 0 (share 1); b's colours are 0 and 5 away, shares
    # 0.5 each: 0 + 0.5 * 5 = 2.5.
    assert nearest_colour_distance([[50, 0, 0]], [1.0], [[50, 0, 0], [50, 3, 4]], [0.5, 0.5]) == pytest.approx(2.5)


def test_similar_products_ranks_the_same_category_only():
    pals = {
        "S1": Palette(jab=[[50, 10, 0]], weights=[1.0]),
        "S2": Palette(jab=[[50, 12, 0]], weights=[1.0]),
        "S3": Palette(jab=[[50, 30, 0]], weights=[1.0]),
        "R1": Palette(jab=[[50, 10, 0]], weights=[1.0]),
    }
    cats = {"S1": "sofa", "S2": "sofa", "S3": "sofa", "R1": "rug"}
    got = similar_products(pals, "S1", top=5, categories=cats)
    assert [g["partner"] for g in got] == ["S2", "S3"]
    assert got[0]["distance"] == pytest.approx(2.0)
    assert got[0]["score"] == pytest.approx(np.exp(-2.0 / SIMILAR_DELTA_E))
    assert [g["rank"] for g in got] == [1, 2]


def test_similar_products_errors_name_the_product():
    pals = {"S1": Palette(jab=[[50, 10, 0]], weights=[1.0])}
    with pytest.raises(StoreError, match="unknown product 'X'"):
        similar_products(pals, "X", categories={"S1": "sofa"})
    with pytest.raises(StoreError, match="'S2' has no palette"):
        similar_products(pals, "S2", categories={"S1": "sofa", "S2": "sofa"})
    with pytest.raises(StoreError, match="no other product of category 'sofa'"):
        similar_products(pals, "S1", categories={"S1": "sofa"})
