"""The palette store: one SQLite file holding products, images and their palettes.

Images are keyed by the SHA-256 of their bytes, palettes by (image hash, extraction settings
key), so a re-run extracts only new or changed images, and a change of settings re-extracts
only under the new key. Products are replaced by each run's catalogue; removed products go.

Every write is one transaction. The file runs in SQLite's write-ahead-log mode, so readers
(feeds, reports) can open it while an extraction writes, and a process killed at any moment
leaves the last committed state: the next run continues from there.

Every SQLite failure, at any call, becomes one :class:`StoreError` naming the file: a damaged
file ("the store is damaged"), a full disk, a read-only folder (SQLite must make the ``-wal``
and ``-shm`` files beside the store even to read it).

A product's *chosen* palette is that of its first studio (non-scene) image that has one; a
room-scene image is used only when the product has no studio palette at all, and its confidence
is then capped at :data:`SCENE_CONFIDENCE`.
"""

import dataclasses
import difflib
import json
import os
import sqlite3
from pathlib import Path

import numpy as np

from harmony.errors import StoreError
from harmony.photo.palette import Palette
from harmony.shop.catalogue import Product, normalise_category

__all__ = ["Store", "SCHEMA_VERSION", "SCENE_CONFIDENCE", "FileHash"]

#: Version of the table layout below; a store of another version is refused with a message.
SCHEMA_VERSION = 1

#: Highest confidence a palette chosen from a room-scene photo may carry (this project's
#: convention: below one half means "guessed, look at it").
SCENE_CONFIDENCE = 0.4

_SCHEMA = """
CREATE TABLE schema_version (version INTEGER NOT NULL);
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE products (
    id TEXT PRIMARY KEY,
    category TEXT NOT NULL,
    category_key TEXT NOT NULL,
    price REAL NOT NULL,
    stock INTEGER,
    title TEXT NOT NULL,
    currency TEXT NOT NULL,
    attributes TEXT NOT NULL,
    row INTEGER NOT NULL
);
CREATE INDEX products_category ON products (category_key);
CREATE TABLE images (
    sha256 TEXT PRIMARY KEY,
    size INTEGER NOT NULL
);
CREATE TABLE product_images (
    product_id TEXT NOT NULL REFERENCES products (id) ON DELETE CASCADE,
    position INTEGER NOT NULL,
    path TEXT NOT NULL,
    abs_path TEXT NOT NULL,
    sha256 TEXT REFERENCES images (sha256),
    size INTEGER,
    mtime_ns INTEGER,
    error TEXT,
    PRIMARY KEY (product_id, position)
);
CREATE INDEX product_images_sha ON product_images (sha256);
CREATE TABLE palettes (
    sha256 TEXT NOT NULL REFERENCES images (sha256) ON DELETE CASCADE,
    settings_key TEXT NOT NULL,
    k INTEGER NOT NULL,
    jab BLOB NOT NULL,
    weights BLOB NOT NULL,
    width INTEGER NOT NULL,
    height INTEGER NOT NULL,
    background BLOB,
    background_share REAL NOT NULL,
    scene INTEGER NOT NULL,
    confidence REAL NOT NULL,
    flags TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (sha256, settings_key)
);
CREATE TABLE failures (
    sha256 TEXT NOT NULL REFERENCES images (sha256) ON DELETE CASCADE,
    settings_key TEXT NOT NULL,
    reason TEXT NOT NULL,
    PRIMARY KEY (sha256, settings_key)
);
"""

#: Downloaded images (catalogue ``image`` URLs): the server's validators, the content hash, the
#: time of the last answer and the bytes themselves (the report embeds them; a settings change
#: re-extracts from them). Made on the first write of a store, so a store of schema 1 made
#: before downloads existed still opens; readers treat a missing table as empty.
_REMOTE_SCHEMA = """
CREATE TABLE IF NOT EXISTS remote_images (
    url TEXT PRIMARY KEY,
    sha256 TEXT NOT NULL,
    etag TEXT,
    last_modified TEXT,
    fetched_at REAL NOT NULL,
    content BLOB NOT NULL
)
"""


