"""Blending harmony's colour score with another system's candidates (the shop's own recommender).

The two scores live on different scales, so both are turned into ranks first. Within each group
of one product and one partner category:

- harmony's exact pair scores of every partner in the group (harmony's own top partners, and
  every candidate the other system proposes that the store can score) become
  ``rank_norm = (n - rank) / (n - 1)``, 1 for the best, 0 for the worst, with tied scores sharing
  their mean rank (a single partner gets 1);
- the other system's scores are rank-normalised the same way over the partners it proposed in the
  group; a partner it did not propose gets 0 (it fell below that system's own cut-off);

and the blended score is ``(1 - W) * harmony + W * other``: ``W = 0`` is harmony alone, ``W = 1``
the other system alone. A candidate the store cannot score (a product unknown to the store, or
without a palette) keeps its own rank-normalised score as its blended score, whatever ``W``, and its
row says so in ``source``. Out-of-stock partners of the store are left out, as in the feed.

Rank normalisation ignores the distance between scores, which is the point: it needs no
calibration between systems, and is the usual first choice for combining ranked lists (the
Borda-count family; Fox & Shaw 1994, Montague & Aslam 2001).

References
----------
E. A. Fox, J. A. Shaw (1994). Combination of multiple searches. TREC-2, NIST SP 500-215, 243-252.
M. Montague, J. A. Aslam (2001). Relevance score normalization for metasearch. CIKM 2001, 427-433.
"""

import csv
import io
import json
import math
from dataclasses import dataclass, field
from operator import attrgetter
from pathlib import Path

import numpy as np

from harmony.errors import HarmonyError
from harmony.fileio import header_names, json_objects, repeated_name, shifted, spreadsheet_safe_row, write_text_whole
from harmony.shop.catalogue import normalise_category
from harmony.suggest.ranks import mid_ranks
from harmony.suggest.rows import PartnerRow

__all__ = [
    "CANDIDATE_COLUMNS",
    "BLEND_COLUMNS",
    "Candidate",
    "BlendRow",
    "read_candidates",
    "rank_normalise",
    "blend_group",
    "blend_feed",
    "blend_from_store",
    "BlendRanks",
    "BlendMethod",
    "write_records",
    "parse_weights",
    "blend_methods_factory",
]

#: Required columns of a candidate list; ``partner_category`` is optional.
CANDIDATE_COLUMNS = ("product", "partner", "score")
#: Columns of a blended feed: the feed's, then both input scores and where the row came from.
BLEND_COLUMNS = ("product", "category", "partner", "partner_category", "rank", "score", "reason", "pinned",
                 "harmony_score", "candidate_score", "source", "relation")
_SHOWN = 5
_ID = attrgetter("id")


@dataclass(frozen=True)
class Candidate:
    """One row of a candidate list (``line`` is its line in the file)."""

    product: str
    partner: str
    score: float
    partner_category: str = ""
    line: int = 0


@dataclass(frozen=True)
class BlendRow(PartnerRow):
    """A blended feed row. ``source`` is ``both``, ``harmony`` (not proposed by the other system),
    ``candidates`` (not in harmony's list but scored by it) or ``not in store`` (kept its own
    score); ``harmony_score`` / ``candidate_score`` are the raw inputs (None when absent)."""

    harmony_score: float | None
    candidate_score: float | None
    source: str
    relation: str = "partner"
    pinned: bool = False


def read_candidates(path):
    """Read a candidate list: CSV with a header, or JSONL; columns product, partner, score and
    optionally partner_category.

    Raises
    ------
    HarmonyError
        Unreadable file, missing column, or bad rows (each named ``FILE:LINE: key: reason``, the
        first five listed), a pair given twice, or no rows.
    """
    return [Candidate(*row) for row in _candidate_rows(path)]


