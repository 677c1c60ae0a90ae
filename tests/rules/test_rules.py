"""Rules files: loading, validation messages, pair lookup and the kernels' properties."""

import re
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harmony.colour import CAM02UCS, hue_deg
from harmony.errors import RulesError
from harmony.photo import palette
from harmony.rules import PairRules, load_rules, parse_rules

DATA = Path(__file__).parent.parent / "data" / "rules"


@pytest.fixture(scope="module")
def default_rules():
    return load_rules()


# ---- Munsell hue circle ----------------------------------------------------------------------
# Gold: colour-science's Munsell renotation data (colour.munsell_colour_to_xyY, Illuminant C),
# adapted to D65 with CAT02 (colour.chromatic_adaptation), then to CAM02-UCS with colorspacious.
# Munsell, "A Color Notation": hues 50 steps apart on the 100-step circle are complements.

_FAMILIES = "R YR Y GY G BG B PB P RP".split()


def _munsell_spec(step, value=6, chroma=6):
    step = step % 100
    family, within = int(step // 10), step % 10
    if within == 0:
        family, within = (family - 1) % 10, 10
    return f"{within:g}{_FAMILIES[family]} {value}/{chroma}"


def _munsell_jab(steps, value=6, chroma=6):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    from colorspacious import cspace_convert

    cmfs = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]
    white_c, white_d65 = colour.xy_to_XYZ(cmfs["C"]), colour.xy_to_XYZ(cmfs["D65"])
    out = []
    for step in steps:
        xyz = colour.xyY_to_XYZ(colour.munsell_colour_to_xyY(_munsell_spec(step, value, chroma)))
        xyz = colour.chromatic_adaptation(xyz, white_c, white_d65, method="Von Kries", transform="CAT02")
        out.append(cspace_convert(xyz * 100.0, "XYZ100", CAM02UCS))
    return np.array(out)


def _only(rule_set, name):
    """PairRules holding one rule of ``rule_set`` at its own weight."""
    rule = rule_set.rules[name]
    base = rule_set.default_rules()
    return PairRules("test", ("a", "b"), ((rule, 1.0),), base.neutral_threshold, base.neutral_fade,
                     base.midpoint, base.scale)


def _pair_value(pair_rules, jab_a, jab_b):
    return float(pair_rules.kernel(jab_a[None, :], jab_b[None, :])[0, 0])


# Five principal hues (5R, 5Y, 5G, 5B, 5P) at steps 5, 25, 45, 65, 85.
_STARTS = (5, 25, 45, 65, 85)


@pytest.fixture(scope="module")
def munsell_pairs():
    starts = np.array(_STARTS, dtype=float)
    return {
        "start": _munsell_jab(starts),
        "opposite": _munsell_jab(starts + 50),   # 5R-5BG, 5Y-5PB, 5G-5RP, 5B-5YR, 5P-5GY
        "quarter": _munsell_jab(starts + 25),    # a quarter turn, 25 steps
        "adjacent": _munsell_jab(starts + 5),    # neighbours, 5 steps
    }


def test_munsell_colours_are_chromatic(munsell_pairs, default_rules):
    # Value 6 / chroma 6 colours must count as chromatic, or the hue checks below test nothing.
    for jab in munsell_pairs.values():
        assert np.all(palette.neutrality(jab, default_rules.neutral_threshold, default_rules.neutral_fade) == 0.0)


def test_complementary_prefers_munsell_opposites(munsell_pairs, default_rules):
    comp = _only(default_rules, "complementary")
    for k in range(len(_STARTS)):
        start = munsell_pairs["start"][k]
        opposite = _pair_value(comp, start, munsell_pairs["opposite"][k])
        quarter = _pair_value(comp, start, munsell_pairs["quarter"][k])
        assert opposite > quarter + 0.3, _munsell_spec(_STARTS[k])


