"""The bundle search against brute force (hypothesis) and against a MILP solved by HiGHS (scipy)."""

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harmony.errors import RoomError
from harmony.suggest.bundle import (
    BundleProblem,
    BundleSlot,
    Candidate,
    brute_force_count,
    iter_bundles,
    search,
)


def random_problem(rng, n_slots, pool, optional=(), budget=math.inf, signed=False):
    """A random instance: prices 20-500, quantities 1-3, scores in [0, 1] (or [-0.3, 1])."""
    slots = tuple(BundleSlot(f"s{s}", quantity=int(rng.integers(1, 4)), required=s not in optional)
                  for s in range(n_slots))
    sizes = pool if isinstance(pool, (list, tuple)) else [pool] * n_slots
    pools = tuple(tuple(Candidate(f"p{s}-{i}", float(rng.uniform(20, 500))) for i in range(sizes[s]))
                  for s in range(n_slots))
    low = -0.3 if signed else 0.0
    scores = {(s, t): rng.uniform(low, 1.0, (sizes[s], sizes[t]))
              for s in range(n_slots) for t in range(s + 1, n_slots)}
    weights = {(s, t): float(rng.choice([0.0, 0.5, 1.0, 2.0, 3.0]))
               for s in range(n_slots) for t in range(s + 1, n_slots)}
    return BundleProblem(slots, pools, scores, weights, budget)


def brute_top(problem, k):
    return sorted(iter_bundles(problem), key=lambda b: -b[0])[:k]


def brute_diverse(problem, k, n):
    """Greedy diverse top-K by enumeration: each next bundle differs from all chosen in >= n slots."""
    chosen = []
    for value, cost, choice in sorted(iter_bundles(problem), key=lambda b: -b[0]):
        if all(sum(a != b for a, b in zip(choice, c[2])) >= n for c in chosen):
            chosen.append((value, cost, choice))
            if len(chosen) == k:
                break
    return chosen


instances = st.fixed_dictionaries({
    "seed": st.integers(0, 2**32 - 1),
    "n_slots": st.integers(1, 4),
    "pool": st.lists(st.integers(1, 4), min_size=4, max_size=4),
    "optional": st.sets(st.integers(0, 3), max_size=2),
    "budget": st.one_of(st.just(math.inf), st.floats(50, 3000)),
    "signed": st.booleans(),
})


def build(params):
    rng = np.random.default_rng(params["seed"])
    n = params["n_slots"]
    optional = {s for s in params["optional"] if s < n}
    if len(optional) == n:
        optional.discard(0)
    return random_problem(rng, n, params["pool"][:n], optional, params["budget"], params["signed"])


@settings(max_examples=150, deadline=None)
@given(instances, st.integers(1, 6))
def test_top_k_equals_brute_force(params, k):
    # Reference: exhaustive enumeration of every bundle within the budget.
    problem = build(params)
    want = brute_top(problem, k)
    result = search(problem, top=k)
    assert result.exact
    got = [b.value for b in result.bundles]
    assert np.allclose(got, [w[0] for w in want], atol=1e-9)
    for b in result.bundles:
        assert b.cost <= problem.budget
        assert math.isclose(b.value, problem.value(b.choice), abs_tol=1e-12)
        for s, slot in enumerate(problem.slots):
            assert b.choice[s] is not None or not slot.required
    assert len({b.choice for b in result.bundles}) == len(result.bundles)


@settings(max_examples=80, deadline=None)
@given(instances, st.integers(1, 4), st.integers(2, 3))
def test_diverse_top_k_equals_greedy_brute_force(params, k, n):
    problem = build(params)
    n = min(n, len(problem.slots))
    want = brute_diverse(problem, k, n)
    result = search(problem, top=k, min_difference=n)
    assert [round(b.value, 9) for b in result.bundles] == [round(w[0], 9) for w in want]
    for i, a in enumerate(result.bundles):
        for b in result.bundles[:i]:
            assert sum(x != y for x, y in zip(a.choice, b.choice)) >= n


