"""The exact pair score: the bilinear contract, the map to [0, 1], symmetry, explanations."""

import re

import numpy as np
import pytest
from scipy.special import expit

from harmony.colour import hex_to_srgb1, srgb1_to_jab
from harmony.photo.palette import Palette
from harmony.rules import load_rules, parse_rules
from harmony.rules.score import colour_name, pair_raw, pair_score, to_unit


def _random_palette(rng, k):
    srgb = rng.uniform(0.0, 1.0, size=(k, 3))
    weights = rng.dirichlet(np.ones(k))
    return Palette(srgb1_to_jab(srgb), weights)


def _palette(hex_weights):
    codes, weights = zip(*hex_weights)
    return Palette(srgb1_to_jab(np.array([hex_to_srgb1(c) for c in codes])), np.array(weights))


@pytest.fixture(scope="module")
def rules():
    return load_rules()


def test_bilinear_contract(rules):
    rng = np.random.default_rng(7)
    for cats in [("sofa", "rug"), ("rug", "sofa"), ("desk", "desk chair"), ("vase", "lamp")]:
        pr = rules.for_pair(*cats)
        a, b = _random_palette(rng, 10), _random_palette(rng, 7)
        result = pair_score(a, b, pr)
        expected = a.weights @ pr.kernel(a.jab, b.jab) @ b.weights
        assert result.raw == pytest.approx(expected, abs=1e-12)
        assert pair_raw(a, b, pr) == pytest.approx(expected, abs=1e-12)
        assert result.score == pytest.approx(to_unit(expected, pr), abs=1e-15)
        assert sum(v for _, v in result.contributions) == pytest.approx(result.raw, abs=1e-12)
        assert 0.0 <= result.score <= 1.0
        assert result.categories == tuple(pr.categories)


def test_to_unit_is_the_logistic_and_strictly_increasing(rules):
    pr = rules.for_pair("sofa", "rug")
    raw = np.linspace(-3.0, 3.0, 1001)
    out = to_unit(raw, pr)
    # Gold: scipy.special.expit is the logistic 1 / (1 + exp(-x)).
    np.testing.assert_allclose(out, expit((raw - pr.midpoint) / pr.scale), rtol=1e-12, atol=1e-15)
    assert np.all(np.diff(out) > 0)
    assert to_unit(pr.midpoint, pr) == 0.5
    assert isinstance(to_unit(0.1, pr), float)
    assert 0.0 <= to_unit(-1e6, pr) <= to_unit(1e6, pr) <= 1.0


def test_symmetric_when_rules_are(rules):
    rng = np.random.default_rng(11)
    pr_ab, pr_ba = rules.for_pair("sofa", "cushion"), rules.for_pair("cushion", "sofa")
    assert pr_ab.symmetric
    for _ in range(5):
        a, b = _random_palette(rng, 10), _random_palette(rng, 10)
        assert pair_score(a, b, pr_ab).score == pytest.approx(pair_score(b, a, pr_ba).score, abs=1e-12)
        assert pair_score(a, b, pr_ab).score == pytest.approx(pair_score(b, a, pr_ab).score, abs=1e-12)


_COMPLEMENTARY_ONLY = """format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.complementary]
kind = "hue"
centre = 180.0
spread = 25.0
weight = 1.0
[rule.clash]
kind = "hue"
centre = 70.0
spread = 14.0
weight = -1.0
[default]
rules = { complementary = 1.0 }
[[pair]]
categories = ["rug", "sofa"]
rules = { complementary = 1.0, clash = 1.0 }
"""


