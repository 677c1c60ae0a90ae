"""The feed on a Dask cluster: one task per unordered category pair, or per block of products of
a large one (:func:`harmony.suggest.feed.task_parts`), the same bytes as locally.

Each task opens the palette store by its path, reads the palettes of its two categories only,
and runs :func:`harmony.suggest.feed.task_chunks` exactly as the local engine does (one BLAS
thread, the same arithmetic), so the file is byte-for-byte the local one. Only the task's own
rows travel back; the client writes them in task order as they arrive. Workers need the store
and the rules file at the same paths (shared storage); a LocalCluster has them.
"""

from dataclasses import replace

from tqdm import tqdm

from harmony.errors import HarmonyError

__all__ = ["dask_chunks", "pair_task", "SCHEDULER_TIMEOUT"]

#: Seconds to wait for a scheduler given by address.
SCHEDULER_TIMEOUT = 10


def pair_task(db_path, rules_path, plan, task, part=None):
    """Run on a worker: the FeedChunks of one category pair (or one ``part`` of it), palettes
    read from the store."""
    from threadpoolctl import threadpool_limits

    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.feed import category_entry, task_chunks

    rules = load_rules(rules_path)
    categories = {}
    with Store(db_path) as store:
        for cat in task[:2]:
            categories[cat] = category_entry(store.products(cat), store.palettes(cat))
    local = replace(plan, categories=categories, labels={})
    with threadpool_limits(limits=1):
        return task_chunks(local, rules, task, part)


def dask_chunks(db_path, rules_path, plan, *, scheduler=None, workers=None, progress=False):
    """The feed's chunks computed on Dask, yielded in the local engine's order.

    Parameters
    ----------
    db_path : path of the store, as the workers see it
    rules_path : path of the rules file, as the workers see it
    plan : harmony.suggest.feed.FeedPlan
        Only its options and task list are sent; the palettes stay behind.
    scheduler : str, optional
        ``tcp://host:8786``; without it a LocalCluster of ``workers`` processes is started.
    workers : int, optional
    progress : bool
    """
    try:
        from distributed import Client, KilledWorker, LocalCluster
    except ImportError:
        raise HarmonyError("the dask engine needs dask.distributed: pip install 'harmony[dask]'") from None
    if str(rules_path).startswith("<"):
        raise HarmonyError("the dask engine needs the rules as a file its workers can read")
    from harmony.suggest.feed import task_parts

    jobs = [(task, part) for task in plan.tasks for part in task_parts(plan, task)]
    light = replace(plan, categories={}, labels={})
    cluster = None
    try:
        if scheduler:
            try:
                client = Client(scheduler, timeout=SCHEDULER_TIMEOUT)
            except (OSError, TimeoutError, ValueError) as exc:
                raise HarmonyError(f"cannot reach the Dask scheduler {scheduler!r}: {exc}") from None
        else:
            cluster = LocalCluster(n_workers=workers or 2, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
            client = Client(cluster)
        try:
            futures = [client.submit(pair_task, str(db_path), str(rules_path), light, task, part, pure=False)
                       for task, part in jobs]
            try:
                for future in tqdm(futures, desc="feed", unit="task", disable=not progress, leave=False):
                    chunks = future.result()
                    future.release()
                    yield from chunks
            except KilledWorker:
                raise HarmonyError("Dask workers died on a category pair (out of memory?); no feed was written") from None
        finally:
            client.close()
    finally:
        if cluster is not None:
            cluster.close()
