"""Palette extraction over a whole catalogue, on local processes or on a Dask cluster.

A run reads the catalogue, hashes every image (reusing the stored hash when a file's size and
modification time are unchanged), replaces the store's products, and extracts only images whose
hash has neither a palette nor a recorded failure under the current settings. The images to do
are split into chunks; each finished chunk is written to the store in one transaction, so an
interrupted run keeps every finished chunk and the next run does the rest.

Both engines run the same chunk function: ``"local"`` on a
:class:`concurrent.futures.ProcessPoolExecutor`, ``"dask"`` through a
:class:`distributed.Client` (a :class:`distributed.LocalCluster` when no scheduler address is
given). Dask workers read the images by path, so they must see the same files (shared storage).

One store has one writer at a time: a run holds an exclusive ``flock`` on a lock file beside the
store's real file (``harmony.db.lock``; a store reached through a symbolic link locks its target)
and a second run on the same store stops at once with an error. The kernel drops the lock when
the process ends, however it ends, so a killed run never leaves a stale lock. Readers (feeds,
reports, exports) take no lock and read the last committed state.

Worker processes of the local engine never outlive the run: each asks the kernel to kill it when
its parent dies (``PR_SET_PDEATHSIG`` on Linux; elsewhere a thread that watches the parent), does
not keep the parent's lock file open, and ignores SIGINT and SIGTERM, which the parent handles:
an interrupted run kills its workers, keeps every chunk it has stored, and re-raises. The worker
processes of a Dask LocalCluster end when the main process dies too: distributed's child processes
exit when their parent's end of a pipe closes (tests/faults/test_kills.py kills one mid-chunk).

A run refuses to remove more than ``max_removal`` (default :data:`MAX_REMOVAL`) of the store's
products: a cut-short catalogue export is far likelier than a real clear-out.

Images named by URL are downloaded first (:mod:`harmony.shop.fetch`), with conditional GETs for
URLs the store already holds; their bytes are kept in the store and handed to the workers
directly, so Dask workers need no shared storage for them. A URL the server reports unchanged
keeps its hash and so its palette: it is neither downloaded nor extracted again. A failed
download is recorded like an unreadable file (the product is listed among the failures).
"""

import contextlib
import dataclasses
import fcntl
import hashlib
import math
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

from tqdm import tqdm

from harmony.errors import CatalogueError, HarmonyError, ImageError, StoreError
from harmony.shop.catalogue import Catalogue, read_catalogue
from harmony.shop.fetch import Known, fetch_images, is_url
from harmony.shop.store import FileHash, Store
from harmony.shop.workers import kill_workers, start_worker

__all__ = [
    "ExtractionSummary",
    "ENGINES",
    "MAX_CHUNK",
    "SCHEDULER_TIMEOUT",
    "DEFAULT_DB_NAME",
    "LOCK_SUFFIX",
    "MAX_REMOVAL",
    "writer_lock",
    "run_extraction",
    "hash_images",
    "download_images",
    "plan_chunks",
    "extract_chunk",
]

from harmony.shop import DEFAULT_DB_NAME, ENGINES, MAX_REMOVAL  # noqa: E402  (light constants for the command line)
#: Added to the store's file name to name the lock file of its writer (``harmony.db.lock``).
LOCK_SUFFIX = ".lock"
#: Upper bound of images per chunk: at most this much work is lost when a run is killed.
MAX_CHUNK = 32
#: Seconds to wait for a Dask scheduler given by address.
SCHEDULER_TIMEOUT = 30

#: File descriptors of the writer locks this process holds; worker processes close them.
_HELD_LOCK_FDS = set()