def test_analogous_prefers_munsell_neighbours(munsell_pairs, default_rules):
    ana = _only(default_rules, "analogous")
    for k in range(len(_STARTS)):
        start = munsell_pairs["start"][k]
        adjacent = _pair_value(ana, start, munsell_pairs["adjacent"][k])
        quarter = _pair_value(ana, start, munsell_pairs["quarter"][k])
        opposite = _pair_value(ana, start, munsell_pairs["opposite"][k])
        assert adjacent > quarter and adjacent > opposite, _munsell_spec(_STARTS[k])
        assert adjacent > 0.4


def test_default_section_ranks_munsell_pairs(munsell_pairs, default_rules):
    # Moon & Spencer (1944), as commonly cited: similarity and contrast harmonise, the ambiguity
    # between them (a quarter turn falls in or near it) does not.
    rules = default_rules.default_rules()
    for k in range(len(_STARTS)):
        start = munsell_pairs["start"][k]
        quarter = _pair_value(rules, start, munsell_pairs["quarter"][k])
        assert _pair_value(rules, start, munsell_pairs["opposite"][k]) > quarter
        assert _pair_value(rules, start, munsell_pairs["adjacent"][k]) > quarter


def test_munsell_hue_differences_as_documented(munsell_pairs):
    # The DESIGN notes' measurement (colour-science renotation data + colorspacious): opposites
    # 160-173 degrees apart in CAM02-UCS hue, quarter turns 67-115, neighbours 12-28.
    def diff(a, b):
        d = np.abs(hue_deg(a) - hue_deg(b)) % 360.0
        return np.minimum(d, 360.0 - d)

    start = munsell_pairs["start"]
    assert np.all((diff(start, munsell_pairs["opposite"]) > 155) & (diff(start, munsell_pairs["opposite"]) < 178))
    assert np.all((diff(start, munsell_pairs["quarter"]) > 60) & (diff(start, munsell_pairs["quarter"]) < 120))
    assert np.all((diff(start, munsell_pairs["adjacent"]) > 8) & (diff(start, munsell_pairs["adjacent"]) < 32))


# ---- the default file ------------------------------------------------------------------------


def test_default_neutral_matches_palette_constants(default_rules):
    assert default_rules.neutral_threshold == palette.NEUTRAL_COLOURFULNESS
    assert default_rules.neutral_fade == palette.NEUTRAL_FADE


def test_default_has_the_required_rules_and_pairs(default_rules):
    kinds = {name: rule.kind for name, rule in default_rules.rules.items()}
    for name in ("analogous", "complementary", "split_complementary", "triadic", "clash"):
        assert kinds[name] == "hue"
    assert default_rules.rules["clash"].weight < 0
    assert kinds["neutral_anchor"] == "neutral"
    assert kinds["lightness_step"] == "lightness"
    for a, b in [("sofa", "rug"), ("sofa", "cushion"), ("dining table", "dining chair"),
                 ("bed", "bedside table"), ("desk", "desk chair")]:
        assert default_rules.for_pair(a, b).section == f"{a} / {b}"


def test_every_number_in_default_file_has_a_comment():
    text = Path(load_rules().path).read_text(encoding="utf-8")
    for number, line in enumerate(text.splitlines(), start=1):
        code = line.split("#", 1)[0]
        if re.search(r"=\s*[-+]?\d", code) or re.search(r"=\s*\{.*\d", code):
            assert "#" in line, f"line {number} has a number without a source comment: {line!r}"


def test_clash_zone_sits_in_moon_spencer_ambiguity(default_rules):
    # Moon & Spencer (1944) as commonly cited: ambiguity at 12-28 Munsell steps = 43.2-100.8 degrees.
    clash = default_rules.rules["clash"]
    assert all(43.2 <= c <= 100.8 for c in clash.centres)


# ---- pair lookup -----------------------------------------------------------------------------


