"""Helpers of the fault-injection suite: a small shop of generated photos, runs of the command
line in a forked child (no interpreter start-up per run), and comparisons of stores.

The photos come from :mod:`harmony.demo.synthetic` (invented studio shots); nothing here is a
check value, only the store of an uninterrupted run is.
"""

import io
import os
import sys
from pathlib import Path

import numpy as np

from harmony.shop.store import Store

__all__ = ["make_shop", "fork_cli", "finish", "run_cli", "store_state", "group_alive", "error_lines"]


def make_shop(folder, n=10, seed=5, size=72):
    """A CSV catalogue of ``n`` generated studio shots (JPEG), half sofas and half rugs."""
    from harmony.demo.synthetic import encode_jpeg, studio_shot

    rng = np.random.default_rng(seed)
    folder = Path(folder)
    (folder / "img").mkdir(parents=True, exist_ok=True)
    lines = ["id,title,category,price,stock,image"]
    for i in range(n):
        (folder / "img" / f"s{i}.jpg").write_bytes(encode_jpeg(studio_shot(rng, width=size, height=size).srgb8))
        lines.append(f"S{i:02d},Item {i},{'Rug' if i % 2 else 'Sofa'},{20 + i},{i},img/s{i}.jpg")
    path = folder / "shop.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def fork_cli(args, out_dir, stdout_fd=None):
    """Run ``harmony ARGS`` in a forked child that leads its own process group.

    Returns the child's pid. Its standard error goes to ``out_dir/stderr``, its standard
    output to ``stdout_fd`` (default ``out_dir/stdout``). Collect it with :func:`finish`.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    err_path, out_path = out_dir / "stderr", out_dir / "stdout"
    pid = os.fork()
    if pid:
        return pid
    code = 70
    try:
        os.setpgid(0, 0)
        # tqdm's default lock holds a multiprocessing semaphore that fork shares with this test
        # process and every other child: one killed while holding it would block all the rest.
        from threading import RLock

        from tqdm import tqdm

        tqdm.set_lock(RLock())
        err = os.open(err_path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        out = stdout_fd if stdout_fd is not None else os.open(out_path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
        os.dup2(err, 2)
        os.dup2(out, 1)
        sys.stdout = io.TextIOWrapper(io.FileIO(1, "w", closefd=False), line_buffering=False)
        sys.stderr = io.TextIOWrapper(io.FileIO(2, "w", closefd=False), line_buffering=True)
        from harmony.cli import main

        try:
            main(list(args), prog_name="harmony")
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        sys.stdout.flush()
        sys.stderr.flush()
    except BaseException:  # noqa: BLE001 - a child must never return into the test runner
        import traceback

        traceback.print_exc()
        try:
            sys.stderr.flush()
        except Exception:  # noqa: BLE001
            pass
    finally:
        os._exit(code)


def finish(pid, out_dir):
    """Wait for a :func:`fork_cli` child; return (exit status or -signal, stdout, stderr)."""
    _, status = os.waitpid(pid, 0)
    code = -os.WTERMSIG(status) if os.WIFSIGNALED(status) else os.WEXITSTATUS(status)
    out_dir = Path(out_dir)
    read = lambda name: (out_dir / name).read_text(errors="replace") if (out_dir / name).exists() else ""
    return code, read("stdout"), read("stderr")


def run_cli(args, out_dir, stdout_fd=None):
    """:func:`fork_cli` and :func:`finish` in one."""
    return finish(fork_cli(args, out_dir, stdout_fd), out_dir)


def group_alive(pgid):
    """Pids of live (not zombie) processes in process group ``pgid`` (Linux /proc)."""
    alive = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as handle:
                fields = handle.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        state, pgrp = fields[0], int(fields[2])
        if pgrp == pgid and state not in ("Z", "X"):
            alive.append(int(entry))
    return alive


def store_state(db):
    """What a store holds: counts, and each product's palette as exact bytes."""
    with Store(db) as store:
        assert store.integrity() == "ok"
        palettes = {pid: (p.jab.tobytes(), p.weights.tobytes(), p.scene) for pid, p in store.palettes().items()}
        return store.counts(), palettes, [p.id for p in store.products()]


def error_lines(stderr):
    """The lines of ``stderr``, checking that none is part of a Python traceback."""
    assert "Traceback" not in stderr and "Exception ignored" not in stderr, stderr
    return [line for line in stderr.splitlines() if line.strip()]
