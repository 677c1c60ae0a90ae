"""Reading a rules file: TOML parsing, validation with file, line and key, and every problem at once.

:func:`load_rules` reads and validates a file into a :class:`~harmony.rules.ruleset.RuleSet`;
see ``rules/README.md`` for the format.
"""

import difflib
import math
import re
import tomllib
from pathlib import Path
from types import MappingProxyType

from harmony.errors import RulesError
from harmony.resources import DEFAULT_RULES
from harmony.rules.kinds import (
    _LIGHTNESS_DIRECTIONS,
    RULE_KINDS,
    HueRule,
    LightnessRule,
    NeutralRule,
    OuLuoRule,
)
from harmony.rules.ruleset import RuleSet, _normalise_category, _Section

#: Version of the rules format this module reads (the file's ``format`` key).
FORMAT_VERSION = 1

__all__ = ["FORMAT_VERSION", "MAX_RULES_BYTES", "MAX_RULES", "MAX_PAIR_SECTIONS", "load_rules", "parse_rules"]

# Bounds on one rules file, so a runaway or hostile file is refused in one line instead of
# exhausting memory (a 5 MB file of 60,000 rules once took 10 GB in feed). This project's
# choice, far above a stylist's file: the shipped default is 13 KB with 9 rules and 21 pair sections;
# 1,000 pair sections cover every pair of 45 categories.
#: Largest rules file read, in bytes.
MAX_RULES_BYTES = 512 * 1024
#: Most ``[rule.NAME]`` tables in one file.
MAX_RULES = 200
#: Most ``[[pair]]`` sections in one file.
MAX_PAIR_SECTIONS = 1000
#: Largest size of a rule's weight and of a pair's multiplier: weights are relative to the
#: reference weight 1.0, and a thousand times it already drives the logistic score (scale 0.43 in
#: the shipped file) to 0 or 1 for every pair; far past it, sums of weights overflow (1e308).
#: This project's choice.
MAX_WEIGHT = 1000.0

# --------------------------------------------------------------------------------------------
# Reading and validation
# --------------------------------------------------------------------------------------------


def _strip_comment(line):
    quote = None
    for i, ch in enumerate(line):
        if quote:
            if ch == quote:
                quote = None
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            return line[:i]
    return line


def _split_dotted(text):
    parts, buf, quote = [], "", None
    for ch in text:
        if quote:
            if ch == quote:
                quote = None
            else:
                buf += ch
        elif ch in "\"'":
            quote = ch
        elif ch == ".":
            parts.append(buf.strip())
            buf = ""
        else:
            buf += ch
    parts.append(buf.strip())
    return tuple(parts)


_KEY_RE = re.compile(r"""^\s*((?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'))*)\s*=""")
_INLINE_KEY_RE = re.compile(r"""[{,]\s*([A-Za-z0-9_\-]+|"[^"]*"|'[^']*')\s*=""")


def _in_last_element(path, counts):
    """A header path with the index of the latest element of each array of tables it passes
    through: after ``[[pair]]`` twice, ``[pair.rules]`` is ``("pair", 1, "rules")``, as parsed."""
    out = ()
    for k, part in enumerate(path):
        out += (part,)
        if k < len(path) - 1 and out in counts:
            out += (counts[out] - 1,)
    return out


def _key_lines(text):
    """Map each key path of a TOML text to the line that defines it (1-based).

    A small line scanner, enough for the files this format describes: table and array-of-table
    headers, ``key = value`` lines, one level of inline table on one line. Paths of array tables
    hold the index of the element, as the parsed data does.
    """
    lines = {}
    counts = {}
    current = ()
    depth = 0
    for number, raw in enumerate(text.splitlines(), start=1):
        line = _strip_comment(raw)
        stripped = line.strip()
        if depth > 0:  # inside a multi-line array
            depth += stripped.count("[") - stripped.count("]")
            continue
        if not stripped:
            continue
        if stripped.startswith("[["):
            path = _in_last_element(_split_dotted(stripped[2 : stripped.find("]]")]), counts)
            index = counts.get(path, 0)
            counts[path] = index + 1
            current = path + (index,)
            lines.setdefault(current, number)
            lines.setdefault(path, number)
            continue
        if stripped.startswith("["):
            current = _in_last_element(_split_dotted(stripped[1 : stripped.find("]")]), counts)
            lines.setdefault(current, number)
            continue
        match = _KEY_RE.match(line)
        if not match:
            continue
        path = current + _split_dotted(match.group(1))
        lines.setdefault(path, number)
        value = line[match.end() :].strip()
        if value.startswith("{"):
            for inner in _INLINE_KEY_RE.finditer(value):
                lines.setdefault(path + (inner.group(1).strip("\"'"),), number)
        elif value.startswith("["):
            depth = value.count("[") - value.count("]")
    return lines


