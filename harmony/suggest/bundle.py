"""Room sets under a budget: an exact branch-and-bound over candidate pools.

A *bundle* fills the slots of a room template with one product each (bought ``quantity`` times);
optional slots may stay empty. Its value is the weighted sum of the pair scores of every pair of
filled slots. The search maximises that value subject to the budget, and returns the top K
bundles that differ from each other in at least ``min_difference`` slots.

The core works on an abstract :class:`BundleProblem` (pools of :class:`Candidate` per slot, one
pair-score matrix and one weight per slot pair), testable on its own; a store's products become
one through a networkx graph (:func:`problem_graph`, :func:`problem_from_graph`, :func:`build_problem`).

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
import time
from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from harmony.errors import RoomError
from harmony.suggest.room import check_currency

__all__ = [
    "Candidate",
    "BundleSlot",
    "BundleProblem",
    "Bundle",
    "SearchResult",
    "search",
    "iter_bundles",
    "brute_force_count",
    "problem_graph",
    "problem_from_graph",
    "RoomBundle",
    "BundleResult",
    "build_problem",
    "search_bundles",
    "bundle_to_dict",
    "result_to_dict",
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
        if cost <= problem.budget and _stock_ok(problem, choice):
            yield problem.value(choice), cost, choice


def _stock_ok(problem, choice):
    """Whether every product's known stock covers the units the bundle takes (over all its slots)."""
    used, stock = {}, {}
    for s, i in enumerate(choice):
        if i is not None:
            c = problem.pools[s][i]
            used[c.id] = used.get(c.id, 0) + problem.slots[s].quantity
            if c.stock is not None:
                stock[c.id] = min(stock.get(c.id, c.stock), c.stock)
    return all(used[pid] <= n for pid, n in stock.items())


def brute_force_count(problem):
    """How many bundles brute force would enumerate (the budget not applied)."""
    return math.prod(len(p) + (0 if slot.required else 1) for slot, p in zip(problem.slots, problem.pools))


def _differences(a, b):
    return sum(1 for x, y in zip(a, b) if x != y)


class _Searcher:
    """Depth-first branch-and-bound over a fixed slot order (see :func:`search`, Notes)."""

    def __init__(self, problem, max_nodes, time_limit=None):
        self.p = problem
        self.deadline = None if time_limit is None else time.monotonic() + float(time_limit)
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
        # In stock for the slot's quantity (None = quantity unknown, taken as available).
        self.avail = [np.array([c.stock is None or c.stock >= problem.slots[s].quantity for c in problem.pools[s]],
                               dtype=bool) for s in o]
        self.all_avail = [bool(a.all()) for a in self.avail]
        # Products offered in more than one slot with a known stock: their units add up over slots.
        seen, shared = {}, set()
        for s in o:
            for c in problem.pools[s]:
                if c.stock is not None and seen.setdefault(c.id, s) != s:
                    shared.add(c.id)
        self.ids = [[c.id for c in problem.pools[s]] for s in o]
        self.stock = [[c.stock for c in problem.pools[s]] for s in o]
        self.shared = shared
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
        mins = [float(c[a].min()) if (r and a.any()) else 0.0
                for c, a, r in zip(self.unit_cost, self.avail, self.required)]
        self.min_rest = [sum(mins[d:]) for d in range(n + 1)]
        self.min_cost = mins
        self.max_cost = [float(c.max()) if c.size else 0.0 for c in self.unit_cost]
        # Slots after d with candidates (an optional slot with an empty pool adds nothing).
        self.later = [[e for e in range(d + 1, n) if self.size[e]] for d in range(n)]
        # Scratch space for the one-level-ahead bounds (largest child count x pool of slot e).
        widest = max(self.size, default=0)
        self.buffer = [np.empty((widest, self.size[e])) for e in range(n)]
        self.max_nodes = max_nodes
        self.nodes = 0
        self.stopped = False

    def _child_bounds(self, depth, links, budget_left):
        """Bound of every child of a node at ``depth``, all candidates at once.

        Returns ``(children, own, bounds)``: candidate indices (-1 = empty), the exact value each
        child adds, and an upper bound on what the slots after ``depth`` can add below it.
        """
        cost = self.unit_cost[depth]
        cand = np.flatnonzero(self.avail[depth] & (cost <= budget_left - self.min_rest[depth + 1] + 1e-9))
        own = links[depth][cand]
        left = budget_left - cost[cand]                      # budget left below each child
        rest = np.zeros(cand.size)
        for e in self.later[depth]:
            # Budget for slot e: what is left after the cheapest picks of the other required slots.
            allowed = left - (self.min_rest[depth + 1] - self.min_cost[e])
            mat = self.pair[depth][e]
            if cand.size < mat.shape[0]:
                mat = mat[cand]
            vals = np.add(mat, links[e] + self.future[e], out=self.buffer[e][:cand.size])
            if cand.size and self.all_avail[e] and self.max_cost[e] <= allowed.min() + 1e-9:
                term = vals.max(axis=1)             # every candidate of e fits under every child
            else:
                ok = self.avail[e][None, :] & (self.unit_cost[e][None, :] <= allowed[:, None] + 1e-9)
                term = np.max(np.where(ok, vals, -np.inf), axis=1, initial=-np.inf)
            if not self.required[e]:
                term = np.maximum(term, 0.0)
            rest += term
        children = cand
        if not self.required[depth]:
            # The empty child: no value of its own, no links added.
            rest_empty = 0.0
            for e in self.later[depth]:
                allowed = budget_left - (self.min_rest[depth + 1] - self.min_cost[e])
                ok = self.avail[e] & (self.unit_cost[e] <= allowed + 1e-9)
                term = float(np.max(np.where(ok, links[e] + self.future[e], -np.inf), initial=-np.inf))
                if not self.required[e]:
                    term = max(term, 0.0)
                rest_empty += term
            children = np.append(cand, -1)
            own = np.append(own, 0.0)
            rest = np.append(rest, rest_empty)
        return children, own, rest

    def _stock_left(self, depth, c, chosen):
        """Whether candidate c at ``depth`` still has stock after the same product's earlier slots."""
        pid, need, limit = self.ids[depth][c], self.qty[depth], self.stock[depth][c]
        for d, i in enumerate(chosen):
            if i is not None and self.ids[d][i] == pid:
                need += self.qty[d]
                if self.stock[d][i] is not None:
                    limit = self.stock[d][i] if limit is None else min(limit, self.stock[d][i])
        return limit is None or need <= limit

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
            if self.deadline is not None and self.nodes % 64 == 0 and time.monotonic() > self.deadline:
                self.stopped = True
                return
            c = None if children[k] < 0 else int(children[k])
            new_diffs = diffs
            if avoid:
                new_diffs = [d + (b[depth] != c) for d, b in zip(diffs, avoid)]
                if any(d + left_after < min_difference for d in new_diffs):
                    continue
            if self.shared and c is not None and self.ids[depth][c] in self.shared and not self._stock_left(
                    depth, c, chosen):
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


