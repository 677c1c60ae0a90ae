"""The report as a working tool: the product finder's data, what curation changed, what made the feed.

Everything here is plain data for the template: the finder's data is one JSON text embedded in
the page (read by a short script in the page itself, which writes it with ``textContent`` only,
so nothing from a catalogue is ever parsed as HTML).
"""

import json
from dataclasses import dataclass
from operator import itemgetter
from pathlib import Path

from harmony.suggest.provenance import file_sha256

__all__ = ["FlaggedProduct", "group_flags", "explorer_json", "curation_changes", "made_by", "plural"]


@dataclass(frozen=True)
class FlaggedProduct:
    """One flagged product with every reason: ``reasons`` is ((kind, detail), ...)."""

    product_id: str
    title: str
    reasons: tuple


def group_flags(flags):
    """FlagViews (in order) grouped by product: each product once, reasons in the order given."""
    out = {}
    for f in flags:
        entry = out.setdefault(f.product_id, (f.title, []))
        entry[1].append((f.kind, f.detail))
    return tuple(FlaggedProduct(pid, title, tuple(reasons)) for pid, (title, reasons) in out.items())


def plural(n, word, many=None):
    """``"1 rug"``, ``"2 rugs"``; ``many`` for irregular plurals. Category names ending in s, x, ch
    or sh take -es (``"2 benches"``)."""
    n = int(n)
    if n == 1:
        return f"1 {word}"
    if many is None:
        many = word + ("es" if word.endswith(("s", "x", "ch", "sh")) else "s")
    return f"{n} {many}"


def explorer_json(views, feed_rows, flagged):
    """The finder's data: per product its palette, partners per category from the feed, flags.

    The text is safe inside ``<script type="application/json">``: every ``<`` is escaped, so no
    catalogue string can close the element.
    """
    reasons = {f.product_id: [f"{kind}: {detail}" if detail else kind for kind, detail in f.reasons]
               for f in flagged}
    partners = {}  # [partner id, score, rank, pinned 0/1]: the page finds the partner's title by its id
    for row in sorted(feed_rows, key=itemgetter("product", "partner_category", "rank")):
        partners.setdefault(row["product"], {}).setdefault(row["partner_category"], []).append(
            [row["partner"], round(float(row["score"]), 3), int(row["rank"]), int(bool(row.get("pinned", False)))])
    data = [
        {"id": v.id, "title": v.title, "category": v.category, "colours": [[h, round(w, 4)] for h, w in v.colours],
         "flags": reasons.get(v.id, []), "partners": partners.get(v.id, {})}
        for v in views.values()
    ]
    return json.dumps(data, ensure_ascii=False, separators=(",", ":")).replace("<", "\\u003c")