def test_reason_names_colours_shares_and_rule():
    rs = parse_rules(_COMPLEMENTARY_ONLY)
    # Rust against teal, 156 degrees apart in CAM02-UCS hue; the greys are neutral (no hue term).
    rug = _palette([("#b8400d", 0.31), ("#808080", 0.69)])
    sofa = _palette([("#008080", 0.48), ("#7f7f7f", 0.52)])
    result = pair_score(rug, sofa, rs.for_pair("Rug", "Sofa"))
    assert result.reason == "the rug's rust (31 %) sits opposite the sofa's teal (48 %): complementary"
    top = result.pairs[0]
    assert (top.hex_a, top.hex_b, top.rule) == ("#b8400d", "#008080", "complementary")
    assert top.value == pytest.approx(0.31 * 0.48 * rs.for_pair("rug", "sofa").kernel(rug.jab[:1], sofa.jab[:1])[0, 0])


def test_reason_mentions_a_clash():
    rs = parse_rules(_COMPLEMENTARY_ONLY)
    rug = _palette([("#b8400d", 0.5), ("#1a8a3a", 0.5)])   # rust and a green about 95 degrees on
    sofa = _palette([("#008080", 0.5), ("#c8b400", 0.5)])  # teal and a mustard
    result = pair_score(rug, sofa, rs.for_pair("rug", "sofa"))
    # The clash clause does not repeat the rule's name: "clashes with" already says it.
    assert result.reason == ("the rug's rust (50 %) sits opposite the sofa's teal (50 %): complementary; "
                             "but the rug's rust (50 %) clashes with the sofa's lemon (50 %)")


def test_reason_without_categories():
    rs = parse_rules(_COMPLEMENTARY_ONLY)
    rug = _palette([("#b8400d", 1.0)])
    sofa = _palette([("#008080", 1.0)])
    result = pair_score(rug, sofa, rs.default_rules())
    assert result.reason.startswith("the first product's rust (100 %) sits opposite the second product's teal")


def test_no_rule_fires():
    rs = parse_rules(_COMPLEMENTARY_ONLY)
    grey = _palette([("#808080", 1.0)])
    result = pair_score(grey, grey, rs.default_rules())
    assert result.raw == 0.0 and result.pairs == () and result.score == 0.5
    assert result.reason == "no rule found anything to say about these two palettes"


def test_pairs_are_sorted_and_limited(rules):
    rng = np.random.default_rng(5)
    a, b = _random_palette(rng, 10), _random_palette(rng, 10)
    result = pair_score(a, b, rules.for_pair("sofa", "rug"), top=6)
    values = [abs(p.value) for p in result.pairs]
    assert len(values) == 6 and values == sorted(values, reverse=True)
    d = result.to_dict()
    assert set(d) >= {"score", "categories", "contributions", "colour_pairs", "reason"}


@pytest.mark.parametrize(
    "code, name",
    # Gold for the words: CSS Color Module Level 4 (W3C) named colours and their sRGB codes.
    [("#008080", "teal"), ("#000080", "navy"), ("#808000", "olive"), ("#ffffff", "white"),
     ("#000000", "black"), ("#808080", "grey"), ("#ff0000", "red"), ("#008000", "green"),
     ("#4b0082", "indigo"), ("#ff00ff", "magenta"), ("#00ffff", "aqua"), ("#87ceeb", "sky blue")],
)
def test_colour_names_agree_with_css_named_colours(code, name):
    assert colour_name(srgb1_to_jab(hex_to_srgb1(code))) == name


def test_neutral_names_by_lightness():
    # Silver: this project's own neutral scale, dark to light.
    names = [colour_name([j, 0.5, 0.3]) for j in (10, 30, 50, 70, 90, 98)]
    assert names == ["black", "charcoal", "grey", "stone", "off-white", "white"]
    assert colour_name([97.0, 1.5, 4.0]) == "cream"


def test_cached_colour_labels_give_the_same_score(rules):
    from harmony.colour import jab_to_hex
    from harmony.rules.score import colour_labels

    rng = np.random.default_rng(50)
    a, b = _random_palette(rng, 6), _random_palette(rng, 4)
    pr = rules.for_pair("sofa", "cushion")
    la, lb = colour_labels(a.jab, pr.neutral_threshold), colour_labels(b.jab, pr.neutral_threshold)
    # The hex codes are harmony.colour.jab_to_hex, colour by colour.
    assert la.hex == tuple(jab_to_hex(a.jab[i : i + 1])[0] for i in range(6))
    assert pair_score(a, b, pr, labels_a=la, labels_b=lb) == pair_score(a, b, pr)
    with pytest.raises(ValueError, match="labels_b must label the palette's 4 colours with threshold 7, got 6 colours"):
        pair_score(a, b, pr, labels_a=la, labels_b=la)


