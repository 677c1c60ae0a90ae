import json
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from click.testing import CliRunner

from harmony import colour
from harmony.errors import HarmonyError
from harmony.photo.palette import Palette
from harmony.report.page import (
    LOW_CONFIDENCE,
    gather_report,
    read_bundles,
    read_feed,
    render_report,
    thumbnail_data_uri,
    write_report,
)
from harmony.report.safety import surface_lrv
from harmony.report.svg import (
    WheelLink,
    hue_wheel_svg,
    palette_strip_svg,
    wheel_position,
)
from harmony.rules import load_rules
from harmony.shop.catalogue import Product

SVG = "{http://www.w3.org/2000/svg}"


def _pal(srgb255, weights, **kw):
    jab = colour.srgb1_to_jab(np.asarray(srgb255, dtype=float) / 255.0)
    return Palette(jab=jab, weights=weights, **kw)


@pytest.fixture(scope="module")
def photos(tmp_path_factory):
    """Real photographs no one here made: scikit-image's sample images, saved as JPEG files."""
    from PIL import Image
    from skimage import data

    folder = tmp_path_factory.mktemp("photos")
    out = {}
    for name in ("coffee", "chelsea", "astronaut"):
        path = folder / f"{name}.jpg"
        Image.fromarray(getattr(data, name)()).save(path, quality=85)
        out[name] = path
    return out


@pytest.fixture(scope="module")
def shop(photos):
    # Invented demo data, for layout only: a sofa, a rug, an armchair, a coffee table.
    products = [
        Product(id="s1", category="sofa", price=899.0, stock=3, title="Low sofa <b>Nord</b>", currency="EUR"),
        Product(id="r1", category="rug", price=149.5, stock=None, title="Flat-weave rug", currency="EUR"),
        Product(id="a1", category="armchair", price=320.0, stock=0, title="Reading chair", currency="EUR"),
        Product(id="t1", category="coffee table", price=210.0, stock=5, title="Oak table", currency="EUR"),
        Product(id="x9", category="cushion", price=25.0, stock=9, title="Cushion & co", currency="EUR"),
    ]
    palettes = {
        "s1": _pal([[120, 130, 150], [200, 196, 188], [60, 60, 64]], [0.6, 0.3, 0.1], sha256="a" * 64),
        "r1": _pal([[125, 128, 140], [180, 60, 40]], [0.8, 0.2]),
        "a1": _pal([[170, 90, 50], [240, 236, 228]], [0.7, 0.3], scene=True, confidence=0.3),
        "t1": _pal([[150, 110, 70]], [1.0]),
    }
    images = {"s1": photos["coffee"], "r1": photos["chelsea"], "a1": photos["astronaut"], "t1": None}
    failures = [("x9", "images/x9.jpg", "cannot identify image file")]
    return products, palettes, images, failures


def _feed_rows():
    return [
        {"product": "s1", "category": "sofa", "partner": "r1", "partner_category": "rug", "rank": 1,
         "score": 0.81, "reason": "The rug's slate <grey> echoes the sofa."},
        {"product": "r1", "category": "rug", "partner": "s1", "partner_category": "sofa", "rank": 1,
         "score": 0.81, "reason": "The same pair the other way: <grey> again."},
        {"product": "s1", "category": "sofa", "partner": "t1", "partner_category": "coffee table", "rank": 1,
         "score": 0.64, "reason": "Warm oak against a cool blue."},
    ]


def _bundle_json():
    return {
        "room": "living <room>", "budget": 1500.0, "currency": "EUR", "exact": True,
        "pool_sizes": {"sofa": 1, "rug": 1, "table": 1},
        "bundles": [{
            "score": 0.72, "total_price": 1258.5,
            "items": [{"slot": "sofa", "id": "s1", "quantity": 1, "price": 899.0},
                      {"slot": "rug", "id": "r1", "quantity": 1, "price": 149.5},
                      {"slot": "table", "id": "t1", "quantity": 1, "price": 210.0}],
            "pairs": [{"a": "sofa", "b": "rug", "score": 0.81, "weight": 2.0},
                      {"a": "sofa", "b": "table", "score": 0.64, "weight": 1.0}],
            "proportions": {"dominant": 0.55, "secondary": 0.3, "accent": 0.15, "distance_60_30_10": 0.05,
                            "palette": {"#7a8296": 0.55, "#c8c4bc": 0.3, "#b43c28": 0.15},
                            "hue_template": {"name": "V", "rotation_deg": 212.0, "distance_deg": 3.5},
                            "lighting": "warm"},
        }],
    }


