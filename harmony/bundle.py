"""Room sets under a budget: an exact branch-and-bound over candidate pools.

A *bundle* fills the slots of a room template with one product each (bought ``quantity`` times);
optional slots may stay empty. Its value is the weighted sum of the pair scores of every pair of
filled slots. The search maximises that value subject to the budget, and returns the top K
bundles that differ from each other in at least ``min_difference`` slots.

The core works on an abstract :class:`BundleProblem` (pools of :class:`Candidate` per slot, one
pair-score matrix and one weight per slot pair), so it is testable on its own; the products of a
store become such a problem through a networkx graph (:func:`problem_graph`,
:func:`problem_from_graph`) and :func:`build_problem`.

References
----------
A. H. Land, A. G. Doig (1960). An automatic method of solving discrete programming problems.
    Econometrica 28(3):497-520 (branch and bound).
T. C. Koopmans, M. Beckmann (1957). Assignment problems and the location of economic activities.
    Econometrica 25(1):53-76 (the quadratic assignment structure of pairwise values).
"""

import heapq
import itertools
import math
from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from .errors import RoomError

__all__ = [
    "Candidate",
    "BundleSlot",
    "BundleProblem",
    "Bundle",
    "SearchResult",
    "search",
    "iter_bundles",
    "brute_force_count",
]

#: Improvements smaller than this (absolute, in score units) are not worth a subtree: a bound
#: within this margin of the incumbent prunes. Far below any meaningful score difference.
SCORE_TOLERANCE = 1e-12


@dataclass(frozen=True)
class Candidate:
    """A product that may fill a slot: ``price`` per unit, ``stock`` None when unknown."""

    id: str
    price: float
    stock: int | None = None


@dataclass(frozen=True)
class BundleSlot:
    """One slot of a room: ``quantity`` units of one product of ``category``."""

    name: str
    category: str = ""
    quantity: int = 1
    required: bool = True


@dataclass(frozen=True, eq=False)
class BundleProblem:
    """An instance of the set search.

    Attributes
    ----------
    slots : tuple of BundleSlot
    pools : tuple of tuple of Candidate
        ``pools[s]`` are the candidates of slot ``s``.
    scores : dict (s, t) -> ndarray, shape (len(pools[s]), len(pools[t]))
        Pair scores for slot pairs with ``s < t``; a missing pair contributes nothing.
    weights : dict (s, t) -> float
        Weight of each slot pair (``s < t``); a missing pair has weight 0.
    budget : float
        Upper limit of ``sum(price * quantity)``; ``math.inf`` for none.
    """

    slots: tuple
    pools: tuple
    scores: dict
    weights: dict
    budget: float = math.inf

    def __post_init__(self):
        if len(self.slots) != len(self.pools):
            raise ValueError(f"{len(self.slots)} slots but {len(self.pools)} pools")
        fixed = {}
        for (s, t), mat in self.scores.items():
            if not 0 <= s < t < len(self.slots):
                raise ValueError(f"score key {(s, t)!r} must be a slot pair with s < t")
            arr = np.array(mat, dtype=float)
            want = (len(self.pools[s]), len(self.pools[t]))
            if arr.shape != want:
                raise ValueError(f"scores[{s}, {t}] must have shape {want}, got {arr.shape}")
            arr.setflags(write=False)
            fixed[(s, t)] = arr
        object.__setattr__(self, "scores", fixed)
        object.__setattr__(self, "slots", tuple(self.slots))
        object.__setattr__(self, "pools", tuple(tuple(p) for p in self.pools))

    def pair_matrix(self, s, t):
        """Weighted pair values ``w_st * scores[s, t]`` oriented (slot s, slot t); zeros if absent."""
        a, b = (s, t) if s < t else (t, s)
        w = float(self.weights.get((a, b), 0.0))
        mat = self.scores.get((a, b))
        if mat is None or w == 0.0:
            return np.zeros((len(self.pools[s]), len(self.pools[t])))
        return w * (mat if s < t else mat.T)

    def value(self, choice):
        """Weighted sum of pair scores of a bundle given as candidate indices (None = empty)."""
        total = 0.0
        for (s, t), mat in self.scores.items():
            i, j = choice[s], choice[t]
            if i is not None and j is not None:
                total += float(self.weights.get((s, t), 0.0)) * float(mat[i, j])
        return total

    def cost(self, choice):
        """Total price of a bundle: sum of price x quantity over filled slots."""
        return float(sum(self.pools[s][i].price * self.slots[s].quantity
                         for s, i in enumerate(choice) if i is not None))


