"""The static HTML report: gather what it shows into plain data, then render one offline file.

:func:`gather_report` turns products, palettes, feed rows and bundle results into a
:class:`ReportData` of small frozen views (no HTML in them except the SVG drawings, which
:mod:`harmony.report.svg` builds with every label escaped). :func:`render_report` fills the jinja2
template ``templates/report.html.j2`` with autoescaping on, so every string that came from a
catalogue, a feed or a bundle file is escaped. Thumbnails are embedded as base64 data URIs and the
CSS and the one script (the product finder) are inline: the file needs no network.
"""

import base64
import heapq
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import jinja2
import numpy as np
from markupsafe import Markup

from harmony import colour
from harmony.errors import HarmonyError
from harmony.fileio import write_text_whole
from harmony.report.safety import (
    CAUTION_NOTE,
    close_band,
    contrast_caution,
    is_floor_covering,
    required_difference,
    stands_on_floor,
    surface_lrvs,
)
from harmony.report.explore import curation_changes, explorer_json, group_flags, made_by, plural
from harmony.report.inputs import FEED_KEYS, read_feed
from harmony.report.svg import WheelLink, hue_wheel_svg, palette_strip_svg

__all__ = [
    "ProductView",
    "SuggestionView",
    "BundleItemView",
    "BundleView",
    "FlagView",
    "CautionView",
    "FloorView",
    "ReportData",
    "LOW_CONFIDENCE",
    "FEED_KEYS",
    "read_feed",
    "read_bundles",
    "thumbnail_data_uri",
    "gather_report",
    "gather_from_store",
    "render_report",
    "write_report",
]

#: Palettes below this confidence are listed among the flagged products.
LOW_CONFIDENCE = 0.5


_TEMPLATE_DIR = Path(__file__).resolve().parent / "templates"
_THUMB_PX = 180


@dataclass(frozen=True)
class ProductView:
    """One product card: catalogue fields, a thumbnail, the palette strip and its estimated LRV."""

    id: str
    title: str
    category: str
    price: float
    currency: str
    stock: int | None
    thumbnail: str = ""
    strip: Markup = Markup("")
    colours: tuple = ()
    lrv: float | None = None
    scene: bool = False
    confidence: float | None = None
    flags: tuple = ()


@dataclass(frozen=True)
class SuggestionView:
    """A product and a suggested partner from the feed, with the wheel and the reason."""

    product: ProductView
    partner: ProductView
    rank: int
    score: float
    reason: str
    wheel: Markup = Markup("")
    links: tuple = ()  # (hex_a, hex_b, rule, value)


@dataclass(frozen=True)
class BundleItemView:
    slot: str
    product: ProductView
    quantity: int
    price: float

    @property
    def line_total(self):
        return self.price * self.quantity


@dataclass(frozen=True)
class BundleView:
    """One bundle of a room: items, prices, the pair scores and the room-level proportions."""

    room: str
    rank: int
    score: float
    total_price: float
    budget: float | None
    currency: str
    exact: bool | None
    pool_sizes: tuple = ()  # (slot, n)
    items: tuple = ()
    pairs: tuple = ()  # (label_a, label_b, score, weight)
    proportions: tuple = ()  # (label, text)
    strip: Markup = Markup("")
    wheel: Markup = Markup("")
    wheel_caption: str = ""
    source: str = ""


@dataclass(frozen=True)
class FlagView:
    product_id: str
    title: str
    kind: str
    detail: str


@dataclass(frozen=True)
class CautionView:
    rug: ProductView
    other: ProductView
    difference: float
    required: float
    message: str
    where: str


@dataclass(frozen=True)
class FloorView:
    """A rug of the report's pairs and sets against the floor it lies on.

    ``band`` holds the floor LRVs to avoid (within ``required`` points of the rug); ``caution``
    is the check against a floor of known LRV (None when it passes or when no floor was given).
    """

    rug: ProductView
    required: float
    band: tuple  # (low, high)
    caution: object = None  # harmony.report.safety.ContrastCaution | None
    where: str = ""