@pytest.fixture(scope="module")
def report(shop, tmp_path_factory):
    products, palettes, images, failures = shop
    path = tmp_path_factory.mktemp("b") / "living.json"
    path.write_text(json.dumps(_bundle_json()))
    data = gather_report(products, palettes, images, failures, _feed_rows(), [read_bundles(path)],
                         rules=load_rules(), title="Test shop <i>")
    return data, render_report(data)


# ------------------------------------------------------------------------------------------ svg


def test_strip_segment_widths_are_the_weights():
    pal = _pal([[200, 30, 30], [30, 200, 30], [30, 30, 200]], [0.5, 0.3, 0.2])
    root = ET.fromstring(palette_strip_svg(pal, width=200, height=10))
    rects = root.findall(f"{SVG}rect")
    widths = [float(r.get("width")) for r in rects]
    assert widths == pytest.approx([100.0, 60.0, 40.0])
    xs = [float(r.get("x")) for r in rects]
    assert xs == pytest.approx([0.0, 100.0, 160.0])
    assert [r.get("fill") for r in rects] == pal.hex


def test_strip_escapes_its_label():
    pal = _pal([[10, 10, 10]], [1.0])
    text = palette_strip_svg(pal, label='a "<script>" & b')
    assert "<script>" not in text
    assert ET.fromstring(text).get("aria-label") == 'a "<script>" & b'