@dataclass(frozen=True)
class Bundle:
    """One result: ``choice[s]`` is an index into ``pools[s]`` or None for an empty slot."""

    value: float
    cost: float
    choice: tuple


@dataclass(frozen=True)
class SearchResult:
    """Bundles best first; ``exact`` is False only when ``max_nodes`` stopped the search."""

    bundles: tuple
    exact: bool
    nodes: int
    pool_sizes: tuple = field(default=())


def _check_problem(problem):
    for s, slot in enumerate(problem.slots):
        if slot.quantity < 1:
            raise RoomError(f"slot '{slot.name}': quantity must be at least 1, got {slot.quantity}")
        if slot.required and not problem.pools[s]:
            raise RoomError(f"slot '{slot.name}': no candidates")


def iter_bundles(problem):
    """Every bundle within the budget, as ``(value, cost, choice)``, lazily (brute force).

    The number of bundles is the product of the pool sizes (plus one per optional slot), so this
    is a generator: use it on small instances only, or stop early.
    """
    options = []
    for slot, pool in zip(problem.slots, problem.pools):
        opts = list(range(len(pool)))
        if not slot.required:
            opts.append(None)
        options.append(opts)
    for choice in itertools.product(*options):
        cost = problem.cost(choice)
        if cost <= problem.budget:
            yield problem.value(choice), cost, choice


def brute_force_count(problem):
    """How many bundles brute force would enumerate (the budget not applied)."""
    return math.prod(len(p) + (0 if slot.required else 1) for slot, p in zip(problem.slots, problem.pools))


def _differences(a, b):
    return sum(1 for x, y in zip(a, b) if x != y)