def milp_optimum(problem):
    """The same problem as a linearised quadratic assignment, solved by scipy's HiGHS MILP.

    x[s, i] = 1 when candidate i fills slot s; y[s, i, t, j] stands for x[s, i] * x[t, j] with
    y <= x[s, i], y <= x[t, j], y >= x[s, i] + x[t, j] - 1 (the standard linearisation).
    """
    from scipy.optimize import Bounds, LinearConstraint, milp
    from scipy.sparse import lil_matrix

    x_index, col = {}, 0
    for s, pool in enumerate(problem.pools):
        for i in range(len(pool)):
            x_index[s, i] = col
            col += 1
    y_terms = []
    for (s, t), mat in problem.scores.items():
        w = problem.weights.get((s, t), 0.0)
        for i in range(mat.shape[0]):
            for j in range(mat.shape[1]):
                y_terms.append((s, i, t, j, w * mat[i, j], col))
                col += 1
    c = np.zeros(col)
    for s, i, t, j, v, k in y_terms:
        c[k] = -v
    rows = len(problem.slots) + 1 + 3 * len(y_terms)
    a = lil_matrix((rows, col))
    lo, hi = np.full(rows, -np.inf), np.zeros(rows)
    r = 0
    for s, slot in enumerate(problem.slots):
        for i in range(len(problem.pools[s])):
            a[r, x_index[s, i]] = 1
        lo[r], hi[r] = (1, 1) if slot.required else (0, 1)
        r += 1
    for (s, i), k in x_index.items():
        a[r, k] = problem.pools[s][i].price * problem.slots[s].quantity
    hi[r] = problem.budget
    r += 1
    for s, i, t, j, v, k in y_terms:
        a[r, k], a[r, x_index[s, i]] = 1, -1
        r += 1
        a[r, k], a[r, x_index[t, j]] = 1, -1
        r += 1
        a[r, k], a[r, x_index[s, i]], a[r, x_index[t, j]] = -1, 1, 1
        hi[r] = 1
        r += 1
    res = milp(c, constraints=LinearConstraint(a.tocsr(), lo, hi), integrality=np.ones(col),
               bounds=Bounds(0, 1))
    assert res.success, res.message
    return -res.fun


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_optimum_agrees_with_highs_milp(seed):
    # Reference: scipy.optimize.milp (HiGHS) on the linearised quadratic assignment.
    rng = np.random.default_rng(seed)
    problem = random_problem(rng, 4, 10, optional={3}, budget=900.0, signed=True)
    best = search(problem, top=1).bundles[0]
    assert best.value == pytest.approx(milp_optimum(problem), abs=1e-6)


def test_search_explores_far_fewer_nodes_than_brute_force():
    rng = np.random.default_rng(7)
    problem = random_problem(rng, 5, 40, budget=1500.0)
    result = search(problem, top=3)
    assert result.exact and len(result.bundles) == 3
    assert result.nodes < brute_force_count(problem) / 1000
    assert result.pool_sizes == (40,) * 5


def test_node_limit_reports_not_exact():
    rng = np.random.default_rng(8)
    problem = random_problem(rng, 4, 20)
    result = search(problem, top=5, max_nodes=3)
    assert not result.exact and result.nodes == 3


def test_optional_slot_left_empty_when_nothing_fits():
    slots = (BundleSlot("table"), BundleSlot("lamp", required=False))
    pools = ((Candidate("t", 400.0),), (Candidate("l1", 200.0), Candidate("l2", 150.0)))
    problem = BundleProblem(slots, pools, {(0, 1): np.ones((1, 2))}, {(0, 1): 1.0}, budget=500.0)
    (best,) = search(problem, top=1).bundles
    assert best.choice == (0, None) and best.cost == 400.0 and best.value == 0.0


def test_infeasible_budget_returns_nothing():
    slots = (BundleSlot("table"), BundleSlot("chairs", quantity=4))
    pools = ((Candidate("t", 400.0),), (Candidate("c", 100.0),))
    problem = BundleProblem(slots, pools, {}, {}, budget=799.0)
    assert search(problem, top=3).bundles == ()


def test_bad_arguments():
    problem = BundleProblem((BundleSlot("a"),), ((),), {}, {})
    with pytest.raises(RoomError, match="slot 'a': no candidates"):
        search(problem)
    ok = BundleProblem((BundleSlot("a"),), ((Candidate("x", 1.0),),), {}, {})
    with pytest.raises(RoomError, match="top must be at least 1"):
        search(ok, top=0)
    with pytest.raises(RoomError, match="min-difference must lie in 1..1"):
        search(ok, min_difference=2)
    with pytest.raises(ValueError, match=r"scores\[0, 1\] must have shape \(1, 1\)"):
        BundleProblem((BundleSlot("a"), BundleSlot("b")), ((Candidate("x", 1.0),), (Candidate("y", 1.0),)),
                      {(0, 1): np.ones((2, 1))}, {})


# --------------------------------------------------------------- harder instances for the bounds


