"""Tests of harmony.shop.store with palettes built directly (no extraction involved)."""

import hashlib
import sqlite3

import numpy as np
import pytest

from harmony.errors import StoreError
from harmony.photo.palette import Palette
from harmony.shop.catalogue import Catalogue, Product
from harmony.shop.store import SCENE_CONFIDENCE, SCHEMA_VERSION, FileHash, Store


def _palette(rng, k=3, scene=False, confidence=1.0, sha="", bg=True):
    jab = rng.uniform([10, -30, -30], [90, 30, 30], size=(k, 3))
    weights = rng.dirichlet(np.ones(k))
    return Palette(
        jab=jab, weights=weights, sha256=sha, width=40, height=30,
        background_jab=rng.uniform(0, 50, 3) if bg else None, background_share=0.25,
        scene=scene, confidence=confidence,
    )


def _catalogue(tmp_path, rows):
    """rows: (id, category, [image names]); each image file holds its own name as bytes."""
    products = []
    for pid, category, images in rows:
        for name in images:
            (tmp_path / name).write_bytes(name.encode())
        products.append(Product(id=pid, category=category, price=10.0, images=tuple(images)))
    cat = Catalogue(tuple(products), (), (tmp_path / "c.csv").resolve())
    hashes = {}
    for product in products:
        for name in product.images:
            path = str(cat.image_path(name))
            hashes[path] = FileHash(path, hashlib.sha256(name.encode()).hexdigest(), len(name), 0)
    return cat, hashes


def _sha(name):
    return hashlib.sha256(name.encode()).hexdigest()


def test_missing_store_and_creation(tmp_path):
    with pytest.raises(StoreError, match=r"x\.db: no palette store here"):
        Store(tmp_path / "x.db")
    with Store.create(tmp_path / "x.db") as store:
        assert len(store) == 0 and store.settings_key == "" and store.catalogue_path is None
    # SQLite documentation, "PRAGMA journal_mode": the mode persists in the file and reads 'wal'.
    with sqlite3.connect(tmp_path / "x.db") as db:
        assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    with Store(tmp_path / "x.db") as store:
        assert store.integrity() == "ok"


def test_schema_version_mismatch_and_foreign_files(tmp_path):
    Store.create(tmp_path / "x.db").close()
    with sqlite3.connect(tmp_path / "x.db") as db:
        db.execute("UPDATE schema_version SET version = ?", (SCHEMA_VERSION + 1,))
    with pytest.raises(StoreError, match=rf"store schema version {SCHEMA_VERSION + 1}, this harmony reads version {SCHEMA_VERSION}"):
        Store(tmp_path / "x.db")
    (tmp_path / "text.db").write_text("hello, I am not a database" * 100)
    with pytest.raises(StoreError, match=r"text\.db: not a palette store"):
        Store(tmp_path / "text.db")
    with sqlite3.connect(tmp_path / "other.db") as db:
        db.execute("CREATE TABLE t (x)")
    with pytest.raises(StoreError, match=r"other\.db: an SQLite file, but not a palette store"):
        Store(tmp_path / "other.db")
    with pytest.raises(StoreError, match="is a folder"):
        Store(tmp_path)


def test_products_categories_and_lookup(tmp_path):
    cat, hashes = _catalogue(tmp_path, [("S-2", "Sofa", ["a.jpg"]), ("S-1", " sofa", ["b.jpg"]), ("R-1", "Rug", ["a.jpg"])])
    with Store.create(tmp_path / "x.db") as store:
        store.sync_catalogue(cat, hashes, "k1")
        assert [p.id for p in store.products()] == ["R-1", "S-1", "S-2"]
        assert [p.id for p in store.products("SOFA")] == ["S-1", "S-2"]
        assert store.categories() == ["rug", "sofa"]
        assert store.product("S-2") == cat.products[0]
        assert store.catalogue_path == cat.path and store.settings_key == "k1"
        with pytest.raises(StoreError, match=r"unknown product id 'S-3' \(did you mean 'S-2', 'S-1'\?\)"):
            store.product("S-3")
        with pytest.raises(StoreError, match=r"unknown product id 'zzz'$"):
            store.palette("zzz")
        assert store.counts()["images"] == 2  # a.jpg is shared, stored once by content hash