def _show_path(path):
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + (part if re.fullmatch(r"[A-Za-z0-9_\-]+", part) else f'"{part}"')
    return out or "(file)"


class _Problems:
    def __init__(self, where, text):
        self.where = where
        self.lines = _key_lines(text)
        self.items = []

    def line_of(self, path):
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return 1

    def add(self, path, reason):
        self.items.append((self.line_of(path), _show_path(path), reason))

    def unknown_keys(self, table, allowed, path):
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                known = ", ".join(sorted(allowed))
                self.add(path + (key,), f"unknown key{hint}; expected one of: {known}")

    def error(self):
        self.items.sort(key=lambda item: item[0])
        messages = [f"{self.where}:{line}: {key}: {reason}" for line, key, reason in self.items]
        err = RulesError("; ".join(messages))
        err.problems = tuple(messages)
        return err


_MISSING = object()


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _get(problems, table, key, path, check, required=True, default=_MISSING):
    """Fetch ``table[key]`` and validate it with ``check(value) -> reason or None``."""
    if key not in table:
        if required:
            problems.add(path, f"missing key '{key}'")
        return default
    value = table[key]
    reason = check(value)
    if reason:
        problems.add(path + (key,), reason)
        return default
    return value


def _number(lo=None, hi=None, lo_open=False, hi_open=False):
    def check(value):
        if not _is_number(value):
            return f"must be a number, got {_type_name(value)}"
        if lo is not None and (value < lo or (lo_open and value == lo)):
            return f"must be {'>' if lo_open else '>='} {lo:g}, got {value:g}"
        if hi is not None and (value > hi or (hi_open and value == hi)):
            return f"must be {'<' if hi_open else '<='} {hi:g}, got {value:g}"
        return None

    return check


def _string(choices=None):
    def check(value):
        if not isinstance(value, str):
            return f"must be a string, got {_type_name(value)}"
        if choices is not None and value not in choices:
            close = difflib.get_close_matches(value, list(choices), n=1, cutoff=0.6)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            return f"must be one of {', '.join(choices)}, got '{value}'{hint}"
        return None

    return check


def _boolean(value):
    return None if isinstance(value, bool) else f"must be true or false, got {_type_name(value)}"


def _table(value):
    return None if isinstance(value, dict) else f"must be a table, got {_type_name(value)}"


def _type_name(value):
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number" if math.isfinite(value) else "a non-finite number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


_TOP_KEYS = ("format", "description", "neutral", "score", "rule", "default", "pair")
_RULE_KEYS = {
    "hue": ("kind", "centre", "spread", "weight", "phrase"),
    "neutral": ("kind", "weight", "phrase"),
    "lightness": ("kind", "step", "width", "direction", "weight", "phrase"),
    "ou_luo": ("kind", "weight", "phrase"),
}


