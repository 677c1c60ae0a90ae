"""The position-based click model: EM against direct maximum likelihood, recovery of a planted curve,
inverse propensity estimates against the truth of a simulation, and the log reader's errors."""

import numpy as np
import pytest
from scipy.optimize import minimize

from harmony.errors import EventsError
from harmony.evaluation.clicks import (
    analyse_clicks,
    fit_pbm,
    garwood_interval,
    impression_log,
    ips_clicks,
    log_likelihood,
    new_positions,
    read_impressions,
)
from harmony.resources import SHOP_DIR


def _simulate(rng, theta, alpha, requests, slots):
    """A log of sliders of ``slots`` suggestions drawn from ``alpha``'s items, in random order."""
    rows = []
    n = len(alpha)
    for r in range(requests):
        shown = rng.choice(n, size=slots, replace=False)
        for k, q in enumerate(shown):
            rows.append((f"r{r}", "P", f"S{q}", k + 1, int(rng.random() < theta[k] * alpha[q])))
    return rows


def test_em_matches_direct_maximum_likelihood_on_a_tiny_log():
    # Reference: the same likelihood maximised directly by scipy.optimize (L-BFGS-B over the
    # free parameters theta_2, theta_3 and alpha, with theta_1 = 1 fixed as in the EM's scale).
    rows = [
        ("a", "P", "x", 1, 1), ("a", "P", "y", 2, 0), ("a", "P", "z", 3, 1),
        ("b", "P", "y", 1, 1), ("b", "P", "z", 2, 0), ("b", "P", "x", 3, 0),
        ("c", "P", "z", 1, 0), ("c", "P", "x", 2, 1), ("c", "P", "y", 3, 0),
        ("d", "P", "x", 1, 1), ("d", "P", "z", 2, 1), ("d", "P", "y", 3, 0),
        ("e", "P", "y", 1, 0), ("e", "P", "x", 2, 0), ("e", "P", "z", 3, 0),
    ]
    log = impression_log(rows)
    fit = fit_pbm(log, tol=1e-12, max_iter=200_000)

    def nll(v):
        theta = np.r_[1.0, v[:2]]
        return -log_likelihood(log, theta, v[2:])

    best = minimize(nll, x0=np.full(5, 0.5), bounds=[(1e-6, 1 - 1e-6)] * 5, method="L-BFGS-B",
                    options={"ftol": 1e-15, "gtol": 1e-12})
    assert fit.theta[0] == 1.0
    # EM converges to the same optimum (its likelihood is at least as high as the direct one).
    assert fit.log_likelihood >= -best.fun - 1e-6
    assert fit.log_likelihood == pytest.approx(-best.fun, abs=1e-5)
    np.testing.assert_allclose(fit.theta[1:], best.x[:2], atol=2e-3)
    np.testing.assert_allclose(fit.alpha, best.x[2:], atol=2e-3)


def test_em_raises_the_likelihood_above_any_other_scaling():
    # Every EM step raises the likelihood (Dempster, Laird & Rubin 1977): the fit must beat the
    # start values and a perturbed copy of itself.
    rng = np.random.default_rng(3)
    log = impression_log(_simulate(rng, [1.0, 0.6, 0.4], rng.uniform(0.1, 0.6, 10), 300, 3))
    fit = fit_pbm(log)
    assert fit.converged
    assert fit.log_likelihood > log_likelihood(log, np.full(3, 0.5), np.full(10, 0.3))
    assert fit.log_likelihood >= log_likelihood(log, fit.theta * [1, 0.95, 1.05], fit.alpha) - 1e-9


def test_accelerated_em_lands_on_plain_em_fixed_point_in_fewer_steps():
    # Reference: plain EM (Chuklin et al. 2015, section 4.2), written out here on the unfolded
    # impressions and run far past convergence; SQUAREM (Varadhan & Roland 2008) must keep its
    # fixed point and take fewer EM steps than plain EM needs to meet the same stopping rule.
    rng = np.random.default_rng(12)
    log = impression_log(_simulate(rng, [1.0, 0.6, 0.45, 0.3], rng.uniform(0.05, 0.5, 40), 2000, 4))
    pos, sug, c = log.position - 1, log.suggestion, log.clicked.astype(float)
    theta, alpha = np.full(4, 0.5), np.full(40, 0.2)
    plain_steps = None
    for step in range(1, 200_001):
        t, a = theta[pos], alpha[sug]
        e = c + (1 - c) * t * (1 - a) / (1 - t * a)
        f = c + (1 - c) * a * (1 - t) / (1 - t * a)
        new_theta = np.bincount(pos, weights=e) / np.bincount(pos)
        new_alpha = np.bincount(sug, weights=f) / np.bincount(sug)
        moved = max(np.abs(new_theta / new_theta[0] - theta / theta[0]).max(),
                    np.abs(new_alpha * new_theta[0] - alpha * theta[0]).max())
        theta, alpha = new_theta, new_alpha
        if plain_steps is None and moved < 1e-7:
            plain_steps = step
        if moved < 1e-13:
            break
    fit = fit_pbm(log, tol=1e-10, max_iter=200_000)
    assert fit.converged
    np.testing.assert_allclose(fit.theta, theta / theta[0], atol=1e-6)
    np.testing.assert_allclose(fit.alpha, alpha * theta[0], atol=1e-6)
    quick = fit_pbm(log)  # the default tolerance, 1e-7
    assert quick.converged and quick.iterations < plain_steps
    np.testing.assert_allclose(quick.theta, theta / theta[0], atol=1e-4)
    # The cap counts EM steps, the accelerated cycle's three included.
    for cap in (1, 2, 4, 5):
        capped = fit_pbm(log, max_iter=cap)
        assert capped.iterations == cap and not capped.converged