@st.composite
def hard_instances(draw):
    """Optional slots (some with empty pools), known stock, one product offered in two slots,
    an anchor (a required singleton pool), negative or zero scores and weights, budgets that bind."""
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    n = draw(st.integers(1, 4))
    optional = draw(st.sets(st.integers(0, n - 1), max_size=n - 1))
    anchor = draw(st.one_of(st.none(), st.integers(0, n - 1)))
    slots, pools = [], []
    for s in range(n):
        required = s not in optional or s == anchor
        size = 1 if s == anchor else draw(st.integers(1 if required else 0, 4))
        qty = draw(st.integers(1, 3))
        slots.append(BundleSlot(f"s{s}", quantity=qty, required=required))
        pool = []
        for i in range(size):
            stock = draw(st.one_of(st.none(), st.integers(0, 4)))
            pool.append(Candidate(f"p{s}-{i}", float(rng.integers(1, 50) * 10), stock))
        pools.append(pool)
    if n > 1 and pools[0] and pools[1] and draw(st.booleans()):
        pools[1][0] = pools[0][0]  # the same product can fill two slots: its stock is shared
    scale = draw(st.sampled_from([0.0, 1.0]))
    scores = {(s, t): np.round(rng.uniform(-0.5, 1.0, (len(pools[s]), len(pools[t]))), 1) * scale
              + (1.0 - scale) * rng.integers(0, 2, (len(pools[s]), len(pools[t])))
              for s in range(n) for t in range(s + 1, n)}
    weights = {(s, t): float(draw(st.sampled_from([-1.0, 0.0, 0.5, 1.0, 3.0])))
               for s in range(n) for t in range(s + 1, n)}
    lo = sum(min((c.price for c in p), default=0) * sl.quantity for sl, p in zip(slots, pools) if sl.required)
    hi = sum(max((c.price for c in p), default=0) * sl.quantity for sl, p in zip(slots, pools))
    budget = draw(st.one_of(st.just(math.inf), st.floats(0.0, 1.2).map(lambda f: lo + f * (hi - lo))))
    return BundleProblem(tuple(slots), tuple(map(tuple, pools)), scores, weights, budget)


def reference_bundles(problem):
    """Every feasible bundle by enumeration, the stock rule written out independently here:
    units of one product over all the slots it fills <= its stock (None = no limit)."""
    out = []
    options = [list(range(len(p))) + ([] if sl.required else [None]) for sl, p in zip(problem.slots, problem.pools)]
    for choice in itertools.product(*options):
        units, stock, cost, value = {}, {}, 0.0, 0.0
        for s, i in enumerate(choice):
            if i is None:
                continue
            c = problem.pools[s][i]
            units[c.id] = units.get(c.id, 0) + problem.slots[s].quantity
            if c.stock is not None:
                stock[c.id] = c.stock
            cost += c.price * problem.slots[s].quantity
        for (s, t), mat in problem.scores.items():
            if choice[s] is not None and choice[t] is not None:
                value += problem.weights[s, t] * mat[choice[s], choice[t]]
        if cost <= problem.budget and all(units[p] <= n for p, n in stock.items()):
            out.append((value, cost, choice))
    return sorted(out, key=lambda b: -b[0])


@settings(max_examples=300, deadline=None)
@given(hard_instances(), st.integers(1, 5))
def test_hard_instances_equal_enumeration(problem, k):
    # Reference: exhaustive enumeration with the budget and stock rules applied independently.
    want = reference_bundles(problem)
    result = search(problem, top=k)
    assert result.exact
    assert [round(b.value, 9) for b in result.bundles] == [round(w[0], 9) for w in want[:k]]
    assert [round(v, 9) for v, _, _ in sorted(iter_bundles(problem), key=lambda b: -b[0])] == \
        [round(w[0], 9) for w in want]
    feasible = {w[2] for w in want}
    assert all(b.choice in feasible for b in result.bundles)


@settings(max_examples=150, deadline=None)
@given(hard_instances(), st.integers(1, 4), st.integers(2, 3))
def test_hard_instances_diverse_top_k(problem, k, n):
    # Reference: the greedy rule by enumeration; ties make the chosen bundles ambiguous, so only
    # the first value and the pairwise differences are compared beyond it.
    n = min(n, len(problem.slots))
    want = reference_bundles(problem)
    result = search(problem, top=k, min_difference=n)
    if want:
        assert result.bundles[0].value == pytest.approx(want[0][0], abs=1e-9)
    else:
        assert result.bundles == ()
    feasible = {w[2] for w in want}
    for i, a in enumerate(result.bundles):
        assert a.choice in feasible
        for b in result.bundles[:i]:
            assert sum(x != y for x, y in zip(a.choice, b.choice)) >= n


def test_time_limit_stops_the_search_and_says_so():
    # A random instance (seeded generator); no time at all must stop before the first node, and no
    # limit must finish exactly with the same best bundle as a generous limit.
    rng = np.random.default_rng(16)
    slots = tuple(BundleSlot(f"s{i}", f"c{i}") for i in range(4))
    pools = tuple(tuple(Candidate(f"p{i}-{j}", float(rng.integers(10, 100))) for j in range(12)) for i in range(4))
    scores = {(s, t): rng.random((12, 12)) for s in range(4) for t in range(s + 1, 4)}
    weights = {k: 1.0 for k in scores}
    problem = BundleProblem(slots, pools, scores, weights, 250.0)
    stopped = search(problem, top=3, time_limit=0.0)
    assert stopped.exact is False and stopped.nodes == 0
    full = search(problem, top=3)
    generous = search(problem, top=3, time_limit=600.0)
    assert full.exact and generous.exact
    assert [b.choice for b in generous.bundles] == [b.choice for b in full.bundles]
