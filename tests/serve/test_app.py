"""``harmony serve`` as a site sees it: a real server process on a free loopback port, over HTTP.

The reference for partners, scores and palettes is the library itself, computed in this process
on the same store (the feed, the exact pair score, ``harmony palette --json``): the server must
give the same answers. Request counts are bounded and the server process is always stopped.
"""

import hashlib
import json
import os
import re
import shutil
import sqlite3
import subprocess
import time

import pytest
from conftest import CLI, HELD_BACK, Server, write_catalogue

from harmony.demo.products import CATEGORY_COUNTS  # the demo shop's size
from harmony.resources import DEFAULT_RULES, SHOP_DIR
from harmony.rules import load_rules
from harmony.rules.score import pair_score
from harmony.shop.store import Store
from harmony.suggest.feed_run import build_feed


def _one_sentence(response):
    """A JSON error of one sentence: no traceback, no line break, no file of the server's machine."""
    body = response.json()
    assert set(body) == {"error", "status"} and body["status"] == response.status_code
    text = body["error"]
    assert "\n" not in text and "Traceback" not in text and str(SHOP_DIR) not in text
    assert text.endswith((".", ".)")), text
    return text


@pytest.mark.parametrize("diversity", [0.0, 0.3])
def test_partners_equal_the_feed(server, demo_db, diversity):
    rules = load_rules(DEFAULT_RULES)
    with Store(demo_db, read_only=True) as store:
        rows = build_feed(store, rules, top=5, diversity=diversity)
    feed = {}
    for r in rows:
        feed.setdefault(r.product, []).append((r.partner, r.partner_category, r.rank, r.score, r.reason))
    assert len(feed) > 150
    for pid, want in feed.items():
        got = server.get(f"/v1/products/{pid}/partners", params={"top": 5, "diversity": diversity})
        assert got.status_code == 200
        body = got.json()
        assert body["product"] == pid
        assert not any(p["pinned"] for p in body["partners"])
        assert [(p["partner"], p["category"], p["rank"], p["score"], p["reason"]) for p in body["partners"]] == want


def test_one_category_and_min_score(server, demo_db):
    all_rugs = server.get("/v1/products/SOF-001/partners", params={"category": "Rug", "top": 10}).json()
    assert all_rugs["partner_categories"] == ["rug"] and len(all_rugs["partners"]) == 10
    scores = [p["score"] for p in all_rugs["partners"]]
    assert scores == sorted(scores, reverse=True)
    cut = scores[4]
    kept = server.get("/v1/products/SOF-001/partners", params={"category": "rug", "top": 10, "min_score": cut}).json()
    # Both sides of the threshold: everything at or above it stays, everything below goes.
    assert [p["partner"] for p in kept["partners"]] == [p["partner"] for p in all_rugs["partners"] if p["score"] >= cut]


def test_score_and_palette_equal_the_library(server, demo_db):
    rules = load_rules(DEFAULT_RULES)
    with Store(demo_db, read_only=True) as store:
        a, b = store.palette("SOF-001"), store.palette("RUG-018")
        want = pair_score(a, b, rules.for_pair("sofa", "rug")).to_dict()
        palette_json = a.to_dict(image=store.chosen_images()["SOF-001"])
    got = server.get("/v1/score", params={"a": "SOF-001", "b": "RUG-018"}).json()
    assert got["score"] == want["score"] and got["reason"] == want["reason"]
    assert got["contributions"] == want["contributions"] and got["paired"] is True
    assert server.get("/v1/products/SOF-001/palette").json() == palette_json


def test_room_sets(server):
    body = server.get("/v1/rooms/dining_corner/sets", params={"top": 2}).json()
    assert body["exact"] is True and len(body["bundles"]) == 2
    assert body["bundles"][0]["score"] >= body["bundles"][1]["score"]
    anchored = server.get("/v1/rooms/dining_corner/sets", params={"anchor": "DCH-009", "top": 1, "budget": 3000})
    assert anchored.status_code == 200
    assert "DCH-009" in [item["id"] for item in anchored.json()["bundles"][0]["items"]]