def _candidate_rows(path):
    """The checked rows of a candidate list as ``(product, partner, score, partner_category, line)``
    tuples, the fields of :class:`Candidate` (see :func:`read_candidates`)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")  # a BOM (spreadsheet exports) is dropped
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot read the candidate list: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise HarmonyError(f"{path}: not UTF-8 text (byte {exc.start}); a candidate list is CSV or JSON Lines") from None
    problems = []
    if path.suffix.lower() in (".jsonl", ".ndjson"):
        fields = _jsonl_fields(path, text, problems)
    else:
        fields = _csv_fields(path, text, problems)
    out, seen, categories = [], {}, {}
    for line, product, partner, score_text, category in fields:
        bad = "product" if not product else "partner" if not partner else "score" if not score_text else None
        if bad:
            problems.append((line, f"{bad}: missing"))
            continue
        try:
            score = float(score_text)
        except ValueError:
            score = math.nan
        if not math.isfinite(score):
            problems.append((line, f"score: not a finite number: {score_text!r}"))
            continue
        if product == partner:
            problems.append((line, f"partner: '{partner}' is the product itself"))
            continue
        first = seen.setdefault((product, partner), line)
        if first != line:
            problems.append((line, f"partner: '{partner}' is given twice for '{product}' (line {first})"))
            continue
        if category:
            category = categories.get(category) or categories.setdefault(category, normalise_category(category))
        out.append((product, partner, score, category, line))
    if problems:
        problems.sort(key=lambda problem: problem[0])  # by line (stable: a line's problems in order)
        shown = [f"{path}:{line}: {text}" for line, text in problems[:_SHOWN]]
        more = f" (and {len(problems) - _SHOWN} more)" if len(problems) > _SHOWN else ""
        raise HarmonyError(f"{len(problems)} bad row(s): " + "; ".join(shown) + more)
    if not out:
        raise HarmonyError(f"{path}: the candidate list has no rows")
    return out


def _csv_fields(path, text, problems):
    """``(line, product, partner, score, partner_category)`` of each non-blank CSV row, stripped
    ("" for a missing field; a column named twice is refused), as a list; a row with
    more fields than the header (an unquoted comma shifts every later field) goes to ``problems``
    as ``(line, reason)``."""
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        header = header_names(next(reader, None) or ())
        if (twice := repeated_name(header)) is not None:
            raise HarmonyError(f"{path}:1: column {twice!r} appears twice")
        column = {name: i for i, name in enumerate(header)}
        missing = [c for c in CANDIDATE_COLUMNS if c not in column]
        if missing:
            raise HarmonyError(f"{path}:1: missing column(s) {', '.join(missing)} (need {','.join(CANDIDATE_COLUMNS)})")
        at = (*(column[c] for c in CANDIDATE_COLUMNS), column.get("partner_category", -1))
        product, partner, score, category = at
        longest, width, out = max(at), len(header), []
        for row in reader:
            if shifted(row, width):
                problems.append((reader.line_num, f"{len(row)} fields, the header has {width}"))
            elif len(row) > longest:  # every column present
                out.append((reader.line_num, row[product].strip(), row[partner].strip(), row[score].strip(),
                            row[category].strip() if category >= 0 else ""))
            elif row:
                out.append((reader.line_num, *(row[i].strip() if 0 <= i < len(row) else "" for i in at)))
    except csv.Error as exc:
        raise HarmonyError(f"{path}:{reader.line_num}: not a readable CSV row: {exc}") from None
    return out


def _jsonl_fields(path, text, problems):
    """:func:`_csv_fields` of a JSONL candidate list; lines that are not JSON objects go to
    ``problems`` as ``(line, reason)``."""
    out = []
    for line, obj, problem in json_objects(text.splitlines()):
        if problem:
            problems.append((line, problem))
            continue
        out.append((line, *(str(obj[k] if obj.get(k) is not None else "").strip()
                            for k in (*CANDIDATE_COLUMNS, "partner_category"))))
    return out


def rank_normalise(scores, sizes=None):
    """Scores to ``(n - rank) / (n - 1)`` in [0, 1], higher score = higher value, ties share their
    mean rank; a single score gives 1.

    ``sizes``, when given, splits ``scores`` into lists laid end to end, each normalised on its own
    (the same numbers as one call per list).

    >>> rank_normalise([0.2, 0.9, 0.5, 0.5]).tolist()
    [0.0, 1.0, 0.5, 0.5]
    >>> rank_normalise([0.2, 0.9, 0.5, 0.5, 7.0], sizes=[4, 1]).tolist()
    [0.0, 1.0, 0.5, 0.5, 1.0]
    """
    s = np.asarray(scores, dtype=float)
    sizes = np.array([s.size] if sizes is None else sizes, dtype=np.int64)
    if s.ndim != 1 or int(sizes.sum()) != s.size:
        raise ValueError(f"sizes {sizes.tolist()} do not split {s.shape[0] if s.ndim else 0} scores")
    n = np.repeat(sizes, sizes).astype(float)
    out = np.ones(s.size)
    many = n > 1
    out[many] = (mid_ranks(s, sizes)[many] - 1.0) / (n[many] - 1.0)
    return out


def blend_group(harmony, other, weight):
    """Blend one group (one product, one partner category).

    Parameters
    ----------
    harmony : mapping of partner to float
        harmony's scores of the partners it can score.
    other : mapping of partner to float
        The other system's scores of the partners it proposed.
    weight : float in [0, 1]
        Weight of the other system.

    Returns
    -------
    dict of partner to (blended score, source)
    """
    w = float(weight)
    if not 0.0 <= w <= 1.0:
        raise HarmonyError(f"the blend weight must lie in [0, 1], got {weight!r}")
    h_ids = sorted(harmony)
    o_ids = sorted(other)
    h_norm = dict(zip(h_ids, rank_normalise([harmony[i] for i in h_ids])))
    o_norm = dict(zip(o_ids, rank_normalise([other[i] for i in o_ids])))
    out = {}
    for pid in sorted(set(h_ids) | set(o_ids)):
        if pid not in harmony:
            out[pid] = (float(o_norm[pid]), "not in store")
            continue
        source = "both" if pid in other else "harmony"
        out[pid] = ((1.0 - w) * float(h_norm[pid]) + w * float(o_norm.get(pid, 0.0)), source)
    return out


def blend_feed(feed_rows, candidates, weight, top, extra=None, categories=None, excluded=(), targets=None,
               curation=None):
    """Blend feed rows with a candidate list.

    Parameters
    ----------
    feed_rows : iterable of FeedRow
        harmony's rows (product, category, partner, partner_category, score, reason).
    candidates : sequence of Candidate
    weight : float in [0, 1]
    top : int
        Rows kept per product and partner category.
    extra : mapping of (product, partner) to (score, reason), optional
        harmony's exact scores of candidate pairs that are not among ``feed_rows``.
    categories : mapping of str to str, optional
        Category of each store product (candidates' partners are grouped by it).
    excluded : set of str
        Store partners that must not appear (out of stock).
    targets : collection of str, optional
        The only partner categories to list (normalised), as the feed's ``--targets``.
    curation : harmony.suggest.curation.Curation, optional
        The stylist's file, applied to the blended rows as to the feed's: blocked category pairs
        and partners left out, floors checked on harmony's score (a row harmony could not score
        is kept), pinned partners (among ``feed_rows`` when the store can score them) placed at
        their rank, and the number of partner categories cut.

    Returns
    -------
    list of BlendRow
        Sorted by product, partner category, rank.
    """
    from harmony.suggest.curation import category_pair_allowed, curate, limit_partner_categories

    categories = dict(categories or {})
    extra = dict(extra or {})
    h_score, reason, own_cat = {}, {}, {}
    for r in feed_rows:
        h_score[(r.product, r.partner_category)] = h_score.get((r.product, r.partner_category), {})
        h_score[(r.product, r.partner_category)][r.partner] = float(r.score)
        reason[(r.product, r.partner)] = r.reason
        own_cat[r.product] = r.category
    other = {}
    for c in candidates:
        if c.partner in excluded:
            continue
        cat = categories.get(c.partner) or c.partner_category or "unknown"
        other.setdefault((c.product, cat), {})[c.partner] = c.score
        if (c.product, c.partner) in extra:
            score, why = extra[(c.product, c.partner)]
            h_score.setdefault((c.product, cat), {})[c.partner] = float(score)
            reason[(c.product, c.partner)] = why
    pinned = {(r.product, r.partner) for r in feed_rows if getattr(r, "pinned", False)}
    rows, run = [], []
    for key in sorted(set(h_score) | set(other)):
        product, cat = key
        own = own_cat.get(product, categories.get(product, ""))
        if targets is not None and cat not in targets:
            continue
        if curation is not None and not category_pair_allowed(curation, own, cat):
            continue
        harmony, theirs = h_score.get(key, {}), other.get(key, {})
        mixed = blend_group(harmony, theirs, weight)
        order = sorted(mixed, key=lambda pid: (-mixed[pid][0], pid))
        group = []
        for rank, pid in enumerate(order, start=1):
            value, source = mixed[pid]
            why = reason.get((product, pid), "")
            if source == "not in store":
                why = "not in the store: the candidate list's own score is kept"
            group.append(BlendRow(product, own, pid, cat, rank, float(value), why, harmony.get(pid),
                                  theirs.get(pid), source, pinned=(product, pid) in pinned))
        if curation is None:
            rows.extend(group[: int(top)])
            continue
        if run and run[0].product != product:
            rows.extend(limit_partner_categories(curation, run))
            run = []
        run.extend(curate(curation, product, cat, group, lambda _pid: None, int(top),
                          floor_of=attrgetter("harmony_score")))
    if run:
        rows.extend(limit_partner_categories(curation, run))
    return rows


def blend_from_store(store, rules, feed_rows, candidates, weight, top, targets=None, curation=None):
    """:func:`blend_feed` with harmony's exact scores of every candidate pair the store can score;
    ``targets`` are category names as given (normalised here)."""
    from harmony.rules.score import pair_scores

    products = {p.id: p for p in store.products()}
    palettes = store.palettes()
    in_feed = {(r.product, r.partner) for r in feed_rows}
    todo = [c for c in candidates if (c.product, c.partner) not in in_feed and c.product in palettes
            and c.partner in palettes and products[c.product].category_key != products[c.partner].category_key
            and rules.pairs_with(products[c.product].category_key, products[c.partner].category_key)]
    extra = {}
    by_pair = {}
    for c in todo:
        by_pair.setdefault((products[c.product].category_key, products[c.partner].category_key), []).append(c)
    for (cat_a, cat_b), group in sorted(by_pair.items()):
        pr = rules.for_pair(cat_a, cat_b)
        scored = pair_scores([palettes[c.product] for c in group], [palettes[c.partner] for c in group], pr)
        for c, ps in zip(group, scored):
            extra[(c.product, c.partner)] = (float(ps.score), ps.reason)
    categories = {pid: p.category_key for pid, p in products.items() if pid in palettes}
    excluded = {pid for pid, p in products.items() if not p.in_stock()}
    if targets is not None:
        targets = {normalise_category(t) for t in targets}
    return blend_feed(feed_rows, candidates, weight, top, extra=extra, categories=categories, excluded=excluded,
                      targets=targets, curation=curation)


@dataclass(frozen=True, eq=False)
class BlendRanks:
    """What a blend mixes, whatever its weight: harmony's raw pair scores and the candidate list's
    scores, each rank-normalised over each query's candidates (0 for candidates the list does not
    propose). The ranks of the latest queries asked are remembered, so the blends of several
    weights share them; ``candidates`` is read when the ranks are made."""

    rules_method: object
    candidates: dict  # (product, partner) -> score
    _by_anchor: dict = field(default_factory=dict, init=False, repr=False)  # product -> {partner: score}
    _latest: list = field(default_factory=lambda: [None, None], init=False, repr=False)

    def __post_init__(self):
        for (product, partner), score in self.candidates.items():
            self._by_anchor.setdefault(product, {})[partner] = score

    def ranks(self, asked):
        """``(harmony, other, bounds)`` of ``(anchor, candidates)`` queries: two arrays laid end to
        end and the start of each query's run (and the end of the last)."""
        key = [(a.id, tuple(map(_ID, cands))) for a, cands in asked]
        if self._latest[0] == key:
            return self._latest[1]
        sizes = [len(cands) for _, cands in asked]
        many = getattr(self.rules_method, "score_queries", None)
        own = many(asked) if many is not None else [self.rules_method(a, cands) for a, cands in asked]
        h = rank_normalise(np.concatenate(own) if own else np.zeros(0), sizes)
        theirs = [list(map(self._by_anchor.get(a, {}).get, partners)) for a, partners in key]
        proposed = np.array([v is not None for row in theirs for v in row], dtype=bool)
        o = np.zeros(proposed.size)
        o[proposed] = rank_normalise([v for row in theirs for v in row if v is not None],
                                     [len(row) - row.count(None) for row in theirs])
        self._latest[:] = [key, (h, o, np.append(0, np.cumsum(sizes)).tolist())]
        return self._latest[1]