def test_categories_match_case_insensitively(default_rules):
    assert default_rules.for_pair("  SOFA ", "Rug").section == "sofa / rug"
    assert default_rules.for_pair("Dining  Table", "dining CHAIR").section == "dining table / dining chair"
    assert default_rules.for_pair("sofa", "unknown thing").section == "default"


def test_reversed_lookup_flips_orientation():
    rs = load_rules(DATA / "small_ok.toml")
    forward = rs.for_pair("sofa", "rug")
    backward = rs.for_pair("rug", "sofa")
    assert not forward.symmetric
    dark, light = np.array([[30.0, 0.0, 0.0]]), np.array([[70.0, 0.0, 0.0]])
    # "rug lighter than sofa" holds for a light rug and a dark sofa, whichever order is asked.
    assert forward.kernel(dark, light)[0, 0] == pytest.approx(backward.kernel(light, dark)[0, 0])
    assert forward.kernel(dark, light)[0, 0] > forward.kernel(light, dark)[0, 0]
    np.testing.assert_allclose(forward.kernel(dark, light), backward.kernel(light, dark).T)


def test_pairs_with(default_rules):
    assert default_rules.pairs_with("sofa", "rug")
    assert default_rules.pairs_with("rug", "SOFA")
    assert not default_rules.pairs_with("sofa", "Sofa")
    assert not default_rules.pairs_with("bed", "dining table")
    assert not default_rules.pairs_with("Dining Table", "bed")
    assert default_rules.pairs_with("sofa", "something unlisted")


# ---- validation: every problem, with file, line and key ---------------------------------------


def test_syntax_error_names_file_and_line():
    path = DATA / "syntax_error.toml"
    with pytest.raises(RulesError, match=re.escape(f"{path}:5: toml: syntax error")):
        load_rules(path)


def test_all_problems_reported_at_once():
    path = DATA / "many_problems.toml"
    with pytest.raises(RulesError) as info:
        load_rules(path)
    problems = info.value.problems
    expected = [
        (4, "neutral.threshold", "must be <= 30"),
        (10, "rule.analogous.spread", "must be > 0"),
        (13, "rule.clash", "missing key 'spread'"),
        (16, "rule.clash.spred", "did you mean 'spread'?"),
        (17, "rule.clash.weight", "must be a number, got a string"),
        (20, "default.rules.clsh", "unknown rule (did you mean 'clash'?)"),
    ]
    assert len(problems) == len(expected)
    for (line, key, reason), text in zip(expected, problems):
        assert text.startswith(f"{path}:{line}: {key}: ")
        assert reason in text
    assert "\n" not in str(info.value)


def test_unknown_kind_suggests():
    with pytest.raises(RulesError, match=r"wrong_kind.toml:8: rule.step.kind: .*did you mean 'lightness'"):
        load_rules(DATA / "wrong_kind.toml")


def test_missing_keys_and_same_category_pair():
    with pytest.raises(RulesError) as info:
        load_rules(DATA / "missing_section.toml")
    text = str(info.value)
    assert "missing_section.toml:1: (file): missing key 'default'" in text
    assert "missing_section.toml:3: neutral: missing key 'fade'" in text
    assert "missing_section.toml:13: pair[1].categories: a pair needs two different categories" in text


def test_missing_file():
    with pytest.raises(RulesError, match=r"nope\.toml: cannot read the rules file"):
        load_rules(DATA / "nope.toml")


_SMALL = """format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.a]
kind = "hue"
centre = 0.0
spread = 20.0
weight = 1.0
[default]
rules = { a = 1.0 }
"""