@dataclasses.dataclass(frozen=True)
class FileHash:
    """What the store knows of one image file: its content hash and the stat it was taken at.

    ``sha256`` is None and ``error`` says why when the file could not be read.
    """

    abs_path: str
    sha256: str | None
    size: int | None = None
    mtime_ns: int | None = None
    error: str | None = None


def _blob(arr):
    return np.ascontiguousarray(arr, dtype="<f8").tobytes()


def _unblob(data, shape):
    return np.frombuffer(data, dtype="<f8").reshape(shape)


def _explain(path, exc, doing="read"):
    """One line for an SQLite failure on the store at ``path``."""
    text = str(exc)
    if "malformed" in text:
        return (f"{path}: the store is damaged ({text}); extract again into a new --db file "
                f"(the palettes of unchanged images are quick to redo)")
    if "database or disk is full" in text:
        return f"{path}: cannot {doing}: the disk is full; nothing of this step was stored"
    if "disk I/O error" in text:
        return f"{path}: cannot {doing}: disk I/O error (a full disk or a failing device?); nothing of this step was stored"
    return f"{path}: cannot {doing}: {text}"


class _Cursor:
    """Iterates an SQLite cursor, turning its failures into StoreError."""

    def __init__(self, cursor, path):
        self._cursor, self._path = cursor, path

    def fetchone(self):
        try:
            return self._cursor.fetchone()
        except sqlite3.Error as exc:
            raise StoreError(_explain(self._path, exc)) from None

    def fetchall(self):
        try:
            return self._cursor.fetchall()
        except sqlite3.Error as exc:
            raise StoreError(_explain(self._path, exc)) from None

    def __iter__(self):
        while True:
            try:
                row = self._cursor.fetchone()
            except sqlite3.Error as exc:
                raise StoreError(_explain(self._path, exc)) from None
            if row is None:
                return
            yield row


class _Connection:
    """The SQLite connection of a Store: every call's failure is a StoreError naming the file."""

    def __init__(self, db, path):
        self._conn, self._path = db, path

    def execute(self, sql, args=()):
        try:
            return _Cursor(self._conn.execute(sql, args), self._path)
        except sqlite3.Error as exc:
            doing = "read" if sql.lstrip().upper().startswith(("SELECT", "PRAGMA")) else "write"
            raise StoreError(_explain(self._path, exc, doing)) from None
        except OverflowError as exc:  # a Python int past SQLite's 64-bit INTEGER
            raise StoreError(f"{self._path}: cannot write: {exc}") from None

    def executemany(self, sql, rows):
        try:
            return _Cursor(self._conn.executemany(sql, rows), self._path)
        except sqlite3.Error as exc:
            raise StoreError(_explain(self._path, exc, "write")) from None
        except OverflowError as exc:
            raise StoreError(f"{self._path}: cannot write: {exc}") from None

    @property
    def in_transaction(self):
        return self._conn.in_transaction

    def close(self):
        try:
            self._conn.close()
        except sqlite3.Error:  # the last checkpoint failed (full disk): the WAL keeps the data
            pass


#: The first bytes of every SQLite 3 database file (SQLite file format documentation, section 1.3).
_SQLITE_HEADER = b"SQLite format 3\x00"


