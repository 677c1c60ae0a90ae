"""The lockstep network simplex against POT's network simplex and scipy's linear programming, on
ordinary, degenerate and oversized transportation problems, and its errors."""

import numpy as np
import pytest

import harmony.colour.transport as transport
from harmony.colour.transport import padded_transport_costs, transport_costs

ot = pytest.importorskip("ot")


def _pot(a, b, c):
    # Reference: POT's network simplex (ot.emd2; Flamary et al. 2021, JMLR 22(78); the algorithm
    # of Bonneel et al. 2011), on the same problem with the sums made equal as POT asks.
    return float(ot.emd2(a / a.sum(), b / b.sum(), np.ascontiguousarray(c)) * a.sum())


def _linprog(a, b, c):
    # Reference: the same problem as a linear programme solved by HiGHS (scipy.optimize.linprog).
    from scipy.optimize import linprog

    n, m = c.shape
    eq = np.vstack([np.kron(np.eye(n), np.ones(m)), np.kron(np.ones(n), np.eye(m))])
    return linprog(c.ravel(), A_eq=eq, b_eq=np.r_[a, b], bounds=(0, None), method="highs").fun


def _problems(rng, count, kind):
    out = []
    for _ in range(count):
        n, m = (int(x) for x in rng.integers(1, 13, 2))
        if kind == "ties":  # small whole amounts: partial sums meet, the start and pivots degenerate
            a, b = rng.integers(1, 4, n).astype(float), rng.integers(1, 4, m).astype(float)
            b *= a.sum() / b.sum()
        else:
            a, b = rng.dirichlet(np.ones(n)), rng.dirichlet(np.ones(m))
        x, y = rng.normal(0, 20, (n, 3)), rng.normal(0, 20, (m, 3))
        c = np.sqrt(((x[:, None] - y[None]) ** 2).sum(-1))
        if kind == "ties":
            c = np.round(c / 15.0)  # many equal costs, zeros among them
        out.append((a, b, c))
    return out


@pytest.mark.parametrize("kind", ["spread", "ties"])
def test_matches_pot_on_random_problems(kind, monkeypatch):
    rng = np.random.default_rng(5 if kind == "spread" else 6)
    problems = _problems(rng, 300, kind)
    # The simplex itself must finish every problem: the linear-programming escape is not taken.
    monkeypatch.setattr(transport, "_linear_program", lambda *p: pytest.fail("fell back to the LP"))
    got = transport_costs(*zip(*problems))
    want = np.array([_pot(*p) for p in problems])
    # Each problem within 1e-12 of its own largest cost: the solver's stated bound (that times
    # the total mass) or tighter, the tie problems carrying masses above 1.
    scale = np.array([max(c.max(), 1.0) for _, _, c in problems])
    assert (np.abs(got - want) <= 1e-12 * scale).all()


def test_identical_palettes_cost_nothing_however_degenerate():
    # Moving a distribution onto itself costs 0 (Rubner et al. 2000, section 4.1: the EMD is a
    # metric); with equal amounts the start is degenerate at every step.
    rng = np.random.default_rng(2)
    x = rng.normal(0, 20, (9, 3))
    c = np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1))
    for a in (np.full(9, 1 / 9), rng.dirichlet(np.ones(9))):
        assert transport_costs([a], [a], [c])[0] == pytest.approx(0.0, abs=1e-12)
        shuffled = rng.permutation(9)  # the same points in another order: still a perfect match
        assert transport_costs([a], [a[shuffled]], [c[:, shuffled]])[0] == pytest.approx(0.0, abs=1e-12)


def test_one_supplier_or_one_customer_ships_everything_directly():
    # With one row (or column) the only feasible plan is the direct one: sum_j b_j c_0j.
    b = np.array([0.2, 0.5, 0.3])
    c = np.array([[4.0, 1.0, 7.0]])
    assert transport_costs([[1.0]], [b], [c])[0] == pytest.approx(b @ c[0], rel=1e-15)
    assert transport_costs([b], [[1.0]], [c.T])[0] == pytest.approx(b @ c[0], rel=1e-15)