@pytest.mark.parametrize(
    "old, new, message",
    [
        ("format = 1", "format = 2", r"<string>:1: format: this version of harmony reads format 1"),
        ("fade = 4.0", "fade = 20.0", r"<string>:4: neutral.fade: must be at most twice the threshold"),
        ("threshold = 7.0", "threshold = 1.0", r"<string>:3: neutral.threshold: must be >= 2.5"),
        ("centre = 0.0", "centre = 200.0", r"<string>:7: rule.a.centre: each angle must be <= 180"),
        ("centre = 0.0", 'centre = "zero"', r"<string>:7: rule.a.centre: each angle must be a number"),
        ("rules = { a = 1.0 }", "rules = { a = -1.0 }", r"<string>:11: default.rules.a: pair weight must be >= 0"),
        # Weights past MAX_WEIGHT (1,000 times the reference) saturate every score and, near 1e308, overflow.
        ("weight = 1.0", "weight = 1e308", r"<string>:9: rule.a.weight: must be <= 1000, got 1e\+308"),
        ("weight = 1.0", "weight = -1001.0", r"<string>:9: rule.a.weight: must be >= -1000, got -1001"),
        ("rules = { a = 1.0 }", "rules = { a = 1e4 }", r"<string>:11: default.rules.a: pair weight must be <= 1000"),
        ("rules = { a = 1.0 }", "rules = { a = 1.0 }\nscored = 1", r"<string>:12: default.scored: must be true or false"),
        ("[default]", "[defualt]", r"<string>:10: defualt: unknown key \(did you mean 'default'\?\)"),
        ('kind = "hue"', 'kind = "hue"\nwidth = 3.0', r"<string>:7: rule.a.width: unknown key"),
    ],
)
def test_single_problems(old, new, message):
    with pytest.raises(RulesError, match=message):
        parse_rules(_SMALL.replace(old, new, 1))


def test_duplicate_pair_in_either_order():
    text = _SMALL + '[[pair]]\ncategories = ["Sofa", "rug"]\nrules = { a = 1.0 }\n' \
                    '[[pair]]\ncategories = ["rug", "sofa"]\nrules = { a = 2.0 }\n'
    with pytest.raises(RulesError, match=r"<string>:16: pair\[2\].categories: the pair 'rug' / 'sofa' is listed twice"):
        parse_rules(text)


def test_small_valid_text_parses():
    rs = parse_rules(_SMALL)
    assert list(rs.rules) == ["a"]
    assert rs.default_rules().rule_names == ("a",)
    # The weight bounds themselves are allowed (the other side of the checks above).
    edge = parse_rules(_SMALL.replace("weight = 1.0", "weight = -1000.0").replace("a = 1.0 }", "a = 1000.0 }"))
    assert edge.rules["a"].weight == -1000.0


# ---- kernel properties (hypothesis) ----------------------------------------------------------


def _jab(j, m, h):
    return np.array([j, m * np.cos(np.radians(h)), m * np.sin(np.radians(h))])


_lightness = st.floats(5.0, 95.0)
_chroma = st.floats(0.0, 40.0)
_hue = st.floats(0.0, 360.0)


@settings(max_examples=60, deadline=None)
@given(_lightness, _chroma, _hue, _lightness, _chroma, _hue)
def test_swap_symmetry(j1, m1, h1, j2, m2, h2):
    rules = load_rules().for_pair("sofa", "rug")
    assert rules.symmetric
    a, b = _jab(j1, m1, h1)[None], _jab(j2, m2, h2)[None]
    assert rules.kernel(a, b)[0, 0] == pytest.approx(rules.kernel(b, a)[0, 0], abs=1e-12)


