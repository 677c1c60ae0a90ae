"""Product catalogues: CSV or JSON Lines files listing products, prices, stock and photos.

Required fields are ``id``, ``category``, ``price`` and ``image``; ``title``, ``stock`` and
``currency`` are optional; every other field is kept as a string attribute. Image paths are
relative to the catalogue file, or ``http://`` / ``https://`` URLs (downloaded by
:mod:`harmony.shop.fetch`; a catalogue may mix both). In CSV several images are separated by ``|``; in JSON Lines
``image`` is a list (a single string is accepted too).

Validation never stops at the first problem: every bad row is reported as
``FILE:ROW: field: reason`` (ROW is the line number in the file, the CSV header being line 1),
skipped and counted. A CSV row the parser cannot read (a stray quote, a field longer than
``csv.field_size_limit()``) is reported the same way and reading goes on at the next line, so a
bad row never silently ends the catalogue. A file that cannot be read at all raises :class:`CatalogueError`.
"""

import csv
import io
import json
import math
import os
import unicodedata
from dataclasses import dataclass, field
from pathlib import Path

from harmony.errors import CatalogueError
from harmony.fileio import header_names, json_objects
from harmony.shop.fetch import is_url

__all__ = [
    "Product",
    "Problem",
    "Catalogue",
    "REQUIRED_FIELDS",
    "IMAGE_SEPARATOR",
    "MAX_STOCK",
    "normalise_category",
    "read_catalogue",
]

#: Fields every product row must carry.
REQUIRED_FIELDS = ("id", "category", "price", "image")
#: Optional fields with a meaning of their own; every other field becomes an attribute.
_KNOWN_FIELDS = REQUIRED_FIELDS + ("title", "stock", "currency")
#: Largest stock the store can keep: SQLite's INTEGER is a signed 64-bit number (SQLite
#: documentation, "Datatypes In SQLite", 2.0).
MAX_STOCK = 2**63 - 1
#: Separator of several image paths in one CSV cell.
IMAGE_SEPARATOR = "|"

_SUFFIXES = {".csv": "csv", ".jsonl": "jsonl", ".ndjson": "jsonl"}


def normalise_category(name):
    """The form of a category name used for every comparison.

    Unicode NFKC, case folded, runs of whitespace collapsed to one space, ends stripped, so
    ``" Dining  Chair"`` and ``"dining chair"`` are the same category.

    >>> normalise_category("  Dining\\tCHAIR ")
    'dining chair'
    """
    return " ".join(unicodedata.normalize("NFKC", str(name)).casefold().split())


@dataclass(frozen=True)
class Product:
    """One product of a catalogue.

    Attributes
    ----------
    id : str
        Unique within the catalogue.
    category : str
        As written in the catalogue; compare through :func:`normalise_category`.
    price : float
        Non-negative, in ``currency``.
    stock : int or None
        Units in stock; None means in stock with the quantity unknown (the field was empty).
    title, currency : str
        Empty when the catalogue does not give them.
    images : tuple of str
        Image paths as written, relative to the catalogue file, in catalogue order.
    attributes : dict of str to str
        Every other field of the row.
    """

    id: str
    category: str
    price: float
    stock: int | None = None
    title: str = ""
    currency: str = ""
    images: tuple = ()
    attributes: dict = field(default_factory=dict, hash=False)

    @property
    def category_key(self):
        """The normalised category (see :func:`normalise_category`)."""
        return normalise_category(self.category)

    def in_stock(self, quantity=1):
        """Whether ``quantity`` units can be sold (unknown stock counts as available)."""
        return self.stock is None or self.stock >= quantity


@dataclass(frozen=True)
class Problem:
    """One problem found in a catalogue row; ``str()`` gives ``FILE:ROW: field: reason``."""

    path: str
    row: int
    field: str
    reason: str

    def __str__(self):
        return f"{self.path}:{self.row}: {self.field}: {self.reason}"