@dataclass(frozen=True)
class ReportData:
    """Everything the report shows, as plain data."""

    title: str
    products: tuple = ()
    suggestions: tuple = ()
    bundles: tuple = ()
    flagged: tuple = ()
    cautions: tuple = ()
    floors: tuple = ()
    floor_lrv: float | None = None
    floor_hex: str = ""
    caution_note: str = CAUTION_NOTE
    rules_path: str = ""
    rules_text: str = ""
    categories: tuple = ()  # (category, count)
    evaluation: tuple = ()  # (heading, ((column, ...), (row, ...), ...))
    notes: tuple = field(default=())
    explorer: str = "[]"  # the product finder's data (harmony.report.explore.explorer_json)
    curation_changes: tuple = ()  # one sentence per curation rule
    made_by: tuple = ()  # which rules / curation files made the report and its feed
    made_warnings: tuple = ()
    pages: tuple = ()  # (label, relative address) of pages made beside the report


# ---------------------------------------------------------------------------------------- inputs


def read_bundles(path):
    """A bundle result file (the JSON of ``harmony bundle --json``), checked for the keys used.

    Raises
    ------
    HarmonyError
        ``FILE: key: reason`` naming the first missing or malformed key.
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise HarmonyError(f"{path}: cannot read bundles: {exc.strerror or exc}") from None
    except json.JSONDecodeError as exc:
        raise HarmonyError(f"{path}: not JSON: {exc.msg} (line {exc.lineno})") from None
    if not isinstance(data, dict):
        raise HarmonyError(f"{path}: bundle JSON must be an object")
    if not isinstance(data.get("bundles"), list):
        raise HarmonyError(f"{path}: bundles: missing or not a list")
    for i, bundle in enumerate(data["bundles"]):
        where = f"{path}: bundles[{i}]"
        if not isinstance(bundle, dict):
            raise HarmonyError(f"{where}: not an object")
        for key in ("score", "total_price"):
            if not isinstance(bundle.get(key), (int, float)) or isinstance(bundle.get(key), bool):
                raise HarmonyError(f"{where}.{key}: missing or not a number")
        if not isinstance(bundle.get("items"), list) or not bundle["items"]:
            raise HarmonyError(f"{where}.items: missing or empty")
        for j, item in enumerate(bundle["items"]):
            if not isinstance(item, dict) or "id" not in item:
                raise HarmonyError(f"{where}.items[{j}].id: missing")
            for key in ("quantity", "price"):
                if not isinstance(item.get(key), (int, float)) or isinstance(item.get(key), bool):
                    raise HarmonyError(f"{where}.items[{j}].{key}: missing or not a number")
    data["_source"] = str(path)
    return data


def thumbnail_data_uri(path, size=_THUMB_PX):
    """A JPEG thumbnail of an image as a ``data:`` URI, or "" when the file cannot be read.

    The report must still be written when a photo is missing (the product is flagged instead).
    """
    from PIL import Image, ImageOps

    if path is None:
        return ""
    try:
        with Image.open(io.BytesIO(path) if isinstance(path, bytes) else path) as im:
            im.draft("RGB", (size * 2, size * 2))
            im = ImageOps.exif_transpose(im).convert("RGB")
            im.thumbnail((size, size))
            buf = io.BytesIO()
            im.save(buf, format="JPEG", quality=78, optimize=True)
    except (OSError, ValueError, Image.DecompressionBombError):
        return ""
    return "data:image/jpeg;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


# ---------------------------------------------------------------------------------------- gather


def _palette_colours(palettes):
    """``{id: (colour codes, surface LRV)}`` of ``palettes`` (a dict by id), every colour of every
    palette converted in one call each (per palette, the conversions cost more than the page)."""
    ids = list(palettes)
    if not ids:
        return {}
    sizes = [len(palettes[i].jab) for i in ids]
    codes = colour.jab_to_hex(np.concatenate([palettes[i].jab for i in ids]))
    lrvs = surface_lrvs([palettes[i] for i in ids])
    ends = np.cumsum(sizes).tolist()
    return {i: (codes[end - n: end], lrv) for i, n, end, lrv in zip(ids, sizes, ends, lrvs)}


def _product_view(product, palette, image_path, thumbnails, known):
    """``known``: the palette's (colour codes, surface LRV) from :func:`_palette_colours`."""
    strip = Markup("")
    colours = ()
    lrv = None
    if palette is not None:
        codes, lrv = known
        strip = Markup(palette_strip_svg(palette, label=f"palette of {product.title}", codes=codes))
        colours = tuple((code, float(w)) for code, w in zip(codes, palette.weights))
    flags = []
    if palette is None:
        flags.append("no palette")
    else:
        if palette.scene:
            flags.append("room scene")
        if palette.confidence < LOW_CONFIDENCE:
            flags.append("low confidence")
        flags.extend(f"palette: {flag}" for flag in palette.flags)
    return ProductView(
        id=str(product.id),
        title=str(product.title),
        category=str(product.category),
        price=float(product.price),
        currency=str(product.currency),
        stock=product.stock,
        thumbnail=thumbnail_data_uri(image_path) if thumbnails else "",
        strip=strip,
        colours=colours,
        lrv=lrv,
        scene=bool(palette is not None and palette.scene),
        confidence=None if palette is None else float(palette.confidence),
        flags=tuple(flags),
    )


