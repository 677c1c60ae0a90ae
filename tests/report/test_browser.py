"""The report in a real browser: headless Chromium renders it, and we read back pixels and DOM.

Chromium must be installed (Debian package ``chromium``; ``.ci/run`` installs it). When the
environment variable CI is set, a missing browser fails the test instead of skipping it.
"""

import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest

from harmony.report.page import gather_report, read_bundles, write_report
from harmony.rules import load_rules
from harmony.shop.catalogue import Product

pytestmark = pytest.mark.browser

HOSTILE_TITLE = "<script>document.title='pwned'</script><img src=x onerror=alert(1)> Bold sofa"

# A console message from the page, in either of the formats Chromium's stderr log has used.
_CONSOLE = re.compile(r":CONSOLE(?:\(\d+\)|:\d+)\]\s*\"(?P<msg>.*)\", source: (?P<src>.*)$")


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    if os.path.exists("/usr/bin/chromium"):
        return "/usr/bin/chromium"
    if os.environ.get("CI"):
        pytest.fail("headless Chromium is required in CI but was not found (apt-get install chromium)")
    pytest.skip("headless Chromium not installed")


def _run(browser, profile, url, *extra, timeout=60):
    args = [
        browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run", "--hide-scrollbars",
        f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0", *extra, url,
    ]
    done = subprocess.run(args, capture_output=True, text=True, timeout=timeout)
    console = [m.group("msg") for line in done.stderr.splitlines() if (m := _CONSOLE.search(line))]
    return done, console


class _Census(HTMLParser):
    """Counts elements by class, collects img sources, script elements and visible text."""

    def __init__(self):
        super().__init__()
        self.classes = {}
        self.scripts = 0
        self.srcs = []
        self.text = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "script":
            self.scripts += 1
        if tag == "img":
            self.srcs.append(attrs.get("src", ""))
        for cls in (attrs.get("class") or "").split():
            self.classes[cls] = self.classes.get(cls, 0) + 1

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def browser():
    return _chromium()


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    """A report over real photographs (scikit-image samples) and an invented, hostile catalogue."""
    from PIL import Image
    from skimage import data

    from harmony import colour
    from harmony.photo.palette import Palette

    folder = tmp_path_factory.mktemp("browser")
    images = {}
    for pid, name in (("p1", "coffee"), ("p2", "chelsea"), ("p3", "rocket")):
        path = folder / f"{name}.jpg"
        Image.fromarray(getattr(data, name)()).save(path, quality=85)
        images[pid] = path

    def pal(srgb255, weights):
        return Palette(jab=colour.srgb1_to_jab(np.asarray(srgb255, float) / 255.0), weights=weights)

    products = [
        Product(id="p1", category="sofa", price=700.0, stock=2, title=HOSTILE_TITLE, currency="EUR"),
        Product(id="p2", category="rug", price=120.0, stock=4, title="Wool rug", currency="EUR"),
        Product(id="p3", category="floor lamp", price=90.0, stock=1, title="Arc lamp", currency="EUR"),
    ]
    palettes = {
        "p1": pal([[60, 80, 120], [220, 215, 205]], [0.7, 0.3]),
        "p2": pal([[190, 150, 90], [90, 60, 40], [240, 240, 235]], [0.5, 0.3, 0.2]),
        "p3": pal([[30, 30, 30], [200, 170, 60]], [0.8, 0.2]),
    }
    feed = [{"product": "p1", "category": "sofa", "partner": "p2", "partner_category": "rug", "rank": 1,
             "score": 0.7, "reason": "A warm sand rug lifts the navy sofa."}]
    bundle = {"room": "reading corner", "budget": 1000, "currency": "EUR", "exact": True,
              "pool_sizes": {"sofa": 1, "rug": 1, "lamp": 1},
              "bundles": [{"score": 0.6, "total_price": 910.0,
                           "items": [{"slot": "sofa", "id": "p1", "quantity": 1, "price": 700.0},
                                     {"slot": "rug", "id": "p2", "quantity": 1, "price": 120.0},
                                     {"slot": "lamp", "id": "p3", "quantity": 1, "price": 90.0}],
                           "pairs": [{"a": "sofa", "b": "rug", "score": 0.7, "weight": 2.0}],
                           "proportions": {"fit_60_30_10": 0.8}}]}
    bpath = folder / "bundle.json"
    bpath.write_text(json.dumps(bundle))
    data = gather_report(products, palettes, images, [], feed, [read_bundles(bpath)], rules=load_rules(),
                         title="Browser check shop")
    out = write_report(data, folder / "report.html")
    return out


def test_console_parser_sees_a_deliberate_error(browser, tmp_path):
    # Guards the check below: a page that logs must be caught, or "no console errors" means nothing.
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><p>x</p><script>console.error('deliberate'); missingFunction();</script>")
    done, console = _run(browser, tmp_path / "profile", bad.as_uri(), "--dump-dom")
    assert done.returncode == 0, done.stderr[-2000:]
    assert any("deliberate" in m for m in console)
    assert any("missingFunction" in m for m in console)


def test_report_renders_without_console_messages_and_escapes_markup(browser, page, tmp_path):
    done, console = _run(browser, tmp_path / "profile", page.as_uri(), "--dump-dom")
    assert done.returncode == 0, done.stderr[-2000:]
    assert console == []
    census = _Census()
    census.feed(done.stdout)
    # The hostile title became text: no injected script or image, the title unchanged. The two
    # script elements are the page's own: the finder's data (JSON) and the finder.
    assert census.scripts == 2
    assert all(src.startswith("data:image/jpeg;base64,") for src in census.srcs)
    assert "pwned" not in re.search(r"<title>(.*?)</title>", done.stdout, re.S).group(1)
    assert any("<script>document.title='pwned'</script>" in t for t in census.text)
    # Product cards, palette strips, hue wheels and the bundle are there.
    assert census.classes.get("product") == 3
    assert census.classes.get("strip", 0) >= 3
    assert census.classes.get("wheel", 0) >= 2
    assert census.classes.get("set") == 1
    assert census.classes.get("caution") == 1


def test_report_screenshot_is_not_blank(browser, page, tmp_path):
    from PIL import Image

    shot = tmp_path / "shot.png"
    done, console = _run(browser, tmp_path / "profile", page.as_uri(), f"--screenshot={shot}",
                         "--window-size=1280,1600")
    assert done.returncode == 0, done.stderr[-2000:]
    assert console == []
    pixels = np.asarray(Image.open(shot).convert("RGB"), dtype=float)
    assert pixels.shape[:2] == (1600, 1280)
    # A blank page is one colour; the report has a dark header, photos and palette strips.
    assert pixels.std() > 20.0
    distinct = np.unique((pixels[::4, ::4] // 16).reshape(-1, 3), axis=0)
    assert len(distinct) > 100