PLANTED = np.array([1.0, 0.5, 1 / 3, 0.25, 0.2])  # (1/k)^1, as simulated by Joachims et al. (2017)


def test_recovers_a_planted_curve_and_the_interval_covers_it():
    # Recovering a known parameter of a simulation is a fair check of the estimator. Tolerance:
    # 0.05 absolute on every slot with 3,000 requests of 5 slots (the bootstrap's half-width is
    # about 0.03-0.04 there).
    rng = np.random.default_rng(11)
    alpha = rng.uniform(0.1, 0.5, 40)
    log = impression_log(_simulate(rng, PLANTED, alpha, 3000, 5))
    report = analyse_clicks(log, rng=np.random.default_rng(0), resamples=100)
    theta = np.array(report.theta)
    np.testing.assert_allclose(theta, PLANTED, atol=0.05)
    lo = np.array([c[0] for c in report.theta_ci])
    hi = np.array([c[1] for c in report.theta_ci])
    assert np.all(lo[1:] <= PLANTED[1:]) and np.all(PLANTED[1:] <= hi[1:])
    assert np.all(hi[1:] - lo[1:] < 0.2)  # an interval that says something
    # The verdicts against the truth: no suggestion whose true alpha is above the mean is called
    # over-rated, and none below it under-rated.
    truth = {f"S{q}": a for q, a in enumerate(alpha)}
    mean = alpha.mean()
    for r in report.ratings:
        if r.verdict == "over-rated":
            assert truth[r.partner] < mean
        if r.verdict == "under-rated":
            assert truth[r.partner] > mean


def test_demo_log_recovers_its_planted_curve():
    # The shipped, simulated log (harmony/demo/impressions.py plants (1/k)^1 over 6 slots).
    log = read_impressions(SHOP_DIR / "impressions.csv")
    planted = 1.0 / np.arange(1, 7)
    report = analyse_clicks(log, rng=np.random.default_rng(0), resamples=60)
    np.testing.assert_allclose(report.theta, planted, atol=0.05)
    for k in range(1, 6):
        assert report.theta_ci[k][0] <= planted[k] <= report.theta_ci[k][1]


def test_ips_estimate_of_the_reversed_order_covers_the_truth():
    # Truth of a simulation: reversing the slider moves suggestion q from slot k to slot K + 1 - k,
    # so the expected clicks per request are sum_k theta[K-k] * alpha[q_k] averaged over requests.
    rng = np.random.default_rng(5)
    alpha = rng.uniform(0.05, 0.6, 5)
    rows = []
    for r in range(4000):
        order = rng.permutation(5) if rng.random() < 0.5 else np.arange(5)
        for k, q in enumerate(order):
            rows.append((f"r{r}", "P", f"S{q}", k + 1, int(rng.random() < PLANTED[k] * alpha[q])))
    log = impression_log(rows)
    reversed_order = {("P", f"S{q}"): 5 - q for q in range(5)}  # the fixed order S0..S4, reversed
    truth = float(np.sum(PLANTED[::-1] * alpha))
    # A 99 % interval, so that a correct estimator fails this check about once in a hundred seeds.
    report = analyse_clicks(log, [("reversed", reversed_order)], rng=np.random.default_rng(1), resamples=200, level=0.99)
    est = report.orders[0]
    assert est.support == 1.0
    assert est.estimate_ci[0] <= truth <= est.estimate_ci[1]
    assert est.estimate == pytest.approx(truth, rel=0.1)


def test_ips_weights_are_one_for_the_logged_order_and_clipping_caps_them():
    log = impression_log([("a", "P", "x", 1, 1), ("a", "P", "y", 2, 1), ("b", "P", "y", 1, 0), ("b", "P", "x", 2, 1)])
    theta = np.array([1.0, 0.05])
    same = log.position.copy()
    assert ips_clicks(log, theta, same, max_weight=100.0)[0] == pytest.approx(3 / 2)  # unclipped: the logged clicks
    assert ips_clicks(log, theta, same, max_weight=10.0)[0] == pytest.approx((1 + 0.5 + 0.5) / 2)  # clipped at 10
    swapped = 3 - log.position
    est, clipped = ips_clicks(log, theta, swapped, max_weight=10.0)
    # Clicks at slot 2 (propensity 0.05, weight clipped to 10) move to slot 1; the one at slot 1 moves to slot 2.
    assert est == pytest.approx((0.05 * 1 + 1.0 * 10 + 1.0 * 10) / 2)
    assert clipped == pytest.approx(2 / 3)