def search(problem, top=1, min_difference=1, max_nodes=None, time_limit=None):
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
    time_limit : float or None
        Stop after about this many seconds (checked every 64 nodes); the result then holds the
        best bundles found so far and says ``exact=False``.

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
    searcher = _Searcher(problem, max_nodes, time_limit)
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


# ------------------------------------------------------------------------------ the graph


def problem_graph(problem):
    """The problem as a networkx graph: one node per (slot index, candidate index).

    Node attributes: ``slot`` (index), ``slot_name``, ``id``, ``price``, ``stock``. Edges join
    candidates of two slots whose pair has a score, with attributes ``score`` (the pair score)
    and ``weight`` (the slot-pair weight).
    """
    g = nx.Graph()
    for s, (slot, pool) in enumerate(zip(problem.slots, problem.pools)):
        for i, c in enumerate(pool):
            g.add_node((s, i), slot=s, slot_name=slot.name, id=c.id, price=c.price, stock=c.stock)
    for (s, t), mat in problem.scores.items():
        w = float(problem.weights.get((s, t), 0.0))
        g.add_edges_from(((s, i), (t, j), {"score": float(mat[i, j]), "weight": w})
                         for i in range(mat.shape[0]) for j in range(mat.shape[1]))
    return g


def problem_from_graph(graph, slots, budget=math.inf, score="score", weight="weight"):
    """Build a :class:`BundleProblem` from a graph shaped like :func:`problem_graph`'s.

    Parameters
    ----------
    graph : networkx.Graph
        Nodes ``(slot index, candidate index)`` with ``id``, ``price`` and optional ``stock``.
    slots : sequence of BundleSlot
    score : str or callable
        Edge attribute holding the pair score, or ``f(u, v, data) -> float``, in the networkx manner.
    weight : str or callable
        Edge attribute (or callable) holding the slot-pair weight; pairs without edges weigh 0.
    """
    def getter(attr):
        return attr if callable(attr) else (lambda u, v, d: d.get(attr, 0.0))

    get_score, get_weight = getter(score), getter(weight)
    n = len(slots)
    members = [sorted(i for (s, i) in graph.nodes if s == t) for t in range(n)]
    for t, m in enumerate(members):
        if m != list(range(len(m))):
            raise ValueError(f"slot {t}: candidate indices must be 0..{len(m) - 1}")
    pools = tuple(tuple(Candidate(graph.nodes[(t, i)]["id"], float(graph.nodes[(t, i)]["price"]),
                                  graph.nodes[(t, i)].get("stock")) for i in members[t]) for t in range(n))
    scores, weights = {}, {}
    for u, v, d in graph.edges(data=True):
        (s, i), (t, j) = sorted((u, v))
        if s == t:
            raise ValueError(f"edge {u}-{v} joins two candidates of one slot")
        if (s, t) not in scores:
            scores[s, t] = np.zeros((len(pools[s]), len(pools[t])))
            weights[s, t] = float(get_weight(u, v, d))
        scores[s, t][i, j] = float(get_score(u, v, d))
    return BundleProblem(tuple(slots), pools, scores, weights, budget)