def test_wheel_places_hue_as_angle_and_colourfulness_as_radius():
    # Gold: colour-science's independent CAM02-UCS conversion gives the hue angle and M'.
    cs = pytest.importorskip("colour")
    srgb = np.array([[0.8, 0.2, 0.2], [0.2, 0.3, 0.8], [0.3, 0.7, 0.3]])
    xyz = cs.sRGB_to_XYZ(srgb)
    vc = cs.VIEWING_CONDITIONS_CIECAM02["Average"]
    jab = cs.XYZ_to_CAM02UCS(xyz, XYZ_w=cs.xy_to_XYZ(cs.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"]),
                             L_A=64 / np.pi * 0.2, Y_b=20.0, surround=vc)
    expected_h = np.degrees(np.arctan2(jab[:, 2], jab[:, 1])) % 360
    expected_m = np.hypot(jab[:, 1], jab[:, 2])
    offsets = wheel_position(colour.srgb1_to_jab(srgb), radius=100.0, max_colourfulness=100.0)
    got_h = np.degrees(np.arctan2(-offsets[:, 1], offsets[:, 0])) % 360  # screen y points down
    assert got_h == pytest.approx(expected_h, abs=0.5)
    assert np.hypot(*offsets.T) == pytest.approx(expected_m, abs=0.1)


def test_wheel_puts_neutrals_in_the_centre_and_draws_links():
    pal_a = _pal([[128, 128, 128], [200, 40, 40]], [0.5, 0.5])
    pal_b = _pal([[40, 40, 200], [250, 250, 250]], [0.7, 0.3])
    text = hue_wheel_svg(pal_a, pal_b, [WheelLink(1, 0, "complement <x>", 0.2), WheelLink(0, 1, "clash", -0.1)],
                         size=200)
    root = ET.fromstring(text)
    c = 100.0
    dots_a = root.findall(f"{SVG}circle[@class='dot-a']")
    assert len(dots_a) == 2
    grey = dots_a[0]
    assert np.hypot(float(grey.get("cx")) - c, float(grey.get("cy")) - c) < 10
    red = dots_a[1]
    assert np.hypot(float(red.get("cx")) - c, float(red.get("cy")) - c) > 30
    assert len(root.findall(f"{SVG}path[@class='dot-b']")) == 2
    links = root.findall(f"{SVG}path[@class='link']")
    assert len(links) == 2
    assert links[0].find(f"{SVG}title").text.startswith("complement <x>")
    assert links[1].get("stroke-dasharray")  # a clash is dashed
    assert "<x>" not in text


def test_wheel_rejects_a_link_outside_the_palettes():
    pal = _pal([[10, 10, 10]], [1.0])
    with pytest.raises(ValueError, match=r"link \(0, 3\) lies outside"):
        hue_wheel_svg(pal, pal, [WheelLink(0, 3)])


# ------------------------------------------------------------------------------------ gathering


def test_gather_flags_scene_low_confidence_and_failures(report):
    data, _ = report
    flags = {(f.product_id, kind) for f in data.flagged for kind, _detail in f.reasons}
    assert ("a1", "room scene") in flags
    assert ("a1", "low confidence") in flags and 0.3 < LOW_CONFIDENCE
    assert ("x9", "extraction failed") in flags
    assert ("x9", "no palette") not in flags  # the failure explains it
    assert data.flagged[0].reasons[0][0] == "extraction failed"
    # Each product once, with all its reasons.
    assert len({f.product_id for f in data.flagged}) == len(data.flagged)
    assert [kind for kind, _ in next(f for f in data.flagged if f.product_id == "a1").reasons] == [
        "room scene", "low confidence"]


def test_gather_picks_one_suggestion_per_pair(report):
    data, _ = report
    pairs = [frozenset((s.product.id, s.partner.id)) for s in data.suggestions]
    assert len(pairs) == len(set(pairs)) == 2
    assert data.suggestions[0].score >= data.suggestions[1].score
    # The links come from the exact pair score under the rules file.
    assert data.suggestions[0].links and all(len(link) == 4 for link in data.suggestions[0].links)


def test_gather_cautions_on_rug_close_in_lrv_to_the_sofa(report, shop):
    data, _ = report
    _, palettes, _, _ = shop
    # The rug and the sofa are both mid greys: their LRVs are close (computed independently here).
    diff = abs(surface_lrv(palettes["r1"]) - surface_lrv(palettes["s1"]))
    assert diff < 30
    found = {(c.rug.id, c.other.id) for c in data.cautions}
    assert ("r1", "s1") in found
    for c in data.cautions:
        assert c.difference < c.required == 30.0


def test_gather_bundle_totals_and_proportions(report):
    data, _ = report
    (b,) = data.bundles
    assert b.total_price == pytest.approx(sum(it.line_total for it in b.items))
    rows = dict(b.proportions)
    assert rows["60-30-10"] == "55 % / 30 % / 15 % (distance 0.05 from 60-30-10)"
    assert rows["hue template"].startswith("Matsuda type V at 212")
    assert rows["lighting"] == "warm"
    # The room's grouped palette is drawn as the strip, widths as given.
    widths = [float(r.get("width")) for r in ET.fromstring(str(b.strip)).findall(f"{SVG}rect")]
    assert widths == pytest.approx([320 * 0.55, 320 * 0.3, 320 * 0.15])
    assert b.wheel  # drawn for the pair that weighs most
    assert "sofa with rug" in b.wheel_caption


def test_gather_rejects_unknown_ids(shop, tmp_path):
    products, palettes, images, failures = shop
    bad = dict(_feed_rows()[0], partner="nope")
    with pytest.raises(HarmonyError, match="unknown product id 'nope'"):
        gather_report(products, palettes, feed_rows=[bad], thumbnails=False)
    data = _bundle_json()
    data["bundles"][0]["items"][0]["id"] = "ghost"
    path = tmp_path / "b.json"
    path.write_text(json.dumps(data))
    with pytest.raises(HarmonyError, match=r"b.json: bundles\[0\].items\[0\].id: unknown product id 'ghost'"):
        gather_report(products, palettes, bundle_results=[read_bundles(path)], thumbnails=False)


# ------------------------------------------------------------------------------------ rendering


def test_render_escapes_every_user_string(report):
    _, html = report
    assert "<b>Nord</b>" not in html and "&lt;b&gt;Nord&lt;/b&gt;" in html
    assert "&lt;grey&gt;" in html
    assert "living &lt;room&gt;" in html
    assert "Test shop &lt;i&gt;" in html
    assert "Cushion &amp; co" in html
    # The only script elements are the page's own finder (its data, then its code); no "<" of a
    # catalogue string reaches the finder's JSON unescaped.
    assert html.lower().count("<script") == 2
    data_text = re.search(r'<script type="application/json" id="finder-data">(.*?)</script>', html, re.S).group(1)
    assert "<" not in data_text and "\\u003cb>Nord" in data_text


def test_render_is_self_contained(report):
    _, html = report
    # No external resources: every src is a data URI, no stylesheet links, no outside scripts.
    srcs = re.findall(r'src="([^"]*)"', html)
    assert srcs and all(s.startswith("data:image/jpeg;base64,") for s in srcs)
    assert "<link" not in html and "http://" not in html.replace('xmlns="http://www.w3.org/2000/svg"', "")
    assert "https://" not in html


def test_render_shows_every_section(report):
    _, html = report
    for marker in ('id="cautions"', 'id="suggestions"', 'id="bundles"', 'id="catalogue"', 'id="flagged"',
                   'id="rules"', 'class="card product"', 'class="strip"', 'class="wheel"', "set 1",
                   "1,258.50 EUR", "BS 8300-2:2018", "default.toml"):
        assert marker in html, marker
    assert html.count('class="card product"') == 5


def test_thumbnail_of_a_missing_or_broken_file_is_empty(tmp_path, photos):
    assert thumbnail_data_uri(tmp_path / "missing.jpg") == ""
    broken = tmp_path / "broken.jpg"
    broken.write_bytes(b"not an image")
    assert thumbnail_data_uri(broken) == ""
    assert thumbnail_data_uri(photos["coffee"]).startswith("data:image/jpeg;base64,")


def test_write_report(report, tmp_path):
    data, html = report
    out = write_report(data, tmp_path / "sub" / "r.html")
    assert out.read_text(encoding="utf-8") == html


# ---------------------------------------------------------------------------------- bad inputs


@pytest.mark.parametrize(
    "text, message",
    [
        ("{not json\n", r"f.jsonl:1: not JSON"),
        ('{"product": "a"}\n', r"f.jsonl:1: feed row lacks key 'category'"),
        ("\n[1, 2]\n", r"f.jsonl:2: a feed row must be a JSON object"),
        ('{"product": "a", "category": "c", "partner": "b", "partner_category": "d", "rank": 1, '
         '"score": "high", "reason": ""}\n', r"f.jsonl:1: score must be a number, got 'high'"),
        # A rank counts slots from 1 (a whole number); harmony's scores lie in [0, 1].
        ('{"product": "a", "category": "c", "partner": "b", "partner_category": "d", "rank": 1.5, '
         '"score": 0.5, "reason": ""}\n', r"f.jsonl:1: rank must be a whole number from 1, got 1.5"),
        ('{"product": "a", "category": "c", "partner": "b", "partner_category": "d", "rank": 0, '
         '"score": 0.5, "reason": ""}\n', r"f.jsonl:1: rank must be a whole number from 1, got 0"),
        ('{"product": "a", "category": "c", "partner": "b", "partner_category": "d", "rank": 2, '
         '"score": -0.1, "reason": ""}\n', r"f.jsonl:1: score must lie in \[0, 1\], got -0.1"),
    ],
)
def test_read_feed_errors(tmp_path, text, message):
    path = tmp_path / "f.jsonl"
    path.write_text(text)
    with pytest.raises(HarmonyError, match=message):
        read_feed(path)


def test_read_feed_csv_refuses_a_shifted_row_and_parquet_is_named_when_broken(tmp_path):
    # A reason with an unquoted comma (RFC 4180 needs it quoted) shifts the fields after it.
    header = "product,category,partner,partner_category,rank,score,reason,pinned\n"
    path = tmp_path / "f.csv"
    path.write_text(header + 'a,sofa,b,rug,1,0.5,"warm, calm",false\n' + "a,sofa,c,rug,2,0.4,warm, calm,false\n")
    with pytest.raises(HarmonyError, match=r"f.csv:3: 9 fields, the header has 8"):
        read_feed(path)
    path.write_text(header.replace("pinned", "rank") + "a,sofa,b,rug,1,0.5,calm,2\n")
    with pytest.raises(HarmonyError, match=r"f.csv:1: column 'rank' appears twice"):
        read_feed(path)
    broken = tmp_path / "f.parquet"
    broken.write_bytes(b"PAR1 this is not parquet")
    with pytest.raises(HarmonyError, match=r"f.parquet: not a readable Parquet feed"):
        read_feed(broken)


def test_read_feed_missing_file(tmp_path):
    with pytest.raises(HarmonyError, match="nope.jsonl: cannot read feed"):
        read_feed(tmp_path / "nope.jsonl")


@pytest.mark.parametrize(
    "data, message",
    [
        ([], r"bundle JSON must be an object"),
        ({"room": "x"}, r"bundles: missing or not a list"),
        ({"bundles": [{"score": 1, "total_price": 2, "items": []}]}, r"bundles\[0\].items: missing or empty"),
        ({"bundles": [{"score": "a", "total_price": 2, "items": []}]}, r"bundles\[0\].score: missing or not a number"),
        ({"bundles": [{"score": 1, "total_price": 2, "items": [{"id": "a", "quantity": 1}]}]},
         r"bundles\[0\].items\[0\].price: missing or not a number"),
    ],
)
def test_read_bundles_errors(tmp_path, data, message):
    path = tmp_path / "b.json"
    path.write_text(json.dumps(data))
    with pytest.raises(HarmonyError, match=message):
        read_bundles(path)


# ---------------------------------------------------------------------------------------- CLI


@pytest.fixture(scope="module")
def store_path(tmp_path_factory, photos):
    """A real store made by the extraction engine over scikit-image photos and a broken file."""
    from harmony.shop.engine import run_extraction

    folder = photos["coffee"].parent
    (folder / "broken.jpg").write_bytes(b"not a jpeg")
    catalogue = folder / "catalogue.csv"
    catalogue.write_text(
        "id,title,category,price,currency,stock,image\n"
        "s1,<script>alert(1)</script> sofa,sofa,700,EUR,2,coffee.jpg\n"
        "r1,Wool rug,rug,120,EUR,4,chelsea.jpg\n"
        "a1,Chair,armchair,300,EUR,1,astronaut.jpg\n"
        "c1,Cushion,cushion,20,EUR,,broken.jpg\n",
        encoding="utf-8",
    )
    db = tmp_path_factory.mktemp("db") / "h.db"
    run_extraction(catalogue, db, workers=1, progress=False)
    return db


def _cli(*args):
    from harmony.cli import main

    return CliRunner().invoke(main, list(map(str, args)))


def test_cli_report_writes_the_file(store_path, tmp_path):
    feed = tmp_path / "feed.jsonl"
    feed.write_text(json.dumps({"product": "s1", "category": "sofa", "partner": "r1", "partner_category": "rug",
                                "rank": 1, "score": 0.5, "reason": "fine"}) + "\n")
    bundles = tmp_path / "b.json"
    bundles.write_text(json.dumps({"room": "lounge", "budget": 900, "currency": "EUR", "bundles": [
        {"score": 0.5, "total_price": 820, "items": [{"slot": "sofa", "id": "s1", "quantity": 1, "price": 700},
                                                     {"slot": "rug", "id": "r1", "quantity": 1, "price": 120}],
         "pairs": [{"a": "sofa", "b": "rug", "score": 0.5, "weight": 1}]}]}))
    out = tmp_path / "r.html"
    result = _cli("report", "--db", store_path, "--feed", feed, "--bundles", bundles, "--bundles", bundles,
                  "--out", out)
    assert result.exit_code == 0, result.output
    assert "wrote" in result.output and "2 sets" in result.output
    html = out.read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(1)&lt;/script&gt; sofa" in html and html.count("<script") == 2  # the finder only
    assert "extraction failed" in html and "broken.jpg" in html
    assert html.count('class="card product"') == 4


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda d: ["--db", d / "none.db"], r"error: .*none.db: no such store"),
        (lambda d: ["--feed", d / "missing.jsonl"], r"error: .*missing.jsonl: cannot read feed"),
        (lambda d: ["--bundles", d / "missing.json"], r"error: .*missing.json: cannot read bundles"),
        (lambda d: ["--rules", d / "bad.toml"], r"error: .*bad.toml"),
    ],
)
def test_cli_report_errors(store_path, tmp_path, make, message):
    (tmp_path / "bad.toml").write_text("this is = = not toml\n")
    args = make(tmp_path)
    if "--db" not in args:
        args = ["--db", store_path, *args]
    result = _cli("report", *args, "--out", tmp_path / "r.html")
    assert result.exit_code == 2
    assert re.search(message, result.output), result.output
    assert "Traceback" not in result.output
    assert not (tmp_path / "r.html").exists()