def test_batched_pair_scores_equal_pair_score(rules):
    from harmony.rules.score import pair_scores

    rng = np.random.default_rng(51)
    pals_a = [_random_palette(rng, k) for k in (3, 7, 5, 1)]
    pals_b = [_random_palette(rng, k) for k in (6, 2, 5, 4)]
    # A tie: the same two colours twice in one palette, so ranked colour pairs tie exactly.
    twin = Palette(np.repeat(pals_a[0].jab[:1], 2, axis=0), np.array([0.5, 0.5]))
    pals_a.append(twin)
    pals_b.append(pals_b[0])
    for section in (("sofa", "rug"), ("rug", "sofa"), ("sofa", "cushion")):
        pr = rules.for_pair(*section)
        got = pair_scores(pals_a, pals_b, pr, top=4)
        want = [pair_score(a, b, pr, top=4) for a, b in zip(pals_a, pals_b)]
        for g, w in zip(got, want):
            assert g.pairs == w.pairs and g.reason == w.reason and dict(g.contributions) == pytest.approx(dict(w.contributions), abs=1e-12)
            assert g.raw == pytest.approx(w.raw, abs=1e-12) and g.score == pytest.approx(w.score, abs=1e-12)
    # Ties go to the lower flat index (rule, colour a, colour b), as a stable sort orders them.
    tied = want[-1].pairs
    for p, q in zip(tied, tied[1:]):
        if abs(p.value) == abs(q.value):
            assert (p.index_a, p.index_b) < (q.index_a, q.index_b) or p.rule != q.rule
    with pytest.raises(ValueError, match="pals_a and pals_b must have the same length, got 5 and 4"):
        pair_scores(pals_a, pals_b[:4], rules.for_pair("sofa", "rug"))


_EVERY_KIND = """format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.clash]
kind = "hue"
centre = 70.0
spread = 14.0
weight = -1.0
[rule.neutral_anchor]
kind = "neutral"
weight = 1.0
[rule.too_plain]
kind = "neutral"
weight = -1.0
[rule.lightness_step]
kind = "lightness"
step = 20.0
width = 10.0
weight = 1.0
[rule.ou_luo]
kind = "ou_luo"
weight = 1.0
[default]
rules = { clash = 1.0 }
[[pair]]
categories = ["rug", "sofa"]
rules = { neutral_anchor = 1.0 }
[[pair]]
categories = ["rug", "cushion"]
rules = { too_plain = 1.0 }
[[pair]]
categories = ["rug", "armchair"]
rules = { lightness_step = 1.0 }
[[pair]]
categories = ["rug", "bed"]
rules = { ou_luo = 1.0 }
"""


@pytest.mark.parametrize(
    "cats, rug, other, reason",
    [
        # A pair whose every contribution is negative: the sentence is the clash alone.
        (("rug", "vase"), [("#b8400d", 1.0)], [("#c8b400", 1.0)],
         "the rug's rust (100 %) clashes with the vase's lemon (100 %)"),
        (("rug", "sofa"), [("#808080", 1.0)], [("#008080", 1.0)],
         "the rug's grey (100 %) anchors the sofa's teal (100 %): neutral anchor"),
        (("rug", "sofa"), [("#008080", 1.0)], [("#808080", 1.0)],
         "the rug's teal (100 %) is anchored by the sofa's grey (100 %): neutral anchor"),
        (("rug", "cushion"), [("#808080", 1.0)], [("#008080", 1.0)],
         "the rug's grey (100 %) sits too plainly with the cushion's teal (100 %)"),
        (("rug", "armchair"), [("#3a3a3a", 1.0)], [("#d9d2c5", 1.0)],
         "the rug's charcoal (100 %) is a clear step darker than the armchair's beige (100 %): lightness step"),
        (("rug", "armchair"), [("#d9d2c5", 1.0)], [("#3a3a3a", 1.0)],
         "the rug's beige (100 %) is a clear step lighter than the armchair's charcoal (100 %): lightness step"),
    ],
)
def test_reason_reads_for_every_rule_kind(cats, rug, other, reason):
    rs = parse_rules(_EVERY_KIND)
    assert pair_score(_palette(rug), _palette(other), rs.for_pair(*cats)).reason == reason