@settings(max_examples=60, deadline=None)
@given(_lightness, st.floats(10.0, 40.0), _lightness, st.floats(10.0, 40.0), _hue, st.floats(-1e-3, 1e-3))
def test_hue_wraps_at_zero(j1, m1, j2, m2, h2, eps):
    rules = load_rules().default_rules()
    b = _jab(j2, m2, h2)[None]
    just_below = _jab(j1, m1, 360.0 - 1e-4 + eps)[None]
    just_above = _jab(j1, m1, 1e-4 + eps)[None]
    shifted = _jab(j1, m1, 1e-4 + eps + 360.0)[None]
    assert rules.kernel(just_below, b)[0, 0] == pytest.approx(rules.kernel(just_above, b)[0, 0], abs=1e-3)
    assert rules.kernel(shifted, b)[0, 0] == pytest.approx(rules.kernel(just_above, b)[0, 0], abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(_lightness, _hue, _lightness, _chroma, _hue)
def test_no_cliff_at_neutral_threshold(j1, h1, j2, m2, h2):
    rules = load_rules().default_rules()
    t = rules.neutral_threshold
    b = _jab(j2, m2, h2)[None]
    below = rules.kernel(_jab(j1, t - 1e-4, h1)[None], b)[0, 0]
    above = rules.kernel(_jab(j1, t + 1e-4, h1)[None], b)[0, 0]
    assert below == pytest.approx(above, abs=1e-3)


def test_hue_rules_vanish_for_neutrals(default_rules):
    grey = np.array([[50.0, 0.0, 0.0]])
    red = _jab(50.0, 30.0, 30.0)[None]
    for name in ("analogous", "complementary", "clash"):
        assert _only(default_rules, name).kernel(grey, red)[0, 0] == 0.0


def test_kernel_shape_check(default_rules):
    with pytest.raises(ValueError, match=r"jab_a must have shape \(n, 3\), got \(2, 2\)"):
        default_rules.default_rules().kernel(np.zeros((2, 2)), np.zeros((1, 3)))


def test_readme_worked_example():
    # Silver: the worked example of rules/README.md, so the document stays true to the code.
    from harmony.colour import hex_to_srgb1, srgb1_to_jab
    from harmony.photo.palette import Palette
    from harmony.rules.score import pair_score

    readme = (Path(load_rules().path).parent / "README.md").read_text(encoding="utf-8")
    text = readme.split("```toml\n", 1)[1].split("```", 1)[0]
    rs = parse_rules(text, where="README.md")

    def pal(codes, weights):
        return Palette(srgb1_to_jab(np.array([hex_to_srgb1(c) for c in codes])), weights)

    rug = pal(["#b8400d", "#d9d2c5"], [0.4, 0.6])
    sofa = pal(["#008080", "#3a3a3a"], [0.7, 0.3])
    result = pair_score(rug, sofa, rs.for_pair("rug", "sofa"))
    np.testing.assert_allclose(rs.for_pair("rug", "sofa").kernel(rug.jab, sofa.jab), [[0.403, 0.891], [1.0, 1.0]], atol=5e-4)
    assert round(result.raw, 3) == 0.820 and round(result.score, 3) == 0.964
    assert dict(result.contributions) == pytest.approx({"complementary": 0.113, "anchor": 0.432, "rug_lighter": 0.275}, abs=5e-4)
    assert result.reason == "the rug's beige (60 %) anchors the sofa's teal (70 %)"


# ---- the broadcasting form of the kernel -------------------------------------------------------


def _random_jab(rng, shape):
    # Colours spread over lightness, colourfulness (neutral to vivid) and hue.
    j = rng.uniform(5.0, 95.0, shape)
    m = rng.choice([0.0, 3.0, 7.0, 15.0, 35.0], shape) + rng.uniform(0.0, 2.0, shape)
    h = rng.uniform(0.0, 2.0 * np.pi, shape)
    return np.stack([j, m * np.cos(h), m * np.sin(h)], axis=-1)


@pytest.mark.parametrize("section", [("sofa", "rug"), ("rug", "sofa"), ("sofa", "cushion"), ("", "")])
def test_pairwise_is_the_kernel_elementwise(default_rules, section):
    pr = default_rules.default_rules() if section == ("", "") else default_rules.for_pair(*section)
    rng = np.random.default_rng(40)
    a, b = _random_jab(rng, (7,)), _random_jab(rng, (9,))
    outer = pr.kernel(a, b)
    np.testing.assert_allclose(pr.pairwise(a[:, None], b[None, :]), outer, rtol=0, atol=1e-13)
    # The diagonal: pairs (a[i], b[i]) with no outer product.
    np.testing.assert_allclose(pr.pairwise(a, b[:7]), np.diag(outer[:, :7]), rtol=0, atol=1e-13)
    # Deeper broadcasting: (2, 1, 7) against (9, 1) gives (2, 9, 7), a still the first side.
    stacked = np.stack([a, a[::-1]])[:, None, :, :]
    got = pr.pairwise(stacked, b[:, None, :])
    assert got.shape == (2, 9, 7)
    np.testing.assert_allclose(got[0], outer.T, atol=1e-13)
    np.testing.assert_allclose(got[1], outer[::-1].T, atol=1e-13)
    # One colour against one colour gives a 0-d value.
    assert np.shape(pr.pairwise(a[0], b[0])) == () and float(pr.pairwise(a[0], b[0])) == pytest.approx(outer[0, 0], abs=1e-13)
    # The per-rule terms still sum to the kernel.
    np.testing.assert_allclose(sum(t for _, t in pr.kernel_terms(a, b)), outer, atol=1e-12)


def test_pairwise_ou_luo_rule_broadcasts(default_rules):
    from harmony.colour.ou_luo import jab_to_lab, two_colour_harmony

    pr = _only(default_rules, "ou_luo")
    rng = np.random.default_rng(41)
    a, b = _random_jab(rng, (4,)), _random_jab(rng, (5,))
    want = pr.terms[0][1] * two_colour_harmony(jab_to_lab(a)[:, None], jab_to_lab(b)[None, :])
    np.testing.assert_allclose(pr.kernel(a, b), want, atol=1e-12)
    np.testing.assert_allclose(pr.pairwise(a[:, None, :], b[None, :, :]), want, atol=1e-12)


def test_hue_bumps_are_von_mises_densities(default_rules):
    # Gold: scipy.stats.vonmises, pdf(x, kappa) = exp(kappa cos x) / (2 pi I0(kappa)), so
    # exp(kappa (cos x - 1)) = 2 pi i0e(kappa) pdf(x, kappa) with i0e(k) = I0(k) exp(-k).
    from scipy.special import i0e
    from scipy.stats import vonmises

    rule = default_rules.rules["split_complementary"]
    kappa = 1.0 / np.radians(rule.spread) ** 2
    d = np.linspace(0.0, 180.0, 37)
    pr = _only(default_rules, "split_complementary")
    vivid = np.array([60.0, 40.0, 0.0])
    rot = np.radians(d)
    others = np.stack([np.full_like(d, 60.0), 40.0 * np.cos(rot), 40.0 * np.sin(rot)], axis=-1)
    want = 2.0 * np.pi * i0e(kappa) * vonmises.pdf(np.radians(d - rule.centres[0]), kappa)
    np.testing.assert_allclose(pr.pairwise(vivid, others) / pr.terms[0][1], want, rtol=1e-9, atol=1e-12)


def test_pairwise_shape_errors(default_rules):
    pr = default_rules.default_rules()
    with pytest.raises(ValueError, match=r"jab_b must have a trailing axis of 3, got shape \(4, 2\)"):
        pr.pairwise(np.zeros((4, 3)), np.zeros((4, 2)))
    with pytest.raises(ValueError, match=r"jab_a and jab_b must broadcast, got shapes \(4, 3\) and \(5, 3\)"):
        pr.pairwise(np.zeros((4, 3)), np.zeros((5, 3)))


def test_analogous_is_highest_for_munsell_neighbours_round_the_whole_circle(default_rules):
    # Gold: colour-science's Munsell renotation data, the 40 hues of the renotation circle
    # (2.5-step spacing) at value 6 / chroma 6. For each principal hue, the hues next to it
    # (2.5 steps either side) score highest under analogous of all 39 other hues, and under
    # complementary the opposite hue beats every hue up to a quarter-turn away.
    steps = np.arange(0.0, 100.0, 2.5)
    ring = _munsell_jab(steps)
    ana, comp = _only(default_rules, "analogous"), _only(default_rules, "complementary")
    for start in _STARTS:
        k = int(np.flatnonzero(steps == start)[0])
        others = np.delete(np.arange(len(steps)), k)
        apart = np.abs((steps[others] - start + 50.0) % 100.0 - 50.0)  # Munsell steps apart
        a_val = ana.kernel(ring[k : k + 1], ring[others])[0]
        best = apart[a_val == a_val.max()]
        assert np.all(best == 2.5), (_munsell_spec(start), best)
        c_val = comp.kernel(ring[k : k + 1], ring[others])[0]
        opposite = c_val[apart == 50.0][0]
        assert np.all(opposite > c_val[apart <= 25.0]), _munsell_spec(start)


def test_sub_table_of_a_pair_names_its_own_line():
    # TOML 1.0: after [[pair]], a [pair.rules] header is a table inside the latest element.
    text = _SMALL + '[[pair]]\ncategories = ["sofa", "rug"]\nrules = { a = 1.0 }\n' \
                    '[[pair]]\ncategories = ["desk", "lamp"]\n[pair.rules]\na = "x"\n'
    with pytest.raises(RulesError, match=r"^<string>:18: pair\[2\]\.rules\.a: pair weight must be a number"):
        parse_rules(text)


def test_every_problem_of_one_rule_at_once():
    # A missing weight does not hide an impossible width in the same rule.
    text = _SMALL + '[rule.b]\nkind = "lightness"\nstep = 10.0\nwidth = 30.0\n'
    with pytest.raises(RulesError) as info:
        parse_rules(text)
    assert info.value.problems == (
        "<string>:12: rule.b: missing key 'weight'",
        "<string>:15: rule.b.width: must be at most twice the step (20), got 30",
    )


# ---- pair sections against the categories of a store -----------------------------------------


def test_unmatched_pairs_name_line_category_and_closest_category():
    # small_ok.toml lists one pair, ["Sofa", "RUG"], on line 25 of the file.
    rs = load_rules(DATA / "small_ok.toml")
    assert rs.unmatched_pairs(["sofa", "rug", "cushion"]) == []
    assert rs.unmatched_pairs(["Sofa", "Rug "]) == []  # compared normalised, like for_pair
    (found,) = rs.unmatched_pairs(["sofa", "rugs", "cushion"])
    assert found == (25, ("sofa", "rug"), "rug", "rugs")
    assert (found.line, found.category, found.suggestion) == (25, "rug", "rugs")
    both = rs.unmatched_pairs(["lamp"])
    assert [(u.category, u.suggestion) for u in both] == [("sofa", None), ("rug", None)]


def test_unmatched_pair_warnings_one_line_per_section():
    from harmony.rules import unmatched_pair_warnings

    text = _SMALL + '\n[[pair]]\ncategories = ["sofa", "rugs"]\nrules = { a = 1.0 }\n'
    rs = parse_rules(text, where="rules/mine.toml")
    line = text.splitlines().index('categories = ["sofa", "rugs"]') + 1
    assert unmatched_pair_warnings(rs, ["sofa", "rug"]) == [
        f"rules/mine.toml:{line}: pair sofa / rugs: no products of category 'rugs' in the store (did you mean 'rug'?)"
    ]
    # Several rule sets: a warning for each; an empty store gets none (it is an error of its own).
    assert len(unmatched_pair_warnings([rs, rs], ["sofa", "rug"])) == 2
    assert unmatched_pair_warnings(rs, []) == []
    # A category the shop simply does not sell (no close match) is not reported: no typo there.
    assert unmatched_pair_warnings(rs, ["sofa", "floor lamp"]) == []


def test_default_rules_match_every_pair_of_the_demo_shop(default_rules):
    from harmony.demo.shop import CATEGORIES

    assert default_rules.unmatched_pairs(CATEGORIES) == []