def test_palettes_round_trip_exactly(tmp_path):
    rng = np.random.default_rng(4)
    cat, hashes = _catalogue(tmp_path, [("A", "Sofa", ["a.jpg"]), ("B", "Rug", ["b.jpg"]), ("C", "Rug", ["c.jpg"])])
    with Store.create(tmp_path / "x.db") as store:
        store.sync_catalogue(cat, hashes, "k1")
        pa, pb = _palette(rng, k=4, sha=_sha("a.jpg")), _palette(rng, k=2, bg=False, sha=_sha("b.jpg"))
        store.record([(_sha("a.jpg"), pa, None), (_sha("b.jpg"), pb, None), (_sha("c.jpg"), None, "c.jpg: no product left")], "k1")
        got = store.palette("A")
        assert np.array_equal(got.jab, pa.jab) and np.array_equal(got.weights, pa.weights)
        assert np.array_equal(got.background_jab, pa.background_jab) and got.background_share == 0.25
        assert (got.width, got.height, got.sha256, got.scene) == (40, 30, _sha("a.jpg"), False)
        assert got.source == str(tmp_path.resolve() / "a.jpg")
        assert store.palette("B").background_jab is None
        assert store.palette("C") is None
        assert sorted(store.palettes()) == ["A", "B"] and sorted(store.palettes("rug")) == ["B"]
        assert store.image_path("A") == tmp_path.resolve() / "a.jpg" and store.image_path("C") is None
        assert store.failures() == [("C", "c.jpg", "c.jpg: no product left")]
        # A later palette replaces the failure.
        store.record([(_sha("c.jpg"), _palette(rng, sha=_sha("c.jpg")), None)], "k1")
        assert store.failures() == [] and store.counts()["failures"] == 0


def test_chosen_palette_prefers_first_studio_image(tmp_path):
    rng = np.random.default_rng(5)
    cat, hashes = _catalogue(
        tmp_path,
        [
            ("A", "Sofa", ["scene.jpg", "studio1.jpg", "studio2.jpg"]),
            ("B", "Sofa", ["scene.jpg", "broken.jpg"]),
            ("C", "Sofa", ["studio2.jpg", "studio1.jpg"]),
        ],
    )
    scene = _palette(rng, scene=True, confidence=0.9, bg=False)
    s1, s2 = _palette(rng), _palette(rng)
    with Store.create(tmp_path / "x.db") as store:
        store.sync_catalogue(cat, hashes, "k1")
        store.record(
            [(_sha("scene.jpg"), scene, None), (_sha("studio1.jpg"), s1, None), (_sha("studio2.jpg"), s2, None),
             (_sha("broken.jpg"), None, "cannot decode")],
            "k1",
        )
        assert np.array_equal(store.palette("A").jab, s1.jab)
        assert np.array_equal(store.palette("C").jab, s2.jab)
        b = store.palette("B")
        assert b.scene and np.array_equal(b.jab, scene.jab) and b.confidence == SCENE_CONFIDENCE
        assert store.scene_only() == ["B"]
        assert store.coverage() == (3, 1)
        assert store.chosen_images() == {"A": "studio1.jpg", "B": "scene.jpg", "C": "studio2.jpg"}


def test_resync_removes_products_and_unused_images(tmp_path):
    rng = np.random.default_rng(6)
    cat, hashes = _catalogue(tmp_path, [("A", "Sofa", ["a.jpg"]), ("B", "Rug", ["b.jpg"])])
    with Store.create(tmp_path / "x.db") as store:
        assert store.sync_catalogue(cat, hashes, "k1") == 0
        store.record([(_sha("a.jpg"), _palette(rng), None), (_sha("b.jpg"), None, "bad")], "k1")
        assert store.done("k1") == {_sha("a.jpg"), _sha("b.jpg")} and store.done("k2") == set()
        smaller, hashes2 = _catalogue(tmp_path, [("A", "Sofa", ["a.jpg"])])
        assert store.sync_catalogue(smaller, hashes2, "k1") == 1  # B went
        assert [p.id for p in store.products()] == ["A"]
        assert store.counts() == {"products": 1, "images": 1, "palettes": 1, "failures": 0}
        # Another settings key: the old palette stays cached but is not the chosen one.
        assert store.sync_catalogue(smaller, hashes2, "k2") == 0
        assert store.palette("A") is None and store.counts()["palettes"] == 1


def test_unreadable_image_is_a_failure(tmp_path):
    cat, hashes = _catalogue(tmp_path, [("A", "Sofa", ["a.jpg"])])
    path = str(cat.image_path("a.jpg"))
    hashes[path] = FileHash(path, None, error="a.jpg: cannot read: Permission denied")
    with Store.create(tmp_path / "x.db") as store:
        store.sync_catalogue(cat, hashes, "k1")
        assert store.failures() == [("A", "a.jpg", "a.jpg: cannot read: Permission denied")]
        assert store.file_hashes() == {}


# -- harmony palettes: the export ---------------------------------------------------------------


def _stored(tmp_path):
    rng = np.random.default_rng(8)
    cat, hashes = _catalogue(tmp_path, [("A", "Sofa", ["a.jpg"]), ("B", "Rug", ["room-b.jpg", "b.jpg"]), ("C", "Rug", ["c.jpg"])])
    pals = {"A": _palette(rng, k=3), "B": _palette(rng, k=5, bg=False)}
    with Store.create(tmp_path / "x.db") as store:
        store.sync_catalogue(cat, hashes, "k1")
        store.record([(_sha("a.jpg"), pals["A"], None), (_sha("b.jpg"), pals["B"], None)], "k1")
    return pals


