import json

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image
from reference_data import ANSI_TRUECOLOUR_EXAMPLE

from harmony.cli import main
from harmony.demo.synthetic import encode_jpeg, encode_png, studio_shot
from harmony.errors import HarmonyError
from harmony.photo.palette import extract_palette
from harmony.photo.swatch import ansi_block, segment_widths, write_swatch

KEYS = {"format", "image", "sha256", "width", "height", "scene", "confidence", "flags", "background", "colours"}
COLOUR_KEYS = {"hex", "share", "J", "a", "b", "M", "hue", "lrv", "neutral"}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("imgs")
    good = d / "chair.jpg"
    good.write_bytes(encode_jpeg(studio_shot(np.random.default_rng(4), 400, 400).srgb8))
    bad = d / "notes.jpg"
    bad.write_text("not a picture")
    cut = d / "cut.jpg"
    cut.write_bytes(good.read_bytes()[:3000])
    blank = d / "blank.png"
    blank.write_bytes(encode_png(np.full((50, 50, 3), 230, np.uint8)))
    return d, good, bad, cut, blank


def test_table(files):
    _, good, *_ = files
    res = CliRunner().invoke(main, ["palette", str(good)])
    assert res.exit_code == 0, res.output
    assert "studio shot" in res.output and "#" in res.output and "\x1b[" not in res.output


def test_json_keys_and_order(files):
    _, good, *_ = files
    res = CliRunner().invoke(main, ["palette", "--json", "--colours", "6", str(good)])
    assert res.exit_code == 0
    lines = res.output.strip().splitlines()
    assert len(lines) == 1
    obj = json.loads(lines[0])
    assert set(obj) == KEYS and obj["image"] == str(good)
    assert set(obj["background"]) == {"hex", "share"}
    assert all(set(c) == COLOUR_KEYS for c in obj["colours"])
    weights = [c["share"] for c in obj["colours"]]
    assert weights == sorted(weights, reverse=True) and len(weights) <= 6
    assert abs(sum(weights) - 1) < 1e-9


def test_bad_images_reported_others_processed(files):
    d, good, bad, cut, blank = files
    args = ["palette", "--json", str(bad), str(good), str(d / "missing.jpg"), str(cut), str(blank)]
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 2
    assert len(res.stdout.strip().splitlines()) == 1
    err = res.stderr.strip().splitlines()
    assert err == [
        f"error: {bad}: not an image (unrecognised format)",
        f"error: {d / 'missing.jpg'}: no such file",
        f"error: {cut}: cannot decode: file is truncated",
        f"error: {blank}: nothing left after removing the background",
    ]
    assert "Traceback" not in res.output


def test_swatch_widths_are_weights(files, tmp_path):
    _, good, *_ = files
    out = tmp_path / "sw.png"
    res = CliRunner().invoke(main, ["palette", "--json", "--swatch", str(out), str(good), str(good)])
    assert res.exit_code == 0
    obj = json.loads(res.output.splitlines()[0])
    img = np.asarray(Image.open(out).convert("RGB"))
    assert img.shape[1] == 600 and img.shape[0] == 2 * 48 + 4
    row = img[10]
    runs = np.flatnonzero(np.any(row[1:] != row[:-1], axis=1)) + 1
    widths = np.diff(np.concatenate([[0], runs, [600]]))
    expected = segment_widths([c["share"] for c in obj["colours"]], 600)
    assert widths.tolist() == expected.tolist()


def test_swatch_unwritable(files, tmp_path):
    _, good, *_ = files
    # A missing folder is made; a folder that is really a file cannot be.
    res = CliRunner().invoke(main, ["palette", "--swatch", str(good) + "/x.png", str(good)])
    assert res.exit_code == 2
    assert "cannot write the swatch" in res.stderr and "Traceback" not in res.output


def test_bad_colours_option(files):
    _, good, *_ = files
    res = CliRunner().invoke(main, ["palette", "--colours", "0", str(good)])
    assert res.exit_code == 2 and "--colours" in res.output


def test_segment_widths_sum_exactly():
    w = segment_widths([1 / 3, 1 / 3, 1 / 3], 100)
    assert w.sum() == 100 and set(w.tolist()) <= {33, 34}


def test_ansi_block():
    # gold: ECMA-48 / ISO/IEC 8613-6 direct colour SGR (reference_data).
    code, expected = ANSI_TRUECOLOUR_EXAMPLE
    assert ansi_block(code) == expected
    with pytest.raises(ValueError, match="#rrggbb"):
        ansi_block("orange")


def test_swatch_failure_leaves_no_partial_file(files, tmp_path):
    # The target is an existing folder: the rename fails, and neither a half-written picture nor
    # a temporary file is left behind.
    _, good, *_ = files
    target = tmp_path / "taken.png"
    target.mkdir()
    with pytest.raises(HarmonyError, match=r"taken\.png: cannot write the swatch: Is a directory$"):
        write_swatch(extract_palette(good), target)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken.png"]


def test_swatch_replaces_an_older_file(files, tmp_path):
    _, good, *_ = files
    out = tmp_path / "sw.png"
    out.write_bytes(b"old")
    res = CliRunner().invoke(main, ["palette", "--swatch", str(out), str(good)])
    assert res.exit_code == 0
    assert Image.open(out).size == (600, 48)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sw.png"]


def test_swatch_failed_write_keeps_the_older_file(files, tmp_path, monkeypatch):
    # A disk that fills up at the last step: the older swatch is kept as it was, no temporary
    # file is left, and the error names the path.
    import harmony.photo.swatch

    _, good, *_ = files
    out = tmp_path / "sw.png"
    out.write_bytes(b"old")

    def full_disk(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(harmony.photo.swatch.os, "replace", full_disk)
    with pytest.raises(HarmonyError, match=r"sw\.png: cannot write the swatch: No space left on device"):
        write_swatch(extract_palette(good), out)
    assert out.read_bytes() == b"old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sw.png"]


def test_full_bleed_photo_and_oversized_png(tmp_path):
    from test_image import _png_header_only
    from test_mask import red_fabric

    rug = tmp_path / "rug.jpg"
    rug.write_bytes(encode_jpeg(red_fabric(np.random.default_rng(5))))
    huge = tmp_path / "huge.png"
    huge.write_bytes(_png_header_only(100_000, 100_000))
    res = CliRunner().invoke(main, ["palette", "--json", str(huge), str(rug)])
    assert res.exit_code != 0 and "Traceback" not in res.output
    assert res.stderr.strip().splitlines() == [
        f"error: {huge}: image declares more pixels than the limit of 178956970"
    ]
    obj = json.loads(res.stdout.strip())
    assert obj["image"] == str(rug) and obj["background"] is None and obj["confidence"] == 0.6
    assert obj["scene"] is False
