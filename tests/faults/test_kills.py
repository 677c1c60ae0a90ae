"""Killed extractions: SIGKILL and SIGTERM, to the main process alone or to the whole process
group, at random moments; then a re-run at once must give the store a clean run gives.

Also, at explicit points (a gate the stand-in extractor waits at, see tests/shop/test_engine.py):
a SIGKILL of the main process alone leaves no worker behind and no lock held; a SIGTERM stops
the run cleanly with one line; a store reached through a symbolic link has one writer.
"""

import os
import signal
import sqlite3
import time

import numpy as np
import pytest

from faultkit import error_lines, finish, fork_cli, group_alive, make_shop, run_cli, store_state
from test_engine import (
    QuadSettings, _shop, process_gone, quad_extract, start_gated_run, stored_palettes, wait_for,
)

from harmony.shop.engine import run_extraction

#: Trials of the random-kill test: (signal, whole group?) each this many times; 4 x 5 = 20.
TRIALS_EACH = 5


@pytest.fixture(scope="module")
def shop(tmp_path_factory):
    folder = tmp_path_factory.mktemp("killshop")
    csv = make_shop(folder, n=10)
    clean = folder / "clean.db"
    started = time.monotonic()
    code, out, err = run_cli(["extract", str(csv), "--db", str(clean), "--workers", "2"], folder / "clean-run")
    seconds = time.monotonic() - started
    assert code == 0, err
    return csv, store_state(clean), seconds


@pytest.mark.slow
def test_random_kills_then_an_immediate_rerun_equals_a_clean_run(shop, tmp_path):
    csv, clean, seconds = shop
    rng = np.random.default_rng(20240613)
    cases = [(sig, group) for sig in (signal.SIGKILL, signal.SIGTERM) for group in (False, True)] * TRIALS_EACH
    outcomes = []
    for trial, (sig, group) in enumerate(cases):
        db = tmp_path / f"t{trial}.db"
        out = tmp_path / f"t{trial}"
        pid = fork_cli(["extract", str(csv), "--db", str(db), "--workers", "2"], out)
        time.sleep(float(rng.uniform(0.0, 1.2 * seconds)))  # a random moment, not a synchronisation
        (os.killpg if group else os.kill)(pid, sig)
        code, _stdout, stderr = finish(pid, out)
        # Whatever was killed, no process of the run may live on (workers die with their parent).
        wait_for(lambda: not group_alive(pid), limit=30)
        lines = error_lines(stderr)
        if sig == signal.SIGKILL:
            assert code in (-signal.SIGKILL, 0), (trial, code, stderr)
        elif code == 143:
            assert lines == ["error: stopped by SIGTERM; finished work is kept and no output file is "
                             "half-written"], (trial, stderr)
        else:  # finished before the signal, or ended by it before the handler was in place
            assert code in (0, -signal.SIGTERM), (trial, code, stderr)
        outcomes.append(code)
        if db.exists():  # (killed before the schema was made, it holds no table yet)
            conn = sqlite3.connect(db)
            try:
                assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            finally:
                conn.close()
        # Re-run at once: never "another extract is writing this store", and the same store
        # as an uninterrupted run, palette for palette.
        rerun = run_extraction(csv, db, workers=1, progress=False)
        assert rerun.new + rerun.cached == 10
        assert store_state(db) == clean, trial
    assert len(outcomes) >= 20
    assert any(c != 0 for c in outcomes), "no kill landed during a run"


def test_sigkill_of_the_main_process_alone_ends_its_worker_and_frees_the_lock(tmp_path):
    csv = _shop(tmp_path, n=8, rng=np.random.default_rng(7))
    db = tmp_path / "s.db"
    child, worker = start_gated_run(csv, db, tmp_path / "gate", free=3)
    os.kill(child.pid, signal.SIGKILL)  # the main process only, as `kill -9 $!` does
    child.wait(timeout=60)
    # At once: the lock belonged to the dead run alone, so the next run is not refused...
    rest = run_extraction(csv, db, workers=1, progress=False,
                          settings=QuadSettings(), extractor=quad_extract)
    assert (rest.new, rest.cached) == (5, 3)
    # ...and the orphaned worker ends by itself (PR_SET_PDEATHSIG), without the gate opening.
    wait_for(lambda: process_gone(worker), limit=30)
    assert not (tmp_path / "gate" / "open").exists()