@dataclass(frozen=True, eq=False)
class BlendMethod:
    """An evaluation method (see :mod:`harmony.evaluation.core`): harmony's raw pair score and the
    candidate list, rank-normalised over a query's candidates and mixed with ``weight``.

    ``rules_method`` is a :class:`harmony.evaluation.methods.RulesMethod`; candidates the list does
    not propose get 0 from it (see the module notes). ``ranks``, when given, is a
    :class:`BlendRanks` of the same ``rules_method`` and ``candidates`` that blends of other weights share.
    """

    rules_method: object
    candidates: dict  # (product, partner) -> score
    weight: float
    name: str = ""
    ranks: BlendRanks = None
    kind: str = field(default="blend", init=False)

    def __post_init__(self):
        if self.ranks is None:
            object.__setattr__(self, "ranks", BlendRanks(self.rules_method, self.candidates))

    def __call__(self, anchor, candidates):
        return self.score_queries([(anchor, candidates)])[0]

    def score_queries(self, asked):
        """Scores of many ``(anchor, candidates)`` queries (a list of arrays), ranked all at once."""
        h, o, bounds = self.ranks.ranks(asked)
        mixed = (1.0 - self.weight) * h + self.weight * o
        return [mixed[lo:hi] for lo, hi in zip(bounds[:-1], bounds[1:])]