def _links(pair_score, pal_a, pal_b, limit=4):
    """Wheel links from a PairScore's colour pairs: the strongest ``limit`` by absolute value."""
    pairs = sorted(pair_score.pairs, key=lambda p: -abs(float(p.value)))
    links, rows = [], []
    for p in pairs:
        if 0 <= p.index_a < len(pal_a) and 0 <= p.index_b < len(pal_b):
            links.append(WheelLink(int(p.index_a), int(p.index_b), str(p.rule), float(p.value)))
            rows.append((p.hex_a, p.hex_b, str(p.rule), float(p.value)))
        if len(links) == limit:
            break
    return links, tuple(rows)


def _wheel(rules, pal_a, pal_b, cat_a, cat_b, names):
    """Hue wheel of two palettes with the rule links of their exact pair score."""
    from harmony.rules.score import pair_score

    links, rows = [], ()
    if rules is not None and rules.pairs_with(cat_a, cat_b):
        ps = pair_score(pal_a, pal_b, rules.for_pair(cat_a, cat_b))
        links, rows = _links(ps, pal_a, pal_b)
    kwargs = {}
    if rules is not None:
        kwargs = {"neutral_threshold": float(rules.neutral_threshold), "neutral_fade": float(rules.neutral_fade)}
    return Markup(hue_wheel_svg(pal_a, pal_b, links, names=names, **kwargs)), rows


def _pick_suggestions(rows, limit):
    """The ``limit`` best feed rows by score, one per unordered product pair (the row of lower
    rank, then higher score, speaks for the pair), the best pair of each category pair first;
    in score order. One pass over the rows: a shop's feed has millions."""
    rep = {}
    for row in rows:
        pair = frozenset((row["product"], row["partner"]))
        key = (row["rank"], -row["score"], row["product"], row["partner"])
        held = rep.get(pair)
        if held is None or key < held[0]:
            rep[pair] = (key, row)

    def order(r):
        return -r["score"], r["product"], r["partner"]

    kinds = {}
    for _, row in rep.values():
        kind = frozenset((str(row["category"]).casefold(), str(row["partner_category"]).casefold()))
        if kind not in kinds or order(row) < order(kinds[kind]):
            kinds[kind] = row
    chosen = sorted(kinds.values(), key=order)[:limit]
    first = {id(r) for r in chosen}
    best = heapq.nsmallest(limit, (row for _, row in rep.values()), key=order)
    chosen += [r for r in best if id(r) not in first][: limit - len(chosen)]
    chosen.sort(key=order)
    return chosen


