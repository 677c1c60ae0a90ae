"""harmony tune: fitting rule weights on a training split, judged on held-out sessions.

The logs here come from simulated shoppers with a planted preference: recovering a known
parameter of a simulation is a fair check of an estimator (the data are invented, the check is not
against any real shop).
"""

import numpy as np
import pytest
from click.testing import CliRunner

from harmony.errors import HarmonyError
from harmony.evaluation.tune import split_log, tune_rules, tune_note, tuned_rules_text
from harmony.photo.palette import Palette
from harmony.rules import parse_rules
from harmony.shop.catalogue import Product
from harmony.shop.events import Event, EventLog

RULES = """format = 1
[neutral]
threshold = 7.0
fade = 8.0
[score]
midpoint = 0.0
scale = 0.25
[rule.analogous]
kind = "hue"
centre = 0.0
spread = 22.0
weight = 1.0
[rule.complementary]
kind = "hue"
centre = 180.0
spread = 20.0
weight = 0.1
[rule.clash]
kind = "hue"
centre = 70.0
spread = 12.0
weight = -0.4
[default]
rules = { analogous = 1.0, complementary = 1.0, clash = 1.0 }
"""


def _jab(h_deg, m=30.0, j=60.0):
    h = np.radians(h_deg)
    return [j, m * np.cos(h), m * np.sin(h)]


def _shop(rng, n=24):
    products, palettes, hues = [], {}, {}
    for cat in ("sofa", "rug"):
        for i in range(n):
            pid = f"{cat}{i:02d}"
            hues[pid] = float(rng.uniform(0, 360))
            products.append(Product(pid, cat, 100.0))
            palettes[pid] = Palette(jab=[_jab(hues[pid])], weights=[1.0])
    return products, palettes, hues


def _log(rng, products, hues, taste, sessions=400):
    """Each session views a sofa and picks two rugs, with chances exp(4 * taste(hue difference))."""
    sofas = [p.id for p in products if p.category == "sofa"]
    rugs = [p.id for p in products if p.category == "rug"]
    events, line, clock = [], 2, 0.0
    for s in range(sessions):
        sofa = sofas[int(rng.integers(len(sofas)))]
        d = np.array([abs((hues[sofa] - hues[r] + 180) % 360 - 180) for r in rugs])
        p = np.exp(4.0 * taste(d))
        picks = rng.choice(len(rugs), size=2, replace=False, p=p / p.sum())
        for pid in [sofa] + [rugs[int(k)] for k in picks]:
            clock += 60.0
            events.append(Event(f"s{s:03d}", pid, "view", 1.0, clock, line))
            line += 1
    return EventLog(path="planted.csv", events=tuple(events), rows=len(events))


def _complementary_lovers(d):
    # Planted: only opposite hues appeal (a bump at 180 degrees), close hues do not.
    return np.exp(-(((d - 180.0) / 25.0) ** 2)) * 1.5


@pytest.fixture(scope="module")
def planted():
    rng = np.random.default_rng(11)
    products, palettes, hues = _shop(rng)
    log = _log(rng, products, hues, _complementary_lovers)
    result = tune_rules(parse_rules(RULES, "planted.toml"), log, products, palettes, split="session",
                        rng=np.random.default_rng(3), resamples=300)
    return result


def test_tune_recovers_a_planted_preference_on_held_out_sessions(planted):
    before, after = planted.weights["complementary"]
    # The shoppers like opposite hues and not close ones: complementary must now outweigh the
    # analogous reference (held at 1.0), which started ten times heavier.
    assert planted.weights["analogous"] == (1.0, 1.0)
    assert after >= 1.0 > before
    ev = planted.evaluation.results
    assert ev[1].auc > ev[0].auc + 0.1
    assert not planted.within_noise and planted.difference["auc"][1][0] > 0


def test_tune_refuses_to_claim_a_gain_within_noise():
    rng = np.random.default_rng(12)
    products, palettes, hues = _shop(rng)
    log = _log(rng, products, hues, lambda d: np.zeros_like(d))  # no colour preference at all
    result = tune_rules(parse_rules(RULES, "flat.toml"), log, products, palettes, split="session",
                        rng=np.random.default_rng(4), resamples=300)
    lo, hi = result.difference["auc"][1]
    assert result.within_noise and lo <= 0.0


def test_tuned_file_is_valid_and_names_log_split_and_date(planted):
    note = tune_note("planted.csv", "session", 3, when="2026-03-01")
    text = tuned_rules_text(RULES, planted, note)
    rs = parse_rules(text)
    assert rs.rules["complementary"].weight == pytest.approx(planted.weights["complementary"][1], rel=1e-3)
    tuned_lines = [l for l in text.splitlines() if "tuned by harmony tune" in l]
    assert any(l.startswith("weight =") for l in tuned_lines)
    assert all("planted.csv (split by session, seed 3) on 2026-03-01" in l for l in tuned_lines)
    assert any(l.startswith("midpoint =") for l in tuned_lines) and any(l.startswith("scale =") for l in tuned_lines)
    # A file without [score] gets one, still valid.
    no_score = RULES.replace("[score]\nmidpoint = 0.0\nscale = 0.25\n", "")
    assert "[score]" in tuned_rules_text(no_score, planted, note)


def test_split_by_time_and_by_session():
    rng = np.random.default_rng(5)
    products, _, hues = _shop(rng, n=6)
    log = _log(rng, products, hues, lambda d: np.zeros_like(d), sessions=20)
    train, held = split_log(log, "time", rng)
    last_train = max(ev.timestamp for ev in train.events)
    assert min(ev.timestamp for ev in held.events) > last_train
    a, b = split_log(log, "session", np.random.default_rng(1))
    sa, sb = {ev.session for ev in a.events}, {ev.session for ev in b.events}
    assert not sa & sb and len(sa) == len(sb) == 10
    with pytest.raises(HarmonyError, match="--split: expected one of time, session"):
        split_log(log, "week", rng)
    stamped = EventLog("x.csv", tuple(Event(e.session, e.product, e.event, e.weight, None, e.line) for e in log.events), log.rows)
    with pytest.raises(HarmonyError, match="has no timestamp; use --split session"):
        split_log(stamped, "time", rng)


def test_cli_never_overwrites_the_input_or_shipped_rules(tmp_path):
    from harmony.cli import main
    from harmony.resources import DEFAULT_RULES

    rules = tmp_path / "mine.toml"
    rules.write_text(RULES)
    runner = CliRunner()
    for out in (rules, DEFAULT_RULES):
        res = runner.invoke(main, ["tune", "--events", "e.csv", "--rules", str(rules), "--out", str(out), "--db", "x.db"])
        assert res.exit_code == 2 and "never changes those" in res.output
    assert rules.read_text() == RULES
