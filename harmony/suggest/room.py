"""Room templates: which slots a room set fills, how much each pair of slots matters, the budget.

A room template is a TOML file a stylist edits::

    name = "Dining corner"          # shown in reports and in the bundle JSON
    budget = 1500                   # upper limit of sum(price x quantity), > 0
    currency = "EUR"                # ISO 4217 code of the budget (three capital letters)
    default_weight = 1.0            # weight of slot pairs not listed below (>= 0; default 1)

    [[slot]]
    name = "table"                  # unique within the room
    category = "dining table"       # a catalogue category (compared case-insensitively)
    quantity = 1                    # units bought of the chosen product (integer >= 1; default 1)
    required = true                 # false: the slot may stay empty (default true)
    visible_share = 1.0             # visible share of one unit in the room view (> 0; default 1)

    [[slot]]
    name = "chairs"
    category = "dining chair"
    quantity = 4
    visible_share = 0.35

    [[pair]]
    slots = ["table", "chairs"]     # two different slot names
    weight = 3.0                    # how much this pair's score counts (>= 0)

Every problem in a file is reported at once, as for rule files: ``FILE:LINE: key: reason``, the
problems joined by ``"; "`` on one line (also listed on the error's ``problems`` attribute).
"""

import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from harmony.errors import RoomError
from harmony.shop.catalogue import normalise_category

__all__ = ["RoomSlot", "RoomTemplate", "load_room", "parse_room", "check_currency"]

_TOP_KEYS = {"name", "budget", "currency", "default_weight", "slot", "pair"}
_SLOT_KEYS = {"name", "category", "quantity", "required", "visible_share"}
#: Keys renamed since an earlier release, with their new names.
_RENAMED_KEYS = {"size": "visible_share"}
_PAIR_KEYS = {"slots", "weight"}
#: ISO 4217 alphabetic codes are three capital Latin letters.
_CURRENCY = re.compile(r"^[A-Z]{3}$")


@dataclass(frozen=True)
class RoomSlot:
    """One slot: ``quantity`` units of a product of ``category`` (normalised)."""

    name: str
    category: str
    quantity: int = 1
    required: bool = True
    visible_share: float = 1.0


@dataclass(frozen=True)
class RoomTemplate:
    """A validated room template (see the module docstring for the file format)."""

    name: str
    budget: float
    currency: str
    slots: tuple
    weights: tuple = ()          # ((slot_a, slot_b, weight), ...) as listed
    default_weight: float = 1.0
    path: str = ""

    def slot(self, name):
        """The slot called ``name`` (RoomError if there is none)."""
        for s in self.slots:
            if s.name == name:
                return s
        raise RoomError(f"{self.path or self.name}: no slot '{name}'")

    def pair_weight(self, a, b):
        """Weight of the pair of slots named ``a`` and ``b`` (order does not matter)."""
        for x, y, w in self.weights:
            if {x, y} == {a, b}:
                return w
        return self.default_weight


class _Lines:
    """Finds the line of a key in the TOML text, for error messages."""

    def __init__(self, text):
        self.lines = text.splitlines()

    def _headers(self, table):
        pat = re.compile(r"^\s*\[\[\s*" + re.escape(table) + r"\s*\]\]")
        return [i for i, line in enumerate(self.lines) if pat.match(line)]

    def find(self, key, table=None, index=None):
        pat = re.compile(r"^\s*" + re.escape(key or "") + r"\s*=")
        if table is None:
            start, stop = 0, len(self.lines)
            for i, line in enumerate(self.lines):
                if line.lstrip().startswith("["):
                    stop = i
                    break
        else:
            heads = self._headers(table)
            if index is None or index >= len(heads):
                return 1
            start = heads[index]
            stop = len(self.lines)
            for i in range(start + 1, len(self.lines)):
                if self.lines[i].lstrip().startswith("["):
                    stop = i
                    break
            if key is None:
                return start + 1
        for i in range(start, stop):
            if pat.match(self.lines[i]):
                return i + 1
        return start + 1