@dataclasses.dataclass(frozen=True)
class ExtractionSummary:
    """What one extraction run did.

    Attributes
    ----------
    products : int
        Valid products in the catalogue (now in the store).
    removed : int
        Products the store held before this run that the catalogue no longer has (now gone).
    images : int
        Distinct images (by content hash) of those products, plus unreadable files.
    new : int
        Images extracted in this run.
    cached : int
        Images whose palette (or failure) an earlier run had already stored.
    failed : int
        Images that failed in this run (unreadable, undecodable, nothing left after masking...).
    scene_only : int
        Products whose chosen palette comes from a room-scene photo (low confidence).
    downloaded, unchanged, download_failed : int
        Image URLs downloaded in this run, answered "not modified", and failed (also in ``failed``).
    no_palette : int
        Products left with no palette at all.
    skipped_rows : int
        Catalogue rows skipped because of problems.
    kept : int
        Products of skipped rows that the store already held, kept as stored (and counted in
        ``products``).
    seconds : float
        Wall-clock time of the whole run.
    engine : str
    workers : int
    db_path : pathlib.Path
    """

    products: int
    removed: int
    images: int
    new: int
    cached: int
    failed: int
    scene_only: int
    no_palette: int
    skipped_rows: int
    seconds: float
    engine: str
    workers: int
    db_path: Path
    downloaded: int = 0
    unchanged: int = 0
    download_failed: int = 0
    kept: int = 0

    def line(self):
        """The summary as one line for people."""
        urls = ""
        if self.downloaded or self.unchanged or self.download_failed:
            urls = (f"; URLs: {self.downloaded} downloaded, {self.unchanged} unchanged, "
                    f"{self.download_failed} failed")
        return (
            f"{self.products} products, {self.images} images: {self.new} new, {self.cached} cached, "
            f"{self.failed} failed, {self.scene_only} scene-only, {self.no_palette} without palette, "
            f"{self.removed} removed, {self.skipped_rows} rows skipped"
            f"{f' ({self.kept} of their products kept as stored)' if self.kept else ''}{urls}; {self.seconds:.1f} s "
            f"({self.engine}, {self.workers} worker{'' if self.workers == 1 else 's'})"
        )

    def to_dict(self):
        out = dataclasses.asdict(self)
        out["db_path"] = str(self.db_path)
        return out


@contextlib.contextmanager
def writer_lock(db_path):
    """Hold the store's writer lock for the ``with`` block, or fail at once if another has it.

    Parameters
    ----------
    db_path : str or pathlib.Path
        The store; the lock file is the same path plus :data:`LOCK_SUFFIX`.

    Raises
    ------
    StoreError
        Another process holds the lock (``another extract is writing this store``), or the lock
        file cannot be made.

    Notes
    -----
    The lock file sits beside the store's real path (symbolic links resolved), so two runs that
    reach one store through different links still exclude each other. A non-blocking exclusive
    ``flock`` (``flock(2)``): the kernel releases it when every process holding the file
    open has closed it or died, even by SIGKILL. The empty lock file is left in place, since
    removing it could let two runs lock two different files of the same name.
    """
    db_path = Path(db_path)
    real = Path(os.path.realpath(db_path))  # the file, however it is reached
    lock_path = real.with_name(real.name + LOCK_SUFFIX)
    try:
        handle = open(lock_path, "a+b")
    except OSError as exc:
        raise StoreError(f"{lock_path}: cannot make the lock file: {exc.strerror or exc}") from None
    with handle:
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise StoreError(f"{db_path}: another extract is writing this store; try again when it ends") from None
        except OSError as exc:
            raise StoreError(f"{lock_path}: cannot lock: {exc.strerror or exc}") from None
        _HELD_LOCK_FDS.add(handle.fileno())
        try:
            yield lock_path
        finally:
            _HELD_LOCK_FDS.discard(handle.fileno())


def hash_images(catalogue, known=None):
    """SHA-256 of every image file of ``catalogue``.

    Parameters
    ----------
    catalogue : Catalogue
    known : dict of str to FileHash, optional
        Hashes from an earlier run; reused when the file's size and ``st_mtime_ns`` match.

    Returns
    -------
    dict of str to FileHash
        By absolute path. A file that cannot be read has ``sha256=None`` and an ``error``.
        URLs are left out (see :func:`download_images`).
    """
    known = known or {}
    out = {}
    for product in catalogue.products:
        for image in product.images:
            if is_url(image):
                continue
            path = catalogue.image_file(image)
            if path in out:
                continue
            try:
                stat = os.stat(path)
                old = known.get(path)
                if old is not None and old.size == stat.st_size and old.mtime_ns == stat.st_mtime_ns:
                    out[path] = old
                    continue
                with open(path, "rb") as handle:
                    digest = hashlib.file_digest(handle, "sha256").hexdigest()
                out[path] = FileHash(path, digest, stat.st_size, stat.st_mtime_ns)
            except OSError as exc:
                out[path] = FileHash(path, None, error=f"{image}: cannot read: {exc.strerror or exc}")
    return out


