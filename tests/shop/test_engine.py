"""Tests of harmony.shop.engine: incremental runs, failures, SIGKILL safety, Dask equals local.

Most tests use a small stand-in extractor defined here (quadrant means of the image, converted
with harmony.colour) so they exercise the engine's bookkeeping quickly and deterministically;
``test_real_extractor_dask_equals_local`` runs the project's own extractor.
"""

import dataclasses
import hashlib
import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from harmony import colour
from harmony.errors import CatalogueError, HarmonyError, ImageError, StoreError
from harmony.photo.palette import Palette
from harmony.shop.catalogue import read_catalogue
from harmony.shop.engine import extract_chunk, hash_images, plan_chunks, run_extraction
from harmony.shop.store import Store

TESTS = Path(__file__).parent


@dataclasses.dataclass(frozen=True)
class QuadSettings:
    """Settings of the stand-in extractor; ``delay`` (seconds per image) is not part of the key."""

    key: str = "quad-1"
    delay: float = 0.0


def quad_extract(path, settings):
    """Stand-in extractor: the four quadrant means as a 4-colour palette, equal weights."""
    if settings.delay:
        time.sleep(settings.delay)
    data = Path(path).read_bytes()
    try:
        with Image.open(path) as img:
            rgb = np.asarray(img.convert("RGB"), dtype=float) / 255.0
    except Exception as exc:
        raise ImageError(f"{path}: cannot decode: {exc}") from None
    h, w = rgb.shape[0] // 2, rgb.shape[1] // 2
    means = [rgb[:h, :w], rgb[:h, w:], rgb[h:, :w], rgb[h:, w:]]
    srgb1 = np.array([m.reshape(-1, 3).mean(axis=0) for m in means])
    scene = "scene" in Path(path).name
    return Palette(
        jab=colour.srgb1_to_jab(srgb1), weights=np.full(4, 0.25), sha256=hashlib.sha256(data).hexdigest(),
        width=rgb.shape[1], height=rgb.shape[0], scene=scene, confidence=0.3 if scene else 1.0, source=str(path),
    )