def test_cli_sigterm_commits_what_is_done_and_exits_143(tmp_path, monkeypatch):
    from test_engine import GateSettings, gated_extract

    import harmony.shop.engine as engine  # the command imports it when it runs

    csv = _shop(tmp_path, n=8, rng=np.random.default_rng(9))
    db = tmp_path / "s.db"
    gate = tmp_path / "gate"
    gate.mkdir()
    real = engine.run_extraction
    monkeypatch.setattr(engine, "run_extraction", lambda *a, **kw: real(
        *a, settings=GateSettings(free=3, gate=str(gate)), extractor=gated_extract, chunk_size=1, **kw))
    pid = fork_cli(["extract", str(csv), "--db", str(db), "--workers", "1"], tmp_path / "run")
    try:
        wait_for(lambda: (gate / "blocked").exists() and stored_palettes(db) == 3, limit=120)
    except AssertionError:
        os.killpg(pid, signal.SIGKILL)
        raise
    worker = int((gate / "blocked").read_text())
    os.kill(pid, signal.SIGTERM)
    code, stdout, stderr = finish(pid, tmp_path / "run")
    assert code == 143
    assert error_lines(stderr) == [
        "error: stopped by SIGTERM; finished work is kept and no output file is half-written"
    ]
    wait_for(lambda: process_gone(worker), limit=30)
    assert stored_palettes(db) == 3


def test_the_lock_follows_the_file_through_a_symlink(tmp_path):
    csv = _shop(tmp_path, n=6, rng=np.random.default_rng(10))
    db = tmp_path / "real.db"
    link = tmp_path / "link.db"
    link.symlink_to(db)
    child, _worker = start_gated_run(csv, db, tmp_path / "gate", free=2)
    try:
        code, _out, err = run_cli(["extract", str(csv), "--db", str(link), "--workers", "1"], tmp_path / "second")
        assert code == 2
        assert error_lines(err) == [f"error: {link}: another extract is writing this store; try again when it ends"]
    finally:
        os.killpg(child.pid, signal.SIGKILL)
        child.wait(timeout=60)
    assert link.is_symlink() and stored_palettes(db) == 2


_DASK_CHILD = """
import sys
sys.path.insert(0, {tests!r})
from test_engine import GateSettings, gated_extract
from harmony.shop.engine import run_extraction
run_extraction({csv!r}, {db!r}, workers=1, chunk_size=1, progress=False, engine="dask",
               settings=GateSettings(free={free}, gate={gate!r}), extractor=gated_extract)
"""


def test_sigkill_of_the_main_process_ends_its_dask_workers(tmp_path):
    """A LocalCluster's worker process holds a chunk at the gate when the main process is killed
    alone: the worker must not live on (distributed ends a worker whose parent's pipe closes)."""
    import subprocess
    import sys

    from test_engine import TESTS

    pytest.importorskip("distributed")
    csv = _shop(tmp_path, n=6, rng=np.random.default_rng(11))
    db = tmp_path / "s.db"
    gate = tmp_path / "gate"
    gate.mkdir()
    code = _DASK_CHILD.format(tests=str(TESTS), csv=str(csv), db=str(db), free=2, gate=str(gate))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
    child = subprocess.Popen([sys.executable, "-c", code], start_new_session=True, env=env)
    try:
        wait_for(lambda: (gate / "blocked").exists() and stored_palettes(db) == 2, child, limit=180)
        worker = int((gate / "blocked").read_text())
        assert worker != child.pid  # the chunk is held in a worker process, not in the main one
        os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=60)
        wait_for(lambda: process_gone(worker), limit=60)
        wait_for(lambda: not group_alive(child.pid), limit=60)  # nothing else of the run either
    finally:
        if child.poll() is None or group_alive(child.pid):
            os.killpg(child.pid, signal.SIGKILL)
            child.wait(timeout=60)
    assert not (gate / "open").exists() and stored_palettes(db) == 2