class Store:
    """A palette store in one SQLite file.

    Parameters
    ----------
    path : str or pathlib.Path
        The database file.
    create : bool
        Make an empty store when the file does not exist (otherwise that is an error).
    read_only : bool
        Open the file read-only (SQLite URI ``mode=ro``): no statement of this connection can
        change it, and no pragma is set (a live server reading while an extraction writes).

    Raises
    ------
    StoreError
        The file is missing (and ``create`` is false), is not a harmony store, or has another
        schema version.

    Notes
    -----
    Use as a context manager, or call :meth:`close`. Reading methods return products sorted
    by id and palettes of the settings used by the last extraction (:attr:`settings_key`).
    """

    def __init__(self, path, create=False, read_only=False):
        self.path = Path(path)
        if create and read_only:
            raise ValueError("a store cannot be both created and opened read-only")
        exists = self.path.exists()
        if not exists and not create:
            raise StoreError(
                f"{self.path}: no palette store here (make one with 'harmony extract CATALOGUE --db {self.path}')"
            )
        if exists and self.path.is_dir():
            raise StoreError(f"{self.path}: is a folder, not a palette store")
        if exists and self.path.stat().st_size > 0:
            # Never let SQLite turn some other file into a store (it would, for a short one).
            with open(self.path, "rb") as handle:
                if handle.read(len(_SQLITE_HEADER)) != _SQLITE_HEADER:
                    raise StoreError(f"{self.path}: not a palette store (not an SQLite file); left untouched")
        self._may_create = bool(create)
        self.read_only = bool(read_only)
        try:
            if self.read_only:
                uri = self.path.resolve().as_uri() + "?mode=ro"
                raw = sqlite3.connect(uri, uri=True, timeout=60.0, isolation_level=None, check_same_thread=False)
            else:
                raw = sqlite3.connect(self.path, timeout=60.0, isolation_level=None)
            self._db = _Connection(raw, self.path)
        except sqlite3.Error as exc:
            raise StoreError(f"{self.path}: cannot open: {exc}") from None
        try:
            self._open()
        except StoreError as exc:
            self._db.close()
            cause = str(exc)
            if exists and ("unable to open" in cause or "readonly" in cause or "read-only" in cause):
                folder = self.path.parent if str(self.path.parent) else "."
                if not os.access(folder, os.W_OK) or not os.access(self.path, os.W_OK):
                    raise StoreError(
                        f"{self.path}: cannot open the store: its folder or file is read-only, and SQLite "
                        f"must write {self.path.name}-wal and {self.path.name}-shm beside it even to read; "
                        f"copy it to a writable folder"
                    ) from None
            if "file is not a database" in cause:
                raise StoreError(f"{self.path}: not a palette store (file is not a database)") from None
            raise

    @classmethod
    def create(cls, path):
        """Open the store at ``path``, making an empty one if there is none."""
        return cls(path, create=True)

    def _tables(self):
        return {r[0] for r in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}

    def _open(self):
        db = self._db
        if not self.read_only:
            db.execute("PRAGMA foreign_keys = ON")
        tables = self._tables()
        if not tables:
            if not self._may_create:
                raise StoreError(f"{self.path}: an empty file, not a palette store; left untouched")
            # WAL: readers never block the writer; a killed writer loses only its open transaction.
            db.execute("PRAGMA journal_mode = WAL")
            # Another process may be making the same new store right now: look again while
            # holding the write lock, and make the tables only if they are still not there.
            with self._transaction():
                tables = self._tables()
                if not tables:
                    for statement in _SCHEMA.split(";"):
                        if statement.strip():
                            db.execute(statement)
                    db.execute("INSERT INTO schema_version (version) VALUES (?)", (SCHEMA_VERSION,))
                    tables = {"schema_version"}
        if "schema_version" not in tables:
            raise StoreError(f"{self.path}: an SQLite file, but not a palette store (no schema_version table)")
        row = db.execute("SELECT version FROM schema_version").fetchone()
        version = None if row is None else row[0]
        if version != SCHEMA_VERSION:
            raise StoreError(
                f"{self.path}: store schema version {version}, this harmony reads version {SCHEMA_VERSION}; "
                f"extract again into a new --db file"
            )
        columns = {r[1] for r in db.execute("PRAGMA table_info(palettes)")}
        if "flags" not in columns and not self.read_only:
            # Stores made before palettes carried flags: add the column (their palettes are of
            # an older method version and are extracted again anyway).
            with self._transaction():
                db.execute("ALTER TABLE palettes ADD COLUMN flags TEXT NOT NULL DEFAULT ''")
            columns.add("flags")
        self._flags_column = "pal.flags" if "flags" in columns else "''"
        if self.read_only:
            return
        db.execute("PRAGMA journal_mode = WAL")
        if self._may_create:  # a writer: downloads need their table (see _REMOTE_SCHEMA)
            db.execute(_REMOTE_SCHEMA)
        # NORMAL is safe in WAL mode against a killed process (only power loss may drop the
        # last commits), and much faster than FULL (SQLite documentation, "PRAGMA synchronous").
        db.execute("PRAGMA synchronous = NORMAL")

    # -- plumbing ------------------------------------------------------------------------------

    class _Tx:
        """One write transaction; an SQLite failure becomes a StoreError naming the file."""

        def __init__(self, db, path):
            self.db, self.path = db, path

        def __enter__(self):
            self.db.execute("BEGIN IMMEDIATE")
            return self.db

        def __exit__(self, kind, value, tb):
            if kind is None:
                try:
                    self.db.execute("COMMIT")
                    return False
                except StoreError as exc:
                    value = exc
            # SQLite may have rolled back by itself (a full disk does): then there is no
            # transaction left to roll back, and asking would only raise a second error.
            if self.db.in_transaction:
                try:
                    self.db.execute("ROLLBACK")
                except StoreError:
                    pass
            if isinstance(value, StoreError) and kind is None:
                raise value
            return False

    def _transaction(self):
        return Store._Tx(self._db, self.path)

    def close(self):
        """Close the database connection (never raises)."""
        self._db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def _meta(self, key, default=None):
        row = self._db.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return default if row is None else row[0]

    # -- reading -------------------------------------------------------------------------------

    @property
    def settings_key(self):
        """Key of the extraction settings of the last run ('' before the first run)."""
        return self._meta("settings_key", "")

    @property
    def catalogue_path(self):
        """Absolute path of the catalogue of the last run, or None."""
        value = self._meta("catalogue_path")
        return None if value is None else Path(value)

    def _product_from_row(self, row, images):
        pid, category, _key, price, stock, title, currency, attributes, _row = row
        return Product(
            id=pid,
            category=category,
            price=float(price),
            stock=None if stock is None else int(stock),
            title=title,
            currency=currency,
            images=tuple(images),
            attributes=json.loads(attributes),
        )

    def _images_by_product(self, category_key=None, product_id=None):
        sql = "SELECT pi.product_id, pi.path FROM product_images pi JOIN products p ON p.id = pi.product_id"
        where, args = self._filter(category_key, product_id)
        out = {}
        for pid, path in self._db.execute(f"{sql}{where} ORDER BY pi.product_id, pi.position", args):
            out.setdefault(pid, []).append(path)
        return out

    @staticmethod
    def _filter(category_key, product_id):
        if product_id is not None:
            return " WHERE p.id = ?", (product_id,)
        if category_key is not None:
            return " WHERE p.category_key = ?", (category_key,)
        return "", ()

    def products(self, category=None):
        """Products (all, or of one category, compared normalised), sorted by id."""
        key = None if category is None else normalise_category(category)
        images = self._images_by_product(category_key=key)
        where, args = self._filter(key, None)
        rows = self._db.execute(f"SELECT * FROM products p{where} ORDER BY p.id", args)
        return [self._product_from_row(r, images.get(r[0], ())) for r in rows]

    def product(self, product_id):
        """One product by id.

        Raises
        ------
        StoreError
            No such id; the message suggests close ids.
        """
        row = self._db.execute("SELECT * FROM products p WHERE p.id = ?", (str(product_id),)).fetchone()
        if row is None:
            ids = [r[0] for r in self._db.execute("SELECT id FROM products")]
            close = difflib.get_close_matches(str(product_id), ids, n=3)
            hint = f" (did you mean {', '.join(repr(c) for c in close)}?)" if close else ""
            raise StoreError(f"{self.path}: unknown product id {str(product_id)!r}{hint}")
        images = self._images_by_product(product_id=row[0])
        return self._product_from_row(row, images.get(row[0], ()))

    def categories(self):
        """The normalised categories present, sorted."""
        return [r[0] for r in self._db.execute("SELECT DISTINCT category_key FROM products ORDER BY 1")]

    def __len__(self):
        return int(self._db.execute("SELECT COUNT(*) FROM products").fetchone()[0])

    def _chosen(self, category_key=None, product_id=None):
        """{product id: (Palette, abs image path, image as written)} of the chosen palettes."""
        where, args = self._filter(category_key, product_id)
        sql = (
            "SELECT pi.product_id, pi.path, pi.abs_path, pi.sha256, pal.k, pal.jab, pal.weights, pal.width,"
            " pal.height, pal.background, pal.background_share, pal.scene, pal.confidence, "
            f"{self._flags_column}"
            " FROM product_images pi JOIN products p ON p.id = pi.product_id"
            " JOIN palettes pal ON pal.sha256 = pi.sha256 AND pal.settings_key = ?"
            f"{where} ORDER BY pi.product_id, pi.position"
        )
        studio, scene = {}, {}
        for row in self._db.execute(sql, (self.settings_key, *args)):
            pid, is_scene = row[0], bool(row[11])
            target = scene if is_scene else studio
            if pid not in target:
                target[pid] = row
        chosen = {}
        for pid in sorted(set(studio) | set(scene)):
            row = studio.get(pid) or scene[pid]
            chosen[pid] = (self._palette_from_row(row), Path(row[2]), row[1])
        return chosen

    @staticmethod
    def _palette_from_row(row):
        _pid, _path, abs_path, sha, k, jab, weights, width, height, bg, share, scene, conf, flags = row
        confidence = float(conf)
        if scene:
            confidence = min(confidence, SCENE_CONFIDENCE)
        return Palette(
            jab=_unblob(jab, (k, 3)),
            weights=_unblob(weights, (k,)),
            sha256=sha,
            width=int(width),
            height=int(height),
            background_jab=None if bg is None else _unblob(bg, (3,)),
            background_share=float(share),
            scene=bool(scene),
            confidence=confidence,
            flags=tuple(f for f in flags.split(",") if f),
            source=abs_path,
        )

    def palette(self, product_id):
        """The product's chosen palette, or None when it has none (yet, or all images failed).

        Raises
        ------
        StoreError
            Unknown product id.
        """
        pid = self.product(product_id).id
        found = self._chosen(product_id=pid).get(pid)
        return None if found is None else found[0]

    def palettes(self, category=None):
        """{product id: chosen Palette} for every product (of ``category``) that has one."""
        key = None if category is None else normalise_category(category)
        return {pid: found[0] for pid, found in self._chosen(category_key=key).items()}

    def image_path(self, product_id):
        """Absolute path of the image the product's chosen palette came from, or None."""
        pid = self.product(product_id).id
        found = self._chosen(product_id=pid).get(pid)
        return None if found is None else found[1]

    def chosen_images(self, category=None):
        """{product id: image path as written in the catalogue} of the chosen palettes."""
        key = None if category is None else normalise_category(category)
        return {pid: found[2] for pid, found in self._chosen(category_key=key).items()}

    def scene_only(self):
        """Ids of products whose chosen palette comes from a room-scene photo, sorted."""
        return sorted(pid for pid, found in self._chosen().items() if found[0].scene)

    def coverage(self):
        """(products with a chosen palette, of which scene-only), counted without loading palettes."""
        sql = (
            "SELECT MIN(pal.scene) FROM product_images pi"
            " JOIN palettes pal ON pal.sha256 = pi.sha256 AND pal.settings_key = ? GROUP BY pi.product_id"
        )
        flags = [r[0] for r in self._db.execute(sql, (self.settings_key,))]
        return len(flags), sum(1 for f in flags if f)

    def failures(self):
        """Images that yielded no palette: a list of (product id, image as written, reason).

        Covers files that could not be read and extraction failures under the current settings,
        sorted by product id and image position.
        """
        sql = (
            "SELECT pi.product_id, pi.position, pi.path, COALESCE(pi.error, f.reason) FROM product_images pi"
            " LEFT JOIN failures f ON f.sha256 = pi.sha256 AND f.settings_key = ?"
            " WHERE pi.error IS NOT NULL OR f.reason IS NOT NULL ORDER BY pi.product_id, pi.position"
        )
        return [(pid, path, reason) for pid, _pos, path, reason in self._db.execute(sql, (self.settings_key,))]

    def data_version(self):
        """SQLite's ``PRAGMA data_version`` of this connection: it changes when another connection
        commits to the file, so a reader can tell cheaply whether to read again."""
        return int(self._db.execute("PRAGMA data_version").fetchone()[0])

    def counts(self):
        """Row counts: products, images, palettes (all settings), failures (all settings)."""
        q = self._db.execute
        return {
            name: int(q(f"SELECT COUNT(*) FROM {name}").fetchone()[0])
            for name in ("products", "images", "palettes", "failures")
        }

    # -- writing (used by harmony.shop.engine) ------------------------------------------------------

    def file_hashes(self):
        """{absolute image path: FileHash} remembered from earlier runs (for the stat cache)."""
        rows = self._db.execute(
            "SELECT abs_path, sha256, size, mtime_ns, error FROM product_images WHERE sha256 IS NOT NULL"
        )
        return {r[0]: FileHash(*r) for r in rows}

    def done(self, settings_key):
        """Image hashes that already have a palette or a recorded failure under ``settings_key``."""
        q = self._db.execute
        have = {r[0] for r in q("SELECT sha256 FROM palettes WHERE settings_key = ?", (settings_key,))}
        have |= {r[0] for r in q("SELECT sha256 FROM failures WHERE settings_key = ?", (settings_key,))}
        return have

    def sync_catalogue(self, catalogue, hashes, settings_key, max_removal=1.0):
        """Replace the products by ``catalogue``'s, in one transaction.

        Parameters
        ----------
        catalogue : harmony.shop.catalogue.Catalogue
        hashes : dict of str to FileHash
            By absolute image path (``catalogue.image_file(image)``), for every image.
        settings_key : str
            The extraction settings of this run; reading methods use its palettes from now on.
        max_removal : float
            Largest share (0..1) of the stored products this catalogue may remove.

        Returns
        -------
        int
            Products that were in the store and are not in ``catalogue`` (now removed). A product
            whose row the catalogue skipped for a problem (``catalogue.skipped_ids``) is kept as
            stored, with its images and palettes, and not counted.

        Raises
        ------
        StoreError
            More than ``max_removal`` of the stored products would go; nothing is changed.

        Notes
        -----
        Removed products go; images no longer used by any product go with their palettes and
        failures (of every settings key).
        """
        products, images, links = [], {}, []
        for row, product in enumerate(catalogue.products):
            products.append((
                product.id,
                product.category,
                product.category_key,
                float(product.price),
                product.stock,
                product.title,
                product.currency,
                json.dumps(product.attributes, sort_keys=True),
                row,
            ))
            for position, image in enumerate(product.images):
                info = hashes[catalogue.image_file(image)]
                if info.sha256 is not None:
                    images.setdefault(info.sha256, info.size)
                links.append(
                    (product.id, position, image, info.abs_path, info.sha256, info.size, info.mtime_ns, info.error)
                )
        with self._transaction() as db:
            before = {r[0] for r in db.execute("SELECT id FROM products")}
            kept = sorted((set(getattr(catalogue, "skipped_ids", ())) & before) - {p[0] for p in products})
            held, held_links = [], []
            for pid in kept:  # rows the catalogue skipped for a problem: the stored product stays
                held.extend(db.execute("SELECT * FROM products WHERE id = ?", (pid,)).fetchall())
                held_links.extend(db.execute("SELECT * FROM product_images WHERE product_id = ?", (pid,)).fetchall())
            removed = len(before - {p[0] for p in products} - set(kept))
            if before and removed > max_removal * len(before):
                raise StoreError(
                    f"{self.path}: the catalogue {catalogue.path.name} would remove {removed} of the store's "
                    f"{len(before)} products ({100.0 * removed / len(before):.0f} %, over the limit of "
                    f"{100.0 * max_removal:g} %); store left unchanged (a cut-short export? if the removal is "
                    f"meant, raise the limit with --max-removal PERCENT)"
                )
            db.execute("DELETE FROM product_images")
            db.execute("DELETE FROM products")
            db.executemany("INSERT INTO products VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)", products + held)
            db.executemany("INSERT OR IGNORE INTO images (sha256, size) VALUES (?, ?)", images.items())
            db.executemany("INSERT INTO product_images VALUES (?, ?, ?, ?, ?, ?, ?, ?)", links + held_links)
            db.execute("DELETE FROM images WHERE sha256 NOT IN (SELECT sha256 FROM product_images WHERE sha256 IS NOT NULL)")
            db.execute("INSERT OR REPLACE INTO meta VALUES ('catalogue_path', ?)", (str(catalogue.path),))
            db.execute("INSERT OR REPLACE INTO meta VALUES ('settings_key', ?)", (settings_key,))
        return removed

    def record(self, results, settings_key):
        """Write one finished chunk of extraction results in one transaction.

        Parameters
        ----------
        results : iterable of (sha256, Palette or None, reason or None)
            A palette, or the reason the image gave none.
        settings_key : str
        """
        with self._transaction() as db:
            for sha, palette, reason in results:
                if palette is None:
                    db.execute(
                        "INSERT OR REPLACE INTO failures VALUES (?, ?, ?)", (sha, settings_key, str(reason))
                    )
                    continue
                bg = None if palette.background_jab is None else _blob(palette.background_jab)
                db.execute("DELETE FROM failures WHERE sha256 = ? AND settings_key = ?", (sha, settings_key))
                db.execute(
                    "INSERT OR REPLACE INTO palettes VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (
                        sha,
                        settings_key,
                        len(palette),
                        _blob(palette.jab),
                        _blob(palette.weights),
                        int(palette.width),
                        int(palette.height),
                        bg,
                        float(palette.background_share),
                        int(bool(palette.scene)),
                        float(palette.confidence),
                        ",".join(palette.flags),
                    ),
                )

    # -- downloaded images (harmony.shop.fetch) -----------------------------------------------------

    def _has_remote(self):
        return "remote_images" in self._tables()

    def remote_known(self):
        """{url: (sha256, etag, last_modified, fetched_at, size in bytes)} of every downloaded image kept."""
        if not self._has_remote():
            return {}
        rows = self._db.execute(
            "SELECT url, sha256, etag, last_modified, fetched_at, length(content) FROM remote_images"
        )
        return {r[0]: tuple(r[1:]) for r in rows}

    def remote_bytes(self, url):
        """The stored bytes of a downloaded image, or None."""
        if not self._has_remote():
            return None
        row = self._db.execute("SELECT content FROM remote_images WHERE url = ?", (str(url),)).fetchone()
        return None if row is None else bytes(row[0])

    def record_downloads(self, results, keep):
        """Store what one run learnt of its URLs, in one transaction.

        Parameters
        ----------
        results : iterable of harmony.shop.fetch.FetchResult
            Downloaded bodies replace the stored ones; unchanged answers refresh the validators
            and the fetch time; failures change nothing.
        keep : iterable of str
            The URLs of the catalogue; stored images of any other URL go.
        """
        keep = set(keep)
        with self._transaction() as db:
            db.execute(_REMOTE_SCHEMA)
            for r in results:
                if r.status == "downloaded":
                    db.execute("INSERT OR REPLACE INTO remote_images VALUES (?, ?, ?, ?, ?, ?)",
                               (r.url, r.sha256, r.etag, r.last_modified, float(r.fetched_at), r.data))
                elif r.status == "unchanged":
                    db.execute("UPDATE remote_images SET etag = ?, last_modified = ?, fetched_at = ? WHERE url = ?",
                               (r.etag, r.last_modified, float(r.fetched_at), r.url))
            for (url,) in db.execute("SELECT url FROM remote_images").fetchall():
                if url not in keep:
                    db.execute("DELETE FROM remote_images WHERE url = ?", (url,))

    def integrity(self):
        """SQLite's ``PRAGMA integrity_check`` result ('ok' for a sound file)."""
        return self._db.execute("PRAGMA integrity_check").fetchone()[0]