def _read_rule(problems, name, table, path):
    kind = _get(problems, table, "kind", path, _string(RULE_KINDS))
    if kind is _MISSING:
        return None
    problems.unknown_keys(table, _RULE_KEYS[kind], path)
    weight = _get(problems, table, "weight", path, _number(-MAX_WEIGHT, MAX_WEIGHT))
    phrase = _get(problems, table, "phrase", path, _string(), required=False, default="")
    ok = weight is not _MISSING
    if kind == "hue":
        centre = table.get("centre", _MISSING)
        centres = None
        if centre is _MISSING:
            problems.add(path, "missing key 'centre'")
        else:
            values = centre if isinstance(centre, list) else [centre]
            check = _number(0.0, 180.0)
            reasons = [check(v) for v in values]
            if not values:
                problems.add(path + ("centre",), "must name at least one angle")
            elif any(reasons):
                problems.add(path + ("centre",), "each angle " + next(r for r in reasons if r) + " (degrees of hue difference)")
            else:
                centres = tuple(float(v) for v in values)
        spread = _get(problems, table, "spread", path, _number(0.0, 90.0, lo_open=True))
        if ok and centres is not None and spread is not _MISSING:
            return HueRule(name, centres, float(spread), float(weight), phrase)
    elif kind == "neutral":
        if ok:
            return NeutralRule(name, float(weight), phrase)
    elif kind == "lightness":
        step = _get(problems, table, "step", path, _number(0.0, 100.0, lo_open=True))
        width = _get(problems, table, "width", path, _number(0.0, 100.0))
        direction = _get(problems, table, "direction", path, _string(_LIGHTNESS_DIRECTIONS), required=False, default="either")
        if step is not _MISSING and width is not _MISSING and width > 2.0 * step:
            problems.add(path + ("width",), f"must be at most twice the step ({2.0 * step:g}), got {width:g}")
            return None
        if ok and step is not _MISSING and width is not _MISSING and direction is not _MISSING:
            return LightnessRule(name, float(step), float(width), direction, float(weight), phrase)
    elif kind == "ou_luo":
        if ok:
            return OuLuoRule(name, float(weight), phrase)
    return None


def _read_section(problems, table, path, rule_names, label):
    problems.unknown_keys(table, ("categories", "rules", "scored") if path[0] == "pair" else ("rules", "scored"), path)
    weights = {}
    chosen = _get(problems, table, "rules", path, _table)
    if chosen is not _MISSING:
        if not chosen:
            problems.add(path + ("rules",), "must choose at least one rule")
        for name, mult in chosen.items():
            if name not in rule_names:
                close = difflib.get_close_matches(name, list(rule_names), n=1, cutoff=0.6)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                problems.add(path + ("rules", name), f"unknown rule{hint}; the file defines: {', '.join(sorted(rule_names)) or 'none'}")
                continue
            reason = _number(0.0, MAX_WEIGHT)(mult)
            if reason:
                problems.add(path + ("rules", name), "pair weight " + reason)
                continue
            weights[name] = float(mult)
    scored = _get(problems, table, "scored", path, _boolean, required=False, default=True)
    return _Section(label, MappingProxyType(weights), bool(scored) if scored is not _MISSING else True)