@dataclass(frozen=True)
class Catalogue:
    """The valid products of a catalogue file and the problems of the rows that were skipped.

    Attributes
    ----------
    products : tuple of Product
        Valid rows in file order.
    problems : tuple of Problem
        Every problem found, in file order (a row may have several).
    path : pathlib.Path
        The catalogue file, absolute.
    skipped_rows : int
        Number of rows left out because of at least one problem.
    skipped_ids : tuple of str
        The ids of those rows, where an id could be read and no valid row has it: a store keeps
        such a product as it was (:meth:`harmony.shop.store.Store.sync_catalogue`), so one bad
        cell in a nightly export does not remove it.
    """

    products: tuple
    problems: tuple
    path: Path
    skipped_rows: int = 0
    skipped_ids: tuple = ()

    @property
    def root(self):
        """The folder image paths are relative to."""
        return self.path.parent

    def image_path(self, image):
        """Absolute path of an image path as written in the catalogue.

        Joined to the (resolved) catalogue folder and normalised lexically; symbolic links
        inside the image path are kept as written.
        """
        return Path(self.image_file(image))

    def image_file(self, image):
        """:meth:`image_path` as a string (the form the store keys images by; cheaper in loops).

        A URL is returned as written: it is its own key.
        """
        if is_url(image):
            return image
        return _join(os.path.dirname(self.path), image)


def _join(folder, image):
    """``folder`` joined with ``image`` and normalised lexically, as a string."""
    return os.path.normpath(os.path.join(folder, image))


def read_catalogue(path):
    """Read and validate a CSV or JSON Lines catalogue.

    Parameters
    ----------
    path : str or pathlib.Path
        A ``.csv``, ``.jsonl`` or ``.ndjson`` file (UTF-8, a byte-order mark is allowed).

    Returns
    -------
    Catalogue
        The valid products and every problem; rows with problems are skipped.

    Raises
    ------
    CatalogueError
        The file is missing, unreadable, of an unknown kind, or (CSV) lacks a required column.

    Notes
    -----
    Problems reported per row: duplicate id (the first row with that id is kept), missing
    required field, non-numeric or negative price, stock that is not a non-negative whole
    number, image file not found.
    """
    path = Path(path)
    kind = _SUFFIXES.get(path.suffix.lower())
    if kind is None:
        raise CatalogueError(f"{path}: unknown catalogue format {path.suffix!r} (use .csv or .jsonl)")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise CatalogueError(f"{path}: catalogue not found") from None
    except UnicodeDecodeError as exc:
        raise CatalogueError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    except OSError as exc:
        raise CatalogueError(f"{path}: cannot read: {exc.strerror or exc}") from None
    rows = _csv_rows(path, text) if kind == "csv" else _jsonl_rows(path, text)
    root = str(path.resolve().parent)
    products, problems, seen, skipped_ids = [], [], set(), []
    skipped = 0
    for line, record, early in rows:
        found = list(early)
        product = None
        if record is not None:
            product, more = _validate(record, root)
            found.extend(more)
            if product is not None and product.id in seen:
                found.append(("id", f"duplicate id {product.id!r}"))
        if found or product is None:
            skipped += 1
            problems.extend(Problem(str(path), line, name, reason) for name, reason in found)
            if record is not None and not isinstance(record.get("id"), (dict, list)) and _text(record.get("id")):
                skipped_ids.append(_text(record.get("id")))
            continue
        seen.add(product.id)
        products.append(product)
    kept = tuple(dict.fromkeys(i for i in skipped_ids if i not in seen))
    return Catalogue(tuple(products), tuple(problems), path.resolve(), skipped, kept)