def download_images(catalogue, store, settings=None, progress=False):
    """Download (or confirm unchanged) every image URL of ``catalogue``; record them in ``store``.

    Returns
    -------
    hashes : dict of str to FileHash
        By URL, as :func:`hash_images` gives for files (``error`` names the URL on a failure).
    results : dict of str to harmony.shop.fetch.FetchResult
    """
    urls = [image for product in catalogue.products for image in product.images if is_url(image)]
    if not urls:
        return {}, {}
    stored = store.remote_known()
    known = {url: Known(sha, etag, modified) for url, (sha, etag, modified, _at, _size) in stored.items()}
    bar = tqdm(total=len(set(urls)), unit="url", desc="download", disable=not progress, file=sys.stderr,
               dynamic_ncols=True)
    try:
        results = fetch_images(urls, known, settings, progress=lambda _result: bar.update(1))
    finally:
        bar.close()
    store.record_downloads(results.values(), keep=results.keys())
    hashes = {}
    for url, r in results.items():
        if r.status == "failed":
            hashes[url] = FileHash(url, None, error=f"{url}: download failed: {r.error}")
        else:
            size = len(r.data) if r.data is not None else stored[url][4]
            hashes[url] = FileHash(url, r.sha256, size)
    return hashes, results


def plan_chunks(items, workers, chunk_size=None):
    """Split ``items`` into consecutive chunks.

    The default size gives each worker about four chunks (for load balance), at least 1 and at
    most :data:`MAX_CHUNK` images (to bound the work an interrupted run loses).
    """
    items = list(items)
    if not items:
        return []
    if chunk_size is None:
        chunk_size = min(MAX_CHUNK, max(1, math.ceil(len(items) / (4 * max(1, workers)))))
    if int(chunk_size) < 1:
        raise HarmonyError(f"chunk size must be at least 1, got {chunk_size}")
    size = int(chunk_size)
    return [items[i:i + size] for i in range(0, len(items), size)]


def _default_extractor():
    from harmony.photo.palette import extract_palette

    return extract_palette


def extract_chunk(items, settings, extractor=None, compiled=False):
    """Extract the palettes of one chunk; runs in a worker process or on a Dask worker.

    Parameters
    ----------
    items : list of (sha256, absolute path)
    settings : object with ``.key``
        Passed to ``extractor``.
    extractor : callable (path, settings) -> Palette, optional
        Default :func:`harmony.photo.palette.extract_palette`. Must be picklable.
    compiled : bool
        Load the compiled kernels first (:func:`harmony.photo.palette.load_kernels`; at once
        where the worker was forked from a process that loaded them).

    Returns
    -------
    list of (sha256, Palette or None, reason or None)
        A failure of one image is its reason; it never stops the chunk.
    """
    extractor = extractor or _default_extractor()
    if compiled:
        from harmony.photo.palette import load_kernels

        load_kernels()
    results = []
    for sha, path in items:
        name = path
        if isinstance(path, tuple):  # a downloaded image: its URL names it in messages
            name, path = path
        try:
            palette = extractor(path, settings)
        except ImageError as exc:
            results.append((sha, None, str(exc).replace("<bytes>", str(name), 1)))
            continue
        except Exception as exc:  # noqa: BLE001 - one bad image must not stop the run
            results.append((sha, None, f"{name}: {type(exc).__name__}: {exc}"))
            continue
        if palette.sha256 and palette.sha256 != sha:
            results.append((sha, None, f"{name}: file changed during the run; run again"))
            continue
        if not palette.sha256:
            palette = dataclasses.replace(palette, sha256=sha)
        results.append((sha, palette, None))
    return results


def _show_progress(progress):
    if progress is None:
        return sys.stderr.isatty()
    return bool(progress)