# ------------------------------------------------------------------------------ store and rules


@dataclass(frozen=True)
class RoomBundle:
    """One bundle of a room, ready to print: items, pair scores and the room-level view."""

    score: float
    total_price: float
    items: tuple        # ((slot name, product id, quantity, unit price), ...)
    pairs: tuple        # ((slot a, slot b, score, weight), ...)
    view: object        # harmony.suggest.roomview.RoomView


@dataclass(frozen=True)
class BundleResult:
    """The answer of :func:`search_bundles`; ``exact`` is over the pools of ``pool_sizes``."""

    room: str
    budget: float
    currency: str
    exact: bool
    pool_sizes: tuple   # ((slot name, n), ...)
    bundles: tuple
    nodes: int = 0
    eligible: tuple = ()  # ((slot name, n before pruning), ...)


def _all_pair_scores(pals_a, pals_b, pair_rules):
    """Exact pair scores of every palette of ``pals_a`` with every one of ``pals_b``, (n_a, n_b).

    Uses the bilinear form of the raw score (``harmony.rules.score``): with all colours stacked,
    ``raw = W_a K W_b^T`` where W holds each palette's weights in its own block of columns.
    """
    from harmony.rules.score import to_unit

    def stack(pals):
        jab = np.concatenate([p.jab for p in pals])
        w = np.zeros((len(pals), jab.shape[0]))
        k = 0
        for r, p in enumerate(pals):
            w[r, k:k + len(p)] = p.weights
            k += len(p)
        return jab, w

    ja, wa = stack(pals_a)
    jb, wb = stack(pals_b)
    raw = wa @ pair_rules.kernel(ja, jb) @ wb.T
    return np.asarray(to_unit(raw, pair_rules), dtype=float)


def _money(x, currency):
    return f"{x:,.2f} {currency}"


def _prune_pool(room, s, pools, palettes, rules, pool_limit):
    """The ``pool_limit`` candidates of slot ``s`` with the best weighted partner scores.

    A candidate's potential is ``sum over partner slots t of w_st * (its best score with pool t)``,
    the best partner found by the screen (:func:`harmony.rules.screen.screen_top_k`, exact re-rank of
    the screened candidates), so no full score matrix of a large category is ever formed. With an
    anchor, the anchor is the whole pool of its slot, so the pool gathers around it. The cheapest
    candidate is always kept, so a budget that admits some complete set still does.
    """
    from harmony.rules.score import to_unit
    from harmony.rules.screen import screen_top_k

    slot, pool = room.slots[s], pools[s]
    potential = np.zeros(len(pool))
    mine = [palettes[p.id] for p in pool]
    for t, other in enumerate(room.slots):
        w = room.pair_weight(slot.name, other.name)
        if t == s or w == 0 or not pools[t] or not rules.pairs_with(slot.category, other.category):
            continue
        pr = rules.for_pair(slot.category, other.category)
        best = screen_top_k(mine, [palettes[p.id] for p in pools[t]], pr, k=1)
        potential += w * np.asarray(to_unit(best.raw[:, 0], pr), dtype=float)
    order = list(np.argsort(-potential, kind="stable")[:pool_limit])
    cheapest_i = int(np.argmin([p.price for p in pool]))
    if cheapest_i not in order:
        order[-1] = cheapest_i
    return [pool[i] for i in sorted(order)]


