"""Clicks by slider position: a position-based click model, and counterfactual estimates of another order.

A shopper clicks a suggestion in slot ``k`` of a slider when they look at that slot (*examination*,
probability ``theta[k]``) and find the suggestion worth a click (*attractiveness*, probability
``alpha[q]``), independently: ``P(click) = theta[k] * alpha[q]``. This is the position-based model
(PBM) of Chuklin, Markov & de Rijke (2015, section 3.3), fitted here by expectation-maximisation
(section 4.2; the updates are those of Wang et al. 2018, equations 4-5).

Scale
-----
The likelihood depends only on the products ``theta[k] * alpha[q]``: multiplying every ``theta`` by
``c`` and every ``alpha`` by ``1 / c`` changes nothing. The scale is fixed by setting the examination
of the first slot to 1 (``theta[1] = 1``): ``theta[k]`` is then the examination of slot ``k``
*relative to the first slot*, and ``alpha`` the click chance of a suggestion shown first.

Position must vary for the same suggestion (a share of randomised or swapped sliders, as in Joachims,
Swaminathan & Schnabel 2017): a log in which every suggestion always sits in the same slot cannot
tell position from attractiveness, and the fit says so.

Per suggestion (a product and the partner shown beside it): impressions, clicks, and the clicks
*expected from its positions* for a suggestion of average attractiveness,
``sum over its impressions of theta[k] * mean_alpha`` with ``mean_alpha`` = all clicks / sum of
``theta`` over all impressions. Their ratio says how much better (> 1) or worse (< 1) the suggestion
does than its slots predict. Its interval is Garwood's (1936) exact Poisson interval on the clicks,
divided by the expected clicks. A suggestion whose whole interval lies above 1 is *under-rated*
(shoppers pick it more than its slots explain: move it up), wholly below 1 *over-rated*.

Another order
-------------
The clicks a different order would get from the same shoppers are estimated by inverse propensity
weighting (Joachims, Swaminathan & Schnabel 2017, section 4): each logged click on a suggestion in
slot ``k`` that the new order puts in slot ``k'`` counts ``theta[k'] / theta[k]`` clicks, with
``1 / theta[k]`` clipped at :data:`DEFAULT_MAX_WEIGHT` (propensity clipping, their section 5.3,
trades a little bias for much less variance). Suggestions the new order shows but that the logged
request did not show cannot be estimated and count 0: the share of new slots that were shown in the
log (*support*) is reported beside the estimate, which is a lower bound when the support is below 1.

Intervals come from a percentile bootstrap over requests (Efron & Tibshirani 1993, ch. 13) that
re-fits the model on every resample, so they carry the uncertainty of ``theta`` too.

References
----------
A. Chuklin, I. Markov, M. de Rijke (2015). Click Models for Web Search. Morgan & Claypool.
X. Wang, N. Golbandi, M. Bendersky, D. Metzler, M. Najork (2018). Position bias estimation for
    unbiased learning to rank in personal search. WSDM 2018, 610-618.
T. Joachims, A. Swaminathan, T. Schnabel (2017). Unbiased learning-to-rank with biased feedback.
    WSDM 2017, 781-789.
F. Garwood (1936). Fiducial limits for the Poisson distribution. Biometrika 28(3/4):437-442.
B. Efron, R. J. Tibshirani (1993). An Introduction to the Bootstrap. Chapman & Hall.
"""

from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np

from harmony.errors import EventsError, HarmonyError
from harmony.fileio import csv_records, json_objects, repeated_name

__all__ = [
    "IMPRESSION_COLUMNS",
    "MIN_IMPRESSIONS",
    "DEFAULT_MAX_WEIGHT",
    "ImpressionLog",
    "PbmFit",
    "SuggestionRating",
    "OrderEstimate",
    "ClickReport",
    "read_impressions",
    "impression_log",
    "fit_pbm",
    "log_likelihood",
    "rate_suggestions",
    "garwood_interval",
    "ips_clicks",
    "new_positions",
    "analyse_clicks",
]

