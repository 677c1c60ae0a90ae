"""The earth mover's distance between palettes: worked by hand, against scipy's one- and
three-dimensional Wasserstein distances, the metric axioms, and batches."""

import itertools
import math

import numpy as np
import pytest
from scipy.stats import wasserstein_distance

import harmony.colour.emd as emd_module
from harmony.colour.emd import emd, emd_one_to_many, emd_pairs, signature


def test_emd_hand_worked_transport():
    # Worked by hand: supplies 0.6 at p1=(50,0,0), 0.4 at p2=(50,10,0); demands 0.3 at q1=p1 and
    # 0.7 at q2=(50,0,10). With f11 = t the cost is 10.414 - 5.858 t, least at t = 0.3:
    # 0.3 * 10 (p1->q2) + 0.4 * sqrt(200) (p2->q2).
    got = emd([[50, 0, 0], [50, 10, 0]], [0.6, 0.4], [[50, 0, 0], [50, 0, 10]], [0.3, 0.7])
    assert got == pytest.approx(3.0 + 0.4 * math.sqrt(200.0), abs=1e-7)


def test_emd_matches_scipy_wasserstein_in_one_dimension():
    # Reference: scipy.stats.wasserstein_distance (1-D EMD); palettes that differ only in J'.
    rng = np.random.default_rng(11)
    for _ in range(20):
        n, m = rng.integers(1, 8, 2)
        ja, jb = rng.uniform(0, 100, n), rng.uniform(0, 100, m)
        wa, wb = rng.random(n) + 0.01, rng.random(m) + 0.01
        pal_a = np.c_[ja, np.zeros(n), np.zeros(n)]
        pal_b = np.c_[jb, np.zeros(m), np.zeros(m)]
        ref = wasserstein_distance(ja, jb, wa, wb)
        assert emd(pal_a, wa, pal_b, wb) == pytest.approx(ref, rel=1e-6, abs=1e-7)


def test_emd_matches_scipy_in_three_dimensions():
    # Reference: scipy.stats.wasserstein_distance_nd (scipy >= 1.13), the EMD of two weighted
    # point sets with Euclidean ground distance, solved by its own linear programme.
    pytest.importorskip("scipy", minversion="1.13")
    from scipy.stats import wasserstein_distance_nd

    rng = np.random.default_rng(17)
    for _ in range(15):
        n, m = rng.integers(1, 9, 2)
        a, b = rng.normal(50, 20, (n, 3)), rng.normal(50, 20, (m, 3))
        wa, wb = rng.random(n) + 0.01, rng.random(m) + 0.01
        ref = wasserstein_distance_nd(a, b, wa, wb)
        assert emd(a, wa, b, wb) == pytest.approx(ref, rel=1e-6, abs=1e-7)


def test_emd_is_a_metric_and_batching_does_not_change_it(monkeypatch):
    rng = np.random.default_rng(3)
    pals = [(rng.normal(0, 20, (k, 3)), rng.dirichlet(np.ones(k))) for k in (1, 3, 5, 10, 10, 7)]
    a = pals[0]
    together = emd_one_to_many(*a, pals)
    with monkeypatch.context() as m:
        m.setattr(emd_module, "BATCH", 1)  # one transport problem per solver call
        alone = emd_one_to_many(*a, pals)
    np.testing.assert_allclose(together, alone, atol=1e-7)
    assert together[0] == pytest.approx(0.0, abs=1e-9)
    d = np.array([emd_one_to_many(*p, pals) for p in pals])
    np.testing.assert_allclose(d, d.T, atol=1e-6)  # symmetric
    for i, j, k in itertools.permutations(range(len(pals)), 3):
        assert d[i, k] <= d[i, j] + d[j, k] + 1e-6  # triangle inequality (Rubner et al. 2000, 4.1)
    with pytest.raises(ValueError, match="shape"):
        emd([[1, 2]], [1.0], [[1, 2, 3]], [1.0])


def test_batches_do_not_change_a_distance(monkeypatch):
    rng = np.random.default_rng(4)
    sigs = [signature(rng.normal(50, 20, (k, 3)), rng.random(k) + 0.01) for k in rng.integers(1, 11, 30)]
    firsts, seconds = sigs[:15] * 3, sigs[15:] + sigs[:15] + sigs[::-2][:15]
    together = emd_pairs(firsts, seconds)
    monkeypatch.setattr(emd_module, "BATCH", 4)
    np.testing.assert_array_equal(emd_pairs(firsts, seconds), together)


def test_zero_weight_colours_move_nothing():
    a, wa = [[50, 0, 0], [20, 30, 0]], [1.0, 0.0]
    assert emd(a, wa, [[50, 0, 10]], [1.0]) == pytest.approx(10.0, rel=1e-15)
    with pytest.raises(ValueError, match="palette 0: colours must be finite"):
        emd_one_to_many(a, wa, [([[np.nan, 0, 0]], [1.0])])
    # An infinite weight would make every share nan and reach the solver as a bad supply.
    for bad in ([np.inf, 1.0], [np.nan, 1.0], [-0.5, 1.0], [0.0, 0.0]):
        with pytest.raises(ValueError, match="first palette: weights must be finite and >= 0"):
            emd(a, bad, [[50, 0, 10]], [1.0])


def test_pairs_of_unequal_lists_are_refused():
    # A shorter second list would leave pairs without a partner (and read unset rows).
    sig = signature([[50, 0, 0]], [1.0])
    for firsts, seconds in (([sig, sig], [sig]), ([sig], [sig, sig])):
        with pytest.raises(ValueError, match="pair one to one"):
            emd_pairs(firsts, seconds)