def curation_changes(curation, feed_rows, palettes=None, products=None, rules=None):
    """What the curation file did to the feed shown, one sentence per rule (with its line).

    Pins say whether the feed shows them; a blocked pair says the score it would have had and the
    rank it would have reached among the partners shown (scored exactly when ``palettes``,
    ``products`` and ``rules`` are given).
    """
    if curation is None:
        return ()
    where = Path(curation.path).name
    shown = {}
    for row in feed_rows:
        shown.setdefault((row["product"], row["partner_category"]), []).append(row)
    by_pair = {(r["product"], r["partner"]): r for r in feed_rows}
    cats = {p.id: p.category_key for p in (products or ())}
    out = []
    for pin in curation.pins:
        row = by_pair.get((pin.product, pin.partner))
        if row is not None and row.get("pinned"):
            out.append(f"{where}:{pin.line}: pinned {pin.partner} as partner {row['rank']} of {pin.product} "
                       f"(score {row['score']:.2f})")
        else:
            out.append(f"{where}:{pin.line}: pin {pin.product} -> {pin.partner} not in this feed (unknown, out of "
                       "stock, without a palette, or its category is not paired)")
    for block in curation.blocks:
        if block.category is not None:
            out.append(f"{where}:{block.line}: {block.product} gets no {block.category} partners")
            continue
        text = f"{where}:{block.line}: never {block.product} with {block.partner}"
        score = _score(block.product, block.partner, palettes, cats, rules)
        if score is not None:
            rows = shown.get((block.product, cats.get(block.partner)), [])
            rank = 1 + sum(1 for r in rows if r["score"] > score)
            top = max((r["rank"] for r in rows), default=0)
            fate = f"would have been partner {rank}" if rank <= top else "below the partners shown anyway"
            text += f" (score {score:.2f}: {fate})"
        out.append(text)
    for rule in curation.category_pairs:
        a, b = rule.categories
        if rule.blocked:
            out.append(f"{where}:{rule.line}: {a} and {b} are never suggested together")
        elif rule.min_score is not None:
            out.append(f"{where}:{rule.line}: {a} and {b} shown from a score of {rule.min_score:.2f}")
    if curation.only_listed_category_pairs:
        out.append(f"{where}: only the category pairs listed are suggested")
    if curation.min_score > 0:
        out.append(f"{where}: other pairs shown from a score of {curation.min_score:.2f}")
    if curation.max_partner_categories is not None:
        out.append(f"{where}: at most {plural(curation.max_partner_categories, 'partner category', 'partner categories')} "
                   "per product")
    return tuple(out)


def _score(a, b, palettes, cats, rules):
    if not palettes or rules is None or a not in palettes or b not in palettes:
        return None
    if a not in cats or b not in cats or not rules.pairs_with(cats[a], cats[b]):
        return None
    from harmony.rules.score import pair_score

    return float(pair_score(palettes[a], palettes[b], rules.for_pair(cats[a], cats[b])).score)


def made_by(rules_path, curation, feed_meta, feed_given):
    """(lines, warnings): which rules and curation files made the report and its feed.

    ``feed_meta`` is the feed's sidecar (:func:`harmony.suggest.provenance.read_provenance`) or
    None; a warning is given when the feed records other rules (or another curation) than the
    report's, or records nothing.
    """
    lines, warnings = [], []
    try:
        rules_sha = file_sha256(rules_path) if rules_path else None
    except OSError:  # rules parsed from text, or a file gone since
        rules_path = rules_sha = None
    if rules_path:
        lines.append(f"rules: {Path(rules_path).name} (sha256 {rules_sha[:12]})")
    if curation is not None:
        lines.append(f"curation: {Path(curation.path).name} (sha256 {curation.sha256[:12]})")
    if not feed_given:
        return tuple(lines), ()
    if feed_meta is None:
        warnings.append("the feed does not record the rules that made it (no matching FEED.about.json beside it): "
                        "its scores may come from other rules than the ones drawn here")
        return tuple(lines), tuple(warnings)
    made = feed_meta.get("rules") or {}
    lines.append(f"feed made with rules {made.get('file', '?')} (sha256 {str(made.get('sha256', ''))[:12]})")
    if rules_sha and made.get("sha256") != rules_sha:
        warnings.append(f"the feed was made with other rules ({made.get('file', '?')}, sha256 "
                        f"{str(made.get('sha256', ''))[:12]}) than this report draws it with "
                        f"({Path(rules_path).name}, sha256 {rules_sha[:12]})")
    feed_cur = feed_meta.get("curation")
    if feed_cur:
        lines.append(f"feed made with curation {feed_cur.get('file', '?')} (sha256 {str(feed_cur.get('sha256', ''))[:12]})")
    mine = curation.sha256 if curation is not None else None
    theirs = feed_cur.get("sha256") if feed_cur else None
    if mine != theirs:
        warnings.append("the feed was made with " + (f"curation {feed_cur.get('file', '?')}" if feed_cur else "no curation")
                        + ", this report is given " + (f"{Path(curation.path).name}" if curation else "none"))
    return tuple(lines), tuple(warnings)
