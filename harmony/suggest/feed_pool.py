"""The local feed engine on several cores: category-pair tasks in worker processes, same bytes.

Each task (an unordered category pair, or a block of one, see
:func:`harmony.suggest.feed.task_parts`) runs :func:`harmony.suggest.feed.task_chunks` in a
worker process with one BLAS thread, exactly the arithmetic of the in-process run, and its
chunks come back in task order, so the file is byte-for-byte the one-process file. Workers are
forked from the calling process and inherit the plan's palettes and the rules without copying
them; at most ``workers + 1`` tasks are in flight, so memory holds a few category pairs. A
signal to the process group is the parent's to handle; the workers are killed, never waited
for, and die with the parent (:mod:`harmony.shop.workers`).
"""

import multiprocessing
import os
from collections import deque
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace

from threadpoolctl import threadpool_limits
from tqdm import tqdm

from harmony.errors import HarmonyError
from harmony.shop.workers import kill_workers, start_worker

__all__ = ["default_workers", "pool_chunks"]

# What the forked workers read: (plan, rules, text format), set in the parent just before the fork.
_SHARED = None


def default_workers():
    """Worker processes of the local engine: the cores this process may use, at most 2
    (the feed's measured machine; more cores help as long as memory allows a task per core);
    1 where processes cannot be forked."""
    if "fork" not in multiprocessing.get_all_start_methods():
        return 1
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cores = os.cpu_count() or 1
    return max(1, min(2, cores))


def _one(plan, rules, job):
    from harmony.suggest.feed import task_chunks

    task, part = job
    with threadpool_limits(limits=1):
        return task_chunks(plan, rules, task, part)


def _run(job):
    from harmony.suggest.feedwriter import chunk_text

    plan, rules, fmt = _SHARED
    chunks = _one(plan, rules, job)
    if fmt in ("jsonl", "csv"):  # the text is written out here too, beside the scoring
        chunks = [replace(c, text=(fmt, chunk_text(c, fmt))) for c in chunks]
    return chunks


def pool_chunks(plan, rules, jobs, workers, *, progress=False, fmt=None):
    """The FeedChunks of ``jobs`` (``(task, part)`` pairs) computed by ``workers`` forked
    processes, yielded in job order; with ``fmt`` ("jsonl" or "csv") each carries its text."""
    global _SHARED
    if "fork" not in multiprocessing.get_all_start_methods():  # run here, the same chunks
        for job in jobs:
            yield from _one(plan, rules, job)
        return
    _SHARED = (plan, rules, fmt)
    ctx = multiprocessing.get_context("fork")
    bar = tqdm(total=len(jobs), desc="feed", unit="task", disable=not progress, leave=False)
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=start_worker,
                               initargs=(os.getpid(),))
    try:
        waiting = deque()
        todo = iter(jobs)
        for job in todo:
            waiting.append(pool.submit(_run, job))
            if len(waiting) > workers:
                break
        while waiting:
            try:
                chunks = waiting.popleft().result()
            except BrokenProcessPool:
                raise HarmonyError("a feed worker process died (out of memory?); no feed was written") from None
            for job in todo:
                waiting.append(pool.submit(_run, job))
                break
            bar.update(1)
            yield from chunks
    except BaseException:
        # Stopped (SIGTERM, Ctrl-C, an error, the caller closed the generator): the workers are
        # killed now, not waited for; they ignore the signal themselves (start_worker).
        kill_workers(pool)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
        bar.close()
        _SHARED = None
