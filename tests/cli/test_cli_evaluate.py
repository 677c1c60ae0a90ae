import json
import math
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from harmony.cli import main
from harmony.shop.catalogue import Catalogue, Product
from harmony.shop.store import FileHash, Store

DATA = Path(__file__).parent.parent / "data" / "eval"
RIGHT = str(DATA / "complementary_only.toml")
WRONG = str(DATA / "complementary_inverted.toml")


def chromatic(hue_deg, j=60.0, m=25.0):
    h = math.radians(hue_deg)
    return [j, m * math.cos(h), m * math.sin(h)]


@pytest.fixture(scope="module")
def shop(tmp_path_factory):
    """A store of invented sofas and cushions, and a log where shoppers pair opposite hues."""
    from harmony.photo.palette import Palette

    root = tmp_path_factory.mktemp("shop")
    rng = np.random.default_rng(7)
    n = 16
    products, palettes, hues = [], {}, {}
    for c, cat in enumerate(("Sofa", "Cushion")):
        for i in range(n):
            pid = f"{cat[0]}{i:02d}"
            hues[pid] = (360.0 * i / n + 11.0 * c) % 360.0
            colour = "red" if hues[pid] < 60 else "blue"
            products.append(
                Product(pid, cat, 100.0, stock=None, title=f"<b>{pid}</b>", images=(f"{pid}.png",),
                        attributes={"colour": colour})
            )
            palettes[pid] = Palette(jab=[chromatic(hues[pid]), [85.0, 1.0, 1.0]], weights=[0.75, 0.25])
    catalogue = Catalogue(products=tuple(products), problems=(), path=root / "catalogue.csv")
    hashes = {
        str(catalogue.image_path(p.images[0])): FileHash(str(catalogue.image_path(p.images[0])), f"{i:064x}", 1, 1)
        for i, p in enumerate(products)
    }
    db = root / "shop.db"
    with Store(db, create=True) as store:
        store.sync_catalogue(catalogue, hashes, "test")
        store.record([(f"{i:064x}", palettes[p.id], None) for i, p in enumerate(products)], "test")
    rows = ["session,product,event,timestamp"]
    cushions = [p.id for p in products if p.category == "Cushion"]
    for s in range(40):
        sofa = f"S{int(rng.integers(n)):02d}"
        target = (hues[sofa] + 180.0 + rng.normal(0, 8)) % 360.0
        gap = [abs((hues[c] - target + 180.0) % 360.0 - 180.0) for c in cushions]
        rows += [f"s{s},{sofa},view,2026-01-0{1 + s % 9}T10:00:00", f"s{s},{cushions[int(np.argmin(gap))]},purchase,"]
    rows += ["x,GONE1,view,", "x,GONE1,cart,", "y,GONE2,view,"]
    log = root / "events.csv"
    log.write_text("\n".join(rows) + "\n")
    return db, log


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_json_output_has_the_documented_keys(shop):
    db, log = shop
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--rules", WRONG, "--json", "--resamples", 200)
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert {"events", "query_products", "results"} <= set(data)
    # Every extra key is deliberate (coverage and what was left out, how intervals were drawn).
    assert set(data) == {
        "events", "query_products", "results", "products_seen", "queries", "coverage", "unknown_products",
        "no_palette", "skipped_events", "confidence_level", "bootstrap_resamples",
    }
    assert data["coverage"] == pytest.approx(data["query_products"] / data["products_seen"])
    assert data["bootstrap_resamples"] == 200 and data["confidence_level"] == 0.95
    names = [r["name"] for r in data["results"]]
    assert names == ["complementary_only", "complementary_inverted", "same colours (EMD)", "colour attribute", "random order"]
    for r in data["results"]:
        assert set(r) == {"name", "kind", "auc", "ndcg_at_10", "hit_at_10", "auc_ci", "ndcg_at_10_ci", "hit_at_10_ci"}
        lo, hi = r["auc_ci"]
        assert lo <= r["auc"] <= hi
    by = {r["name"]: r for r in data["results"]}
    assert by["complementary_only"]["auc"] > 0.8 > 0.2 > by["complementary_inverted"]["auc"]
    assert by["random order"]["auc"] == pytest.approx(0.5)
    assert data["unknown_products"] == {"GONE1": 2, "GONE2": 1}
    assert data["skipped_events"] == {}