def test_cli_palettes_jsonl_round_trips(tmp_path):
    import json

    from click.testing import CliRunner

    from harmony.cli import main

    pals = _stored(tmp_path)
    result = CliRunner().invoke(main, ["palettes", "--db", str(tmp_path / "x.db")])
    assert result.exit_code == 0
    lines = [json.loads(line) for line in result.stdout.splitlines()]
    assert [(r["product"], r["category"], r["image"]) for r in lines] == [("A", "Sofa", "a.jpg"), ("B", "Rug", "b.jpg")]
    for record in lines:
        back = Palette.from_dict(record)
        # Python's json writes floats with repr, which reads back to the same double.
        assert np.array_equal(back.jab, pals[record["product"]].jab)
        assert np.array_equal(back.weights, pals[record["product"]].weights)
    assert "note: 1 product(s) without a palette left out" in result.stderr


def test_cli_palettes_csv_file(tmp_path):
    import csv

    from click.testing import CliRunner

    from harmony.cli import main
    from harmony.cli.extract_cmd import PALETTE_CSV_COLUMNS

    pals = _stored(tmp_path)
    out = tmp_path / "p.csv"
    result = CliRunner().invoke(main, ["palettes", "--db", str(tmp_path / "x.db"), "--out", str(out)])
    assert result.exit_code == 0 and result.stdout == ""
    with open(out, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert tuple(rows[0]) == PALETTE_CSV_COLUMNS and len(rows) == 3 + 5
    a = [r for r in rows if r["product"] == "A"]
    assert [int(r["rank"]) for r in a] == [1, 2, 3]
    assert np.array_equal([[float(r["J"]), float(r["a"]), float(r["b"])] for r in a], pals["A"].jab)
    assert sum(float(r["share"]) for r in a) == pytest.approx(1.0)
    same = CliRunner().invoke(main, ["palettes", "--db", str(tmp_path / "x.db"), "--format", "jsonl", "--out", str(out)])
    assert same.exit_code == 0 and out.read_text().startswith('{"product":"A"')


def test_cli_palettes_errors(tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main

    runner = CliRunner()
    missing = runner.invoke(main, ["palettes", "--db", str(tmp_path / "none.db")])
    assert missing.exit_code == 2 and "none.db: no palette store here" in missing.stderr
    _stored(tmp_path)
    # A missing folder is made; a folder that is really a file cannot be.
    made = runner.invoke(main, ["palettes", "--db", str(tmp_path / "x.db"), "--out", str(tmp_path / "new" / "p.csv")])
    assert made.exit_code == 0 and (tmp_path / "new" / "p.csv").read_text()
    bad = runner.invoke(main, ["palettes", "--db", str(tmp_path / "x.db"), "--out", str(tmp_path / "x.db" / "p.csv")])
    assert bad.exit_code == 2 and "p.csv: cannot write the palette export" in bad.stderr
    assert "Traceback" not in bad.output
    wrong = runner.invoke(main, ["palettes", "--db", str(tmp_path / "x.db"), "--format", "xml"])
    assert wrong.exit_code == 2 and "Invalid value for '--format'" in wrong.stderr


@pytest.mark.parametrize("content", [b"x", b"id,category\n", b"SQLite format 2\x00" + b"\x00" * 100])
def test_a_foreign_file_is_never_turned_into_a_store(tmp_path, content):
    # SQLite would happily write its schema over a short non-database file; the store refuses.
    path = tmp_path / "notes.db"
    path.write_bytes(content)
    for create in (False, True):
        with pytest.raises(StoreError, match="not a palette store .not an SQLite file.; left untouched"):
            Store(path, create=create)
    assert path.read_bytes() == content


def test_an_empty_file_is_only_made_a_store_when_asked(tmp_path):
    path = tmp_path / "new.db"
    path.write_bytes(b"")
    with pytest.raises(StoreError, match="an empty file, not a palette store"):
        Store(path)
    assert path.read_bytes() == b""
    with Store(path, create=True) as store:
        assert store.products() == []


def test_schema_is_made_once_when_another_process_made_it_first(tmp_path, monkeypatch):
    # The interleaving of two runs on a new file: this one looked before the other committed
    # the schema (saw no tables), the other then made it. The look inside the write lock must
    # find the tables and leave them alone (one version row, no "already exists" error).
    Store.create(tmp_path / "x.db").close()
    real = Store._tables
    calls = []

    def stale_first_look(self):
        calls.append(1)
        return set() if len(calls) == 1 else real(self)

    monkeypatch.setattr(Store, "_tables", stale_first_look)
    with Store.create(tmp_path / "x.db") as store:
        assert store.integrity() == "ok"
    assert len(calls) == 2
    with sqlite3.connect(tmp_path / "x.db") as db:
        assert db.execute("SELECT version FROM schema_version").fetchall() == [(SCHEMA_VERSION,)]


def test_many_connections_creating_one_new_store_at_once(tmp_path):
    import threading

    path = tmp_path / "new.db"
    barrier = threading.Barrier(6)
    errors = []

    def make():
        barrier.wait()
        try:
            Store.create(path).close()
        except StoreError as exc:
            errors.append(str(exc))

    threads = [threading.Thread(target=make) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=30)
    assert errors == []
    with sqlite3.connect(path) as db:
        assert db.execute("SELECT version FROM schema_version").fetchall() == [(SCHEMA_VERSION,)]