def test_reason_follows_the_sign_of_the_ou_luo_model():
    from harmony.colour.ou_luo import jab_to_lab, two_colour_harmony

    rs = parse_rules(_EVERY_KIND)
    pr = rs.for_pair("rug", "bed")
    seen = set()
    for code_a, code_b in [("#d9d2c5", "#e8e4dc"), ("#b8400d", "#008080"), ("#1a8a3a", "#c8b400")]:
        a, b = _palette([(code_a, 1.0)]), _palette([(code_b, 1.0)])
        # The sign comes from the model itself (harmony.colour.ou_luo), not from the rule's weight.
        ch = float(two_colour_harmony(jab_to_lab(a.jab[0]), jab_to_lab(b.jab[0])))
        words = "goes with" if ch > 0 else "sits uneasily with"
        reason = pair_score(a, b, pr).reason
        assert f" {words} the bed's " in reason and reason.endswith(": Ou & Luo model")
        seen.add(words)
    assert seen == {"goes with", "sits uneasily with"}


def test_reason_for_two_products_of_one_category():
    rs = parse_rules(_COMPLEMENTARY_ONLY)
    a, b = _palette([("#b8400d", 1.0)]), _palette([("#008080", 1.0)])
    assert pair_score(a, b, rs.for_pair("Sofa", "sofa")).reason.startswith(
        "the first sofa's rust (100 %) sits opposite the second sofa's teal (100 %)")


# ---- reasons agree with the score: one colour pair, one net effect -------------------------------

_CLAUSE = re.compile(r"^(the .+?'s .+? \(\d+ %\)) (.+?) (the .+?'s .+? \(\d+ %\))")


def contradicting_rows(reasons):
    """Reasons whose "but" clause names the same colour pair as the first clause."""
    bad = []
    for reason in reasons:
        parts = reason.split("; but ")
        if len(parts) == 2:
            a, b = _CLAUSE.match(parts[0]), _CLAUSE.match(parts[1])
            if a and b and (a.group(1), a.group(3)) == (b.group(1), b.group(3)):
                bad.append(reason)
    return bad


_OVERLAP = """format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.analogous]
kind = "hue"
centre = 0.0
spread = 30.0
weight = 1.0
phrase = "sits close in hue to"
[rule.clash]
kind = "hue"
centre = 70.0
spread = 28.0
weight = -0.8
[default]
rules = { analogous = 1.0, clash = 1.0 }
"""


def test_one_colour_pair_is_spoken_of_by_its_net_effect():
    # Overlapping bumps (analogous up to about 60 degrees, clash from about 40): rust and a colour
    # about 45 degrees on get both rules. The sentence names the pair once, by the sign of the sum.
    rs = parse_rules(_OVERLAP)
    pr = rs.for_pair("rug", "sofa")
    rust = _palette([("#b8400d", 1.0)])
    signs = set()
    for code in ("#c07000", "#c09000", "#a0a000", "#80a000"):
        other = _palette([(code, 1.0)])
        result = pair_score(rust, other, pr)
        terms = {name: float(k[0, 0]) for name, k in pr.kernel_terms(rust.jab, other.jab)}
        net = sum(terms.values())
        assert terms["analogous"] > 0.05 and terms["clash"] < -0.05, (code, terms)  # both rules fire
        signs.add(net > 0)
        assert len(result.pairs) == 1 and result.pairs[0].value == pytest.approx(net)
        assert ("clashes with" in result.reason) == (net < 0)
        assert ("close in hue" in result.reason) == (net > 0)
        assert "; but " not in result.reason
    assert signs == {True, False}