def build_problem(store, room, rules, budget=None, anchor=None, exclude=(), pool_limit=60):
    """Candidate pools, pair scores and the graph of a room, as a :class:`BundleProblem`.

    Candidates of a slot are the store's products of its category that are in stock for the
    slot's quantity, have a palette, are not excluded, and whose price x quantity fits the budget
    left after the cheapest picks of the other required slots. With an ``anchor`` product, its
    slot holds only the anchor. A pool larger than ``pool_limit`` keeps the candidates with the
    best weighted partner scores found by the screen (and the cheapest one, so the budget stays
    reachable); the search is then exact over the kept pools only, which ``eligible`` shows.

    Returns
    -------
    problem : BundleProblem
    eligible : tuple of (slot name, n) before pruning to ``pool_limit``
    palettes : dict id -> Palette

    Raises
    ------
    RoomError
        A slot category with no products, or none usable; an anchor whose category is not in the
        room (or is excluded, out of stock, without a palette); a budget below the cheapest
        complete set (naming the cheapest total); prices in another currency than the budget's.
    StoreError
        An unknown anchor or excluded id.
    """
    budget = room.budget if budget is None else float(budget)
    if not budget > 0 or not math.isfinite(budget):
        raise RoomError(f"budget must be a positive number, got {budget!r}")
    exclude = set(exclude)
    for pid in sorted(exclude):
        store.product(pid)  # StoreError for an unknown id
    anchor_slot = None
    if anchor is not None:
        product = store.product(anchor)
        cat = product.category_key
        matches = [s for s in room.slots if s.category == cat]
        if not matches:
            raise RoomError(f"anchor '{anchor}' is a {cat}, which has no slot in room "
                            f"'{room.name}' (slots: {', '.join(s.category for s in room.slots)})")
        if anchor in exclude:
            raise RoomError(f"anchor '{anchor}' is also excluded")
        anchor_slot = matches[0].name

    palettes = {}
    raw_pools = []
    for slot in room.slots:
        products = store.products(slot.category)
        if not products:
            raise RoomError(f"room '{room.name}': slot '{slot.name}': no products of category "
                            f"'{slot.category}' in the store")
        if slot.name == anchor_slot:
            products = [store.product(anchor)]
        pals = store.palettes(slot.category)
        usable = [p for p in products if p.id not in exclude and p.in_stock(slot.quantity) and p.id in pals]
        check_currency(room, slot, usable)
        if slot.name == anchor_slot and not usable:
            raise RoomError(f"anchor '{anchor}' cannot fill slot '{slot.name}': it needs {slot.quantity} "
                            "in stock and a palette")
        if not usable and slot.required:
            raise RoomError(f"room '{room.name}': slot '{slot.name}': none of the {len(products)} "
                            f"products of category '{slot.category}' is usable (in stock x{slot.quantity}, "
                            "with a palette, not excluded)")
        for p in usable:
            palettes[p.id] = pals[p.id]
        raw_pools.append(usable)

    cheapest = [min(p.price * s.quantity for p in pool) if ((s.required or s.name == anchor_slot) and pool) else 0.0
                for s, pool in zip(room.slots, raw_pools)]
    if sum(cheapest) > budget:
        parts = " + ".join(f"{s.name} {_money(c, room.currency)}" for s, c in zip(room.slots, cheapest) if c)
        raise RoomError(f"budget {_money(budget, room.currency)} is below the cheapest complete set "
                        f"of room '{room.name}': {_money(sum(cheapest), room.currency)} ({parts})")
    pools = []
    for k, (slot, pool) in enumerate(zip(room.slots, raw_pools)):
        room_left = budget - (sum(cheapest) - cheapest[k])
        pools.append([p for p in pool if p.price * slot.quantity <= room_left + 1e-9])
    eligible = tuple((s.name, len(p)) for s, p in zip(room.slots, pools))

    def matrices(pools):
        scores, weights = {}, {}
        for s in range(len(room.slots)):
            for t in range(s + 1, len(room.slots)):
                a, b = room.slots[s], room.slots[t]
                w = room.pair_weight(a.name, b.name)
                if w == 0 or not pools[s] or not pools[t] or not rules.pairs_with(a.category, b.category):
                    continue
                pr = rules.for_pair(a.category, b.category)
                scores[s, t] = _all_pair_scores([palettes[p.id] for p in pools[s]],
                                                [palettes[p.id] for p in pools[t]], pr)
                weights[s, t] = w
        return scores, weights

    if pool_limit < 1:
        raise RoomError(f"pool limit must be at least 1, got {pool_limit}")
    pools = [_prune_pool(room, s, pools, palettes, rules, pool_limit) if len(pool) > pool_limit else pool
             for s, pool in enumerate(pools)]
    scores, weights = matrices(pools)

    # The anchor's slot must be filled even when the template makes it optional.
    slots = tuple(BundleSlot(s.name, s.category, s.quantity, s.required or s.name == anchor_slot)
                  for s in room.slots)
    cands = tuple(tuple(Candidate(p.id, float(p.price), p.stock) for p in pool) for pool in pools)
    graph = problem_graph(BundleProblem(slots, cands, scores, weights, budget))
    return problem_from_graph(graph, slots, budget), eligible, palettes