def _is_number(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def parse_room(text, path="<room>"):
    """Validate the text of a room template; ``path`` names it in errors.

    Raises
    ------
    RoomError
        Listing every problem as ``FILE:LINE: key: reason``, joined by ``"; "`` (one line); the
        list is also on ``err.problems``.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        line = m.group(1) if m else "1"
        reason = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise RoomError(f"{path}:{line}: toml: {reason}") from None
    where = _Lines(text)
    problems = []

    def bad(line, key, reason):
        problems.append(f"{path}:{line}: {key}: {reason}")

    def table_ok(table, i, item, allowed):
        """Whether ``[[table]]`` number i is a table; reports its unknown keys."""
        tag = f"{table}[{i + 1}]"
        if not isinstance(item, dict):
            bad(where.find(None, table, i), tag, "must be a table")
            return False
        for key in item:
            if key in _RENAMED_KEYS and _RENAMED_KEYS[key] in allowed:
                bad(where.find(key, table, i), f"{tag}.{key}", f"renamed '{_RENAMED_KEYS[key]}' in harmony 0.2")
            elif key not in allowed:
                bad(where.find(key, table, i), f"{tag}.{key}",
                    f"unknown key (expected one of {', '.join(sorted(allowed))})")
        return True

    for key in data:
        if key not in _TOP_KEYS:
            bad(where.find(key), key, f"unknown key (expected one of {', '.join(sorted(_TOP_KEYS))})")
    name = data.get("name")
    if not isinstance(name, str) or not name.strip():
        bad(where.find("name"), "name", "a non-empty string is required")
    budget = data.get("budget")
    if not _is_number(budget) or budget <= 0:
        bad(where.find("budget"), "budget", f"a positive number is required, got {budget!r}")
    currency = data.get("currency")
    if not isinstance(currency, str) or not _CURRENCY.match(currency):
        bad(where.find("currency"), "currency", f"an ISO 4217 code such as 'EUR' is required, got {currency!r}")
    default_weight = data.get("default_weight", 1.0)
    if not _is_number(default_weight) or default_weight < 0:
        bad(where.find("default_weight"), "default_weight", f"a number >= 0 is required, got {default_weight!r}")

    slots = []
    raw_slots = data.get("slot", [])
    if not isinstance(raw_slots, list) or not raw_slots:
        bad(where.find("slot"), "slot", "at least one [[slot]] table is required")
        raw_slots = []
    names = set()
    for i, s in enumerate(raw_slots):
        tag = f"slot[{i + 1}]"
        if not table_ok("slot", i, s, _SLOT_KEYS):
            continue
        ok = True
        sname = s.get("name")
        if not isinstance(sname, str) or not sname.strip():
            bad(where.find("name", "slot", i), f"{tag}.name", "a non-empty string is required")
            ok = False
        elif sname in names:
            bad(where.find("name", "slot", i), f"{tag}.name", f"duplicate slot name '{sname}'")
            ok = False
        else:
            names.add(sname)
        category = s.get("category")
        if not isinstance(category, str) or not category.strip():
            bad(where.find("category", "slot", i), f"{tag}.category", "a non-empty string is required")
            ok = False
        quantity = s.get("quantity", 1)
        if not isinstance(quantity, int) or isinstance(quantity, bool) or quantity < 1:
            bad(where.find("quantity", "slot", i), f"{tag}.quantity", f"an integer >= 1 is required, got {quantity!r}")
            ok = False
        required = s.get("required", True)
        if not isinstance(required, bool):
            bad(where.find("required", "slot", i), f"{tag}.required", f"true or false is required, got {required!r}")
            ok = False
        share = s.get("visible_share", 1.0)
        if not _is_number(share) or share <= 0:
            bad(where.find("visible_share", "slot", i), f"{tag}.visible_share",
                f"a positive number is required, got {share!r}")
            ok = False
        if ok:
            slots.append(RoomSlot(name=sname, category=normalise_category(category), quantity=quantity,
                                  required=required, visible_share=float(share)))
    if raw_slots and not any(s.get("required", True) is True for s in raw_slots if isinstance(s, dict)):
        bad(where.find(None, "slot", 0), "slot", "at least one slot must be required")

    weights = []
    raw_pairs = data.get("pair", [])
    if not isinstance(raw_pairs, list):
        bad(where.find("pair"), "pair", "must be an array of [[pair]] tables")
        raw_pairs = []
    seen = set()
    for i, p in enumerate(raw_pairs):
        tag = f"pair[{i + 1}]"
        if not table_ok("pair", i, p, _PAIR_KEYS):
            continue
        pair = p.get("slots")
        line = where.find("slots", "pair", i)
        good = True
        if (not isinstance(pair, list) or len(pair) != 2 or not all(isinstance(x, str) for x in pair)):
            bad(line, f"{tag}.slots", "a list of two slot names is required")
            good = False
        elif pair[0] == pair[1]:
            bad(line, f"{tag}.slots", f"the two slots must differ, got '{pair[0]}' twice")
            good = False
        else:
            for x in pair:
                if x not in names:
                    bad(line, f"{tag}.slots", f"unknown slot '{x}' (slots: {', '.join(sorted(names))})")
                    good = False
            if good and frozenset(pair) in seen:
                bad(line, f"{tag}.slots", f"pair {pair[0]} / {pair[1]} listed twice")
                good = False
        weight = p.get("weight")
        if not _is_number(weight) or weight < 0:
            bad(where.find("weight", "pair", i), f"{tag}.weight", f"a number >= 0 is required, got {weight!r}")
            good = False
        if good:
            seen.add(frozenset(pair))
            weights.append((pair[0], pair[1], float(weight)))

    if problems:
        err = RoomError("; ".join(problems))
        err.problems = tuple(problems)
        raise err
    return RoomTemplate(name=name.strip(), budget=float(budget), currency=currency, slots=tuple(slots),
                        weights=tuple(weights), default_weight=float(default_weight), path=str(path))


def load_room(path):
    """Read and validate a room template file.

    Raises
    ------
    RoomError
        The file is missing or unreadable, or invalid (every problem listed, see :func:`parse_room`).
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")  # a byte order mark (some editors write one) is dropped
    except FileNotFoundError:
        raise RoomError(f"{p}: no such room template") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RoomError(f"{p}: cannot read room template: {exc}") from None
    return parse_room(text, path=str(p))


def check_currency(room, slot, products):
    """Refuse products of ``slot`` priced in another currency than the room's budget (a product
    without a currency is taken to be in the room's): their prices cannot be added to it."""
    other = [p for p in products if p.currency and p.currency.upper() != room.currency]
    if other:
        raise RoomError(f"room '{room.name}': slot '{slot.name}': the budget is in {room.currency} but "
                        f"{len(other)} product(s) are priced in {other[0].currency} (first: '{other[0].id}'); "
                        "give the template the catalogue's currency")