def run_extraction(
    catalogue,
    db_path=None,
    workers=None,
    engine="local",
    scheduler=None,
    settings=None,
    progress=None,
    chunk_size=None,
    extractor=None,
    fetch_settings=None,
    max_removal=MAX_REMOVAL,
):
    """Bring the store up to date with a catalogue: products, hashes, palettes.

    Parameters
    ----------
    catalogue : str, pathlib.Path or Catalogue
        The catalogue file, or one already read (its problems are then counted, not re-read).
    db_path : str or pathlib.Path, optional
        The store; default ``harmony.db`` beside the catalogue. Made when missing.
    workers : int, optional
        Worker processes; default all cores (``os.cpu_count()``). For ``"dask"`` with a
        scheduler address it is ignored (the cluster has its own workers).
    engine : {"local", "dask"}
    scheduler : str, optional
        Address of a Dask scheduler (``tcp://host:8786``); without it ``"dask"`` starts a local
        cluster of ``workers`` processes.
    settings : PaletteSettings, optional
        Default ``harmony.photo.palette.PaletteSettings()``. Its ``.key`` keys the palettes.
    progress : bool or None
        Progress bar on stderr: None shows it when stderr is a terminal.
    chunk_size : int, optional
        Images per task; see :func:`plan_chunks`.
    extractor : callable (path, settings) -> Palette, optional
        Default :func:`harmony.photo.palette.extract_palette`; must be picklable.
    fetch_settings : harmony.shop.fetch.FetchSettings, optional
        How image URLs are downloaded.
    max_removal : float
        Largest share (0..1) of the store's products this run may remove; more is refused and
        the store left unchanged. 1 allows any removal.

    Returns
    -------
    ExtractionSummary

    Raises
    ------
    CatalogueError
        The catalogue cannot be read, or it has no valid product row (the store is then left as
        it was: an empty export never empties the store).
    StoreError
        The store is of another schema version or not a store, another run is writing it
        (see :func:`writer_lock`), or the catalogue would remove more than ``max_removal`` of
        its products.
    HarmonyError
        Bad ``engine`` / ``workers``, Dask missing or its scheduler unreachable.
    """
    start = time.perf_counter()
    if engine not in ENGINES:
        raise HarmonyError(f"unknown engine {engine!r} (use one of {', '.join(ENGINES)})")
    if workers is None:
        workers = os.cpu_count() or 1
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise HarmonyError(f"workers must be a whole number of at least 1, got {workers!r}")
    if not 0.0 <= float(max_removal) <= 1.0:
        raise HarmonyError(f"max_removal must be a share between 0 and 1, got {max_removal!r}")
    if settings is None:
        from harmony.photo.palette import PaletteSettings

        settings = PaletteSettings()
    key = str(settings.key)
    cat = catalogue if isinstance(catalogue, Catalogue) else read_catalogue(catalogue)
    if not cat.products:
        # An empty export must not wipe a store (and every cached palette with it).
        detail = f"{len(cat.problems)} problems, first: {cat.problems[0]}" if cat.problems else "no product rows"
        raise CatalogueError(f"{cat.path}: no valid product ({detail}); store left unchanged")
    db_path = Path(db_path) if db_path is not None else cat.path.parent / DEFAULT_DB_NAME

    with writer_lock(db_path), Store(db_path, create=True) as store:
        hashes = hash_images(cat, store.file_hashes())
        url_hashes, fetched = download_images(cat, store, fetch_settings, _show_progress(progress))
        hashes.update(url_hashes)
        removed = store.sync_catalogue(cat, hashes, key, max_removal=max_removal)
        done = store.done(key)
        todo, cached = {}, set()
        for info in hashes.values():
            if info.sha256 is None:
                continue
            if info.sha256 in done:
                cached.add(info.sha256)
            elif info.abs_path in fetched:  # downloaded now, or unchanged with stored bytes
                data = fetched[info.abs_path].data or store.remote_bytes(info.abs_path)
                todo.setdefault(info.sha256, (info.abs_path, data))
            else:
                todo.setdefault(info.sha256, info.abs_path)
        unreadable = sum(1 for info in hashes.values() if info.sha256 is None)
        chunks = plan_chunks(sorted(todo.items(), key=lambda item: item[0]), workers, chunk_size)
        bar = tqdm(
            total=len(todo), unit="img", desc="extract", disable=not _show_progress(progress),
            file=sys.stderr, dynamic_ncols=True,
        )
        from harmony.photo.palette import COMPILED_MIN_IMAGES, load_kernels

        compiled = len(todo) >= COMPILED_MIN_IMAGES
        if compiled and engine == "local":  # here, once: the forked workers inherit them
            bar.set_description("extract (loading compiled kernels)")
            load_kernels()
            bar.set_description("extract")
        new = failed = 0
        try:
            # closing(): an exception here stops the engine (and its workers) at once.
            run = _run(chunks, key, settings, extractor, engine, workers, scheduler, compiled)
            with contextlib.closing(run) as done_chunks:
                for results in done_chunks:
                    store.record(results, key)
                    ok = sum(1 for _sha, palette, _reason in results if palette is not None)
                    new += ok
                    failed += len(results) - ok
                    bar.update(len(results))
        finally:
            bar.close()
        with_palette, scene_only = store.coverage()
        kept = len(store) - len(cat.products)  # the stored products of skipped rows
        no_palette = len(cat.products) + kept - with_palette
        distinct = len({info.sha256 for info in hashes.values() if info.sha256 is not None})
    return ExtractionSummary(
        products=len(cat.products) + kept,
        removed=removed,
        images=distinct + unreadable,
        new=new,
        cached=len(cached),
        failed=failed + unreadable,
        scene_only=scene_only,
        no_palette=no_palette,
        skipped_rows=cat.skipped_rows,
        seconds=time.perf_counter() - start,
        engine=engine,
        workers=workers,
        db_path=db_path,
        downloaded=sum(1 for r in fetched.values() if r.status == "downloaded"),
        unchanged=sum(1 for r in fetched.values() if r.status == "unchanged"),
        download_failed=sum(1 for r in fetched.values() if r.status == "failed"),
        kept=kept,
    )