#: Required columns of an impression log.
IMPRESSION_COLUMNS = ("request", "product", "partner", "position", "clicked")
#: Suggestions with fewer impressions are reported as too few to rate. A choice of this project:
#: at a click chance of 5 % that is about one expected click, below which Garwood's interval spans
#: more than a factor of 5 either way.
MIN_IMPRESSIONS = 20
#: Largest inverse-propensity weight ``1 / theta`` (propensity clipped at 0.1). Common practice
#: (Joachims et al. 2017 clip at a fixed threshold); the bias it adds is reported as ``clipped``.
DEFAULT_MAX_WEIGHT = 10.0
_SHOWN = 5


@dataclass(frozen=True, eq=False)
class ImpressionLog:
    """An impression log as arrays, one entry per shown suggestion.

    ``request[i]`` indexes ``requests``; ``suggestion[i]`` indexes ``pairs`` (product, partner);
    ``position[i]`` is the 1-based slot; ``clicked[i]`` is 0 or 1.
    """

    request: np.ndarray
    suggestion: np.ndarray
    position: np.ndarray
    clicked: np.ndarray
    requests: tuple
    pairs: tuple
    path: str = ""

    def __len__(self):
        return int(self.request.shape[0])

    @property
    def positions(self):
        return int(self.position.max()) if len(self) else 0

    @cached_property
    def folded(self):
        """The impressions grouped by (suggestion, slot, click), worked out once per log (every
        bootstrap resample's fit reuses it): ``(group of each impression, click, slot - 1,
        suggestion)``, the last three one entry per group."""
        key = ((self.suggestion * self.positions) + (self.position - 1)) * 2 + self.clicked
        keys, inverse = np.unique(key, return_inverse=True)
        return inverse, (keys % 2).astype(float), (keys // 2) % self.positions, keys // 2 // self.positions


def impression_log(rows, path=""):
    """An :class:`ImpressionLog` from ``(request, product, partner, position, clicked)`` tuples."""
    req_index, pair_index = {}, {}
    r, s, p, c = [], [], [], []
    for request, product, partner, position, clicked in rows:
        r.append(req_index.setdefault(request, len(req_index)))
        s.append(pair_index.setdefault((product, partner), len(pair_index)))
        p.append(int(position))
        c.append(int(clicked))
    return ImpressionLog(
        request=np.asarray(r, dtype=np.int64), suggestion=np.asarray(s, dtype=np.int64),
        position=np.asarray(p, dtype=np.int64), clicked=np.asarray(c, dtype=np.int64),
        requests=tuple(req_index), pairs=tuple(pair_index), path=str(path),
    )


def _raw_rows(path):
    """Yield (line, dict) from a CSV (header row) or JSONL file; errors name the file and line."""
    path = Path(path)
    try:
        handle = open(path, encoding="utf-8-sig", newline="")  # a BOM (spreadsheet exports) is dropped
    except OSError as exc:
        raise EventsError(f"{path}: cannot read the impression log: {exc.strerror or exc}") from None
    try:
        with handle:
            if path.suffix.lower() in (".jsonl", ".ndjson"):
                for line, obj, problem in json_objects(handle):
                    yield line, obj if problem is None else problem
            else:
                header, records = csv_records(handle)
                if (twice := repeated_name(header)) is not None:
                    raise EventsError(f"{path}:1: column {twice!r} appears twice")
                missing = [c for c in IMPRESSION_COLUMNS if c not in header]
                if missing:
                    raise EventsError(f"{path}:1: missing column(s) {', '.join(missing)} "
                                      f"(need {','.join(IMPRESSION_COLUMNS)})")
                for line, row, problem in records:
                    yield line, row if problem is None else problem
    except UnicodeDecodeError:
        raise EventsError(f"{path}: not UTF-8 text (an impression log is CSV or JSON Lines)") from None


def _parse_row(obj):
    """(request, product, partner, position, clicked) from one record, or a problem string."""
    if isinstance(obj, str):
        return obj
    values = []
    for key in IMPRESSION_COLUMNS:
        value = obj.get(key)
        if value is None or str(value).strip() == "":
            return f"{key}: missing"
        values.append(str(value).strip())
    request, product, partner, position, clicked = values
    try:
        pos = int(position)
    except ValueError:
        return f"position: not a whole number: {position!r}"
    if pos < 1:
        return f"position: must be 1 or more (1 = first slot), got {pos}"
    if clicked.lower() in ("1", "true"):
        click = 1
    elif clicked.lower() in ("0", "false"):
        click = 0
    else:
        return f"clicked: must be 0 or 1, got {clicked!r}"
    return request, product, partner, pos, click


def read_impressions(path):
    """Read an impression log (CSV with a header, or JSONL).

    Columns ``request, product, partner, position, clicked`` (position 1 = first slot; clicked 0/1);
    a ``timestamp`` and any other column are ignored.

    Raises
    ------
    EventsError
        The file cannot be read, a column is missing, any row is malformed (each named as
        ``FILE:LINE: key: reason``, the first five listed), a request shows two suggestions in one
        slot or one suggestion twice, or the log is empty.
    """
    rows, problems, seen_slot, seen_pair = [], [], {}, {}
    count = 0
    for line, obj in _raw_rows(path):
        parsed = _parse_row(obj)
        if isinstance(parsed, str):
            problems.append(f"{path}:{line}: {parsed}")
            continue
        request, product, partner, pos, _ = parsed
        first = seen_slot.setdefault((request, pos), line)
        if first != line:
            problems.append(f"{path}:{line}: position: request '{request}' already has slot {pos} (line {first})")
            continue
        first = seen_pair.setdefault((request, product, partner), line)
        if first != line:
            problems.append(f"{path}:{line}: partner: request '{request}' already shows '{partner}' (line {first})")
            continue
        rows.append(parsed)
        count += 1
    if problems:
        more = f" (and {len(problems) - _SHOWN} more)" if len(problems) > _SHOWN else ""
        raise EventsError(f"{len(problems)} bad row(s): " + "; ".join(problems[:_SHOWN]) + more)
    if not rows:
        raise EventsError(f"{path}: the impression log has no rows")
    return impression_log(rows, path)


# --------------------------------------------------------------------------------------------
# The position-based model, by EM
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PbmFit:
    """A fitted position-based model.

    ``theta[k - 1]`` is the examination of slot ``k`` with ``theta[0] = 1`` (the scale);
    ``alpha[q]`` the attractiveness of suggestion ``q`` of the log; ``iterations`` EM steps run;
    ``converged`` whether the largest change fell below the tolerance.
    """

    theta: np.ndarray
    alpha: np.ndarray
    iterations: int
    converged: bool
    log_likelihood: float


def log_likelihood(log, theta, alpha):
    """Bernoulli log-likelihood of the log's clicks under ``P(click) = theta[pos-1] * alpha[q]``."""
    p = np.clip(np.asarray(theta)[log.position - 1] * np.asarray(alpha)[log.suggestion], 1e-12, 1 - 1e-12)
    c = log.clicked
    return float(np.sum(c * np.log(p) + (1 - c) * np.log1p(-p)))


def fit_pbm(log, tol=1e-7, max_iter=2000, start=None, weights=None):
    """Fit the position-based click model by EM (Chuklin et al. 2015, section 4.2).

    Parameters
    ----------
    log : ImpressionLog
    tol : float
        Stop when no identified parameter (``theta / theta[0]``, ``alpha * theta[0]``) moves by more
        than this in one step.
    max_iter : int
    start : PbmFit, optional
        Warm start (the bootstrap starts each resample from the full fit).
    weights : ndarray, shape (len(log),), optional
        How many times each impression counts (a bootstrap resample's multiplicities).

    Returns
    -------
    PbmFit
        With ``theta[0] = 1``.

    Notes
    -----
    E-step for an impression with no click: the posteriors of examination and attractiveness
    are ``theta (1 - alpha) / (1 - theta alpha)`` and ``alpha (1 - theta) / (1 - theta alpha)``; a
    click sets both to 1. M-step: each parameter becomes the mean of its posteriors over its
    impressions (Wang et al. 2018, equations 4-5). Every step raises the likelihood (Dempster,
    Laird & Rubin 1977); the result is rescaled to ``theta[0] = 1`` at the end, which leaves the
    likelihood unchanged. Slots or suggestions with no impression (weight 0) keep their start value.
    The steps are accelerated by SQUAREM (Varadhan & Roland 2008), which keeps EM's fixed point
    and its stopping rule; ``iterations`` counts EM steps.

    R. Varadhan, C. Roland (2008). Simple and globally convergent methods for accelerating the
    convergence of any EM algorithm. Scandinavian Journal of Statistics 35(2):335-353.
    """
    n_pos, n_sug = log.positions, len(log.pairs)
    w_all = np.ones(len(log)) if weights is None else np.asarray(weights, dtype=float)
    # The likelihood depends only on counts per (slot, suggestion, click): fold equal impressions.
    inverse, c, pos, sug = log.folded
    w = np.bincount(inverse, weights=w_all, minlength=c.size)
    per_pos = np.bincount(pos, weights=w, minlength=n_pos)
    per_sug = np.bincount(sug, weights=w, minlength=n_sug)
    if start is None:
        theta = np.full(n_pos, 0.5)
        ctr = np.bincount(sug, weights=w * c, minlength=n_sug) / np.maximum(per_sug, 1e-12)
        alpha = np.clip(ctr, 0.01, 0.99)
    else:
        theta = np.clip(start.theta * 0.999, 1e-6, 1 - 1e-6)
        alpha = np.clip(start.alpha, 1e-6, 1 - 1e-6)
    def em_step(theta, alpha):
        t, a = theta[pos], alpha[sug]
        denom = np.maximum(1.0 - t * a, 1e-12)
        e_post = c + (1 - c) * t * (1 - a) / denom
        a_post = c + (1 - c) * a * (1 - t) / denom
        new_theta = np.where(per_pos > 0, np.bincount(pos, weights=w * e_post, minlength=n_pos) / np.maximum(per_pos, 1e-12), theta)
        new_alpha = np.where(per_sug > 0, np.bincount(sug, weights=w * a_post, minlength=n_sug) / np.maximum(per_sug, 1e-12), alpha)
        return new_theta, new_alpha

    def change(theta, alpha, new_theta, new_alpha):
        # Only theta / theta[0] and alpha * theta[0] are identified; the common scale drifts slowly.
        return max(np.max(np.abs(new_theta / new_theta[0] - theta / theta[0])),
                   np.max(np.abs(new_alpha * new_theta[0] - alpha * theta[0])))

    def likelihood(x):
        p = np.clip(x[:n_pos][pos] * x[n_pos:][sug], 1e-12, 1 - 1e-12)
        return float(np.sum(w * (c * np.log(p) + (1 - c) * np.log1p(-p))))

    # SQUAREM (Varadhan & Roland 2008, scheme S3): two EM steps, a step along their squared
    # extrapolation, and an EM step from there, kept only if the likelihood beats the second EM
    # step's; EM alone creeps along a ridge for hundreds of steps here. Converged means, as for
    # plain EM, that one EM step moves no identified parameter by more than ``tol``.
    converged = False
    it = 0
    x = np.concatenate([theta, alpha])
    while it < int(max_iter):
        t1, a1 = em_step(x[:n_pos], x[n_pos:])
        it += 1
        if change(x[:n_pos], x[n_pos:], t1, a1) < tol:
            x, converged = np.concatenate([t1, a1]), True
            break
        x1 = np.concatenate([t1, a1])
        if it + 2 > int(max_iter):  # no room for a whole cycle: plain EM steps to the cap
            x = x1
            continue
        x2 = np.concatenate(em_step(t1, a1))
        it += 1
        r, v = x1 - x, x2 - 2.0 * x1 + x
        norm_v = np.sqrt(v @ v)
        if not norm_v > 0:
            x = x2
            continue
        step = min(-np.sqrt(r @ r) / norm_v, -1.0)
        jump = np.clip(x - 2.0 * step * r + step * step * v, 1e-9, 1.0 - 1e-9)
        x3 = np.concatenate(em_step(jump[:n_pos], jump[n_pos:]))
        it += 1
        x = x3 if likelihood(x3) >= likelihood(x2) else x2
    theta, alpha = x[:n_pos], x[n_pos:]
    if not theta[0] > 0:
        raise EventsError(f"{log.path or 'impression log'}: no click in the first slot; the examination curve cannot be scaled")
    scale = theta[0]
    theta, alpha = theta / scale, alpha * scale
    return PbmFit(theta=theta, alpha=alpha, iterations=it, converged=converged,
                  log_likelihood=log_likelihood(log, theta, alpha) if weights is None else float("nan"))


# --------------------------------------------------------------------------------------------
# Ratings of suggestions
# --------------------------------------------------------------------------------------------


def garwood_interval(clicks, level=0.95):
    """Exact Poisson interval for a count (Garwood 1936), elementwise; lower bound 0 at 0 clicks.

    The bounds are chi-square quantiles, ``chi2.ppf(a, 2k) / 2`` and ``chi2.ppf(1 - a, 2k + 2) / 2``;
    scipy computes ``chi2.ppf(p, df)`` as ``2 * gammaincinv(df / 2, p)``, so the regularised
    incomplete gamma function's inverse gives the same numbers without importing scipy.stats
    (a second of start-up here).
    """
    from scipy.special import gammaincinv

    k = np.asarray(clicks, dtype=float)
    a = (1.0 - level) / 2.0
    lo = np.where(k > 0, gammaincinv(np.where(k > 0, k, 1.0), a), 0.0)
    hi = gammaincinv(k + 1.0, 1.0 - a)
    return lo, hi


@dataclass(frozen=True)
class SuggestionRating:
    """How one suggestion does against its slots.

    ``verdict`` is ``"under-rated"`` (interval above 1: move up), ``"over-rated"`` (below 1),
    ``"as expected"``, or ``"too few impressions"`` (fewer than the minimum; not rated, and
    ``ratio`` and its interval are None).
    """

    product: str
    partner: str
    impressions: int
    clicks: int
    expected_clicks: float
    mean_position: float
    ratio: float | None
    ratio_ci: tuple | None
    attractiveness: float
    verdict: str

    def to_dict(self):
        d = dict(self.__dict__)
        d["ratio_ci"] = list(self.ratio_ci) if self.ratio_ci is not None else None
        return d


def rate_suggestions(log, fit, min_impressions=MIN_IMPRESSIONS, level=0.95):
    """Rate every suggestion of the log against its slots (see the module notes).

    Returns
    -------
    list of SuggestionRating
        Rated ones first, by ratio descending, then the ones with too few impressions by id.
    """
    n_sug = len(log.pairs)
    exam = fit.theta[log.position - 1]
    mean_alpha = log.clicked.sum() / exam.sum()
    imps = np.bincount(log.suggestion, minlength=n_sug)
    clicks = np.bincount(log.suggestion, weights=log.clicked, minlength=n_sug).astype(int)
    expected = np.bincount(log.suggestion, weights=exam, minlength=n_sug) * mean_alpha
    mean_pos = np.bincount(log.suggestion, weights=log.position, minlength=n_sug) / np.maximum(imps, 1)
    lo, hi = garwood_interval(clicks, level)
    out = []
    for q, (product, partner) in enumerate(log.pairs):
        if imps[q] < min_impressions:
            out.append(SuggestionRating(product, partner, int(imps[q]), int(clicks[q]), float(expected[q]),
                                        float(mean_pos[q]), None, None, float(fit.alpha[q]), "too few impressions"))
            continue
        ci = (float(lo[q] / expected[q]), float(hi[q] / expected[q]))
        verdict = "under-rated" if ci[0] > 1.0 else "over-rated" if ci[1] < 1.0 else "as expected"
        out.append(SuggestionRating(product, partner, int(imps[q]), int(clicks[q]), float(expected[q]),
                                    float(mean_pos[q]), float(clicks[q] / expected[q]), ci, float(fit.alpha[q]), verdict))
    rated = sorted((r for r in out if r.ratio is not None), key=lambda r: (-r.ratio, r.product, r.partner))
    few = sorted((r for r in out if r.ratio is None), key=lambda r: (r.product, r.partner))
    return rated + few


# --------------------------------------------------------------------------------------------
# Inverse propensity estimate of another order
# --------------------------------------------------------------------------------------------


def new_positions(log, order):
    """Slot of each logged impression under another order (0 = not shown), and the support.

    Parameters
    ----------
    log : ImpressionLog
    order : mapping of (product, partner) to int or to (int, str)
        The new slot (1-based) of a partner beside a product, e.g. a feed's ``rank``, optionally
        with the partner's category (a feed ranks each category apart; a request's slider is the
        category of the partners it showed). A request shows as many slots as it showed in the
        log; a partner ranked below that is not shown.

    Returns
    -------
    slots : ndarray of int, shape (len(log),)
    support : float
        Of the new order's slots within the logged requests' lengths, the share whose suggestion
        the logged request showed (and can therefore be estimated).
    """
    rank = {k: (v[0] if isinstance(v, tuple) else int(v)) for k, v in order.items()}
    group = {k: (v[1] if isinstance(v, tuple) else "") for k, v in order.items()}
    category_of = {partner: g for (_product, partner), g in group.items()}
    shown = np.bincount(log.request, minlength=len(log.requests))
    new = np.array([rank.get(log.pairs[q], 0) for q in log.suggestion], dtype=np.int64)
    new = np.where(new <= shown[log.request], new, 0)
    ranks_by = {}
    for (product, partner), k in rank.items():
        ranks_by.setdefault((product, group[(product, partner)]), []).append(k)
    sliders = {}
    for r, q in zip(log.request.tolist(), log.suggestion.tolist()):
        product, partner = log.pairs[q]
        if partner in category_of:
            sliders.setdefault(r, set()).add((product, category_of[partner]))
    slots_total = sum(sum(1 for k in ranks_by.get(key, ()) if k <= shown[r]) for r, keys in sliders.items() for key in keys)
    support = min(1.0, float(np.count_nonzero(new)) / slots_total) if slots_total else 0.0
    return new, support


def ips_clicks(log, theta, slots, max_weight=DEFAULT_MAX_WEIGHT, weights=None):
    """Inverse-propensity estimate of the clicks per request under the slots ``slots``.

    Each logged click at slot ``k`` moved to slot ``k' > 0`` counts
    ``theta[k'-1] * min(1 / theta[k-1], max_weight)`` (Joachims et al. 2017). Returns
    ``(clicks per request, share of clicks whose weight was clipped)``.
    """
    w = np.ones(len(log)) if weights is None else np.asarray(weights, dtype=float)
    theta = np.asarray(theta, dtype=float)
    inv = 1.0 / np.maximum(theta[log.position - 1], 1e-12)
    clipped = inv > max_weight
    gain = np.where(slots > 0, theta[np.maximum(slots, 1) - 1], 0.0) * np.minimum(inv, max_weight)
    total = np.sum(w * log.clicked * gain)
    n_req = len(log.requests) if weights is None else _requests_in(log, w)
    clicks = log.clicked.astype(bool)
    share = float(np.sum(w * (clicks & clipped & (slots > 0))) / max(np.sum(w * clicks), 1e-12))
    return float(total / n_req), share


def _requests_in(log, w):
    # Bootstrap multiplicities are per impression but equal within a request: count requests once each.
    per_req = np.bincount(log.request, weights=w, minlength=len(log.requests))
    sizes = np.bincount(log.request, minlength=len(log.requests))
    return float(np.sum(per_req / np.maximum(sizes, 1)))


# --------------------------------------------------------------------------------------------
# Everything ``harmony clicks`` prints
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class OrderEstimate:
    """Clicks per request of the logged order and the IPS estimate of another, with intervals."""

    name: str
    logged: float
    logged_ci: tuple
    estimate: float
    estimate_ci: tuple
    ratio: float
    ratio_ci: tuple
    support: float
    clipped: float
    max_weight: float

    def to_dict(self):
        d = dict(self.__dict__)
        for key in ("logged_ci", "estimate_ci", "ratio_ci"):
            d[key] = list(d[key])
        return d


@dataclass(frozen=True)
class ClickReport:
    """The fitted curve with its intervals, the ratings, and optional order estimates."""

    theta: tuple
    theta_ci: tuple
    impressions_by_position: tuple
    ratings: tuple
    orders: tuple
    impressions: int
    requests: int
    clicks: int
    min_impressions: int
    level: float
    resamples: int
    converged: bool
    iterations: int

    def to_dict(self):
        return {
            "scale": "examination of slot 1 fixed at 1",
            "examination": [
                {"position": k + 1, "examination": self.theta[k], "ci": list(self.theta_ci[k]),
                 "impressions": self.impressions_by_position[k]}
                for k in range(len(self.theta))
            ],
            "suggestions": [r.to_dict() for r in self.ratings],
            "orders": [o.to_dict() for o in self.orders],
            "impressions": self.impressions, "requests": self.requests, "clicks": self.clicks,
            "min_impressions": self.min_impressions, "confidence_level": self.level,
            "bootstrap_resamples": self.resamples, "converged": self.converged, "iterations": self.iterations,
        }


def _check_identifiable(log):
    """Refuse a log in which no suggestion is ever seen in two slots (theta cannot be told from alpha)."""
    first = {}
    for q, k in zip(log.suggestion.tolist(), log.position.tolist()):
        if first.setdefault(q, k) != k:
            return
    raise EventsError(
        f"{log.path or 'impression log'}: every suggestion always sits in the same slot, so position cannot be "
        "told from attractiveness; log some sliders in a randomised or swapped order"
    )


def analyse_clicks(log, orders=(), rng=None, resamples=200, level=0.95, min_impressions=MIN_IMPRESSIONS,
                   max_weight=DEFAULT_MAX_WEIGHT, progress=False):
    """Fit the model, rate the suggestions, estimate other orders; bootstrap over requests.

    Parameters
    ----------
    log : ImpressionLog
    orders : sequence of (name, mapping of (product, partner) to slot)
        Other orders to estimate (see :func:`new_positions`).
    rng : numpy.random.Generator
        Draws the bootstrap resamples of requests.
    resamples : int
    level : float
    min_impressions : int
    max_weight : float
        Clip of the inverse propensity (see :func:`ips_clicks`).
    progress : bool

    Returns
    -------
    ClickReport
    """
    if not isinstance(rng, np.random.Generator):
        raise TypeError("rng must be a numpy.random.Generator")
    if int(resamples) < 1 or not 0.0 < float(level) < 1.0:
        raise ValueError(f"need resamples >= 1 and 0 < level < 1, got {resamples} and {level}")
    if not max_weight >= 1.0:
        raise HarmonyError(f"the largest inverse-propensity weight must be at least 1, got {max_weight}")
    _check_identifiable(log)
    fit = fit_pbm(log)
    ratings = rate_suggestions(log, fit, min_impressions, level)
    placed = [(name, *new_positions(log, order)) for name, order in orders]
    n_req = len(log.requests)
    logged = log.clicked.sum() / n_req
    point = [(ips_clicks(log, fit.theta, slots, max_weight)) for _, slots, _ in placed]

    draws = range(int(resamples))
    if progress:
        from tqdm import tqdm

        draws = tqdm(draws, desc="bootstrap", unit="resample", leave=False)
    thetas = np.empty((int(resamples), log.positions))
    boot_logged = np.empty(int(resamples))
    boot_est = np.empty((int(resamples), len(placed)))
    for b in draws:
        times = np.bincount(rng.integers(0, n_req, size=n_req), minlength=n_req)
        w = times[log.request].astype(float)
        f = fit_pbm(log, start=fit, weights=w, tol=1e-6)
        thetas[b] = f.theta
        boot_logged[b] = np.sum(w * log.clicked) / _requests_in(log, w)
        for j, (_, slots, _) in enumerate(placed):
            boot_est[b, j] = ips_clicks(log, f.theta, slots, max_weight, weights=w)[0]
    a = (1.0 - float(level)) / 2.0
    q = lambda x: (float(np.quantile(x, a)), float(np.quantile(x, 1.0 - a)))
    estimates = []
    for j, (name, _slots, support) in enumerate(placed):
        est, clipped = point[j]
        estimates.append(OrderEstimate(
            name=name, logged=float(logged), logged_ci=q(boot_logged), estimate=est, estimate_ci=q(boot_est[:, j]),
            ratio=est / logged if logged > 0 else float("nan"), ratio_ci=q(boot_est[:, j] / boot_logged),
            support=support, clipped=clipped, max_weight=float(max_weight),
        ))
    return ClickReport(
        theta=tuple(float(t) for t in fit.theta),
        theta_ci=tuple(q(thetas[:, k]) for k in range(log.positions)),
        impressions_by_position=tuple(int(n) for n in np.bincount(log.position - 1, minlength=log.positions)),
        ratings=tuple(ratings), orders=tuple(estimates), impressions=len(log), requests=n_req,
        clicks=int(log.clicked.sum()), min_impressions=int(min_impressions), level=float(level),
        resamples=int(resamples), converged=fit.converged, iterations=fit.iterations,
    )