def parse_rules(text, where="<string>"):
    """Validate the text of a rules file into a :class:`RuleSet`.

    Raises
    ------
    RulesError
        Listing every problem found, each as ``WHERE:LINE: key: reason`` (joined by ``"; "``;
        the list is also in the exception's ``problems`` attribute).
    """
    problems = _Problems(where, text)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        found = re.search(r"at line (\d+)", message)
        line = int(found.group(1)) if found else len(text.splitlines()) or 1
        reason = re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", message)
        err = RulesError(f"{where}:{line}: toml: syntax error: {reason}")
        err.problems = (str(err),)
        raise err from None

    rule_count = len(data.get("rule", ())) if isinstance(data.get("rule"), dict) else 0
    pair_count = len(data.get("pair", ())) if isinstance(data.get("pair"), list) else 0
    if rule_count > MAX_RULES or pair_count > MAX_PAIR_SECTIONS:
        what = (f"{rule_count} rules (at most {MAX_RULES})" if rule_count > MAX_RULES
                else f"{pair_count} pair sections (at most {MAX_PAIR_SECTIONS})")
        err = RulesError(f"{where}: too large: {what}; split the shop's categories or merge rules")
        err.problems = (str(err),)
        raise err
    problems.unknown_keys(data, _TOP_KEYS, ())
    _get(problems, data, "format", (), lambda v: None if v == FORMAT_VERSION and not isinstance(v, bool)
         else f"this version of harmony reads format {FORMAT_VERSION}, got {v!r}")
    description = _get(problems, data, "description", (), _string(), required=False, default="")
    if description is _MISSING:
        description = ""

    # [neutral]
    threshold = fade = _MISSING
    neutral = _get(problems, data, "neutral", (), _table)
    if neutral is not _MISSING:
        problems.unknown_keys(neutral, ("threshold", "fade"), ("neutral",))
        # Under the default viewing conditions sRGB white has M' of about 2.2, so a threshold
        # must sit above it; Munsell chroma 4 lands at M' 10.7-16.8 (see harmony.photo.palette).
        threshold = _get(problems, neutral, "threshold", ("neutral",), _number(2.5, 30.0))
        fade = _get(problems, neutral, "fade", ("neutral",), _number(0.0, 20.0))
        if threshold is not _MISSING and fade is not _MISSING and fade > 2.0 * threshold:
            problems.add(("neutral", "fade"), f"must be at most twice the threshold ({2.0 * threshold:g}), got {fade:g}")
            fade = _MISSING

    # [score]
    midpoint, scale = 0.0, 0.25
    score = _get(problems, data, "score", (), _table, required=False, default={})
    if score is not _MISSING:
        problems.unknown_keys(score, ("midpoint", "scale"), ("score",))
        midpoint = _get(problems, score, "midpoint", ("score",), _number(-10.0, 10.0), required=False, default=0.0)
        scale = _get(problems, score, "scale", ("score",), _number(0.0, 10.0, lo_open=True), required=False, default=0.25)

    # [rule.NAME]
    rules = {}
    rule_tables = _get(problems, data, "rule", (), _table)
    declared = set()
    if rule_tables is not _MISSING:
        if not rule_tables:
            problems.add(("rule",), "must define at least one rule")
        for name, table in rule_tables.items():
            declared.add(name)
            reason = _table(table)
            if reason:
                problems.add(("rule", name), reason)
                continue
            rule = _read_rule(problems, name, table, ("rule", name))
            if rule is not None:
                rules[name] = rule

    # [default] and [[pair]]
    default = None
    default_table = _get(problems, data, "default", (), _table)
    if default_table is not _MISSING:
        default = _read_section(problems, default_table, ("default",), declared, "default")
    pairs = {}
    pair_lines = {}
    pair_list = data.get("pair", [])
    if not isinstance(pair_list, list):
        problems.add(("pair",), "must be an array of tables written as [[pair]]")
        pair_list = []
    for index, table in enumerate(pair_list):
        path = ("pair", index)
        if not isinstance(table, dict):
            problems.add(path, "must be a table written as [[pair]]")
            continue
        cats = _get(problems, table, "categories", path, lambda v: None if (
            isinstance(v, list) and len(v) == 2 and all(isinstance(c, str) and c.strip() for c in v))
            else "must be two category names, e.g. [\"sofa\", \"rug\"]")
        if cats is _MISSING:
            _read_section(problems, table, path, declared, "?")
            continue
        a, b = (_normalise_category(c) for c in cats)
        section = _read_section(problems, table, path, declared, f"{a} / {b}")
        if a == b:
            problems.add(path + ("categories",), f"a pair needs two different categories, got '{a}' twice")
            continue
        if (a, b) in pairs or (b, a) in pairs:
            problems.add(path + ("categories",), f"the pair '{a}' / '{b}' is listed twice")
            continue
        pairs[(a, b)] = section
        pair_lines[(a, b)] = problems.line_of(path + ("categories",))

    if problems.items:
        raise problems.error()
    return RuleSet(
        path=where,
        description=description,
        neutral_threshold=float(threshold),
        neutral_fade=float(fade),
        midpoint=float(midpoint),
        scale=float(scale),
        rules=MappingProxyType(rules),
        default=default,
        pairs=MappingProxyType(pairs),
        pair_lines=MappingProxyType(pair_lines),
    )


def load_rules(path=DEFAULT_RULES):
    """Read and validate a rules file (default: ``rules/default.toml``).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    RuleSet

    Raises
    ------
    RulesError
        If the file cannot be read, is not TOML, or breaks the format; every problem is listed
        as ``FILE:LINE: key: reason``.
    """
    path = Path(path)
    try:
        with open(path, "rb") as handle:
            raw = handle.read(MAX_RULES_BYTES + 1)  # never more, whatever the file's size
    except OSError as exc:
        raise RulesError(f"{path}: cannot read the rules file: {exc.strerror or exc}") from None
    if len(raw) > MAX_RULES_BYTES:
        raise RulesError(
            f"{path}: the rules file is larger than {MAX_RULES_BYTES // 1024} KiB; a rules file holds at most "
            f"{MAX_RULES} rules and {MAX_PAIR_SECTIONS} pair sections"
        )
    try:
        text = raw.decode("utf-8-sig")  # a byte order mark (some editors write one) is dropped
    except UnicodeDecodeError as exc:
        raise RulesError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    return parse_rules(text, where=str(path))
