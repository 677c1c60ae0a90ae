"""A feed stopped by SIGTERM or SIGINT sent to its whole process group (what ``timeout``,
``systemctl stop`` and Ctrl-C do) at random moments, on the local engine with 2 worker
processes: it ends by itself with one line and the shell's status, no process of it lives on,
no traceback is printed, and the feed file already there is left exactly as it was.
"""

import os
import signal
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from faultkit import error_lines, fork_cli, group_alive, run_cli

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "suggest"))
from test_feed import make_store, random_palettes  # noqa: E402

#: Trials: (signal) each this many times.
TRIALS_EACH = 10
#: Seconds a stopped feed may take to end; far more than it needs (a hang fails the test).
STOP_LIMIT = 60


def _finish_within(pid, limit):
    """(exit status or -signal) of a fork_cli child, or None when it has not ended in ``limit`` s
    (it is then killed with its group)."""
    deadline = time.monotonic() + limit
    while time.monotonic() < deadline:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done:
            return -os.WTERMSIG(status) if os.WIFSIGNALED(status) else os.WEXITSTATUS(status)
        time.sleep(0.05)
    os.killpg(pid, signal.SIGKILL)
    os.waitpid(pid, 0)
    return None


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    folder = tmp_path_factory.mktemp("feedkill")
    rng = np.random.default_rng(3)
    cats = ["sofa", "rug", "armchair", "floor lamp", "cushion", "curtain"]
    pals = random_palettes(1800, rng)
    items = [(f"P{i:04d}", cats[i % len(cats)], None, pals[i]) for i in range(1800)]
    db = make_store(folder, items)
    feed = folder / "feed.jsonl"
    started = time.monotonic()
    code, _out, err = run_cli(["feed", "--db", str(db), "--out", str(feed), "--workers", "2", "--no-progress"],
                              folder / "clean-run")
    assert code == 0, err
    return db, feed, feed.read_bytes(), time.monotonic() - started


@pytest.mark.slow
def test_a_feed_stopped_at_random_moments_ends_cleanly_and_keeps_the_old_file(store, tmp_path):
    db, feed, clean, seconds = store
    rng = np.random.default_rng(20261202)
    outcomes = []
    for trial, sig in enumerate([signal.SIGTERM, signal.SIGINT] * TRIALS_EACH):
        out = tmp_path / f"t{trial}"
        pid = fork_cli(["feed", "--db", str(db), "--out", str(feed), "--workers", "2", "--no-progress"], out)
        time.sleep(float(rng.uniform(0.0, 1.1 * seconds)))  # a random moment, not a synchronisation
        os.killpg(pid, sig)
        code = _finish_within(pid, STOP_LIMIT)
        assert code is not None, f"trial {trial}: the feed did not end within {STOP_LIMIT} s of {sig.name}"
        stderr = (out / "stderr").read_text(errors="replace")
        lines = error_lines(stderr)  # no traceback, from the parent or a worker
        if code == 143:  # 128 + SIGTERM, as shells report it
            assert lines == ["error: stopped by SIGTERM; finished work is kept and no output file is "
                             "half-written"], (trial, stderr)
        elif code == 130:  # 128 + SIGINT
            assert lines == ["error: interrupted"], (trial, stderr)
        else:  # finished before the signal, or ended by it before the handlers were in place
            assert code in (0, -sig), (trial, code, stderr)
        # The workers die with the run (the parent kills them; any left die with it, PR_SET_PDEATHSIG).
        deadline = time.monotonic() + STOP_LIMIT
        while group_alive(pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not group_alive(pid), trial
        # A stopped run leaves the old file; a finished one writes the same bytes.
        assert feed.read_bytes() == clean, trial
        assert not [p.name for p in feed.parent.iterdir() if p.name.endswith(".part")], trial
        outcomes.append(code)
    assert any(c in (130, 143) for c in outcomes), "no signal landed during a run"


def test_a_feed_on_standard_output_read_by_head_ends_with_the_sigpipe_status(store):
    # `| head -n 1` closes the pipe after one line of megabytes: the feed must notice (status
    # 141 = 128 + SIGPIPE, as shells report a process that SIGPIPE ended) and say nothing.
    import subprocess

    db, _feed, clean, _seconds = store
    assert len(clean) > 1 << 20  # far more than a pipe holds (64 KiB on Linux, pipe(7))
    harmony = Path(sys.executable).parent / "harmony"
    if not harmony.exists():
        pytest.skip("the harmony script is not installed beside this Python")
    done = subprocess.run(f"'{harmony}' feed --db '{db}' --out - --format jsonl --no-progress | head -n 1; "
                          "exit ${PIPESTATUS[0]}", shell=True, executable="/bin/bash", capture_output=True,
                          text=True, timeout=300)
    assert done.stdout == clean.decode().splitlines(keepends=True)[0]
    assert (done.returncode, done.stderr) == (141, "")
