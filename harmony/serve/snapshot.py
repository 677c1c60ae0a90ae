"""Immutable snapshots of the store, and the watcher that swaps in a new one when the store changes.

A :class:`Snapshot` holds what the server answers from: products, chosen palettes, per-category
partner lists and screen histograms. It is built once, never changed (its caches only grow), and
replaced whole: a request takes the current snapshot at its start and answers from it, so a reload
never blocks a request nor mixes two versions of the store in one answer.

:class:`LiveStore` watches the file through a read-only SQLite connection: ``PRAGMA data_version``
changes when another connection (``harmony extract``) commits, and a new file at the same path
(a new inode) is noticed by ``stat``. A reload reuses the data of every category whose products,
stock and palettes did not change, so a product added by an extraction costs the rebuild of its own
category, and its partners are then scored on the spot at the first request.
"""

import difflib
import hashlib
import logging
import os
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from harmony.errors import StoreError
from harmony.rules.screen import PaletteStack
from harmony.serve.engine import category_histograms, grid_for, pair_screen
from harmony.serve.watched import WatchedFile
from harmony.shop.catalogue import normalise_category
from harmony.shop.store import SCHEMA_VERSION, Store

__all__ = ["CategoryData", "Snapshot", "LiveStore", "load_snapshot", "POLL_SECONDS", "CACHE_ENTRIES",
           "SUGGEST_IDS"]

log = logging.getLogger("harmony.serve")

#: How often the watcher asks the store whether it changed (one cheap pragma and one stat).
POLL_SECONDS = 0.5

#: Answers kept per snapshot in the least-recently-used cache of computed partners.
CACHE_ENTRIES = 20_000

#: Unknown ids get "did you mean" hints only in stores of at most this many products (the
#: close-match search is linear in the number of ids).
SUGGEST_IDS = 5000


@dataclass(frozen=True, eq=False)
class CategoryData:
    """One category of a snapshot.

    Attributes
    ----------
    key : str
        The normalised category.
    products : tuple of Product
        All its products, by id.
    ids : tuple of str
        Products with a palette, by id (the rows of ``histograms``).
    partner_ids : tuple of str
        In-stock products with a palette, by id: the candidate partners (the feed's order).
    partner_rows : ndarray of int
        Their rows in ``ids``.
    partner_stack : PaletteStack
    partner_palettes : tuple of Palette
    histograms : dict
        BinGrid -> CategoryHistograms of ``ids`` (made at load for the grids the rules use).
    fingerprint : tuple
        (id, palette hash, in stock) of every product: equal fingerprints mean equal data.
    """

    key: str
    products: tuple
    ids: tuple
    partner_ids: tuple
    partner_rows: np.ndarray
    partner_stack: PaletteStack
    partner_palettes: tuple
    histograms: dict
    fingerprint: tuple


class _Lru:
    """A small thread-safe least-recently-used cache."""

    def __init__(self, size):
        self.size = int(size)
        self.data = OrderedDict()
        self.lock = threading.Lock()

    def get(self, key):
        with self.lock:
            value = self.data.get(key)
            if value is not None:
                self.data.move_to_end(key)
            return value

    def put(self, key, value):
        with self.lock:
            self.data[key] = value
            self.data.move_to_end(key)
            while len(self.data) > self.size:
                self.data.popitem(last=False)

    def __len__(self):
        return len(self.data)