def test_query_product_and_event_counts(shop):
    db, log = shop
    data = json.loads(run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--json", "--resamples", 50).output)
    # 40 sessions of one sofa view and one cushion purchase; the rows of unknown ids are left out.
    assert data["events"] == 80
    assert data["query_products"] == data["products_seen"]  # every product of the log had a partner
    assert 0 < data["query_products"] <= 32


def test_table_and_html_page(shop, tmp_path):
    db, log = shop
    out = tmp_path / "eval" / "page.html"
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--out", out, "--resamples", 100)
    assert res.exit_code == 0, res.output
    assert re.search(r"^complementary_only\s+0\.\d{3}\s+0\.\d{3}-", res.output, re.M)
    assert "2 unknown product ids in 3 rows left out (GONE1, GONE2)" in res.output
    html = out.read_text()
    assert "<svg" in html and 'class="whisker"' in html
    assert "<script" not in html and "http://" not in html.replace("http://www.w3.org", "")

    class Check(HTMLParser):
        texts = []

        def handle_data(self, data):
            self.texts.append(data)

    Check().feed(html)
    assert "complementary_only" in "".join(Check.texts)


def test_event_weights_option(shop):
    db, log = shop
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--json", "--event-weight", "view=0")
    assert res.exit_code == 2
    # Only purchases remain: no sofa is left in any session, so there is nothing to evaluate.
    assert "error: no product of the log has a partner" in res.output


@pytest.mark.parametrize(
    "args, match",
    [
        (["--db", "{tmp}/none.db", "--events", "{log}"], r"error: .*none.db: no palette store here"),
        (["--db", "{db}", "--events", "{tmp}/missing.csv"], r"error: .*missing.csv: no such file"),
        (["--db", "{db}", "--events", "{log}", "--rules", "{tmp}/nope.toml"], r"error: .*nope.toml"),
        (["--db", "{db}", "--events", "{log}", "--event-weight", "click=-2"],
         r"error: --event-weight: weight of 'click' must be a finite number >= 0"),
        (["--db", "{db}", "--events", "{bad}"], r"error: .*bad.csv: 1 bad row: line 3: empty product"),
        (["--db", "{db}", "--events", "{ghosts}"],
         r"^error: nothing to evaluate: all 3 product ids in the log are unknown to the store \(most frequent: GONE2\)$"),
        # The same file twice, also under another spelling: only that file is named.
        (["--db", "{db}", "--events", "{log}", "--rules", RIGHT, "--rules", WRONG, "--rules", RIGHT],
         r"^error: --rules: \S*complementary_only.toml is given twice; each rules file is evaluated once$"),
        (["--db", "{db}", "--events", "{log}", "--rules", RIGHT, "--rules", str(DATA / ".." / "eval" / "complementary_only.toml")],
         r"^error: --rules: \S*eval/\.\./eval/complementary_only.toml is given twice \(as '\S*complementary_only.toml' before\)"),
    ],
)
def test_errors_are_one_line(shop, tmp_path, args, match):
    db, log = shop
    bad = tmp_path / "bad.csv"
    bad.write_text("session,product,event\ns,S01,view\ns,,like\n")
    ghosts = tmp_path / "ghosts.csv"
    ghosts.write_text("session,product,event\ns,GONE1,view\ns,GONE2,view\nt,GONE2,cart\nt,GONE3,view\nt,S01,wishlist\n")
    args = [a.format(tmp=tmp_path, db=db, log=log, bad=bad, ghosts=ghosts) for a in args]
    res = run("evaluate", *args)
    assert res.exit_code == 2
    assert re.search(match, res.output), res.output
    assert "Traceback" not in res.output and res.output.count("\n") == 1


def test_page_escapes_names_and_reports_unwritable_out(shop, tmp_path):
    db, log = shop
    odd = tmp_path / "a<b>&c.toml"
    odd.write_text(Path(RIGHT).read_text())
    out = tmp_path / "page.html"
    res = run("evaluate", "--db", db, "--events", log, "--rules", odd, "--out", out, "--resamples", 20)
    assert res.exit_code == 0, res.output
    html = out.read_text()
    assert "a&lt;b&gt;&amp;c" in html and "a<b>" not in html
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--out", log / "page.html", "--resamples", 20)
    assert res.exit_code == 2
    assert re.search(r"^error: .*page.html: cannot write the evaluation page", res.output), res.output


def with_other_kinds(log, tmp_path):
    """The shop's log with rows of kinds the default weights do not know, spread through it."""
    lines = log.read_text().splitlines()
    extra = ["s1,C03,wishlist,", "s2,S05,click,", "s3,C07,wishlist,", "z,S01,WishList,2026-01-02T09:00:00"]
    out = tmp_path / "kinds.csv"
    out.write_text("\n".join(lines[:5] + extra[:2] + lines[5:40] + extra[2:] + lines[40:]) + "\n")
    return out


def test_kinds_without_a_weight_are_reported_not_fatal(shop, tmp_path):
    db, log = shop
    kinds = with_other_kinds(log, tmp_path)
    base = ["evaluate", "--db", db, "--rules", RIGHT, "--resamples", 50]
    res = run(*base, "--events", kinds)
    assert res.exit_code == 0, res.output
    warnings = [line for line in res.output.splitlines() if "without a weight" in line]
    assert warnings == ["4 rows of event kinds without a weight left out (wishlist 3, click 1); "
                        "weigh a kind with --event-weight KIND=W"]
    # Left out, the extra rows change nothing: the same numbers as on the plain log.
    plain = json.loads(run(*base, "--events", log, "--json").output)
    data = json.loads(run(*base, "--events", kinds, "--json").output)
    assert data["skipped_events"] == {"wishlist": 3, "click": 1}
    assert data["results"] == plain["results"] and data["events"] == plain["events"]
    page = tmp_path / "kinds.html"
    assert run(*base, "--events", kinds, "--out", str(page)).exit_code == 0
    assert "wishlist &times;3, click &times;1" in page.read_text()


def test_event_weight_names_any_kind(shop, tmp_path):
    db, log = shop
    kinds = with_other_kinds(log, tmp_path)
    base = ["evaluate", "--db", db, "--events", kinds, "--rules", RIGHT, "--resamples", 50, "--json"]
    # A weight of 0 ignores the kind without a warning; the rest is still skipped and counted.
    res = run(*base, "--event-weight", "wishlist=0")
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["skipped_events"] == {"click": 1}
    assert data["events"] == 80
    # A weight above 0 keeps its rows as interactions.
    data = json.loads(run(*base, "--event-weight", "wishlist=2", "--event-weight", "CLICK=0.5").output)
    assert data["skipped_events"] == {} and data["events"] == 84
    res = run("evaluate", "--db", db, "--events", kinds, "--rules", RIGHT, "--resamples", 50,
              "--event-weight", "wishlist=0", "--event-weight", "click=0")
    assert res.exit_code == 0 and "without a weight" not in res.output, res.output


def test_page_to_standard_output_and_the_table_to_stderr(shop):
    db, log = shop
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--out", "-", "--resamples", 20)
    assert res.exit_code == 0, res.output
    assert res.stdout.lstrip().lower().startswith("<!doctype html>") and res.stdout.rstrip().endswith("</html>")
    assert re.search(r"^complementary_only\s+0\.\d{3}\s+0\.\d{3}-", res.stderr, re.M)
    assert not re.search(r"^complementary_only\s+0\.\d{3}", res.stdout, re.M)


def test_report_to_standard_output(shop):
    db, _log = shop
    res = run("report", "--db", db, "--out", "-")
    assert res.exit_code == 0, res.output
    assert res.stdout.lstrip().lower().startswith("<!doctype html>") and res.stdout.rstrip().endswith("</html>")
    assert "<!doctype" not in res.stderr.lower()


def test_blend_rows_are_drawn_as_their_own_kind(shop, tmp_path):
    db, log = shop
    # Another system's list: every sofa with two cushions (any scores will do for the page).
    rows = ["product,partner,score"] + [f"S{i:02d},C{(i + k) % 16:02d},{1.0 - k / 4}" for i in range(16) for k in (0, 1)]
    candidates = tmp_path / "candidates.csv"
    candidates.write_text("\n".join(rows) + "\n")
    out = tmp_path / "page.html"
    res = run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--out", out, "--resamples", 20,
              "--blend", candidates, "--blend-weights", "0,0.5,1")
    assert res.exit_code == 0, res.output
    html = out.read_text()
    charts = html.count('<svg class="chart"')
    assert charts >= 1
    # Three blend bars per chart, styled as blends; the one rules file's bar stays "rules".
    assert html.count('<rect class="blend"') == 3 * charts
    assert html.count('<rect class="rules"') == charts
    assert "blend with another list" in html
    plain = tmp_path / "plain.html"
    assert run("evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--out", plain, "--resamples", 20).exit_code == 0
    assert 'class="blend"' not in plain.read_text() and "blend with another list" not in plain.read_text()


def test_a_weighted_kind_the_log_lacks_is_warned_of(shop, tmp_path):
    # A misspelt kind would otherwise weigh nothing without a word; the closest kind is offered
    # (difflib), else the kinds the log has.
    db, log = shop
    base = ["evaluate", "--db", db, "--events", log, "--rules", RIGHT, "--resamples", 20]
    res = run(*base, "--event-weight", "purchse=4")
    assert res.exit_code == 0, res.output
    assert ("warning: --event-weight purchse: the log has no kept events of that kind (did you mean 'purchase'?)"
            in res.stderr)
    res = run(*base, "--event-weight", "wishlist=2")
    assert "warning: --event-weight wishlist: the log has no kept events of that kind (kinds: " in res.stderr
    assert "--event-weight" not in run(*base, "--event-weight", "view=2").stderr
