"""`harmony rules check`, `harmony rules show` and `harmony score` through click's CliRunner."""

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from harmony.cli import main
from harmony.colour import hex_to_srgb1, srgb1_to_jab
from harmony.photo.palette import Palette
from harmony.resources import DEFAULT_RULES
from harmony.rules.wheel import (
    HEADER_HEIGHT,
    RING_COLOURFULNESS,
    RING_LIGHTNESS,
    wheel_geometry,
)

DATA = Path(__file__).parent.parent / "data" / "rules"


@pytest.fixture()
def runner():
    return CliRunner(mix_stderr=False) if "mix_stderr" in CliRunner.__init__.__code__.co_varnames else CliRunner()


def _write_palette(path, codes_weights):
    codes, weights = zip(*codes_weights)
    pal = Palette(srgb1_to_jab(np.array([hex_to_srgb1(c) for c in codes])), np.array(weights), source=path.name)
    path.write_text(pal.to_json() + "\n", encoding="utf-8")
    return path


@pytest.fixture()
def palettes(tmp_path):
    rug = _write_palette(tmp_path / "rug.json", [("#b8400d", 0.31), ("#808080", 0.69)])
    sofa = _write_palette(tmp_path / "sofa.json", [("#008080", 0.48), ("#7f7f7f", 0.52)])
    return rug, sofa


def test_check_ok(runner):
    result = runner.invoke(main, ["rules", "check", str(DEFAULT_RULES), str(DATA / "small_ok.toml")])
    assert result.exit_code == 0, result.output
    assert f"{DEFAULT_RULES}: ok" in result.output
    assert "small_ok.toml: ok (2 rules, 1 pair sections)" in result.output


def test_check_reports_every_problem(runner):
    bad = DATA / "many_problems.toml"
    result = runner.invoke(main, ["rules", "check", str(DATA / "small_ok.toml"), str(bad), str(DATA / "syntax_error.toml")])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 7  # six in many_problems.toml, one syntax error
    assert all(line.startswith("error: ") for line in lines)
    assert f"error: {bad}:16: rule.clash.spred: unknown key (did you mean 'spread'?)" in result.stderr
    assert "syntax_error.toml:5: toml: syntax error" in result.stderr
    assert "Traceback" not in result.stderr


def test_check_needs_a_file(runner):
    result = runner.invoke(main, ["rules", "check"])
    assert result.exit_code == 2 and "Missing argument" in result.stderr


def test_show_draws_wheels(runner, tmp_path):
    out = tmp_path / "wheels.png"
    result = runner.invoke(main, ["rules", "show", str(DATA / "small_ok.toml"), "--out", str(out)])
    assert result.exit_code == 0, result.stderr
    assert "3 wheels" in result.output  # rule analogous, [default], sofa / rug
    img = np.asarray(Image.open(out).convert("RGB")).astype(int)
    panel = 240
    c, base, amplitude, ring_inner, _ = wheel_geometry(panel)
    top = HEADER_HEIGHT + 30
    # The key above the wheels is drawn (dark text on the white header).
    assert np.any(img[:HEADER_HEIGHT - 4].sum(axis=-1) < 300)
    # The analogous rule (first panel) has its bump at hue difference 0 (screen top), none at 180.
    y_up = int(top + c - base - amplitude * 0.5)
    y_down = int(top + c + base + amplitude * 0.5)
    assert tuple(img[y_up, int(c)]) == (46, 125, 50)
    assert tuple(img[y_down, int(c)]) == (255, 255, 255)


def test_show_bad_rules_file(runner, tmp_path):
    result = runner.invoke(main, ["rules", "show", str(DATA / "wrong_kind.toml"), "--out", str(tmp_path / "x.png")])
    assert result.exit_code == 2
    assert result.stderr.startswith("error: ") and "did you mean 'lightness'" in result.stderr


def test_show_unwritable_output(runner, tmp_path):
    # Written like every output (harmony.fileio): a missing folder is made, a file in the way is not.
    (tmp_path / "a-file").write_text("")
    out = tmp_path / "a-file" / "x.png"
    result = runner.invoke(main, ["rules", "show", str(DEFAULT_RULES), "--out", str(out)])
    assert result.exit_code == 2 and "cannot write the picture" in result.stderr


def test_ring_colours_in_gamut():
    # The wheel's ring must show real colours: J' 65, M' 20 stays inside sRGB at every hue.
    from harmony.colour import in_srgb_gamut, jab_to_srgb1

    h = np.radians(np.arange(360.0))
    jab = np.stack([np.full_like(h, RING_LIGHTNESS), RING_COLOURFULNESS * np.cos(h), RING_COLOURFULNESS * np.sin(h)], -1)
    assert np.all(in_srgb_gamut(jab_to_srgb1(jab), tol=1e-3))


