"""Running the feed: its category-pair tasks in this process, in forked worker processes
(:mod:`harmony.suggest.feed_pool`) or on a Dask cluster (:mod:`harmony.suggest.feed_dask`), and
the feed written as it is made or built whole.

:mod:`harmony.suggest.feed` says what a task computes; the engines here only decide where it
runs, and every engine gives the same rows in the same order.
"""

import itertools

from threadpoolctl import threadpool_limits
from tqdm import tqdm

from harmony.errors import HarmonyError
from harmony.suggest.curation import limit_partner_categories
from harmony.suggest.feed import FeedRow, plan_feed, task_chunks, task_parts, write_feed
from harmony.suggest.feed_pool import default_workers, pool_chunks
from harmony.suggest.feedwriter import feed_format, write_chunks

__all__ = ["feed_chunks", "build_feed", "write_feed_stream"]


def feed_chunks(plan, rules, *, progress=False, workers=1, fmt=None):
    """The feed as FeedChunks, one ordered category pair at a time, in file order.

    With ``workers > 1`` the category-pair tasks run in that many forked processes
    (:mod:`harmony.suggest.feed_pool`); the chunks and their order are the same, and with
    ``fmt`` each also carries its text in that format, written out by the worker.
    """
    if workers is not None and int(workers) > 1:
        jobs = [(task, part) for task in plan.tasks for part in task_parts(plan, task)]
        if len(jobs) > 1:
            yield from pool_chunks(plan, rules, jobs, min(int(workers), len(jobs)), progress=progress,
                                  fmt=fmt)
            return
    for task in tqdm(plan.tasks, desc="feed", unit="category pair", disable=not progress, leave=False):
        for part in task_parts(plan, task):
            with threadpool_limits(limits=1):
                yield from task_chunks(plan, rules, task, part)


def _has_rows(plan):
    cats = plan.categories
    return any(
        on and len(cats[x][0]) and len(cats[y][2])
        for a, b, ab, ba in plan.tasks
        for on, x, y in ((ab, a, b), (ba, b, a))
    )


def build_feed(store, rules, top=10, targets=None, diversity=0.0, *, pool=None, warn=None, progress=False,
               curation=None):
    """The feed: for each product, its top partners in each category the rules pair it with.

    Parameters
    ----------
    store : harmony.shop.store.Store
    rules : harmony.rules.RuleSet
    top : int
        Partners per product and target category.
    targets : iterable of str, optional
        Partner categories to list (default: every category of the store).
    diversity : float in [0, 1]
        Weight of the redundancy term of maximal marginal relevance; 0 lists the best scores.
    pool : int, optional
        With diversity, how many best-scoring partners MMR chooses from (default ``3 * top``).
    warn : callable, optional
        Called with a one-line message for each warning (default: :func:`warnings.warn`).
    progress : bool
        Show a progress bar over the category pairs on stderr.
    curation : harmony.suggest.curation.Curation, optional
        Pins, blocks, category pairs, score floors and the partner-category limit to apply.

    Returns
    -------
    list of FeedRow
        Sorted by product id, partner category, rank. Holds the whole feed in memory: a file
        is better written by :func:`write_feed_stream`, one category pair at a time.

    Raises
    ------
    StoreError
        Empty store, no palettes, or an unknown target category.
    """
    plan = plan_feed(store, rules, top, targets, diversity, pool=pool, warn=warn, curation=curation)
    rows = [FeedRow(**rec) for chunk in feed_chunks(plan, rules, progress=progress) for rec in chunk.records()]
    rows.sort(key=lambda r: (r.product, r.partner_category, r.rank))
    if curation is not None:  # curation: partner categories per product
        rows = [r for _pid, run in itertools.groupby(rows, key=lambda r: r.product)
                for r in limit_partner_categories(curation, run)]
    return rows


def write_feed_stream(store, rules, path, fmt=None, *, top=10, targets=None, diversity=0.0, pool=None,
                      warn=None, progress=False, engine="local", scheduler=None, workers=None, curation=None,
                      block=None):
    """Build the feed and write it as it is made (see :func:`harmony.suggest.feedwriter.write_chunks`).

    Rows come grouped by category pair (pairs in sorted order, a to b before b to a), within a
    pair by product id and rank. Memory holds one category pair at a time per process.
    ``engine="dask"`` runs the category pairs on a Dask cluster (:mod:`harmony.suggest.feed_dask`)
    and writes the same bytes; the local engine runs them in ``workers`` forked processes
    (default :func:`harmony.suggest.feed_pool.default_workers`: the cores, at most 2; 1 runs in
    this process), also the same bytes. A curation file is applied to each product's list in
    each category as it is made; its ``max_partner_categories`` needs all of a product's categories at once, so with it
    the feed is built whole first (:func:`build_feed`) and written in product order.

    Returns
    -------
    (pathlib.Path, int, int)
        The path, the number of rows and the number of products that got rows.
    """
    feed_format(path, fmt)
    if engine not in ("local", "dask"):
        raise HarmonyError(f"unknown feed engine '{engine}' (use local or dask)")
    plan = plan_feed(store, rules, top, targets, diversity, pool=pool, warn=warn, curation=curation, block=block)
    if not _has_rows(plan):
        # Said before the file is touched, so an older feed stays as it was.
        raise HarmonyError(
            f"{store.path}: no feed rows: the rules pair none of the store's categories with an in-stock target"
        )
    if curation is not None and curation.max_partner_categories is not None:
        rows = build_feed(store, rules, top, targets, diversity, pool=pool, warn=lambda m: None,
                          progress=progress, curation=curation)
        return write_feed(rows, path, fmt), len(rows), len({r.product for r in rows})
    if engine == "dask":
        from harmony.suggest.feed_dask import dask_chunks

        chunks = dask_chunks(store.path, rules.path, plan, scheduler=scheduler, workers=workers, progress=progress)
    else:
        if workers is None:
            workers = default_workers()
        chunks = feed_chunks(plan, rules, progress=progress, workers=workers, fmt=feed_format(path, fmt))
    products = set()

    def counted():
        for chunk in chunks:
            products.update(chunk.product)
            yield chunk

    try:
        written, rows = write_chunks(counted(), path, fmt)
    finally:  # stopped (a signal, a full disk): the worker processes go now, not when collected
        close = getattr(chunks, "close", None)
        if close is not None:
            close()
    return written, rows, len(products)