def test_new_positions_drops_slots_beyond_the_logged_length_and_measures_support():
    log = impression_log([("a", "P", "x", 1, 0), ("a", "P", "y", 2, 0)])
    slots, support = new_positions(log, {("P", "y"): 1, ("P", "z"): 2, ("P", "x"): 3})
    assert slots.tolist() == [0, 1]
    assert support == pytest.approx(0.5)  # y is shown, z never was
    # With categories, only the slider's own category counts: the lamp slots are another slider.
    order = {("P", "y"): (1, "rug"), ("P", "z"): (2, "rug"), ("P", "x"): (3, "rug"), ("P", "L"): (1, "lamp")}
    slots, support = new_positions(log, order)
    assert slots.tolist() == [0, 1] and support == pytest.approx(0.5)


def test_garwood_interval_matches_published_values():
    # Garwood (1936) exact 95 % limits, as tabulated e.g. in Ulm (1990), Am. J. Epidemiol. 131(2):373:
    # 0 -> (0, 3.689); 1 -> (0.0253, 5.572); 10 -> (4.795, 18.39).
    lo, hi = garwood_interval([0, 1, 10])
    np.testing.assert_allclose(lo, [0.0, 0.0253, 4.795], atol=1e-3)
    np.testing.assert_allclose(hi, [3.689, 5.572, 18.39], atol=1e-2)


@pytest.mark.parametrize("level", [0.5, 0.9, 0.95, 0.99])
def test_garwood_interval_equals_scipys_chi_square_quantiles(level):
    # The textbook form (Garwood 1936): chi-square quantiles with 2k and 2k + 2 degrees of freedom,
    # here from scipy.stats (the reference library) on counts 0..2,000 and a few large ones.
    from scipy.stats import chi2

    k = np.concatenate([np.arange(2001.0), [5000.0, 1e5]])
    a = (1.0 - level) / 2.0
    lo, hi = garwood_interval(k, level)
    np.testing.assert_allclose(lo, np.where(k > 0, chi2.ppf(a, 2 * k) / 2.0, 0.0), rtol=1e-14, atol=0)
    np.testing.assert_allclose(hi, chi2.ppf(1.0 - a, 2 * (k + 1)) / 2.0, rtol=1e-14, atol=0)
    assert lo[0] == 0.0


def test_a_log_where_nothing_moves_is_refused():
    log = impression_log([(f"r{i}", "P", s, k, i % 2) for i in range(10) for k, s in enumerate("xy", start=1)])
    with pytest.raises(EventsError, match="always sits in the same slot"):
        analyse_clicks(log, rng=np.random.default_rng(0), resamples=2)


@pytest.mark.parametrize(
    "text, message",
    [
        ("request,product,partner,position\n", r"missing column\(s\) clicked"),
        ("request,product,partner,position,clicked\na,P,x,first,0\n", r"log.csv:2: position: not a whole number"),
        ("request,product,partner,position,clicked\na,P,x,0,0\n", r"log.csv:2: position: must be 1 or more"),
        ("request,product,partner,position,clicked\na,P,x,1,yes\n", r"log.csv:2: clicked: must be 0 or 1"),
        ("request,product,partner,position,clicked\na,P,x,1,0\na,P,y,1,0\n", r"log.csv:3: position: request 'a' already has slot 1"),
        ("request,product,partner,position,clicked\n", r"no rows"),
        # An unquoted comma in a field shifts the ones after it: refused, not read by name.
        ("request,product,partner,position,clicked\na,P,Rug, round,1,0\n", r"log.csv:2: 6 fields, the header has 5"),
        ("request,product,partner,position,clicked,position\na,P,x,1,0,2\n", r"log.csv:1: column 'position' appears twice"),
    ],
)
def test_bad_rows_are_named(tmp_path, text, message):
    path = tmp_path / "log.csv"
    path.write_text(text)
    with pytest.raises(EventsError, match=message):
        read_impressions(path)


def test_jsonl_log_reads_like_csv(tmp_path):
    path = tmp_path / "log.jsonl"
    path.write_text('{"request": "a", "product": "P", "partner": "x", "position": 1, "clicked": 1, "timestamp": 5}\n'
                    '{"request": "a", "product": "P", "partner": "y", "position": "2", "clicked": false}\n')
    log = read_impressions(path)
    assert log.position.tolist() == [1, 2] and log.clicked.tolist() == [1, 0]


def test_a_spreadsheet_export_with_a_byte_order_mark_reads_and_binary_is_one_line(tmp_path):
    # Spreadsheet programs save "CSV UTF-8" with a byte order mark (U+FEFF) before the header.
    path = tmp_path / "log.csv"
    path.write_text("\ufeffrequest,product,partner,position,clicked\na,P,x,1,1\n", encoding="utf-8")
    assert read_impressions(path).clicked.tolist() == [1]
    path.write_bytes(b"request,product\n\xff\xfe\x00junk\n")
    with pytest.raises(EventsError, match=r"log.csv: not UTF-8 text"):
        read_impressions(path)