def test_score_json(runner, palettes):
    rug, sofa = palettes
    result = runner.invoke(main, ["score", str(rug), str(sofa), "--categories", "Rug,SOFA", "--json"])
    assert result.exit_code == 0, result.stderr
    out = json.loads(result.output)
    assert set(out) >= {"score", "categories", "rules_file", "contributions", "colour_pairs", "reason"}
    assert out["categories"] == ["rug", "sofa"]
    assert 0.0 <= out["score"] <= 1.0
    assert {c["rule"] for c in out["contributions"]} >= {"complementary", "neutral_anchor", "lightness_step"}
    assert all(set(p) == {"a", "b", "rule", "value"} for p in out["colour_pairs"])
    assert out["reason"].startswith("the rug's ") and " the sofa's " in out["reason"]


def test_score_text_and_custom_rules(runner, palettes):
    rug, sofa = palettes
    result = runner.invoke(main, ["score", str(rug), str(sofa), "--rules", str(DATA / "small_ok.toml")])
    assert result.exit_code == 0, result.stderr
    assert result.output.startswith("score ") and "rules: default" in result.output


@pytest.mark.parametrize(
    "args, message",
    [
        (["--categories", "rug"], "--categories: expected two names separated by a comma"),
        (["--rules", "nope.toml"], "nope.toml: cannot read the rules file"),
        (["--rules", str(DATA / "many_problems.toml")], "many_problems.toml:4: neutral.threshold"),
    ],
)
def test_score_bad_options(runner, palettes, args, message):
    rug, sofa = palettes
    result = runner.invoke(main, ["score", str(rug), str(sofa), *args])
    assert result.exit_code == 2
    assert result.stderr.startswith("error: ") and message in result.stderr
    assert "Traceback" not in result.stderr


def test_score_bad_inputs(runner, palettes, tmp_path):
    rug, _ = palettes
    broken = tmp_path / "broken.json"
    broken.write_text("{not json", encoding="utf-8")
    two = tmp_path / "two.json"
    two.write_text(rug.read_text() + rug.read_text(), encoding="utf-8")
    not_image = tmp_path / "photo.jpg"
    not_image.write_bytes(b"this is not a picture")
    for path, message in [(broken, "broken.json: not JSON"), (two, "two.json: holds 2 palettes"),
                          (tmp_path / "gone.json", "gone.json: cannot read"), (not_image, "photo.jpg")]:
        result = runner.invoke(main, ["score", str(rug), str(path)])
        assert result.exit_code == 2, path
        assert result.stderr.startswith("error: ") and message in result.stderr
        assert "Traceback" not in result.stderr


def test_score_images(runner, palettes, tmp_path):
    # A real photograph no one here made: scikit-image's sample image "coffee".
    from skimage import data

    photo = tmp_path / "coffee.png"
    Image.fromarray(data.coffee()).save(photo)
    _, sofa = palettes
    result = runner.invoke(main, ["score", str(photo), str(sofa), "--categories", "cushion,sofa", "--json"])
    assert result.exit_code == 0, result.stderr
    out = json.loads(result.output)
    assert 0.0 <= out["score"] <= 1.0 and out["categories"] == ["cushion", "sofa"]
    assert out["reason"].startswith("the cushion's ")


def test_score_of_a_pair_the_rules_never_score(runner, palettes):
    # rules/default.toml: bed with dining table has scored = false; the CLI says so.
    rug, sofa = palettes
    result = runner.invoke(main, ["score", str(rug), str(sofa), "--categories", "Dining Table,bed", "--json"])
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["scored"] is False
    assert "never scores dining table with bed (scored = false)" in result.stderr
    result = runner.invoke(main, ["score", str(rug), str(sofa), "--categories", "rug,sofa", "--json"])
    assert json.loads(result.stdout)["scored"] is True and result.stderr == ""


def test_score_names_a_category_no_pair_section_knows(runner, palettes):
    # "rugs" is in no section of rules/default.toml, "rug" is: the [default] rules would score
    # the pair, so the command says which name was probably meant (difflib).
    rug, sofa = palettes
    result = runner.invoke(main, ["score", str(rug), str(sofa), "--categories", "rugs,sofa", "--json"])
    assert result.exit_code == 0, result.stderr
    assert "has no pair section naming 'rugs' (did you mean 'rug'?)" in result.stderr
    assert json.loads(result.stdout)["section"] == "default"


def test_rules_show_to_standard_output_writes_the_png_only(tmp_path):
    from harmony.resources import DEFAULT_RULES

    res = CliRunner().invoke(main, ["rules", "show", str(DEFAULT_RULES), "--out", "-"])
    assert res.exit_code == 0, res.output
    # PNG signature: 137 80 78 71 13 10 26 10 (ISO/IEC 15948:2004, section 5.2).
    assert res.stdout_bytes.startswith(b"\x89PNG\r\n\x1a\n")
    picture = tmp_path / "wheels.png"
    picture.write_bytes(res.stdout_bytes)
    with Image.open(picture) as img:
        assert img.format == "PNG" and img.size[0] > 100
    assert res.stderr.strip().endswith("wheels") and "-: " in res.stderr