def _shop(tmp_path, n=6, rng=None, extra_rows=()):
    """An invented catalogue of n products with one random 16x16 PNG each."""
    rng = rng or np.random.default_rng(0)
    (tmp_path / "img").mkdir(exist_ok=True)
    lines = ["id,category,price,image"]
    for i in range(n):
        pixels = rng.integers(0, 256, size=(16, 16, 3), dtype=np.uint8)
        Image.fromarray(pixels).save(tmp_path / "img" / f"p{i}.png")
        lines.append(f"P{i:03d},{'sofa' if i % 2 else 'rug'},{10 + i},img/p{i}.png")
    lines.extend(extra_rows)
    (tmp_path / "shop.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return tmp_path / "shop.csv"


def _run(csv, db, **kw):
    kw.setdefault("workers", 1)
    kw.setdefault("settings", QuadSettings())
    kw.setdefault("extractor", quad_extract)
    kw.setdefault("progress", False)
    return run_extraction(csv, db, **kw)


def _as_arrays(palettes):
    return {pid: (p.jab.tobytes(), p.weights.tobytes(), p.scene, p.confidence) for pid, p in palettes.items()}


def test_first_run_then_nothing_to_do(tmp_path):
    csv = _shop(tmp_path, n=6)
    first = _run(csv, tmp_path / "s.db", workers=2)
    assert (first.products, first.images, first.new, first.cached, first.failed) == (6, 6, 6, 0, 0)
    again = _run(csv, tmp_path / "s.db")
    assert (again.new, again.cached, again.failed) == (0, 6, 0)
    with Store(tmp_path / "s.db") as store:
        assert store.counts() == {"products": 6, "images": 6, "palettes": 6, "failures": 0}
        want = quad_extract(tmp_path / "img" / "p3.png", QuadSettings())
        assert np.array_equal(store.palette("P003").jab, want.jab)


def test_default_store_path_is_beside_the_catalogue(tmp_path):
    csv = _shop(tmp_path, n=1)
    summary = run_extraction(csv, settings=QuadSettings(), extractor=quad_extract, workers=1, progress=False)
    assert summary.db_path == tmp_path / "harmony.db" and (tmp_path / "harmony.db").is_file()


def test_changed_image_changed_settings_removed_product(tmp_path):
    csv = _shop(tmp_path, n=4)
    _run(csv, tmp_path / "s.db")
    Image.new("RGB", (16, 16), (200, 30, 30)).save(tmp_path / "img" / "p1.png")
    changed = _run(csv, tmp_path / "s.db")
    assert (changed.new, changed.cached) == (1, 3)
    other = _run(csv, tmp_path / "s.db", settings=QuadSettings(key="quad-2"))
    assert (other.new, other.cached) == (4, 0)
    back = _run(csv, tmp_path / "s.db")  # the first settings' palettes are still cached
    assert (back.new, back.cached) == (0, 4)
    lines = csv.read_text().splitlines()
    csv.write_text("\n".join(lines[:3]) + "\n")  # keep P000 and P001
    smaller = _run(csv, tmp_path / "s.db", max_removal=1.0)  # half the products go, on purpose
    assert (smaller.products, smaller.new) == (2, 0)
    with Store(tmp_path / "s.db") as store:
        assert [p.id for p in store.products()] == ["P000", "P001"]
        assert store.counts()["images"] == 2 and store.counts()["palettes"] == 4  # 2 images x 2 keys
        red = colour.srgb1_to_jab(np.array([200, 30, 30]) / 255.0)
        assert np.allclose(store.palette("P001").jab, red)


def test_shared_image_extracted_once_and_scene_only(tmp_path):
    csv = _shop(tmp_path, n=2)
    Image.new("RGB", (16, 16), (90, 90, 90)).save(tmp_path / "img" / "room-scene.png")
    with open(csv, "a") as f:
        f.write("X1,lamp,5,img/room-scene.png|img/p0.png\nX2,lamp,5,img/room-scene.png\n")
    summary = _run(csv, tmp_path / "s.db")
    assert (summary.products, summary.images, summary.new, summary.scene_only) == (4, 3, 3, 1)
    with Store(tmp_path / "s.db") as store:
        assert store.scene_only() == ["X2"]
        assert store.chosen_images()["X1"] == "img/p0.png"  # the studio image wins over the scene
        assert store.palette("X2").confidence == 0.3


def test_failures_are_recorded_and_never_stop_the_run(tmp_path):
    csv = _shop(tmp_path, n=3)
    (tmp_path / "img" / "broken.png").write_bytes(b"not an image at all")
    with open(csv, "a") as f:
        f.write("B1,rug,5,img/broken.png\n")
    summary = _run(csv, tmp_path / "s.db", chunk_size=1)
    assert (summary.new, summary.failed, summary.no_palette) == (3, 1, 1)
    with Store(tmp_path / "s.db") as store:
        [(pid, image, reason)] = store.failures()
        assert (pid, image) == ("B1", "img/broken.png") and "broken.png: cannot decode" in reason
    again = _run(csv, tmp_path / "s.db")  # a recorded failure of the same bytes is not retried
    assert (again.new, again.failed, again.cached) == (0, 0, 4)


def test_unexpected_exceptions_become_failures(tmp_path):
    def boom(path, settings):
        raise RuntimeError("worker fell over")

    (tmp_path / "a.png").write_bytes(b"x")
    [(sha, palette, reason)] = extract_chunk([("abc", str(tmp_path / "a.png"))], QuadSettings(), boom)
    assert palette is None and reason.endswith("a.png: RuntimeError: worker fell over")


def test_file_changed_between_hash_and_extraction(tmp_path):
    _shop(tmp_path, n=1)  # writes img/p0.png
    path = str(tmp_path / "img" / "p0.png")
    [(sha, palette, reason)] = extract_chunk([("0" * 64, path)], QuadSettings(), quad_extract)
    assert palette is None and "file changed during the run" in reason


def test_hash_matches_hashlib_and_stat_cache(tmp_path):
    csv = _shop(tmp_path, n=2)
    cat = read_catalogue(csv)
    hashes = hash_images(cat)
    path = str((tmp_path / "img" / "p0.png").resolve())
    # Reference: hashlib.sha256 over the whole file (FIPS 180-4 SHA-256).
    assert hashes[path].sha256 == hashlib.sha256(Path(path).read_bytes()).hexdigest()
    fake = {path: dataclasses.replace(hashes[path], sha256="f" * 64)}
    assert hash_images(cat, fake)[path].sha256 == "f" * 64  # same size and mtime: reused
    os.utime(path, ns=(1, 1))
    assert hash_images(cat, fake)[path].sha256 == hashes[path].sha256  # touched: hashed again


def test_plan_chunks():
    assert plan_chunks([], 2) == []
    assert [len(c) for c in plan_chunks(range(10), 1)] == [3, 3, 3, 1]
    assert [len(c) for c in plan_chunks(range(1000), 2)] == [32] * 31 + [8]
    assert sum(plan_chunks(range(7), 2, chunk_size=3), []) == list(range(7))
    with pytest.raises(HarmonyError, match="chunk size must be at least 1, got 0"):
        plan_chunks(range(3), 1, chunk_size=0)


def test_bad_arguments_and_all_rows_bad(tmp_path):
    csv = _shop(tmp_path, n=1)
    with pytest.raises(HarmonyError, match="unknown engine 'spark'"):
        _run(csv, tmp_path / "s.db", engine="spark")
    with pytest.raises(HarmonyError, match="workers must be a whole number of at least 1, got 0"):
        _run(csv, tmp_path / "s.db", workers=0)
    _run(csv, tmp_path / "s.db")
    csv.write_text("id,category,price,image\nP000,rug,-1,img/p0.png\n")
    with pytest.raises(CatalogueError, match=r"shop\.csv: no valid product .*store left unchanged"):
        _run(csv, tmp_path / "s.db")
    with Store(tmp_path / "s.db") as store:
        assert len(store) == 1


def test_dask_in_process_cluster_equals_local(tmp_path):
    distributed = pytest.importorskip("distributed")
    csv = _shop(tmp_path, n=8, rng=np.random.default_rng(11))
    local = _run(csv, tmp_path / "local.db", workers=2, chunk_size=3)
    with distributed.LocalCluster(
        processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None
    ) as cluster:
        dask = _run(csv, tmp_path / "dask.db", engine="dask", scheduler=cluster.scheduler_address, chunk_size=3)
    assert (local.new, dask.new, dask.engine) == (8, 8, "dask")
    with Store(tmp_path / "local.db") as a, Store(tmp_path / "dask.db") as b:
        assert _as_arrays(a.palettes()) == _as_arrays(b.palettes())
        assert len(a.palettes()) == 8


def test_unreachable_scheduler(tmp_path, monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr("harmony.shop.engine.SCHEDULER_TIMEOUT", 1)
    csv = _shop(tmp_path, n=1)
    with pytest.raises(HarmonyError, match="cannot reach the Dask scheduler 'tcp://127.0.0.1:9'"):
        _run(csv, tmp_path / "s.db", engine="dask", scheduler="tcp://127.0.0.1:9")


@dataclasses.dataclass(frozen=True)
class GateSettings:
    """Settings of :func:`gated_extract`: the first ``free`` images pass, then the worker stops
    at a gate (it writes its pid to ``<gate>/blocked`` and waits for ``<gate>/open``). Same key
    as QuadSettings, so a later run with quad_extract reuses what was stored."""

    key: str = "quad-1"
    free: int = 4
    gate: str = ""


_passed = 0


def gated_extract(path, settings):
    """quad_extract behind a gate: an explicit point where a test knows the run is, with no timing."""
    global _passed
    if _passed >= settings.free:
        gate = Path(settings.gate)
        (gate / "blocked.tmp").write_text(str(os.getpid()))
        os.replace(gate / "blocked.tmp", gate / "blocked")
        while not (gate / "open").exists():
            time.sleep(0.01)
    _passed += 1
    return quad_extract(path, QuadSettings())


_CHILD = """
import sys
sys.path.insert(0, {tests!r})
from test_engine import GateSettings, gated_extract
from harmony.shop.engine import run_extraction
run_extraction({csv!r}, {db!r}, workers=1, chunk_size=1, progress=False,
               settings=GateSettings(free={free}, gate={gate!r}), extractor=gated_extract)
"""


def start_gated_run(csv, db, gate, free=4, session=True):
    """Start an extraction in a child process that stores ``free`` palettes and then waits at the
    gate; return (process, worker pid) once both have happened. Waits for states, not for time:
    the run cannot finish before the test kills it or opens the gate."""
    gate = Path(gate)
    gate.mkdir(exist_ok=True)
    code = _CHILD.format(tests=str(TESTS), csv=str(csv), db=str(db), free=free, gate=str(gate))
    child = subprocess.Popen([sys.executable, "-c", code], start_new_session=session)
    wait_for(lambda: (gate / "blocked").exists() and stored_palettes(db) == free, child)
    return child, int((gate / "blocked").read_text())


def stored_palettes(db):
    """Palettes committed in ``db`` as a reader sees them (0 before the schema exists)."""
    if not Path(db).exists():
        return 0
    try:
        with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as ro:
            return ro.execute("SELECT COUNT(*) FROM palettes").fetchone()[0]
    except sqlite3.OperationalError:
        return 0


def wait_for(condition, child=None, limit=120.0):
    """Poll ``condition`` until it holds; the limit only stops a broken run from hanging the suite."""
    deadline = time.monotonic() + limit
    while not condition():
        if child is not None and child.poll() is not None:
            raise AssertionError(f"the run ended (status {child.returncode}) before reaching the expected state")
        if time.monotonic() > deadline:
            raise AssertionError("the expected state was not reached")
        time.sleep(0.02)


def process_gone(pid):
    """True once ``pid`` has exited (a zombie waiting to be reaped counts as gone)."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] in ("Z", "X")
    except FileNotFoundError:
        return True
    except OSError:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True
        return False


def test_sigkill_mid_run_leaves_a_valid_store_and_the_next_run_finishes(tmp_path):
    n, free = 20, 4
    csv = _shop(tmp_path, n=n, rng=np.random.default_rng(3))
    db = tmp_path / "s.db"
    child, _worker = start_gated_run(csv, db, tmp_path / "gate", free=free)
    # A new session, so the kill reaches the run and its pool worker together.
    os.killpg(child.pid, signal.SIGKILL)
    child.wait(timeout=60)
    assert child.returncode == -signal.SIGKILL
    with Store(db) as store:
        assert store.integrity() == "ok"
        before = store.counts()
        assert before["products"] == n and before["palettes"] == free
    # The next run (same settings key) does exactly the rest.
    rest = _run(csv, db)
    assert rest.cached == free and rest.new == n - free
    fresh = _run(csv, tmp_path / "fresh.db")
    with Store(db) as a, Store(tmp_path / "fresh.db") as b:
        assert a.counts() == b.counts() == {"products": n, "images": n, "palettes": n, "failures": 0}
        assert _as_arrays(a.palettes()) == _as_arrays(b.palettes())
    assert fresh.new == n


# -- the project's own extractor, and the command line ----------------------------------------


def _studio_shop(tmp_path, n=6, seed=21):
    """An invented catalogue of generated studio shots (harmony.demo.synthetic), 160x160 JPEGs."""
    from harmony.demo.synthetic import encode_jpeg, studio_shot

    rng = np.random.default_rng(seed)
    (tmp_path / "img").mkdir(exist_ok=True)
    lines = ["id,title,category,price,stock,image"]
    for i in range(n):
        (tmp_path / "img" / f"s{i}.jpg").write_bytes(encode_jpeg(studio_shot(rng, width=160, height=160).srgb8))
        lines.append(f"S{i},Item {i},{'Rug' if i % 2 else 'Sofa'},{20 + i},{i},img/s{i}.jpg")
    (tmp_path / "shop.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return tmp_path / "shop.csv"


def test_real_extractor_dask_equals_local(tmp_path):
    distributed = pytest.importorskip("distributed")
    from harmony.photo.palette import PaletteSettings, extract_palette

    csv = _studio_shop(tmp_path)
    settings = PaletteSettings()
    local = run_extraction(csv, tmp_path / "local.db", workers=2, chunk_size=2, progress=False)
    with distributed.LocalCluster(
        processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None
    ) as cluster:
        dask = run_extraction(csv, tmp_path / "dask.db", engine="dask", scheduler=cluster.scheduler_address,
                              chunk_size=2, progress=False)
    assert (local.new, dask.new, local.failed, dask.failed) == (6, 6, 0, 0)
    with Store(tmp_path / "local.db") as a, Store(tmp_path / "dask.db") as b:
        assert a.settings_key == b.settings_key == settings.key
        pa, pb = a.palettes(), b.palettes()
        assert sorted(pa) == [f"S{i}" for i in range(6)]
        assert _as_arrays(pa) == _as_arrays(pb)
        # The stored palette is what extract_palette gives for the file, colour for colour.
        direct = extract_palette(tmp_path / "img" / "s3.jpg", settings)
        assert np.array_equal(pa["S3"].jab, direct.jab) and np.array_equal(pa["S3"].weights, direct.weights)


def test_a_large_job_loads_the_compiled_kernels_and_stores_the_same_palettes(tmp_path, monkeypatch):
    # A job of at least COMPILED_MIN_IMAGES images (here lowered to the job's 6) loads the kernels
    # once in this process, before the workers fork; one image fewer than the bound (7) runs
    # the numpy steps. Both store the same palettes, byte for byte.
    from harmony.photo import palette as palette_module

    monkeypatch.delenv("HARMONY_NUMBA", raising=False)
    monkeypatch.setattr(palette_module, "_KERNELS", [])
    csv = _studio_shop(tmp_path)
    monkeypatch.setattr(palette_module, "COMPILED_MIN_IMAGES", 7)
    small = run_extraction(csv, tmp_path / "numpy.db", workers=2, chunk_size=2, progress=False)
    assert palette_module._KERNELS == []
    monkeypatch.setattr(palette_module, "COMPILED_MIN_IMAGES", 6)
    large = run_extraction(csv, tmp_path / "compiled.db", workers=2, chunk_size=2, progress=False)
    assert len(palette_module._KERNELS) == 1
    assert (small.new, large.new, small.failed, large.failed) == (6, 6, 0, 0)
    with Store(tmp_path / "numpy.db") as a, Store(tmp_path / "compiled.db") as b:
        assert _as_arrays(a.palettes()) == _as_arrays(b.palettes())


def test_cli_extract_summary_warnings_and_strict(tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main

    csv = _studio_shop(tmp_path, n=3)
    with open(csv, "a") as f:
        f.write("BAD,bad,Rug,-4,1,img/s0.jpg\n")
    runner = CliRunner()
    strict = runner.invoke(main, ["extract", str(csv), "--strict"])
    assert strict.exit_code == 2 and not (tmp_path / "harmony.db").exists()
    assert f"error: {csv}:5: price: negative price -4" in strict.output
    assert "1 problem(s) in 1 row(s); nothing written (--strict)" in strict.output
    ok = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(tmp_path / "s.db")])
    assert ok.exit_code == 0, ok.output
    assert f"warning: {csv}:5: price: negative price -4" in ok.output
    assert "3 products, 3 images: 3 new, 0 cached, 0 failed" in ok.output and "1 rows skipped" in ok.output
    again = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(tmp_path / "s.db")])
    assert "0 new, 3 cached" in again.output


@pytest.mark.parametrize(
    "args, match",
    [
        (["extract", "{tmp}/none.csv"], r"error: .*none\.csv: catalogue not found"),
        (["extract", "{csv}", "--scheduler", "tcp://x:1"], r"error: --scheduler needs --engine dask"),
        (["extract", "{csv}", "--workers", "0"], r"Invalid value for '--workers'"),
        (["extract", "{csv}", "--engine", "spark"], r"Invalid value for '--engine'"),
        (["extract", "{csv}", "--db", "{tmp}/text.db"], r"error: .*text\.db: not a palette store"),
        (["extract", "{csv}", "--engine", "dask", "--scheduler", "tcp://no:port:here"],
         r"error: cannot reach the Dask scheduler 'tcp://no:port:here'"),
    ],
)
def test_cli_extract_errors(tmp_path, args, match):
    from click.testing import CliRunner

    from harmony.cli import main

    csv = _shop(tmp_path, n=1)
    (tmp_path / "text.db").write_text("plain text, no database here " * 50)
    args = [a.format(tmp=tmp_path, csv=csv) for a in args]
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2
    assert re.search(match, result.output), result.output
    assert "Traceback" not in result.output


def test_header_only_catalogue_leaves_the_store_alone(tmp_path):
    # A truncated nightly export must not remove every product (and its cached palettes).
    csv = _shop(tmp_path, n=2)
    _run(csv, tmp_path / "s.db")
    csv.write_text("id,category,price,image\n")
    with pytest.raises(CatalogueError, match=r"shop\.csv: no valid product \(no product rows\); store left unchanged"):
        _run(csv, tmp_path / "s.db")
    with Store(tmp_path / "s.db") as store:
        assert len(store) == 2 and store.counts()["palettes"] == 2


def test_cli_extract_lists_images_without_a_palette(tmp_path, monkeypatch):
    from click.testing import CliRunner

    from harmony.cli import extract_cmd, main

    monkeypatch.setattr(extract_cmd, "SHOWN_FAILURES", 2)
    csv = _shop(tmp_path, n=1)
    for name in ("b1", "b2", "b3"):
        (tmp_path / "img" / f"{name}.png").write_bytes(f"{name} is not an image".encode())
    with open(csv, "a") as f:
        f.write("B1,rug,5,img/b1.png\nB2,rug,5,img/b2.png|img/p0.png\nB3,rug,5,img/b3.png\n")
    result = CliRunner().invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(tmp_path / "s.db")])
    assert result.exit_code == 0, result.output
    lines = [line for line in result.stderr.splitlines() if line.startswith("warning: ")]
    assert lines == [
        f"warning: product B1: no palette from {tmp_path / 'img' / 'b1.png'}: not an image (unrecognised format)",
        f"warning: product B2: no palette from {tmp_path / 'img' / 'b2.png'}: not an image (unrecognised format)",
        "warning: ... and 1 more image(s) without a palette",
    ]
    assert "4 products, 4 images: 1 new, 0 cached, 3 failed" in result.stdout


def die(path, settings):
    """Stand-in extractor that kills its own worker process, as the kernel's OOM killer would."""
    os.kill(os.getpid(), signal.SIGKILL)


def test_dead_worker_is_an_error_and_the_store_stays_valid(tmp_path):
    csv = _shop(tmp_path, n=2)
    with pytest.raises(HarmonyError, match=r"a worker process died .*run again to continue"):
        _run(csv, tmp_path / "s.db", extractor=die)
    with Store(tmp_path / "s.db") as store:
        assert len(store) == 2 and store.integrity() == "ok"
    assert _run(csv, tmp_path / "s.db").new == 2


def test_progress_bar_when_asked(tmp_path, capsys):
    csv = _shop(tmp_path, n=3)
    _run(csv, tmp_path / "s.db", progress=True)
    err = capsys.readouterr().err
    assert "extract" in err and "3/3" in err
    _run(csv, tmp_path / "t.db", progress=False)
    assert capsys.readouterr().err == ""


def test_store_write_failure_is_a_store_error(tmp_path):
    csv = _shop(tmp_path, n=1)
    _run(csv, tmp_path / "s.db")
    locker = sqlite3.connect(tmp_path / "s.db", isolation_level=None)
    locker.execute("BEGIN IMMEDIATE")  # another writer holds the lock
    try:
        with Store(tmp_path / "s.db") as store:
            store._db.execute("PRAGMA busy_timeout = 50")
            with pytest.raises(StoreError, match=r"s\.db: cannot write: database is locked"):
                store.record([], "k")
    finally:
        locker.execute("ROLLBACK")
        locker.close()


@pytest.mark.slow
def test_dask_without_scheduler_starts_its_own_local_cluster(tmp_path):
    # The path `harmony extract --engine dask` takes with no --scheduler: a LocalCluster of worker
    # processes started and stopped by the engine itself. Same palettes as the local engine.
    pytest.importorskip("distributed")
    csv = _studio_shop(tmp_path, n=4)
    run_extraction(csv, tmp_path / "local.db", workers=1, chunk_size=2, progress=False)
    dask = run_extraction(csv, tmp_path / "dask.db", engine="dask", workers=2, chunk_size=2, progress=False)
    assert (dask.engine, dask.new, dask.failed) == ("dask", 4, 0)
    with Store(tmp_path / "local.db") as a, Store(tmp_path / "dask.db") as b:
        assert _as_arrays(a.palettes()) == _as_arrays(b.palettes())


# -- one writer per store, readers alongside; --strict and image failures; removed products -----


def test_a_second_extract_is_refused_while_one_runs_and_readers_keep_working(tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main

    n, free = 12, 3
    csv = _shop(tmp_path, n=n, rng=np.random.default_rng(4))
    db = tmp_path / "s.db"
    _run(csv, tmp_path / "other.db")  # a finished run on another store holds no lock on this one
    child, _worker = start_gated_run(csv, db, tmp_path / "gate", free=free)
    runner = CliRunner()
    try:
        second = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(db)])
        assert second.exit_code == 2
        assert second.stderr == f"error: {db}: another extract is writing this store; try again when it ends\n"
        # WAL (SQLite documentation, "Write-Ahead Logging"): readers are not blocked by the writer.
        export = runner.invoke(main, ["palettes", "--db", str(db)])
        assert export.exit_code == 0, export.output
        assert len(export.stdout.splitlines()) == free
    finally:
        os.killpg(child.pid, signal.SIGKILL)
        child.wait(timeout=60)
    assert child.returncode == -signal.SIGKILL
    # The lock went with the killed process: the next run takes it and finishes the rest.
    rest = _run(csv, db)
    assert (rest.new, rest.cached) == (n - free, free)


def test_extract_on_a_new_store_while_the_lock_is_held_writes_nothing(tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main
    from harmony.shop.engine import writer_lock

    csv = _shop(tmp_path, n=1)
    db = tmp_path / "new.db"
    with writer_lock(db) as lock_path:
        assert lock_path == tmp_path / "new.db.lock"
        result = CliRunner().invoke(main, ["extract", str(csv), "--db", str(db)])
        assert result.exit_code == 2 and "another extract is writing this store" in result.stderr
        assert not db.exists()
        with pytest.raises(StoreError, match=r"new\.db: another extract is writing this store"):
            _run(csv, db)
    assert _run(csv, db).new == 1  # released at the end of the block


_RACER = """
import sys
sys.path.insert(0, {tests!r})
from click.testing import CliRunner
from harmony.cli import main
from test_engine import QuadSettings, quad_extract
import harmony.shop.engine as engine
real = engine.run_extraction
engine.run_extraction = lambda *a, **kw: real(*a, settings=QuadSettings(), extractor=quad_extract, progress=False, **kw)
import harmony.cli.extract_cmd as cmd
cmd.run_extraction = engine.run_extraction
result = CliRunner().invoke(main, ["extract", {csv!r}, "--workers", "1", "--db", {db!r}])
sys.stdout.write(result.output)
sys.exit(result.exit_code)
"""


def test_two_extracts_started_together_on_a_new_store(tmp_path):
    csv = _shop(tmp_path, n=4)
    db = tmp_path / "c.db"
    code = _RACER.format(tests=str(TESTS), csv=str(csv), db=str(db))
    runs = [subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True) for _ in range(2)]
    outs = [(r.communicate(timeout=60)[0], r.returncode) for r in runs]
    # Either both ran one after the other, or one was told plainly that the other was writing;
    # never an SQLite error about the schema.
    assert any(code == 0 for _out, code in outs), outs
    for out, code in outs:
        assert "already exists" not in out and "Traceback" not in out
        if code != 0:
            assert code == 2 and "another extract is writing this store" in out, out
    with Store(db) as store:
        assert store.integrity() == "ok" and store.counts()["palettes"] == 4


def test_strict_exits_1_when_a_product_has_no_palette_after_storing_everything(tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main

    csv = _studio_shop(tmp_path, n=2)
    (tmp_path / "img" / "broken.jpg").write_bytes(b"not a picture at all")
    with open(csv, "a") as f:
        f.write("B1,Broken,Rug,5,1,img/broken.jpg\n")
    db = tmp_path / "s.db"
    runner = CliRunner()
    strict = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(db), "--strict"])
    assert strict.exit_code == 1, strict.output
    assert "warning: product B1: no palette from" in strict.stderr
    assert strict.stderr.splitlines()[-1] == (
        "error: 1 product(s) without a palette (--strict); the store is up to date, the warnings above say why"
    )
    assert "3 products, 3 images: 2 new, 0 cached, 1 failed" in strict.stdout
    with Store(db) as store:  # everything was recorded before the exit status was decided
        assert len(store) == 3 and sorted(store.palettes()) == ["S0", "S1"]
        assert [f[0] for f in store.failures()] == ["B1"]
    # The cached failure still counts on the next strict run; without --strict the status is 0.
    again = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(db), "--strict"])
    assert again.exit_code == 1 and "0 new, 3 cached" in again.stdout
    lenient = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(db)])
    assert lenient.exit_code == 0, lenient.output
    csv.write_text("\n".join(csv.read_text().splitlines()[:-1]) + "\n")  # drop the broken product
    clean = runner.invoke(main, ["extract", str(csv), "--workers", "1", "--db", str(db), "--strict",
                                 "--max-removal", "100"])
    assert clean.exit_code == 0, clean.output
    assert "0 without palette, 1 removed" in clean.stdout