def _proportions(value):
    """Room-level proportions of a bundle as (label, text) rows.

    Understands the room view of :mod:`harmony.suggest.roomview` (dominant / secondary / accent shares,
    their distance from 60-30-10, the best Matsuda hue template); other keys are shown as given.
    """
    if value is None:
        return ()
    if not isinstance(value, dict):
        return (("proportions", str(value)),)
    value = dict(value)
    out = []
    shares = [value.pop(k, None) for k in ("dominant", "secondary", "accent")]
    if all(isinstance(x, (int, float)) for x in shares):
        text = " / ".join(f"{x * 100:.0f} %" for x in shares)
        dist = value.pop("distance_60_30_10", None)
        if isinstance(dist, (int, float)):
            text += f" (distance {dist:.2f} from 60-30-10)"
        out.append(("60-30-10", text))
    template = value.pop("hue_template", None)
    if isinstance(template, dict) and "name" in template:
        text = f"Matsuda type {template['name']}"
        if isinstance(template.get("rotation_deg"), (int, float)):
            text += f" at {template['rotation_deg']:.0f}\u00b0"
        if isinstance(template.get("distance_deg"), (int, float)):
            text += f", {template['distance_deg']:.1f}\u00b0 outside its sectors"
        out.append(("hue template", text))
    value.pop("palette", None)  # drawn as the combined strip
    for key, v in value.items():
        if isinstance(v, float):
            text = f"{v:.3f}"
        elif isinstance(v, dict):
            text = ", ".join(f"{k}: {x:.3g}" if isinstance(x, float) else f"{k}: {x}" for k, x in v.items())
        else:
            text = str(v)
        out.append((str(key).replace("_", " "), text))
    return tuple(out)


def _room_strip(proportions):
    """The room view's grouped palette ({hex: weight}) as a strip, or None when absent or malformed."""
    from harmony.photo.palette import Palette

    pal = proportions.get("palette") if isinstance(proportions, dict) else None
    if not isinstance(pal, dict) or not pal:
        return None
    try:
        codes = list(pal)
        weights = np.array([float(pal[c]) for c in codes])
        jab = colour.srgb1_to_jab(np.array([colour.hex_to_srgb1(c) for c in codes]))
        palette = Palette(jab=jab, weights=weights / weights.sum())
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    return Markup(palette_strip_svg(palette, width=320, height=18, label="combined palette of the room"))


def _combined_strip(items, palettes):
    """A palette strip of the whole bundle: item palettes weighted by quantity."""
    jab, w = [], []
    for item in items:
        pal = palettes.get(item.product.id)
        if pal is None:
            continue
        jab.append(pal.jab)
        w.append(pal.weights * item.quantity)
    if not jab:
        return Markup("")
    from harmony.photo.palette import Palette

    jab = np.concatenate(jab)
    w = np.concatenate(w)
    order = np.argsort(-w, kind="stable")
    pal = Palette(jab=jab[order], weights=w[order] / w.sum())
    return Markup(palette_strip_svg(pal, width=320, height=18, label="combined palette of the bundle"))


def _bundle_views(data, views, palettes, rules, where, per_room):
    out = []
    room = str(data.get("room", Path(where).stem))
    budget = data.get("budget")
    currency = str(data.get("currency", ""))
    pools = data.get("pool_sizes") or {}
    pool_sizes = tuple((str(k), int(v)) for k, v in pools.items()) if isinstance(pools, dict) else ()
    for rank, bundle in enumerate(data["bundles"][:per_room], start=1):
        items = []
        for j, item in enumerate(bundle["items"]):
            pid = str(item["id"])
            if pid not in views:
                raise HarmonyError(f"{where}: bundles[{rank - 1}].items[{j}].id: unknown product id {pid!r}")
            items.append(BundleItemView(str(item.get("slot", views[pid].category)), views[pid],
                                        int(item["quantity"]), float(item["price"])))
        by_slot = {it.slot: it for it in items}
        by_id = {it.product.id: it for it in items}
        pairs = []
        for p in bundle.get("slot_pairs") or bundle.get("pairs") or []:  # "pairs": bundle JSON format 1
            if isinstance(p, dict):
                pairs.append((str(p.get("a", "")), str(p.get("b", "")), float(p.get("score", 0.0)),
                              float(p.get("weight", 1.0))))
        wheel, caption = Markup(""), ""
        ranked = sorted(pairs, key=lambda p: -(p[2] * p[3]))
        for a, b, _, _ in ranked:
            ia = by_id.get(a) or by_slot.get(a)
            ib = by_id.get(b) or by_slot.get(b)
            if ia and ib and ia.product.id in palettes and ib.product.id in palettes:
                wheel, _rows = _wheel(rules, palettes[ia.product.id], palettes[ib.product.id],
                                      ia.product.category, ib.product.category,
                                      (ia.product.title, ib.product.title))
                caption = f"{ia.slot} with {ib.slot}, the pair that weighs most in this set"
                break
        out.append(BundleView(
            room=room, rank=rank, score=float(bundle["score"]), total_price=float(bundle["total_price"]),
            budget=None if budget is None else float(budget), currency=currency,
            exact=None if data.get("exact") is None else bool(data.get("exact")),
            pool_sizes=pool_sizes, items=tuple(items), pairs=tuple(pairs),
            proportions=_proportions(bundle.get("proportions")),
            strip=_room_strip(bundle.get("proportions")) or _combined_strip(items, palettes), wheel=wheel, wheel_caption=caption, source=where,
        ))
    return out


