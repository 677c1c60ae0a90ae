"""``harmony demo`` with every input beside the catalogue: interaction log, impression log and the
shop's own candidate list. A smaller shop (part of the committed demo shop) keeps the run short."""

import csv
import shutil

import pytest

from harmony.demo.impressions import PLANTED_EXAMINATION
from harmony.demo.run import BLEND_WEIGHTS, run_demo
from harmony.resources import DEMO_DIR

SHOP = DEMO_DIR / "shop"
CATEGORIES = ("sofa", "armchair", "rug", "coffee table", "cushion", "floor lamp")


def _rows(path):
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        return reader.fieldnames, list(reader)


def _write(path, fields, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields)
        writer.writeheader()
        writer.writerows(rows)


@pytest.fixture(scope="module")
def shop(tmp_path_factory):
    """The living-room products of the demo shop, with the logs and candidates of those products
    (the impression log whole: the click model needs no store)."""
    folder = tmp_path_factory.mktemp("shop")
    (folder / "images").mkdir()
    fields, rows = _rows(SHOP / "catalogue.csv")
    keep = [r for r in rows if r["category"] in CATEGORIES]
    ids = {r["id"] for r in keep}
    for r in keep:
        for image in r["image"].split("|"):
            shutil.copy(SHOP / image, folder / image)
    _write(folder / "catalogue.csv", fields, keep)
    fields, events = _rows(SHOP / "events.csv")
    _write(folder / "events.csv", fields, [e for e in events if e["product"] in ids])
    fields, candidates = _rows(SHOP / "candidates.csv")
    _write(folder / "candidates.csv", fields, [c for c in candidates if c["product"] in ids and c["partner"] in ids])
    shutil.copy(SHOP / "impressions.csv", folder / "impressions.csv")
    return folder / "catalogue.csv"


def test_demo_runs_the_click_model_and_the_blends(shop, tmp_path):
    lines = []
    result = run_demo(tmp_path / "demo", workers=1, progress=False, log=lines.append, catalogue=shop,
                      rooms=[DEMO_DIR / "living_room.toml"])
    assert [name for name, _ in result.stages] == ["extract", "feed", "bundles", "evaluate", "clicks", "report"]
    assert result.evaluated and result.clicks_path == tmp_path / "demo" / "clicks.html"
    clicks = result.clicks_path.read_text(encoding="utf-8")
    assert "<svg" in clicks and "impressions.csv" in clicks
    assert "24000 impressions" in next(line for line in lines if line.startswith("clicks:"))
    report = result.report_path.read_text(encoding="utf-8")
    assert '<a href="clicks.html">' in report
    # One row per blend weight in the report's evaluation table, beside the rules file.
    for w in BLEND_WEIGHTS.split(","):
        assert f"blend W={float(w):g} (default)" in report
    assert "<td>default</td>" in report


def test_demo_click_model_recovers_the_planted_curve(shop, tmp_path):
    """Recovering the simulation's planted examination curve is a fair check of the estimator
    the demo runs (the numbers say nothing about real shoppers)."""
    import numpy as np

    from harmony.evaluation.clicks import analyse_clicks, read_impressions

    report = analyse_clicks(read_impressions(SHOP / "impressions.csv"), rng=np.random.default_rng(0), resamples=20)
    assert np.allclose(report.theta, PLANTED_EXAMINATION, atol=0.05)