def test_large_problems_go_to_the_linear_programme():
    # Over MAX_NODES rows plus columns the bit masks do not fit; HiGHS solves those exactly.
    rng = np.random.default_rng(8)
    n, m = 40, 30
    a, b = rng.dirichlet(np.ones(n)), rng.dirichlet(np.ones(m))
    c = rng.uniform(0, 50, (n, m))
    small = _problems(rng, 3, "spread")
    got = transport_costs([a, *(p[0] for p in small)], [b, *(p[1] for p in small)], [c, *(p[2] for p in small)])
    assert got[0] == pytest.approx(_linprog(a, b, c), rel=1e-9)
    assert got[0] == pytest.approx(_pot(a, b, c), rel=1e-9)
    np.testing.assert_allclose(got[1:], [_linprog(*p) for p in small], rtol=1e-9)


def test_a_problem_costs_the_same_bits_alone_or_in_any_batch():
    rng = np.random.default_rng(9)
    problems = _problems(rng, 40, "spread")
    together = transport_costs(*zip(*problems))
    alone = np.array([transport_costs(*zip(p))[0] for p in problems])
    np.testing.assert_array_equal(together, alone)
    reversed_order = transport_costs(*zip(*problems[::-1]))[::-1]
    np.testing.assert_array_equal(together, reversed_order)


def test_padded_layout_ignores_what_lies_beyond_each_problem():
    a = np.array([[0.6, 0.4, -5.0], [1.0, np.nan, 0.0]])
    b = np.array([[0.3, 0.7], [0.5, 0.5]])
    c = np.array([[[0.0, 10.0], [10.0, 200 ** 0.5], [np.inf, np.nan]],
                  [[1.0, 3.0], [np.nan, np.nan], [np.nan, np.nan]]])
    got = padded_transport_costs(a, b, c, [2, 1], [2, 2])
    # Worked by hand: 0.3 * 10 + 0.4 * sqrt(200) (tests/evaluation: the EMD worked example),
    # and 0.5 * 1 + 0.5 * 3.
    np.testing.assert_allclose(got, [3.0 + 0.4 * 200 ** 0.5, 2.0], rtol=1e-15)


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (([[0.5, 0.5]], [[1.0]], [[[1.0], [2.0]]]), None),
        (([[0.5, 0.5]], [[1.0]], [[1.0, 2.0]]), "problem 0: costs must have shape"),
        (([[1.0], [0.5, 0.0]], [[1.0], [0.5, 0.5]], [[[1.0]], [[1.0, 2.0], [3.0, 4.0]]]), "problem 1: supplies and demands must be positive"),
        (([[1.0]], [[1.0]], [[[np.nan]]]), "problem 0: costs must be finite"),
        # No plan moves every unit when the totals differ: 1.0 against 0.9.
        (([[0.5, 0.5], [1.0]], [[0.5, 0.5], [0.9]], [[[1.0, 2.0], [3.0, 4.0]], [[1.0]]]),
         "problem 1: supplies and demands must be finite with equal totals"),
        (([[np.inf]], [[1.0]], [[[1.0]]]), "problem 0: supplies and demands must be finite with equal totals"),
        (([[np.inf]], [[np.inf]], [[[1.0]]]), "problem 0: supplies and demands must be finite with equal totals"),
        (([[1.0]], [], [[[1.0]]]), "same length"),
    ],
)
def test_bad_problems_are_named(args, message):
    if message is None:  # a well-formed 2 x 1 problem, worked by hand: 0.5 * 1 + 0.5 * 2
        assert transport_costs(*args)[0] == pytest.approx(1.5)
        return
    with pytest.raises(ValueError, match=message):
        transport_costs(*args)


def test_nothing_to_solve():
    assert transport_costs([], [], []).shape == (0,)


def test_rounding_level_imbalance_is_accepted():
    # The other side of BALANCE_TOLERANCE: totals that differ only by rounding (weights
    # normalised in float64; here 1e-12 apart) are solved, not refused. Worked by hand: the one
    # plan ships 0.3 at cost 1 and 0.7 at cost 2.
    got = transport_costs([[0.3, 0.7]], [[1.0 + 1e-12]], [[[1.0], [2.0]]])[0]
    assert got == pytest.approx(1.7, rel=1e-11)