def search_bundles(store, room, rules, budget=None, anchor=None, exclude=(), top=3, min_difference=1,
                   pool_limit=60, max_nodes=None, time_limit=None, curation=None):
    """The top bundles of a room from a store's products, scored under ``rules``.

    Parameters
    ----------
    store : harmony.shop.store.Store
    room : harmony.suggest.room.RoomTemplate
    rules : harmony.rules.RuleSet
    budget : float or None
        Overrides the room template's budget.
    anchor : str or None
        A product id every bundle must contain.
    exclude : iterable of str
        Product ids no bundle may contain.
    top, min_difference, max_nodes, time_limit
        As in :func:`search` (the time limit covers the search, not building the pools).
    pool_limit : int
        Largest candidate pool per slot (see :func:`build_problem`).
    curation : harmony.suggest.curation.Curation, optional
        Sets with two products a block keeps apart are left out (more are searched for).

    Returns
    -------
    BundleResult
        Bundles best first, each with its room-level view (:func:`harmony.suggest.roomview.room_view`).
    """
    from harmony.suggest.roomview import room_view

    problem, eligible, palettes = build_problem(store, room, rules, budget, anchor, exclude, pool_limit)
    from harmony.suggest.curation import set_allowed
    want = top if curation is None else 5 * top + 10  # curation: room for sets a block removes
    result = search(problem, top=want, min_difference=min_difference, max_nodes=max_nodes,
                    time_limit=time_limit)
    bundles = []
    for b in result.bundles:
        if len(bundles) == top or not set_allowed(curation, [(problem.pools[s][i].id, room.slots[s].category)
                                                             for s, i in enumerate(b.choice) if i is not None]):
            continue  # curation: blocks
        items, pals, visible = [], [], []
        for s, i in enumerate(b.choice):
            if i is None:
                continue
            slot, cand = room.slots[s], problem.pools[s][i]
            items.append((slot.name, cand.id, slot.quantity, cand.price))
            pals.append(palettes[cand.id])
            visible.append(slot.quantity * slot.visible_share)
        pairs = []
        for (s, t), mat in sorted(problem.scores.items()):
            i, j = b.choice[s], b.choice[t]
            if i is not None and j is not None:
                pairs.append((room.slots[s].name, room.slots[t].name, float(mat[i, j]),
                              float(problem.weights[s, t])))
        bundles.append(RoomBundle(score=b.value, total_price=b.cost, items=tuple(items), pairs=tuple(pairs),
                                  view=room_view(pals, visible)))
    return BundleResult(room=room.name, budget=problem.budget, currency=room.currency, exact=result.exact,
                        pool_sizes=tuple((s.name, len(p)) for s, p in zip(room.slots, problem.pools)),
                        bundles=tuple(bundles), nodes=result.nodes, eligible=eligible)


#: Version of ``harmony bundle --json``: 2 names the slot pairs ``slot_pairs`` (format 1: ``pairs``).
BUNDLE_JSON_FORMAT = 2


def bundle_to_dict(bundle):
    """One bundle as the JSON object of ``harmony bundle --json``."""
    return {
        "score": round(float(bundle.score), 6),
        "total_price": round(float(bundle.total_price), 2),
        "items": [{"slot": s, "id": pid, "quantity": int(q), "price": float(p)} for s, pid, q, p in bundle.items],
        "slot_pairs": [{"a": a, "b": b, "score": round(sc, 6), "weight": w} for a, b, sc, w in bundle.pairs],
        "proportions": bundle.view.to_dict(),
    }


def result_to_dict(result):
    """The whole answer as the JSON object of ``harmony bundle --json``."""
    return {
        "format": BUNDLE_JSON_FORMAT,
        "room": result.room,
        "budget": float(result.budget),
        "currency": result.currency,
        "exact": bool(result.exact),
        "pool_sizes": {name: int(n) for name, n in result.pool_sizes},
        # Candidates per slot before pruning to the pool limit: "exact" holds over pool_sizes only.
        "eligible_sizes": {name: int(n) for name, n in result.eligible},
        "bundles": [bundle_to_dict(b) for b in result.bundles],
    }