def _csv_rows(path, text):
    """Yield (line, record or None, early problems) for each data row of a CSV text."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader)
    except StopIteration:
        raise CatalogueError(f"{path}: empty catalogue (no header row)") from None
    except csv.Error as exc:
        raise CatalogueError(f"{path}:1: header: {exc}") from None
    header = header_names(header)
    missing = [name for name in REQUIRED_FIELDS if name not in header]
    if missing:
        names = ", ".join(repr(m) for m in missing)
        raise CatalogueError(f"{path}:1: header: missing required column(s) {names}")
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        raise CatalogueError(f"{path}:1: header: column {dupes[0]!r} appears twice")
    # Rows are read from a list of physical lines, so that after a row the csv module cannot
    # parse (a stray quote, a field over csv.field_size_limit(), a NUL byte) reading goes on
    # at the next line instead of ending early: the bad row is reported, never the rest lost.
    lines = list(io.StringIO(text, newline=""))
    offset = reader.line_num
    reader = csv.reader(iter(lines[offset:]), strict=True)
    while True:
        start = offset + reader.line_num + 1
        try:
            cells = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            yield start, None, [("row", f"not valid CSV: {exc}; skipped, reading goes on at line {start + 1}")]
            offset = start
            reader = csv.reader(iter(lines[offset:]), strict=True)
            continue
        if not any(c.strip() for c in cells):
            continue  # blank line
        early = []
        if len(cells) != len(header):
            early.append(("row", f"{len(cells)} cells, the header has {len(header)}"))
        record = {name: value for name, value in zip(header, cells)}
        images = record.get("image", "")
        record["image"] = [p.strip() for p in images.split(IMAGE_SEPARATOR) if p.strip()]
        yield start, record, early


def _jsonl_rows(path, text):
    """Yield (line, record or None, early problems) for each non-blank line of a JSONL text."""
    for line, record, problem in json_objects(text.splitlines(), not_object="must be a JSON object", column=True):
        if problem:
            yield line, None, [("row", problem)]
            continue
        early = []
        images = record.get("image")
        if isinstance(images, str):
            images = [images]
        if images is None:
            images = []
        if not isinstance(images, list) or not all(isinstance(p, str) for p in images):
            early.append(("image", "must be a path or a list of paths"))
            images = None  # reported already
        record["image"] = None if images is None else [p.strip() for p in images if p.strip()]
        yield line, record, early


def _text(value):
    """A field value as a stripped string ('' for missing / null)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (dict, list)):
        return json.dumps(value, sort_keys=True)
    return str(value).strip()


def _validate(record, root):
    """Check one record; return (Product or None, [(field, reason), ...])."""
    problems = []
    for key in ("id", "category", "title", "currency"):  # a JSON list or object is no name
        if isinstance(record.get(key), (dict, list)):
            problems.append((key, f"must be text, not a JSON {'list' if isinstance(record[key], list) else 'object'}"))
    if problems:
        return None, problems
    pid = _text(record.get("id"))
    if not pid:
        problems.append(("id", "missing required field"))
    category = _text(record.get("category"))
    if not normalise_category(category):
        problems.append(("category", "missing required field"))

    price = None
    raw_price = record.get("price")
    if _text(raw_price) == "":
        problems.append(("price", "missing required field"))
    else:
        try:
            price = float(_text(raw_price))
        except ValueError:
            problems.append(("price", f"not a number: {_text(raw_price)!r}"))
        else:
            if not math.isfinite(price):
                problems.append(("price", f"not a finite number: {_text(raw_price)!r}"))
                price = None
            elif price < 0:
                problems.append(("price", f"negative price {price:g}"))
                price = None

    stock = None
    raw_stock = record.get("stock")
    if raw_stock is not None and _text(raw_stock) != "":
        stock, reason = _whole(raw_stock)
        if reason:
            problems.append(("stock", reason))

    images = record.get("image")
    if images is not None and not images:
        problems.append(("image", "missing required field"))
    images = tuple(images or ())
    for image in images:
        if is_url(image):  # checked when downloaded (harmony.shop.fetch)
            continue
        if not os.path.isfile(_join(root, image)):
            problems.append(("image", f"file not found: {image}"))

    if problems:
        return None, problems
    attributes = {k: _text(v) for k, v in record.items() if k not in _KNOWN_FIELDS and k}
    product = Product(
        id=pid,
        category=category,
        price=price,
        stock=stock,
        title=_text(record.get("title")),
        currency=_text(record.get("currency")),
        images=images,
        attributes=attributes,
    )
    return product, []


def _whole(raw):
    """Parse a stock value: (int, None) or (None, reason)."""
    if isinstance(raw, bool):
        return None, f"not a whole number: {_text(raw)!r}"
    text = _text(raw)
    try:
        value = int(text)  # exact, however long
    except ValueError:
        try:
            number = float(text)
        except ValueError:
            return None, f"not a whole number: {text!r}"
        if not math.isfinite(number) or number != int(number):
            return None, f"not a whole number: {text!r}"
        value = int(number)
    if value < 0:
        return None, f"negative stock {value}"
    if value > MAX_STOCK:
        return None, f"stock {text} is larger than {MAX_STOCK} (the store keeps 64-bit whole numbers)"
    return value, None