def _cautions(suggestions, bundles):
    """Rug-and-furniture cautions, and the rugs met (id -> (rug view, where)) in order."""
    found, rugs = {}, {}

    def consider(x, y, where):
        for rug, other in ((x, y), (y, x)):
            if is_floor_covering(rug.category) and rug.lrv is not None:
                rugs.setdefault(rug.id, (rug, where))
            if is_floor_covering(rug.category) and stands_on_floor(other.category):
                if rug.lrv is None or other.lrv is None:
                    continue
                key = (rug.id, other.id)
                if key in found:
                    continue
                # Furniture on a rug is not a large area: the 30-point figure applies.
                c = contrast_caution(rug.title, rug.lrv, other.title, other.lrv)
                if c is not None:
                    found[key] = CautionView(rug, other, c.difference, c.required, c.message, where)

    for s in suggestions:
        consider(s.product, s.partner, "suggested pair")
    for b in bundles:
        for i, x in enumerate(b.items):
            for y in b.items[i + 1:]:
                consider(x.product, y.product, f"{b.room}, set {b.rank}")
    return tuple(sorted(found.values(), key=lambda c: (c.difference, c.rug.id, c.other.id))), rugs


def _grey_hex(lrv):
    """The sRGB grey whose CIE Y is ``lrv / 100`` (a neutral has R = G = B = Y in linear sRGB).

    Encoded with the sRGB transfer function of IEC 61966-2-1:1999.
    """
    y = min(max(float(lrv) / 100.0, 0.0), 1.0)
    v = 12.92 * y if y <= 0.0031308 else 1.055 * y ** (1.0 / 2.4) - 0.055
    return colour.srgb1_to_hex(np.full(3, v))


def _floor_views(rugs, floor_lrv, illuminance_lux):
    """Each rug against the floor: the band of floor LRVs to avoid, and the check when known.

    A rug and the floor under it are both large areas, so the 20-point allowance of BS 8300-2
    Annex B applies when the illuminance is known to exceed 200 lux.
    """
    need = required_difference(large_area=True, illuminance_lux=illuminance_lux)
    out = []
    for rug, where in rugs.values():
        caution = None
        if floor_lrv is not None:
            caution = contrast_caution(rug.title, rug.lrv, "the floor", floor_lrv, large_area=True,
                                       illuminance_lux=illuminance_lux)
        out.append(FloorView(rug, need, close_band(rug.lrv, need), caution, where))
    # Rugs that fail against the given floor first, then the closest, then by id.
    return tuple(sorted(out, key=lambda f: (f.caution is None,
                                            f.caution.difference if f.caution else 0.0, f.rug.id)))