class Snapshot:
    """What the server answers from, read from the store at one moment.

    Offers the reading methods of :class:`harmony.shop.store.Store` that the suggestion stages use
    (``product``, ``products``, ``palette``, ``palettes``, ``categories``), so the room search runs
    on it unchanged; its errors never name a file of the server's machine. The rules and the
    curation it answers under belong to it, so one answer never mixes two versions of either.
    """

    def __init__(self, *, name, generation, products, palettes, images, settings_key, categories, rules,
                 screens=None, curation=None):
        self.path = name  # the store's file name only: error messages reach HTTP clients
        self.generation = int(generation)
        self.curation = curation
        self.loaded_at = time.time()
        self._products = products
        self._palettes = palettes
        self.images = images
        self.settings_key = settings_key
        self.category_data = categories
        self.rules = rules
        self._screens = dict(screens or {})
        self._screen_lock = threading.Lock()
        self.cache = _Lru(CACHE_ENTRIES)
        # The same answers by the request as sent (raw path, raw query), for the fast path.
        self.answers = _Lru(CACHE_ENTRIES)
        self.palette_count = len(palettes)
        digest = hashlib.sha256(f"{SCHEMA_VERSION}\x1f{settings_key}".encode())
        for pid in sorted(products):
            p = products[pid]
            pal = palettes.get(pid)
            digest.update(f"\x1e{pid}\x1f{p.category_key}\x1f{p.price!r}\x1f{p.stock}\x1f"
                          f"{'' if pal is None else pal.sha256}".encode())
        self.version = digest.hexdigest()[:16]

    def with_curation(self, curation, generation):
        """The same store data, rules and screens under another curation, with empty answer caches."""
        new = object.__new__(Snapshot)
        new.__dict__.update(self.__dict__)
        new.generation, new.curation, new.loaded_at = int(generation), curation, time.time()
        new._screens = dict(self._screens)
        new._screen_lock = threading.Lock()
        new.cache, new.answers = _Lru(CACHE_ENTRIES), _Lru(CACHE_ENTRIES)
        return new

    # -- the Store reading interface ----------------------------------------------------------

    def product(self, product_id):
        found = self._products.get(str(product_id))
        if found is None:
            hint = ""
            if len(self._products) <= SUGGEST_IDS:
                close = difflib.get_close_matches(str(product_id), list(self._products), n=3)
                hint = f" (did you mean {', '.join(repr(c) for c in close)}?)" if close else ""
            raise StoreError(f"unknown product id {str(product_id)!r}{hint}")
        return found

    def products(self, category=None):
        if category is None:
            return [self._products[k] for k in sorted(self._products)]
        data = self.category_data.get(normalise_category(category))
        return [] if data is None else list(data.products)

    def palette(self, product_id):
        return self._palettes.get(self.product(product_id).id)

    def palettes(self, category=None):
        if category is None:
            return dict(self._palettes)
        data = self.category_data.get(normalise_category(category))
        if data is None:
            return {}
        return {pid: self._palettes[pid] for pid in data.ids}

    def categories(self):
        return sorted(self.category_data)

    def __len__(self):
        return len(self._products)

    # -- the screen of one category pair, made once per snapshot (or kept from the last) --------

    def screen(self, own, target, pair_rules):
        """The :class:`~harmony.serve.engine.PairScreen` of categories ``own`` -> ``target``."""
        key = (own, target)
        found = self._screens.get(key)
        if found is not None:
            return found
        with self._screen_lock:
            found = self._screens.get(key)
            if found is None:
                a, b = self.category_data[own], self.category_data[target]
                grid = grid_for(pair_rules)
                found = pair_screen(pair_rules, _histograms(a, self._palettes, grid),
                                    _histograms(b, self._palettes, grid), b.partner_rows)
                self._screens[key] = found
        return found

    def screens_to_keep(self, new_categories):
        """The screens whose two categories are unchanged in ``new_categories`` (same objects)."""
        return {k: v for k, v in self._screens.items()
                if new_categories.get(k[0]) is self.category_data.get(k[0])
                and new_categories.get(k[1]) is self.category_data.get(k[1])}


def _histograms(data, palettes, grid):
    found = data.histograms.get(grid)
    if found is None:
        # A grid the load did not foresee (a rules pair with its own neutral fade): made once.
        found = category_histograms([palettes[i] for i in data.ids], grid)
        data.histograms[grid] = found
    return found


def _grids(rules):
    """The screen grids of every pair the rules score, at least the default one."""
    grids = {grid_for(rules.default_rules())}
    for a, b in getattr(rules, "pairs", {}):
        grids.add(grid_for(rules.for_pair(a, b)))
    return grids