class _Searcher:
    """Depth-first branch-and-bound over a fixed slot order (see :func:`search`, Notes)."""

    def __init__(self, problem, max_nodes):
        self.p = problem
        n = len(problem.slots)
        # Heavier slots first: their pair values become exact early, which tightens the bound.
        incident = [sum(abs(float(problem.weights.get((min(s, t), max(s, t)), 0.0)))
                        for t in range(n) if t != s) for s in range(n)]
        self.order = sorted(range(n), key=lambda s: (len(problem.pools[s]) > 1, -incident[s], s))
        o = self.order
        self.qty = [problem.slots[s].quantity for s in o]
        self.required = [problem.slots[s].required for s in o]
        self.unit_cost = [np.array([c.price * problem.slots[s].quantity for c in problem.pools[s]], dtype=float)
                          for s in o]
        self.size = [len(problem.pools[s]) for s in o]
        # pair[d][e]: weighted values between the d-th and e-th slot of the order, shape (n_d, n_e).
        self.pair = [[problem.pair_matrix(o[d], o[e]) if d != e else None for e in range(n)] for d in range(n)]
        # future[d][c]: an upper bound on the values of pairs (d, e), e > d, given candidate c at d:
        # each partner e contributes at most its best value over its pool (or 0 when e may be empty).
        self.future = []
        for d in range(n):
            f = np.zeros(self.size[d])
            for e in range(d + 1, n):
                if self.size[e] == 0:
                    continue
                best = self.pair[d][e].max(axis=1)
                if not self.required[e]:
                    best = np.maximum(best, 0.0)
                f = f + best
            self.future.append(f)
        # Cheapest cost of the required slots from depth d on (used to keep the budget feasible).
        mins = [float(c.min()) if (r and c.size) else 0.0 for c, r in zip(self.unit_cost, self.required)]
        self.min_rest = [sum(mins[d:]) for d in range(n + 1)]
        self.min_cost = mins
        self.max_nodes = max_nodes
        self.nodes = 0
        self.stopped = False

    def _child_bounds(self, depth, links, budget_left):
        """Bound of every child of a node at ``depth``, all candidates at once.

        Returns ``(children, own, bounds)``: candidate indices (-1 = empty), the exact value each
        child adds, and an upper bound on what the slots after ``depth`` can add below it.
        """
        n = len(self.order)
        cost = self.unit_cost[depth]
        cand = np.flatnonzero(cost <= budget_left - self.min_rest[depth + 1] + 1e-9)
        own = links[depth][cand]
        left = budget_left - cost[cand]                      # budget left below each child
        rest = np.zeros(cand.size)
        for e in range(depth + 1, n):
            # Budget for slot e: what is left after the cheapest picks of the other required slots.
            allowed = left - (self.min_rest[depth + 1] - self.min_cost[e])
            vals = (links[e] + self.future[e])[None, :] + self.pair[depth][e][cand]
            ok = self.unit_cost[e][None, :] <= allowed[:, None] + 1e-9
            term = np.max(np.where(ok, vals, -np.inf), axis=1, initial=-np.inf)
            if not self.required[e]:
                term = np.maximum(term, 0.0)
            rest += term
        children = cand
        if not self.required[depth]:
            # The empty child: no value of its own, no links added.
            rest_empty = 0.0
            for e in range(depth + 1, n):
                allowed = budget_left - (self.min_rest[depth + 1] - self.min_cost[e])
                ok = self.unit_cost[e] <= allowed + 1e-9
                term = float(np.max(np.where(ok, links[e] + self.future[e], -np.inf), initial=-np.inf))
                if not self.required[e]:
                    term = max(term, 0.0)
                rest_empty += term
            children = np.append(cand, -1)
            own = np.append(own, 0.0)
            rest = np.append(rest, rest_empty)
        return children, own, rest

    def _threshold(self):
        if len(self.heap) < self.top:
            return -math.inf
        return self.heap[0][0]

    def _offer(self, value, cost, chosen):
        item = (value, -next(self.counter), cost, tuple(chosen))
        if len(self.heap) < self.top:
            heapq.heappush(self.heap, item)
        elif value > self.heap[0][0] + SCORE_TOLERANCE:
            heapq.heapreplace(self.heap, item)

    def run(self, top, avoid=(), min_difference=1):
        """The ``top`` best bundles differing from each of ``avoid`` in >= ``min_difference`` slots.

        Choices are in search order; returns ``[(value, cost, choice), ...]`` best first.
        """
        n = len(self.order)
        self.top = top
        self.heap = []                      # min-heap of (value, -counter, cost, choice)
        self.counter = itertools.count()
        links = [np.zeros(self.size[e]) for e in range(n)]
        if n:
            self._dfs(0, [], 0.0, 0.0, links, [0] * len(avoid), list(avoid), min_difference)
        elif not avoid:
            self._offer(0.0, 0.0, [])
        out = sorted(self.heap, key=lambda item: (-item[0], -item[1]))
        return [(v, c, ch) for v, _, c, ch in out]

    def _dfs(self, depth, chosen, value, cost, links, diffs, avoid, min_difference):
        n = len(self.order)
        children, own, rest = self._child_bounds(depth, links, self.p.budget - cost)
        bounds = value + own + rest
        left_after = n - depth - 1
        for k in np.argsort(-bounds, kind="stable"):
            bound = bounds[k]
            threshold = self._threshold()
            if bound == -math.inf or bound <= threshold + SCORE_TOLERANCE and threshold > -math.inf:
                break
            if self.max_nodes is not None and self.nodes >= self.max_nodes:
                self.stopped = True
                return
            c = None if children[k] < 0 else int(children[k])
            new_diffs = diffs
            if avoid:
                new_diffs = [d + (b[depth] != c) for d, b in zip(diffs, avoid)]
                if any(d + left_after < min_difference for d in new_diffs):
                    continue
            self.nodes += 1
            c_cost = 0.0 if c is None else float(self.unit_cost[depth][c])
            if depth + 1 == n:
                self._offer(value + float(own[k]), cost + c_cost, chosen + [c])
                continue
            if c is None:
                new_links = links
            else:
                new_links = links[:depth + 1] + [links[e] + self.pair[depth][e][c] for e in range(depth + 1, n)]
            self._dfs(depth + 1, chosen + [c], value + float(own[k]), cost + c_cost, new_links, new_diffs,
                      avoid, min_difference)
            if self.stopped:
                return