def _run(chunks, key, settings, extractor, engine, workers, scheduler, compiled=False):
    """Yield the results of each chunk as it finishes (in completion order)."""
    if not chunks:
        return
    if engine == "local":
        yield from _run_local(chunks, settings, extractor, workers, compiled)
    else:
        yield from _run_dask(chunks, settings, extractor, workers, scheduler, compiled)


def _run_local(chunks, settings, extractor, workers, compiled=False):
    pool = ProcessPoolExecutor(
        max_workers=min(workers, len(chunks)),
        initializer=start_worker,
        initargs=(os.getpid(), tuple(sorted(_HELD_LOCK_FDS))),
    )
    try:
        futures = [pool.submit(extract_chunk, chunk, settings, extractor, compiled) for chunk in chunks]
        try:
            for future in as_completed(futures):
                yield future.result()
        except BrokenProcessPool:
            raise HarmonyError(
                "a worker process died (out of memory?); finished chunks are stored, run again to continue"
            ) from None
    except BaseException:
        # Interrupted (SIGTERM, Ctrl-C, an error, the caller stopped): the finished chunks are
        # stored; the ones running are dropped now rather than waited for.
        kill_workers(pool)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _run_dask(chunks, settings, extractor, workers, scheduler, compiled=False):
    try:
        from distributed import Client, KilledWorker, LocalCluster
        from distributed import as_completed as dask_completed
    except ImportError:
        raise HarmonyError("the dask engine needs dask.distributed: pip install 'harmony[dask]'") from None
    cluster = None
    try:
        if scheduler:
            try:
                client = Client(scheduler, timeout=SCHEDULER_TIMEOUT)
            except (OSError, TimeoutError, ValueError) as exc:  # ValueError: a malformed address
                raise HarmonyError(f"cannot reach the Dask scheduler {scheduler!r}: {exc}") from None
        else:
            cluster = LocalCluster(
                n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None
            )
            client = Client(cluster)
        try:
            futures = client.map(extract_chunk, chunks, settings=settings, extractor=extractor, compiled=compiled,
                                 pure=False)
            try:
                for future in dask_completed(futures):
                    yield future.result()
            except KilledWorker:
                raise HarmonyError(
                    "Dask workers died on a chunk (out of memory?); finished chunks are stored, run again to continue"
                ) from None
        finally:
            client.close()
    finally:
        if cluster is not None:
            cluster.close()