def load_snapshot(path, rules, previous=None, generation=0, curation=None):
    """Read the store at ``path`` (read-only) into a :class:`Snapshot`.

    Categories whose fingerprint equals the one in ``previous`` are taken over as they are, with
    their histograms, and so are the screens between two such categories when the rules are the same.

    Raises
    ------
    StoreError
        The file is not a palette store.
    """
    with Store(path, read_only=True) as store:
        products = store.products()
        palettes = store.palettes()
        images = store.chosen_images()
        settings_key = store.settings_key
    by_cat = {}
    for p in products:
        by_cat.setdefault(p.category_key, []).append(p)
    grids = _grids(rules)
    old = {} if previous is None else previous.category_data
    categories = {}
    for key, members in sorted(by_cat.items()):
        fingerprint = tuple((p.id, None if p.id not in palettes else palettes[p.id].sha256, p.in_stock())
                            for p in members)
        same = old.get(key)
        if same is not None and same.fingerprint == fingerprint:
            categories[key] = same
            continue
        ids = tuple(p.id for p in members if p.id in palettes)
        partners = [(row, p.id) for row, p in enumerate(q for q in members if q.id in palettes) if p.in_stock()]
        partner_ids = tuple(pid for _, pid in partners)
        partner_palettes = tuple(palettes[pid] for pid in partner_ids)
        hist = {grid: category_histograms([palettes[i] for i in ids], grid) for grid in grids}
        categories[key] = CategoryData(
            key=key,
            products=tuple(members),
            ids=ids,
            partner_ids=partner_ids,
            partner_rows=np.array([row for row, _ in partners], dtype=np.int64),
            partner_stack=PaletteStack.from_palettes(partner_palettes),
            partner_palettes=partner_palettes,
            histograms=hist,
            fingerprint=fingerprint,
        )
    screens = None if previous is None or previous.rules is not rules else previous.screens_to_keep(categories)
    return Snapshot(
        name=os.path.basename(str(path)),
        generation=generation,
        products={p.id: p for p in products},
        palettes=palettes,
        images=images,
        settings_key=settings_key,
        categories=categories,
        rules=rules,
        screens=screens,
        curation=curation,
    )