def test_every_openapi_path_answers(server):
    doc = server.get("/openapi.json").json()
    assert doc["openapi"].startswith("3.")
    fill = {"product_id": "SOF-001", "template": "dining_corner"}
    for path, methods in doc["paths"].items():
        url = re.sub(r"\{(\w+)\}", lambda m: fill[m.group(1)], path)
        required = {p["name"]: {"a": "SOF-001", "b": "RUG-018"}[p["name"]]
                    for p in methods["get"].get("parameters", []) if p["in"] == "query" and p["required"]}
        r = server.get(url, params=required)
        assert r.status_code == 200, (path, r.text)
        assert r.headers["content-type"].startswith("application/json")


def test_health_and_categories(server):
    health = server.get("/v1/health").json()
    assert health["products"] == sum(CATEGORY_COUNTS.values()) - len(HELD_BACK) and health["rules_sha256"] and len(health["store_version"]) == 16
    cats = {c["category"]: c for c in server.get("/v1/categories").json()["categories"]}
    assert "rug" in cats["sofa"]["pairs_with"] and "sofa" not in cats["sofa"]["pairs_with"]


@pytest.mark.parametrize("path, status", [
    ("/v1/products/NO-SUCH/partners", 404),
    ("/v1/products/SOF-001/partners?category=rugz", 404),
    ("/v1/products/SOF-001/partners?category=sofa", 400),
    ("/v1/products/SOF-001/partners?top=abc", 400),
    ("/v1/products/SOF-001/partners?top=0", 400),
    ("/v1/products/SOF-001/partners?top=101", 400),
    ("/v1/products/SOF-001/partners?top=5&top=6", 400),
    ("/v1/products/SOF-001/partners?diversity=1.5", 400),
    ("/v1/products/SOF-001/partners?diversity=nan", 400),
    ("/v1/products/SOF-001/partners?min_score=inf", 400),
    ("/v1/products/SOF-001/partners?colour=red", 400),
    ("/v1/products/SOF-001/palette?x=1", 400),
    ("/v1/products/NO-SUCH/similar", 404),
    ("/v1/products/SOF-001/similar?top=0", 400),
    ("/v1/products/SOF-001/similar?top=101", 400),
    ("/v1/products/SOF-001/similar?top=two", 400),
    ("/v1/products/SOF-001/similar?top=2&top=3", 400),
    ("/v1/products/SOF-001/similar?category=rug", 400),
    ("/v1/products/NO-SUCH/palette", 404),
    ("/v1/score?a=SOF-001", 400),
    ("/v1/score?a=SOF-001&b=NOPE", 404),
    ("/v1/rooms/kitchen/sets", 404),
    ("/v1/rooms/..%2F..%2Fetc%2Fpasswd/sets", 404),
    ("/v1/rooms/%2e%2e/sets", 404),
    ("/v1/rooms/dining_corner/sets?budget=-5", 400),
    ("/v1/rooms/dining_corner/sets?budget=1", 400),
    ("/v1/rooms/dining_corner/sets?top=11", 400),
    ("/v1/rooms/dining_corner/sets?time_limit=999", 400),
    ("/v1/rooms/dining_corner/sets?anchor=NOPE", 404),
    ("/v1/rooms/dining_corner/sets?anchor=SOF-001", 400),
    ("/v1/products/..%2F..%2Fshop.db/palette", 404),
    ("/v1/../../etc/passwd", 404),
    ("/nothing/here", 404),
])
def test_bad_requests_get_one_sentence(server, path, status):
    r = server.get(path)
    assert r.status_code == status, r.text
    _one_sentence(r)


def test_methods_bodies_and_sizes_are_limited(server):
    assert server.request("POST", "/v1/health").status_code == 405
    assert server.request("DELETE", "/v1/products/SOF-001/palette").status_code == 405
    with_body = server.request("GET", "/v1/health", content=b"x" * 100)
    assert with_body.status_code == 413
    _one_sentence(with_body)
    long_query = server.get("/v1/products/SOF-001/partners", params={"category": "r" * 2000})
    assert long_query.status_code == 414
    _one_sentence(long_query)
    assert server.get("/v1/products/" + "A" * 600 + "/palette").status_code == 414