def test_contradiction_detector_finds_a_self_contradiction():
    # Both sides of the check below: the detector flags a sentence of the old form.
    old = ("the rug's rust (50 %) sits close in hue to the sofa's amber (40 %): analogous; "
           "but the rug's rust (50 %) clashes with the sofa's amber (40 %)")
    fine = ("the rug's rust (50 %) sits close in hue to the sofa's amber (40 %): analogous; "
            "but the rug's cream (50 %) clashes with the sofa's amber (40 %)")
    assert contradicting_rows([old, fine]) == [old]


@pytest.mark.slow
def test_no_row_of_the_demo_feed_contradicts_itself(tmp_path):
    # The demo shop's feed under the default rules (22,536 rows): before reasons spoke of net
    # effects, 920 rows named one colour pair with rules of opposite sign.
    from harmony.resources import DEFAULT_RULES, DEMO_DIR
    from harmony.shop.engine import run_extraction
    from harmony.shop.store import Store
    from harmony.suggest.feed_run import build_feed

    db = tmp_path / "shop.db"
    run_extraction(DEMO_DIR / "shop" / "catalogue.csv", db, workers=1, progress=False)
    with Store(db) as store:
        rows = build_feed(store, load_rules(DEFAULT_RULES), top=10)
    assert len(rows) > 10_000
    assert contradicting_rows([r.reason for r in rows]) == []
    assert any("; but " in r.reason for r in rows)  # the "but" clause still appears, for other pairs


def test_feed_reasons_equal_pair_scores_for_every_rule_kind():
    # The feed's group-at-once sentences against the per-pair path (pair_scores, which speaks
    # through explain_reason one colour pair at a time), for every rule kind without a phrase of
    # its own; a third of the colours are greys so that the neutral rule picks every phrase.
    from harmony.rules.score import colour_labels, pair_scores, scores_and_reasons
    from harmony.rules.screen import PaletteStack

    rng = np.random.default_rng(52)

    def palettes(count):
        out = []
        for _ in range(count):
            k = int(rng.integers(1, 7))
            srgb = rng.uniform(0.0, 1.0, size=(k, 3))
            grey = rng.random(k) < 0.35
            srgb[grey] = srgb[grey].mean(axis=1, keepdims=True)
            out.append(Palette(srgb1_to_jab(srgb), np.sort(rng.dirichlet(np.ones(k)))[::-1]))
        return out

    rs = parse_rules(_EVERY_KIND)
    pals_a, pals_b = palettes(40), palettes(30)
    ia, ib = rng.integers(0, 40, 600), rng.integers(0, 30, 600)
    seen = set()
    for cats in (("rug", "vase"), ("rug", "sofa"), ("sofa", "rug"), ("rug", "cushion"), ("rug", "armchair"),
                 ("armchair", "rug"), ("rug", "bed")):
        pr = rs.for_pair(*cats)
        t = pr.neutral_threshold
        la, lb = [colour_labels(p.jab, t) for p in pals_a], [colour_labels(p.jab, t) for p in pals_b]
        scores, reasons = scores_and_reasons(PaletteStack.from_palettes(pals_a), PaletteStack.from_palettes(pals_b),
                                             ia, ib, pr, labels_a=la, labels_b=lb)
        want = pair_scores([pals_a[i] for i in ia], [pals_b[j] for j in ib], pr)
        assert reasons == [w.reason for w in want]
        assert scores.tolist() == [w.score for w in want]  # to the last bit
        seen.update(reasons)
    for words in ("anchors", "is anchored by", "sits quietly with", "sits too plainly with", "goes with",
                  "sits uneasily with", "is a clear step lighter than", "is a clear step darker than", "clashes with"):
        assert any(f" %) {words} the " in r for r in seen), words