class LiveStore:
    """The current snapshot of a store, replaced when the store, the rules file or the curation file changes.

    Parameters
    ----------
    path : str or pathlib.Path
    rules : harmony.rules.RuleSet
    poll_seconds : float
        How often the watcher thread (:meth:`start`) looks for a change.
    rules_path : str or pathlib.Path, optional
        The file ``rules`` was read from; edits to it are loaded while the server runs (a new
        snapshot with the new rules; the store's data is taken over, the screens are made again).
    curation : harmony.suggest.curation.Curation, optional
    curation_path : str or pathlib.Path, optional
        The file ``curation`` was read from; edits to it are loaded while the server runs (a new
        snapshot with the same data and screens, and empty answer caches).
    rules_version, curation_version : harmony.serve.watched.FileVersion, optional
        :func:`harmony.serve.watched.file_version` of each file taken before the caller read it,
        so that an edit made while the server starts is loaded too.

    Attributes
    ----------
    snapshot : Snapshot
        Read it once per request; assignment of a new one is atomic.
    last_error : str or None
        Why the store's last change could not be loaded.
    """

    def __init__(self, path, rules, poll_seconds=POLL_SECONDS, *, rules_path=None, curation=None,
                 curation_path=None, rules_version=None, curation_version=None):
        from harmony.rules import load_rules

        self.path = os.fspath(path)
        self.poll_seconds = float(poll_seconds)
        self._probe = Store(self.path, read_only=True)
        self._inode = self._stat()
        self._seen = self._version()
        self.snapshot = load_snapshot(self.path, rules, curation=curation)
        self.rules_file = (None if rules_path is None
                           else WatchedFile(rules_path, "rules file", load_rules, rules, rules_version))
        self.curation_file = (None if curation_path is None
                              else WatchedFile(curation_path, "curation file", self._read_curation, curation,
                                               curation_version))
        self.reloads = 0
        self.last_error = None
        self._stop = threading.Event()
        self._thread = None
        self._warmer = None

    def _read_curation(self, path):
        """An edited curation file, its unknown product ids logged (as the command warns of them)."""
        from harmony.suggest.curation import load_curation, unknown_product_warnings

        curation = load_curation(path)
        snap = self.snapshot
        products = {pid: p.category_key for pid, p in snap._products.items()}
        for message in unknown_product_warnings(curation, products, snap.categories()):
            log.warning("%s", message.replace(str(path), os.path.basename(str(path))))
        return curation

    @property
    def rules(self):
        """The rules in force."""
        return self.snapshot.rules

    @property
    def rules_sha256(self):
        """Hex SHA-256 of the rules file in force (None when the rules did not come from a watched file)."""
        return None if self.rules_file is None else self.rules_file.sha256

    @property
    def reload_errors(self):
        """One line for each watched file whose current version is not in force, and for the store."""
        out = [f.error for f in (self.rules_file, self.curation_file) if f is not None and f.error]
        if self.last_error:
            out.append(f"{self.snapshot.path}: " + self.last_error.replace(self.path, self.snapshot.path))
        return out

    def _stat(self):
        st = os.stat(self.path)
        return st.st_dev, st.st_ino

    def _version(self):
        """The store's change token: (device, inode, data_version); a new file reopens the probe."""
        inode = self._stat()
        if inode != self._inode:
            self._probe.close()
            self._probe = Store(self.path, read_only=True)
            self._inode = inode
        return inode + (self._probe.data_version(),)

    def check(self):
        """Look once at the store and the watched files; swap in a new snapshot when one changed.
        Returns whether a new snapshot was swapped in.

        A failed reload keeps the last good snapshot (or file) and is tried again at the next look
        (at the next edit, for a file).
        """
        old = self.snapshot
        for watched in (self.rules_file, self.curation_file):
            if watched is not None:
                watched.poll()
        # What the files hold now; a snapshot that does not answer under it is replaced.
        rules = old.rules if self.rules_file is None else self.rules_file.value
        curation = old.curation if self.curation_file is None else self.curation_file.value
        try:
            version = self._version()
            if version != self._seen or rules is not old.rules:
                fresh = load_snapshot(self.path, rules, previous=old, generation=old.generation + 1,
                                      curation=curation)
            elif curation is not old.curation:
                fresh = old.with_curation(curation, old.generation + 1)
            else:
                return False
        except Exception as exc:  # StoreError, OSError, sqlite3 errors of a file replaced mid-read
            if str(exc) != self.last_error:
                log.warning("store not reloaded: %s", exc)
            self.last_error = str(exc)
            return False
        self._seen = version
        self.last_error = None
        self.snapshot = fresh
        self.reloads += 1
        self._warm_up()
        log.info("snapshot %d: %d products, version %s", fresh.generation, len(fresh), fresh.version)
        return True

    def _warm(self, snap):
        """Build the screens of every category pair the rules score whose partner side is too large
        for the exact path, so that first requests do not pay for them; stops when replaced."""
        from harmony.serve.engine import EXACT_ROW

        for own in snap.categories():
            for target in snap.categories():
                if self._stop.is_set() or self.snapshot is not snap:
                    return
                if own == target or not snap.rules.pairs_with(own, target):
                    continue
                if len(snap.category_data[target].partner_ids) > EXACT_ROW and snap.category_data[own].ids:
                    snap.screen(own, target, snap.rules.for_pair(own, target))

    @property
    def warming(self):
        """Whether screens of the current snapshot are still being built in the background."""
        return self._warmer is not None and self._warmer.is_alive()

    def _warm_up(self):
        self._warmer = threading.Thread(target=self._warm, args=(self.snapshot,), name="harmony-screen-warm-up",
                                        daemon=True)
        self._warmer.start()

    def _run(self):
        while not self._stop.wait(self.poll_seconds):
            self.check()

    def start(self):
        """Start the watcher thread (a daemon; :meth:`close` stops it)."""
        if self._thread is None:
            self._thread = threading.Thread(target=self._run, name="harmony-store-watcher", daemon=True)
            self._thread.start()
            self._warm_up()

    def close(self):
        self._stop.set()
        for thread in (self._thread, self._warmer):
            if thread is not None:
                thread.join(timeout=30)
        self._thread = self._warmer = None
        self._probe.close()