def test_cached_answers_are_the_computed_bytes(server):
    """A repeated request is answered from the snapshot's cache of answers by request line: the same
    bytes and headers as the computed answer, under the same limits (a body is still refused)."""
    path = "/v1/products/SOF-002/partners?category=floor%20lamp&top=7&diversity=0.2"
    first, second = server.get(path), server.get(path)
    assert first.status_code == second.status_code == 200 and first.content == second.content
    for name in ("content-type", "content-length"):
        assert first.headers[name] == second.headers[name]
    # Another spelling of the same question (category case) is the same answer.
    assert server.get(path.replace("floor%20lamp", "Floor+Lamp")).content == first.content
    head = server.request("HEAD", path)
    assert head.status_code == 200 and head.content == b"" and head.headers["content-length"] == first.headers["content-length"]
    refused = server.request("GET", path, content=b"x")
    assert refused.status_code == 413
    _one_sentence(refused)


def _flock_held(path):
    """Whether some process holds a flock on ``path`` (Linux: /proc/locks lists device:inode)."""
    inode = os.stat(path).st_ino
    with open("/proc/locks", encoding="ascii") as fh:
        return any(re.search(rf"\bFLOCK\s+ADVISORY\s+WRITE\s+\d+\s+[0-9a-f]+:[0-9a-f]+:{inode}\s", line)
                   for line in fh)