# ---------------------------------------------------------------------------------------- demo


@pytest.fixture(scope="module")
def small_shop(tmp_path_factory):
    """The three cheapest products of each living-room category of the committed demo shop."""
    import csv
    import shutil

    from harmony.resources import DEMO_DIR

    source = DEMO_DIR / "shop" / "catalogue.csv"
    if not source.is_file():
        pytest.fail(f"{source} is missing: the demo shop is part of the repository")
    with open(source, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        fields, rows = reader.fieldnames, list(reader)
    keep = []
    for cat in ("sofa", "armchair", "rug", "coffee table", "cushion", "floor lamp"):
        keep += sorted((r for r in rows if r["category"] == cat), key=lambda r: float(r["price"]))[:3]
    folder = tmp_path_factory.mktemp("small-shop")
    (folder / "images").mkdir()
    for r in keep:
        for image in r["image"].split("|"):  # the demo lists extra photos separated by "|"
            shutil.copy(source.parent / image, folder / image)
    with open(folder / "catalogue.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields)
        writer.writeheader()
        writer.writerows(keep)
    return folder / "catalogue.csv"


def test_demo_runs_every_stage(small_shop, tmp_path):
    from harmony.demo.run import run_demo
    from harmony.resources import DEMO_DIR

    lines = []
    out = tmp_path / "demo"
    result = run_demo(out, workers=1, progress=False, log=lines.append, catalogue=small_shop,
                      rooms=[DEMO_DIR / "living_room.toml"])
    assert [name for name, _ in result.stages] == ["extract", "feed", "bundles", "report"]
    assert [line.split(":")[0] for line in lines] == ["extract", "feed", "bundles", "report"]
    assert result.db_path == out / "harmony.db" and result.db_path.is_file()
    feed = read_feed(result.feed_path)
    assert feed and {r["category"] for r in feed} >= {"sofa", "rug"}
    (bundle_path,) = result.bundle_paths
    data = read_bundles(bundle_path)
    assert data["room"] == "Living room" and data["bundles"]
    for b in data["bundles"]:
        assert b["total_price"] <= data["budget"]
    html = result.report_path.read_text(encoding="utf-8")
    assert html.count('class="card product"') == 18
    assert 'class="card set"' in html and 'class="card pair"' in html
    assert not result.evaluated  # no interaction log beside this catalogue


def test_demo_command_prints_where_the_report_is(small_shop, tmp_path, monkeypatch):
    import harmony.demo.run as demo
    from harmony.resources import DEMO_DIR

    # The command runs the real pipeline; only the catalogue and rooms are made smaller for speed.
    real = demo.run_demo
    monkeypatch.setattr(demo, "run_demo", lambda out, **kw: real(out, catalogue=small_shop,
                                                                  rooms=[DEMO_DIR / "living_room.toml"], **kw))
    out = tmp_path / "d"
    result = _cli("demo", "--out-dir", out, "--workers", "1", "--no-progress")
    assert result.exit_code == 0, result.output
    last = result.output.strip().splitlines()[-1]
    assert last == f"report: {(out / 'report.html').resolve()}"


def test_demo_command_reports_an_unusable_folder(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    result = _cli("demo", "--out-dir", blocker / "sub", "--no-progress")
    assert result.exit_code == 2
    assert "error: " in result.output and "cannot make the output folder" in result.output


# ------------------------------------------------------------------------- hostile strings, floor

EVIL = '"><img src=x onerror=alert(1)><script>alert(2)</script>'

HOSTILE_RULES = f"""
format = 1
[neutral]
threshold = 7.0
fade = 4.0
[rule.'close{EVIL}']
kind = "hue"
centre = 0.0
spread = 40.0
weight = 1.0
phrase = 'sits {EVIL} near'
[default]
rules = {{ 'close{EVIL}' = 1.0 }}
"""


class _Tags(__import__("html.parser").parser.HTMLParser):
    """Every element and attribute of a page, and its text."""

    def __init__(self):
        super().__init__()
        self.tags, self.attrs, self.text = set(), set(), []

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        self.attrs.update(name for name, _ in attrs)

    def handle_data(self, data):
        self.text.append(data)


def test_every_user_string_is_escaped(tmp_path):
    # Hostile ids, titles, categories, currency, rule names and phrases, rooms, slots and reasons:
    # none may become markup. The category still reads as a rug, so the caution box shows it too.
    from harmony.rules import parse_rules

    rules = parse_rules(HOSTILE_RULES, where="hostile.toml")
    products = [
        Product(id=f"s{EVIL}", category=f"sofa {EVIL}", price=500.0, stock=1, title=f"Sofa {EVIL}",
                currency=f"E{EVIL}"),
        Product(id=f"r{EVIL}", category=f"rug {EVIL}", price=90.0, stock=1, title=f"Rug {EVIL}",
                currency=f"E{EVIL}"),
    ]
    palettes = {
        f"s{EVIL}": _pal([[120, 60, 50], [110, 64, 58]], [0.6, 0.4]),
        f"r{EVIL}": _pal([[125, 70, 52]], [1.0]),
    }
    feed = [{"product": f"s{EVIL}", "category": f"sofa {EVIL}", "partner": f"r{EVIL}",
             "partner_category": f"rug {EVIL}", "rank": 1, "score": 0.5, "reason": f"Because {EVIL}"}]
    bundle = {"room": f"Room {EVIL}", "budget": 1000, "currency": f"E{EVIL}", "exact": False,
              "pool_sizes": {f"slot {EVIL}": 1},
              "bundles": [{"score": 1.0, "total_price": 590.0,
                           "items": [{"slot": f"seat {EVIL}", "id": f"s{EVIL}", "quantity": 1, "price": 500.0},
                                     {"slot": f"floor {EVIL}", "id": f"r{EVIL}", "quantity": 1, "price": 90.0}],
                           "pairs": [{"a": f"seat {EVIL}", "b": f"floor {EVIL}", "score": 0.5, "weight": 1.0}],
                           "proportions": {f"key {EVIL}": f"value {EVIL}"}}]}
    path = tmp_path / "b.json"
    path.write_text(json.dumps(bundle))
    failures = [(f"s{EVIL}", f"images/{EVIL}.jpg", f"reason {EVIL}")]
    data = gather_report(products, palettes, {}, failures, feed, [read_bundles(path)], rules=rules,
                         title=f"Shop {EVIL}", notes=(f"note {EVIL}",), floor_lrv=20.0)
    assert data.suggestions[0].links, "the hostile rule linked colours"
    assert data.cautions and data.floors
    html = render_report(data)
    parser = _Tags()
    parser.feed(html)
    assert "img" not in parser.tags  # no thumbnails were given
    assert not any(a.startswith("on") for a in parser.attrs)
    # Two script elements, both the page's own: the finder's data holds the hostile strings as
    # JSON with every "<" escaped (inert), and the finder's code holds none of them.
    scripts = re.findall(r"<script([^>]*)>(.*?)</script>", html, re.S)
    assert [attrs for attrs, _ in scripts] == [' type="application/json" id="finder-data"', ""]
    assert "<" not in scripts[0][1] and "alert(2)" not in scripts[1][1]
    assert json.loads(scripts[0][1])[0]["title"] in (f"Sofa {EVIL}", f"Rug {EVIL}")
    text = "".join(parser.text)
    for needle in (f"Sofa {EVIL}", f"Room {EVIL}", f"seat {EVIL}", f"Because {EVIL}", f"close{EVIL}",
                   f"value {EVIL}", f"reason {EVIL}"):
        assert needle in text, needle  # shown, as text
    # Inside the SVG drawings (tooltips, labels) the markup is escaped as well.
    for svg in re.findall(r"<svg.*?</svg>", html, re.S):
        root = ET.fromstring(svg)  # well-formed XML: nothing broke out of an attribute
        assert not [el for el in root.iter() if el.tag.split("}")[-1] in ("script", "img", "foreignObject")]


def test_rug_against_a_given_floor(shop):
    products, palettes, images, failures = shop
    rug_lrv = surface_lrv(palettes["r1"])
    feed = _feed_rows()
    # A floor within 30 points of the rug: cautioned (BS 8300-2:2018 Annex B, 30 points).
    data = gather_report(products, palettes, {}, failures, feed, rules=load_rules(), thumbnails=False,
                         floor_lrv=rug_lrv + 10.0)
    (floor,) = data.floors
    assert floor.rug.id == "r1" and floor.required == 30.0
    assert floor.caution is not None and floor.caution.difference == pytest.approx(10.0)
    assert floor.band == pytest.approx((max(0.0, rug_lrv - 30.0), rug_lrv + 30.0))
    html = render_report(data)
    assert "and the floor (LRV about" in html and "Rug and floor" in html
    # A floor 35 points away passes; with more than 200 lux, rug and floor (both large areas)
    # need only 20 points (BS 8300-2:2018 Annex B), so 25 points pass too.
    clear = gather_report(products, palettes, {}, failures, feed, thumbnails=False, floor_lrv=rug_lrv + 35.0)
    assert clear.floors[0].caution is None
    assert "clear of the floor" in render_report(clear)
    dim = gather_report(products, palettes, {}, failures, feed, thumbnails=False, floor_lrv=rug_lrv + 25.0)
    bright = gather_report(products, palettes, {}, failures, feed, thumbnails=False, floor_lrv=rug_lrv + 25.0,
                           illuminance_lux=300.0)
    assert dim.floors[0].caution is not None and bright.floors[0].caution is None
    assert bright.floors[0].required == 20.0


def test_without_a_floor_the_report_names_the_floor_lrvs_to_avoid(report):
    data, html = report
    (floor,) = data.floors
    assert floor.caution is None and data.floor_lrv is None
    lo, hi = floor.band
    assert f"a floor with an LRV between {lo:.0f} and {hi:.0f} would sit within 30 points" in html
    assert "--floor-lrv" in html
    # The note speaks of the floor and the furniture on the rug, and defers to codes and a sample.
    for words in ("floor it lies on", "furniture that stands on it", "BS 8300-2:2018 (Annex B)", "30 points",
                  "20 points", "200 lux", "BS 8493", "local codes", "measured sample"):
        assert words in html, words


def test_floor_swatch_has_the_floor_lrv(shop):
    # Gold: the sRGB transfer function of IEC 61966-2-1, via harmony.colour.lrv (CIE Y x 100).
    products, palettes, _, _ = shop
    for lrv in (0.0, 12.0, 45.0, 100.0):
        data = gather_report(products, palettes, {}, thumbnails=False, floor_lrv=lrv)
        got = colour.lrv(colour.hex_to_srgb1(data.floor_hex), space="srgb1")
        assert got == pytest.approx(lrv, abs=0.5)  # 8-bit rounding


@pytest.mark.parametrize("kw, message", [
    ({"floor_lrv": 120.0}, r"floor LRV must be between 0 and 100, got 120\.0"),
    ({"floor_lrv": float("nan")}, r"floor LRV must be between 0 and 100"),
    ({"illuminance_lux": -5.0}, r"illuminance must be a finite, non-negative number of lux, got -5\.0"),
    ({"illuminance_lux": float("inf")}, r"illuminance must be a finite, non-negative number of lux, got inf"),
])
def test_bad_floor_values_are_refused(shop, kw, message):
    products, palettes, _, _ = shop
    with pytest.raises(HarmonyError, match=message):
        gather_report(products, palettes, {}, thumbnails=False, **kw)


def test_cli_report_floor_lrv(store_path, tmp_path):
    out = tmp_path / "r.html"
    bad = _cli("report", "--db", store_path, "--floor-lrv", "101", "--out", out)
    assert bad.exit_code == 2 and len(bad.output.strip().splitlines()) == 1
    assert "error: Invalid value for '--floor-lrv': 101.0 is not in the range 0.0<=x<=100.0" in bad.output
    assert not out.exists()
    good = _cli("report", "--db", store_path, "--floor-lrv", "40", "--lux", "300", "--out", out)
    assert good.exit_code == 0, good.output
    assert out.is_file()


_BLOCK_OPTIONAL = """
import importlib.abc, sys
BLOCKED = {"colour", "dask", "distributed", "pyarrow", "hypothesis", "pytest"}
class Block(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] in BLOCKED:
            raise ImportError(f"{name} is blocked: not a runtime dependency")
        return None
sys.meta_path.insert(0, Block())
for name in list(sys.modules):
    if name.split(".")[0] in BLOCKED:
        del sys.modules[name]
from harmony.cli import main
from harmony.demo.run import run_demo
from harmony.resources import DEMO_DIR
result = run_demo(sys.argv[1], workers=1, progress=False, catalogue=sys.argv[2],
                  rooms=[DEMO_DIR / "living_room.toml"])
print(result.report_path.is_file())
"""


def test_demo_needs_only_the_runtime_dependencies(small_shop, tmp_path):
    # `pip install -e .` without the test extras has no colour-science, dask, pyarrow or
    # hypothesis (pyproject.toml): the CLI (every command module) and the demo must not import them.
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-c", _BLOCK_OPTIONAL, str(tmp_path / "d"), str(small_shop)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-3000:]
    assert done.stdout.strip() == "True"


def _pick_by_sorting(rows, limit):
    # The selection written out as whole sorts (the definition the one-pass code must match):
    # rows by (rank, -score, product, partner), the first of each unordered pair kept; those by
    # (-score, product, partner); the first of each category pair, then the rest, cut at limit.
    seen, best = set(), []
    for row in sorted(rows, key=lambda r: (r["rank"], -r["score"], r["product"], r["partner"])):
        key = frozenset((row["product"], row["partner"]))
        if key not in seen:
            seen.add(key)
            best.append(row)
    best.sort(key=lambda r: (-r["score"], r["product"], r["partner"]))
    chosen, kinds = [], set()
    for row in best:
        kind = frozenset((row["category"].casefold(), row["partner_category"].casefold()))
        if kind not in kinds:
            kinds.add(kind)
            chosen.append(row)
    chosen += [r for r in best if not any(r is c for c in chosen)]
    return sorted(chosen[:limit], key=lambda r: (-r["score"], r["product"], r["partner"]))


@pytest.mark.parametrize("seed", range(6))
def test_suggestions_picked_in_one_pass_match_the_sorted_definition(seed):
    from harmony.report.page import _pick_suggestions

    rng = np.random.default_rng(seed)
    cats = ["sofa", "Rug", "lamp", "rug"]
    products = [(f"P{i}", cats[i % 4]) for i in range(30)]
    rows = []
    for _ in range(400):
        (a, ca), (b, cb) = (products[i] for i in rng.choice(30, 2, replace=False))
        rows.append({"product": a, "category": ca, "partner": b, "partner_category": cb,
                     "rank": int(rng.integers(1, 4)), "score": float(rng.integers(0, 8)) / 8})  # many ties
    for limit in (1, 2, 3, 12, 500):
        got = _pick_suggestions(rows, limit)
        assert [id(r) for r in got] == [id(r) for r in _pick_by_sorting(rows, limit)]