def write_records(rows, path, columns, fmt=None, what="feed"):
    """Write rows (with ``to_dict``) as JSONL or CSV with ``columns``, whole (see harmony.fileio).

    Rows lacking a column get an empty value. ``fmt`` defaults to the suffix (.csv or JSONL).
    """
    path = Path(path)
    fmt = fmt or ("csv" if path.suffix.lower() == ".csv" else "jsonl")
    if fmt not in ("jsonl", "csv"):
        raise HarmonyError(f"{path}: blended and look-alike rows are written as JSONL or CSV, not {fmt}")
    records = [{c: r.to_dict().get(c) for c in columns} for r in rows]
    if fmt == "jsonl":
        text = "".join(json.dumps(rec, ensure_ascii=False) + "\n" for rec in records)
    else:
        buf = io.StringIO()
        writer = csv.DictWriter(buf, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows(spreadsheet_safe_row(rec) for rec in records)  # formula cells neutralised
        text = buf.getvalue()
    return write_text_whole(path, text, what)


def parse_weights(text):
    """``"0,0.25,1"`` -> ``(0.0, 0.25, 1.0)``; HarmonyError naming a bad or out-of-range value."""
    out = []
    for part in str(text).split(","):
        part = part.strip()
        if not part:
            continue
        try:
            w = float(part)
        except ValueError:
            raise HarmonyError(f"--blend-weights: not a number: {part!r}") from None
        if not 0.0 <= w <= 1.0:
            raise HarmonyError(f"--blend-weights: {part} is outside [0, 1]")
        if w not in out:
            out.append(w)
    if not out:
        raise HarmonyError("--blend-weights: no weights given")
    return tuple(out)


def blend_methods_factory(path, weights_text):
    """For ``run_evaluation(extra_methods=...)``: one :class:`BlendMethod` per weight, blending the
    first rules method with the candidate list at ``path``."""
    candidates = {(product, partner): score for product, partner, score, _, _ in _candidate_rows(path)}
    weights = parse_weights(weights_text)

    def make(methods, palettes, products):
        rules_method = next(m for m in methods if getattr(m, "kind", "") == "rules")
        ranks = BlendRanks(rules_method, candidates)
        return [BlendMethod(rules_method, candidates, w, name=f"blend W={w:g} ({rules_method.name})", ranks=ranks)
                for w in weights]

    return make