@pytest.mark.skipif(not os.path.exists("/proc/locks"), reason="needs Linux /proc/locks to see the writer lock")
def test_new_products_are_answered_while_a_second_extract_is_refused(demo_db, tmp_path):
    """An extract adds the held-back products while the server runs; the new products are answered
    without a restart. The test holds SQLite's write lock of the store, so the extract waits inside
    its writer lock until the test lets go: a second extract tried in that moment must be refused."""
    db = tmp_path / "live.db"
    shutil.copy(demo_db, db)
    lock_file = db.with_name(db.name + ".lock")
    lock_file.touch()
    catalogue = tmp_path / "catalogue.csv"
    write_catalogue(catalogue)
    with Store(db, read_only=True) as store:
        sofa_ids = [p.id for p in store.products("sofa")]
    srv = Server(db)
    first = None
    holder = sqlite3.connect(db, isolation_level=None, timeout=60)
    try:
        assert srv.get("/v1/products/RUG-003/partners").status_code == 404
        # Every sofa's rug list is cached in the first snapshot (the second request is answered from
        # the cache of answers by request line); after the reload the same requests see the new rug.
        for sid in sofa_ids:
            a, b = (srv.get(f"/v1/products/{sid}/partners", params={"category": "rug", "top": 100}) for _ in range(2))
            assert a.status_code == 200 and a.content == b.content and "RUG-003" not in a.text
        holder.execute("BEGIN IMMEDIATE")
        first = subprocess.Popen([*CLI, "extract", str(catalogue), "--db", str(db), "--workers", "1"],
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        deadline = time.monotonic() + 120
        while not _flock_held(lock_file):
            assert first.poll() is None, first.communicate()
            assert time.monotonic() < deadline, "the first extract never took its writer lock"
            time.sleep(0.05)
        second = subprocess.run([*CLI, "extract", str(catalogue), "--db", str(db)], capture_output=True,
                                text=True, timeout=300)
        assert second.returncode == 2 and "another extract" in second.stderr, second.stderr
        assert srv.get("/v1/health").status_code == 200
        holder.execute("ROLLBACK")
        out, err = first.communicate(timeout=600)
        assert first.returncode == 0, err
        deadline = time.monotonic() + 60
        while True:
            r = srv.get("/v1/products/RUG-003/partners", params={"category": "sofa", "top": 3})
            if r.status_code == 200:
                break
            assert time.monotonic() < deadline, f"the new product was not answered within 60 s: {r.text}"
            time.sleep(0.25)
        assert len(r.json()["partners"]) == 3
        # The new rug is also a partner now: some sofa's full rug list contains it.
        sofas = [p["partner"] for p in srv.get("/v1/products/RUG-003/partners",
                                                params={"category": "sofa", "top": 100}).json()["partners"]]
        listed = [p["partner"] for p in srv.get(f"/v1/products/{sofas[0]}/partners",
                                                params={"category": "rug", "top": 100}).json()["partners"]]
        assert "RUG-003" in listed
        assert srv.get("/v1/health").json()["products"] == sum(CATEGORY_COUNTS.values())
        assert srv.get("/v1/products/CSH-004/palette").status_code == 200
    finally:
        holder.close()
        if first is not None and first.poll() is None:
            first.kill()
            first.wait()
        log = srv.stop()
    assert "Traceback" not in log


# ------------------------------------------------------------------ curation and look-alikes

DEMO_CURATION = SHOP_DIR / "curation.toml"


@pytest.fixture(scope="module")
def full_db(demo_db, tmp_path_factory):
    """The demo store with the held-back products added (the demo curation pins one of them)."""
    folder = tmp_path_factory.mktemp("full")
    db = folder / "shop.db"
    shutil.copy(demo_db, db)
    catalogue = folder / "catalogue.csv"
    write_catalogue(catalogue)
    done = subprocess.run([*CLI, "extract", str(catalogue), "--db", str(db), "--workers", "1"],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return db


@pytest.fixture(scope="module")
def curated_server(full_db):
    srv = Server(full_db, "--curation", str(DEMO_CURATION))
    try:
        yield srv
    finally:
        log = srv.stop()
        assert "Traceback" not in log


def _by_product(rows):
    out = {}
    for r in rows:
        out.setdefault(r.product, []).append((r.partner, r.partner_category, r.rank, r.score, r.reason, r.pinned))
    return out


@pytest.mark.parametrize("diversity", [0.0, 0.3])
def test_curated_partners_equal_the_curated_feed(curated_server, full_db, diversity):
    from harmony.suggest.curation import load_curation

    rules = load_rules(DEFAULT_RULES)
    curation = load_curation(DEMO_CURATION)
    with Store(full_db, read_only=True) as store:
        curated = _by_product(build_feed(store, rules, top=5, diversity=diversity, curation=curation))
        plain = _by_product(build_feed(store, rules, top=5, diversity=diversity))
        ids = [p.id for p in store.products() if store.palette(p.id) is not None]
    assert len(ids) == sum(CATEGORY_COUNTS.values())
    for pid in ids:
        got = curated_server.get(f"/v1/products/{pid}/partners", params={"top": 5, "diversity": diversity})
        assert got.status_code == 200, got.text
        rows = [(p["partner"], p["category"], p["rank"], p["score"], p["reason"], p["pinned"])
                for p in got.json()["partners"]]
        assert rows == curated.get(pid, []), pid
    # The curation acted (so the equality above is not that of two plain feeds): the pin is first
    # and marked, the blocked pair and categories are gone, at most five categories remain.
    first_rug = [r for r in curated["SOF-001"] if r[1] == "rug"][0]
    assert first_rug[:3] == ("RUG-003", "rug", 1) and first_rug[5] is True
    assert [r for r in plain["SOF-001"] if r[1] == "rug"][0][0] != "RUG-003"
    assert "RUG-008" in [r[0] for r in plain["SOF-002"]] and "RUG-008" not in [r[0] for r in curated["SOF-002"]]
    assert {"bed", "cushion", "armchair"} & {r[1] for r in plain["DSK-001"]}
    assert not {"bed", "cushion", "armchair"} & {r[1] for r in curated.get("DSK-001", [])}
    assert max(len({r[1] for r in rows}) for rows in plain.values()) > 5
    assert max(len({r[1] for r in rows}) for rows in curated.values()) == 5
    # Sofa-rug rows under the pair's floor 0.55 go, unless pinned; other rows under 0.40 go.
    for pid, rows in curated.items():
        for partner, cat, _rank, score, _reason, pinned in rows:
            assert pinned or score >= (0.55 if {pid[:3], cat} == {"SOF", "rug"} else 0.40)
    assert min(r[3] for rows in plain.values() for r in rows) < 0.40  # the floor has something to remove


def test_curated_server_reports_the_file_and_refuses_blocked_pairs(curated_server):
    health = curated_server.get("/v1/health").json()
    assert health["curation_sha256"] == hashlib.sha256(DEMO_CURATION.read_bytes()).hexdigest()
    blocked = curated_server.get("/v1/products/DSK-001/partners", params={"category": "cushion"})
    assert blocked.status_code == 400 and "curation" in _one_sentence(blocked)
    one = curated_server.get("/v1/products/SOF-001/partners", params={"category": "rug", "top": 3}).json()
    assert one["partners"][0]["partner"] == "RUG-003" and one["partners"][0]["pinned"] is True


def _wait_for_health(srv, key, value, seconds=60):
    """/v1/health once its ``key`` equals ``value`` (the watcher looks every half second)."""
    deadline = time.monotonic() + seconds
    while True:
        health = srv.get("/v1/health").json()
        if health[key] == value:
            return health
        assert time.monotonic() < deadline, f"{key} did not become {value!r} within {seconds} s: {health}"
        time.sleep(0.25)


def test_a_stylists_edit_reaches_the_running_server(full_db, tmp_path):
    """The curation file is edited while the server runs: a broken edit is named in /v1/health and
    changes nothing; a good one is answered without a restart, cached answers included."""
    cur = tmp_path / "curation.toml"
    shutil.copy(DEMO_CURATION, cur)
    srv = Server(full_db, "--curation", str(cur))
    try:
        ask = {"category": "rug", "top": 3}
        first = [srv.get("/v1/products/SOF-001/partners", params=ask) for _ in range(2)]
        assert first[0].content == first[1].content  # the second is a cached answer
        assert first[0].json()["partners"][0]["partner"] == "RUG-003"
        text = cur.read_text(encoding="utf-8")
        broken = cur.with_name("broken.toml")
        broken.write_text(text.replace('partner = "RUG-003"', 'partner = "RUG-003"\nrank = "first"'), encoding="utf-8")
        broken.replace(cur)
        health = srv.get("/v1/health").json()
        deadline = time.monotonic() + 60
        while not health["reload_errors"]:
            assert time.monotonic() < deadline, health
            time.sleep(0.25)
            health = srv.get("/v1/health").json()
        assert len(health["reload_errors"]) == 1 and health["reload_errors"][0].startswith("curation.toml:")
        assert health["curation_sha256"] == hashlib.sha256(DEMO_CURATION.read_bytes()).hexdigest()
        assert srv.get("/v1/products/SOF-001/partners", params=ask).content == first[0].content
        # The stylist moves the pin to another rug.
        edited = text.replace('partner = "RUG-003"', 'partner = "RUG-005"')
        cur.write_text(edited, encoding="utf-8")
        health = _wait_for_health(srv, "curation_sha256", hashlib.sha256(edited.encode()).hexdigest())
        assert health["reload_errors"] == []
        now = srv.get("/v1/products/SOF-001/partners", params=ask).json()["partners"]
        assert now[0]["partner"] == "RUG-005" and now[0]["pinned"] is True
        assert "RUG-003" not in [p["partner"] for p in now if p["pinned"]]
    finally:
        log = srv.stop()
    assert "Traceback" not in log
    assert "curation file not reloaded" in log and "curation file reloaded" in log


def test_uncurated_health_has_no_curation_hash(server):
    assert server.get("/v1/health").json()["curation_sha256"] is None


def _feed_similar(db, tmp_path, top):
    """``harmony feed --similar`` rows of the look-alike relation, by product."""
    out = tmp_path / "feed.jsonl"
    done = subprocess.run([*CLI, "feed", "--db", str(db), "--top", str(top), "--similar", "--out", str(out)],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    found = {}
    for line in out.read_text(encoding="utf-8").splitlines():
        row = json.loads(line)
        if row["relation"] == "similar":
            found.setdefault(row["product"], []).append(row)
    return found


def test_similar_equals_the_feeds_look_alikes(server, demo_db, tmp_path):
    want = _feed_similar(demo_db, tmp_path, 4)
    assert len(want) > 150
    for pid in sorted(want)[::7]:
        got = server.get(f"/v1/products/{pid}/similar", params={"top": 4})
        assert got.status_code == 200, got.text
        body = got.json()
        assert body["product"] == pid and body["category"] == want[pid][0]["category"]
        assert [(s["partner"], s["category"], s["rank"]) for s in body["similar"]] == \
            [(r["partner"], r["partner_category"], r["rank"]) for r in want[pid]]
        # The feed solves each pair once, in one direction; the EMD is symmetric up to rounding.
        assert [s["score"] for s in body["similar"]] == pytest.approx([r["score"] for r in want[pid]],
                                                                       rel=1e-9, abs=1e-12)
        assert [s["reason"] for s in body["similar"]] == [r["reason"] for r in want[pid]]
    default = server.get("/v1/products/SOF-001/similar").json()["similar"]
    assert len(default) == 10 and [s["rank"] for s in default] == list(range(1, 11))