def test_a_truncated_catalogue_reports_the_removed_products(tmp_path):
    csv = _shop(tmp_path, n=6)
    first = _run(csv, tmp_path / "s.db")
    assert first.removed == 0 and ", 0 removed, " in first.line()
    csv.write_text("\n".join(csv.read_text().splitlines()[:3]) + "\n")  # header and two rows
    with pytest.raises(StoreError, match=r"s\.db: the catalogue shop\.csv would remove 4 of the store's 6 "
                                         r"products \(67 %, over the limit of 20 %\); store left unchanged"):
        _run(csv, tmp_path / "s.db")
    with Store(tmp_path / "s.db") as store:
        assert len(store) == 6
    cut = _run(csv, tmp_path / "s.db", max_removal=0.7)
    assert (cut.products, cut.removed, cut.new, cut.cached) == (2, 4, 0, 2)
    assert cut.line().startswith("2 products, 2 images: ") and ", 4 removed, " in cut.line()
    assert cut.to_dict()["removed"] == 4
    with Store(tmp_path / "s.db") as store:
        assert [p.id for p in store.products()] == ["P000", "P001"]


def test_a_row_skipped_for_a_bad_cell_keeps_its_stored_product(tmp_path):
    # A nightly export with one mistyped price must not remove the product (and its palette);
    # a product whose row is gone from the catalogue is removed as before.
    csv = _shop(tmp_path, n=6)
    db = tmp_path / "s.db"
    first = _run(csv, db)
    with Store(db) as store:
        before = {p.id: p for p in store.products()}
        palette = store.palettes()["P003"]
    lines = csv.read_text().splitlines()
    lines[4] = lines[4].replace(",13,", ',"1.079,00",')  # P003's price in a decimal-comma locale
    csv.write_text("\n".join(lines) + "\n")
    again = _run(csv, db)
    assert (again.removed, again.skipped_rows, again.kept, again.products) == (0, 1, 1, 6)
    assert "1 rows skipped (1 of their products kept as stored)" in again.line()
    with Store(db) as store:
        assert {p.id: p for p in store.products()} == before  # P003 as stored, its old price too
        assert np.array_equal(store.palettes()["P003"].jab, palette.jab)
    csv.write_text("\n".join(lines[:4] + lines[5:]) + "\n")  # the row gone: the product goes
    gone = _run(csv, db)
    assert (gone.removed, gone.kept, gone.products) == (1, 0, 5)
    assert first.kept == 0