def gather_report(
    products,
    palettes,
    image_paths=None,
    failures=(),
    feed_rows=(),
    bundle_results=(),
    rules=None,
    title="harmony report",
    max_suggestions=12,
    bundles_per_room=3,
    thumbnails=True,
    evaluation=(),
    notes=(),
    floor_lrv=None,
    illuminance_lux=None,
    curation=None,
    feed_meta=None,
    pages=(),
    feed_given=False,
):
    """Gather the report's content into a :class:`ReportData`.

    Parameters
    ----------
    products : iterable of harmony.shop.catalogue.Product
        Every product to show (id, title, category, price, currency, stock).
    palettes : mapping of str to Palette
        Chosen palette per product id; products without one are flagged.
    image_paths : mapping of str to path, optional
        The photo each palette came from, for the thumbnails.
    failures : iterable of (product_id, image, reason)
        Extraction failures, listed among the flagged products.
    feed_rows : iterable of dict
        Feed rows (see :func:`read_feed`).
    bundle_results : iterable of dict
        Bundle result files (see :func:`read_bundles`).
    rules : harmony.rules.RuleSet, optional
        The rules used; its colour pairs draw the wheel links and its file is shown.
    evaluation : iterable of (heading, (header, rows))
        Optional tables of an offline evaluation.
    floor_lrv : float, optional
        Measured or stated LRV (0-100) of the floor the rugs will lie on; each rug of the pairs
        and sets is checked against it. Without it the report lists the floor LRVs to avoid.
    illuminance_lux : float, optional
        Illuminance on the floor; above 200 lux the rug-and-floor check asks for 20 points.
    curation : harmony.suggest.curation.Curation, optional
        The curation file the feed was made with; the report lists what it changed.
    feed_meta : dict, optional
        The feed's sidecar (:func:`harmony.suggest.provenance.read_provenance`): which rules and
        curation made it. With ``feed_given`` true and no sidecar, the report warns.
    feed_given : bool, optional
        Whether the rows come from a feed file, whose sidecar ``feed_meta`` is then expected.
    pages : iterable of (label, address), optional
        Pages made beside the report (e.g. the demo's clicks page), linked from its contents bar.

    Raises
    ------
    HarmonyError
        If a feed row or bundle names a product that is not among ``products``, or the floor LRV
        or the illuminance is out of range.
    """
    for name, value, top in (("floor LRV", floor_lrv, 100.0), ("illuminance", illuminance_lux, math.inf)):
        if value is not None:
            try:
                v = float(value)
            except (TypeError, ValueError):
                v = math.nan
            if not (0.0 <= v <= top) or not math.isfinite(v):
                limit = "between 0 and 100" if top == 100.0 else "a finite, non-negative number of lux"
                raise HarmonyError(f"{name} must be {limit}, got {value!r}")
    products = sorted(products, key=lambda p: (str(p.category).casefold(), str(p.id)))
    palettes = dict(palettes)
    image_paths = dict(image_paths or {})
    views = {}
    known = _palette_colours({str(p.id): palettes[str(p.id)] for p in products if str(p.id) in palettes})
    for p in products:
        pid = str(p.id)
        views[pid] = _product_view(p, palettes.get(pid), image_paths.get(pid), thumbnails, known.get(pid))

    suggestions = []
    rows = list(feed_rows)
    for n, row in enumerate(rows, start=1):
        for key in ("product", "partner"):
            if row[key] not in views:
                raise HarmonyError(f"feed row {n}: unknown product id {row[key]!r}")
    for row in _pick_suggestions(rows, max_suggestions):
        a, b = views[row["product"]], views[row["partner"]]
        wheel, links = Markup(""), ()
        if a.id in palettes and b.id in palettes:
            wheel, links = _wheel(rules, palettes[a.id], palettes[b.id], a.category, b.category, (a.title, b.title))
        suggestions.append(SuggestionView(a, b, int(row["rank"]), float(row["score"]), row["reason"], wheel, links))

    bundles = []
    for data in bundle_results:
        bundles.extend(_bundle_views(data, views, palettes, rules, data.get("_source", "bundles"), bundles_per_room))

    flagged = []
    for v in views.values():
        for flag in v.flags:
            detail = {
                "room scene": "only a room-scene photo: the palette was guessed around the centre",
                "low confidence": f"palette confidence {v.confidence:.2f}" if v.confidence is not None else "",
                "no palette": "no palette in the store",
                "palette: near-backdrop": "parts of the product lie within a few ΔE of the backdrop: some may be "
                                          f"lost or kept wrongly (confidence {v.confidence or 0:.2f})",
                "palette: small-area": "the product left after removing the backdrop is implausibly small "
                                       f"(confidence {v.confidence or 0:.2f})",
            }.get(flag, flag)
            flagged.append(FlagView(v.id, v.title, flag, detail))
    failed_ids = set()
    for pid, image, reason in failures:
        pid = str(pid)
        name = views[pid].title if pid in views else ""
        failed_ids.add(pid)
        flagged.append(FlagView(pid, name, "extraction failed", f"{image}: {reason}"))
    # A failure explains a missing palette; do not list the product twice.
    flagged = [f for f in flagged if not (f.kind == "no palette" and f.product_id in failed_ids)]
    order = {"extraction failed": 0, "no palette": 1, "room scene": 2, "low confidence": 3}
    flagged.sort(key=lambda f: (order.get(f.kind, 4), f.product_id))
    flagged = group_flags(flagged)  # each product once, with all its reasons

    counts = {}
    for v in views.values():
        counts[v.category] = counts.get(v.category, 0) + 1
    rules_path, rules_text = "", ""
    if rules is not None and getattr(rules, "path", None):
        rules_path = str(rules.path)
        try:
            rules_text = Path(rules.path).read_text(encoding="utf-8")
        except OSError:
            rules_text = ""
    cautions, rugs = _cautions(suggestions, bundles)
    made, made_warnings = made_by(rules_path or None, curation, feed_meta, bool(feed_given))
    return ReportData(
        title=str(title),
        products=tuple(views.values()),
        suggestions=tuple(suggestions),
        bundles=tuple(bundles),
        flagged=tuple(flagged),
        cautions=cautions,
        floors=_floor_views(rugs, None if floor_lrv is None else float(floor_lrv), illuminance_lux),
        floor_lrv=None if floor_lrv is None else float(floor_lrv),
        floor_hex="" if floor_lrv is None else _grey_hex(floor_lrv),
        rules_path=rules_path,
        rules_text=rules_text,
        categories=tuple(sorted(counts.items(), key=lambda kv: kv[0].casefold())),
        evaluation=tuple(evaluation),
        notes=tuple(str(n) for n in notes),
        explorer=explorer_json(views, rows, flagged),
        curation_changes=curation_changes(curation, rows, palettes, products, rules),
        made_by=made,
        made_warnings=made_warnings,
        pages=tuple((str(label), str(href)) for label, href in pages),
    )