def search(problem, top=1, min_difference=1, max_nodes=None):
    """The top bundles of ``problem``, exactly, by branch-and-bound.

    Parameters
    ----------
    problem : BundleProblem
    top : int
        How many bundles to return (fewer when fewer exist).
    min_difference : int
        Every two returned bundles differ in at least this many slots (1 = merely distinct).
    max_nodes : int or None
        Stop after expanding this many nodes; the result then says ``exact=False``.

    Returns
    -------
    SearchResult
        ``bundles`` best first: bundle k is the best bundle within the budget that differs from
        each of bundles 1..k-1 in at least ``min_difference`` slots (with ``min_difference=1`` this
        is the plain top-K). ``nodes`` counts expanded search nodes over all K searches.

    Raises
    ------
    RoomError
        A required slot has no candidates, or a quantity is below 1.

    Notes
    -----
    Slots are assigned one at a time in a fixed order (singleton pools such as an anchor first,
    then by total incident weight). At a node with the first d slots assigned, the value so far
    is exact and the rest is bounded by

        sum over unassigned e of  max( 0 if e optional,
                                       max over affordable c of  link_e(c) + future_e(c) )

    where ``link_e(c)`` is the exact weighted value between candidate c of slot e and the slots
    already assigned, and ``future_e(c)`` sums, over unassigned slots f after e, the best value c
    could have with any candidate of f (or 0 when f may stay empty). The bound is admissible
    (never below the best completion): every completion's value splits into exactly these terms,
    one per unassigned slot e (its links to assigned slots plus its pairs with later slots), and
    each term is at most its maximum; dropping the budget coupling between terms and the choice
    consistency between ``future`` terms only loosens it. "Affordable" keeps only candidates
    whose price fits the budget left after the cheapest choices of the other required slots,
    which any feasible completion satisfies, so that filter is admissible too. Children are
    bounded one level ahead (all candidates at once) and visited best bound first, so a strong
    incumbent is found early; a subtree is cut only when its bound cannot beat the K-th best
    bundle found so far (kept in a heap with a counter tie-breaker) by more than
    :data:`SCORE_TOLERANCE`. With ``min_difference > 1`` the K bundles are found one search at a
    time, each against the bundles already chosen. The difference constraint prunes a node when some earlier
    bundle can no longer be differed from in enough slots, which removes only infeasible nodes.
    """
    if top < 1:
        raise RoomError(f"top must be at least 1, got {top}")
    if min_difference < 1 or min_difference > max(1, len(problem.slots)):
        raise RoomError(f"min-difference must lie in 1..{len(problem.slots)}, got {min_difference}")
    _check_problem(problem)
    searcher = _Searcher(problem, max_nodes)
    order = searcher.order
    if min_difference == 1:
        found = searcher.run(top)
    else:
        found = []
        while len(found) < top and not searcher.stopped:
            best = searcher.run(1, avoid=[f[2] for f in found], min_difference=min_difference)
            if not best:
                break
            found.append(best[0])
    bundles = []
    for value, cost, ordered in found:
        choice = [None] * len(order)
        for d, s in enumerate(order):
            choice[s] = ordered[d]
        choice = tuple(choice)
        bundles.append(Bundle(value=problem.value(choice), cost=problem.cost(choice), choice=choice))
    return SearchResult(bundles=tuple(bundles), exact=not searcher.stopped, nodes=searcher.nodes,
                        pool_sizes=tuple(len(p) for p in problem.pools))