def gather_from_store(store, feed_rows=(), bundle_results=(), rules=None, **kwargs):
    """:func:`gather_report` over everything in a :class:`harmony.shop.store.Store`."""
    from harmony.shop.fetch import is_url

    products = store.products()
    palettes = store.palettes()
    chosen = store.chosen_images()
    # A downloaded photo is embedded from the store's copy, so the report opens offline.
    images = {p.id: store.remote_bytes(chosen[p.id]) if is_url(chosen[p.id]) else store.image_path(p.id)
              for p in products if p.id in palettes}
    return gather_report(products, palettes, images, store.failures(), feed_rows, bundle_results, rules, **kwargs)


# ---------------------------------------------------------------------------------------- render


def _money(value, currency=""):
    if value is None:
        return ""
    text = f"{float(value):,.2f}"
    return f"{text} {currency}".strip()


def _environment():
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(_TEMPLATE_DIR)),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["money"] = _money
    env.filters["pct"] = lambda x: f"{float(x) * 100:.0f} %"
    env.filters["plural"] = plural
    return env


def render_report(data):
    """The report as one HTML string (autoescaped jinja2, inline CSS, embedded thumbnails)."""
    template = _environment().get_template("report.html.j2")
    by_category = {}
    for p in data.products:
        by_category.setdefault(p.category, []).append(p)
    return template.render(r=data, by_category=sorted(by_category.items(), key=lambda kv: kv[0].casefold()))


def write_report(data, out):
    """Render ``data`` into the file ``out`` (written whole, then moved into place)."""
    return write_text_whole(out, render_report(data), what="report")
