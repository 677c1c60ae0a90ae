"""The exact harmony score of two palettes, and its explanation in a stylist's words.

``raw = pal_a.weights @ pair_rules.kernel(pal_a.jab, pal_b.jab) @ pal_b.weights`` (the bilinear
contract of :mod:`harmony.rules`) and ``score = to_unit(raw, pair_rules)`` in [0, 1], strictly
increasing in ``raw``. Every :class:`PairScore` carries the rules' contributions, the colour pairs
that drove them and one plain sentence.
"""

import math
from dataclasses import dataclass

import numpy as np

from harmony import colour
from harmony.colour.neutral import neutrality

__all__ = [
    "ColourPair",
    "PairScore",
    "to_unit",
    "pair_raw",
    "pair_score",
    "explain_reason",
    "colour_name",
    "ColourLabels",
    "colour_labels",
    "pair_scores",
    "net_colour_pairs",
    "SCORE_BATCH",
    "scores_and_reasons",
]


@dataclass(frozen=True)
class ColourPair:
    """One colour of each product and the net effect of the rules on them.

    Attributes
    ----------
    hex_a, hex_b : str
        '#rrggbb' of the two colours.
    rule : str
        The rule that leads the pair: the largest contribution with the sign of ``value``.
    value : float
        The pair's net contribution to the raw score, summed over every rule:
        ``w_a * w_b * kernel`` (see :func:`net_colour_pairs`).
    share_a, share_b : float
        The colours' weights in their palettes (0..1).
    name_a, name_b : str
        Words for the colours (:func:`colour_name`).
    index_a, index_b : int
        Positions in the palettes.
    """

    hex_a: str
    hex_b: str
    rule: str
    value: float
    share_a: float
    share_b: float
    name_a: str
    name_b: str
    index_a: int
    index_b: int


@dataclass(frozen=True)
class PairScore:
    """The exact score of two palettes under the rules of their categories.

    Attributes
    ----------
    score : float
        In [0, 1], higher is better.
    raw : float
        The weighted kernel sum before :func:`to_unit`.
    categories : tuple of (str, str)
    section : str
        The rules-file section that applied (``"sofa / rug"``, ``"default"``).
    contributions : tuple of (str, float)
        Each rule's share of ``raw``; they sum to ``raw``. In the order of the rules file.
    pairs : tuple of ColourPair
        The colour pairs with the largest absolute net contributions, largest first; each colour
        pair appears once.
    reason : str
        One sentence a stylist can read.
    """

    score: float
    raw: float
    categories: tuple
    section: str
    contributions: tuple
    pairs: tuple
    reason: str

    def to_dict(self):
        return {
            "score": self.score,
            "raw": self.raw,
            "categories": list(self.categories),
            "section": self.section,
            "contributions": [{"rule": r, "value": v} for r, v in self.contributions],
            "colour_pairs": [
                {"a": p.hex_a, "b": p.hex_b, "rule": p.rule, "value": p.value,
                 "share_a": p.share_a, "share_b": p.share_b, "name_a": p.name_a, "name_b": p.name_b}
                for p in self.pairs
            ],
            "reason": self.reason,
        }


def to_unit(raw, pair_rules):
    """Map raw scores to [0, 1], strictly increasing: ``1 / (1 + exp(-(raw - midpoint) / scale))``.

    Works element-wise on arrays (the screen maps whole score matrices); a float in, a float out.
    The logistic is written with ``tanh`` so that no overflow occurs for any finite ``raw``.
    """
    x = (np.asarray(raw, dtype=float) - pair_rules.midpoint) / pair_rules.scale
    out = 0.5 * (1.0 + np.tanh(0.5 * x))
    return float(out) if out.ndim == 0 else out


def pair_raw(pal_a, pal_b, pair_rules):
    """The raw score only, ``w_a @ K @ w_b`` (no explanation): the fast path."""
    return float(pal_a.weights @ pair_rules.kernel(pal_a.jab, pal_b.jab) @ pal_b.weights)


# --------------------------------------------------------------------------------------------
# Colour names
# --------------------------------------------------------------------------------------------

# Hue sectors in CAM02-UCS hue angle under harmony.colour.VIEWING_CONDITIONS, placed by
# converting sRGB anchors (e.g. sRGB red lands near 32 degrees, yellow near 106, a mid teal near
# 198, blue near 258, purple near 330). Names are the trade's everyday words, chosen here. Each
# sector: (upper bound in degrees, (dark, muted, pale, mid, light, vivid)).
_HUE_SECTORS = (
    (12.0, ("plum", "mauve", "blush", "raspberry", "pink", "magenta")),
    (36.0, ("burgundy", "dusty rose", "blush", "terracotta", "salmon", "red")),
    (50.0, ("brick", "clay", "peach", "rust", "coral", "vermilion")),
    (68.0, ("chocolate", "tan", "sand", "amber", "peach", "orange")),
    (98.0, ("bronze", "camel", "beige", "mustard", "butter", "marigold")),
    (125.0, ("dark olive", "khaki", "straw", "olive", "lemon", "chartreuse")),
    (170.0, ("forest green", "sage", "celadon", "green", "mint", "emerald")),
    (220.0, ("deep teal", "slate", "duck egg", "teal", "aqua", "turquoise")),
    (275.0, ("navy", "denim", "powder blue", "blue", "sky blue", "cobalt")),
    (305.0, ("indigo", "dusk", "lavender", "violet", "lavender", "violet")),
    (345.0, ("aubergine", "heather", "lilac", "purple", "lilac", "magenta")),
    (360.0, ("plum", "mauve", "blush", "raspberry", "pink", "magenta")),
)


def colour_name(jab, threshold=7.0):
    """A word a stylist uses for one CAM02-UCS colour ("rust", "teal", "cream", "charcoal").

    Parameters
    ----------
    jab : array_like, shape (3,)
    threshold : float
        Colourfulness M' below which the colour is named as a neutral.

    Notes
    -----
    Neutrals are named by lightness J' (black, charcoal, grey, stone, ivory, white) with a warm
    (beige, greige, taupe, cream) variant when their hue leans yellow-red. Chromatic colours are
    named by hue sector and by lightness and colourfulness within it. The boundaries are this
    project's own choices, made by eye on sRGB anchors; they only label explanations.
    """
    j, a, b = (float(v) for v in np.asarray(jab, dtype=float).reshape(3))
    m = math.hypot(a, b)
    h = math.degrees(math.atan2(b, a)) % 360.0
    warm = m >= 3.0 and 30.0 <= h <= 110.0
    if m < threshold:
        if j < 18.0:
            return "black"
        if j < 38.0:
            return "espresso" if warm else "charcoal"
        if j < 62.0:
            return "taupe" if warm else "grey"
        if j < 82.0:
            return "greige" if warm else "stone"
        if j < 94.0:
            return "beige" if warm else "off-white"
        return "cream" if warm else "white"
    for upper, names in _HUE_SECTORS:
        if h < upper:
            break
    dark, muted, pale, mid, light, vivid = names
    if m >= 38.0 and 25.0 <= j < 85.0:
        return vivid
    if j < 40.0:
        return dark
    if m < 20.0:
        return pale if j >= 75.0 else muted
    return light if j >= 75.0 else mid


@dataclass(frozen=True)
class ColourLabels:
    """The words of one palette's colours, worked out once and reused for every pair it is in.

    Attributes
    ----------
    hex : tuple of str
        '#rrggbb' of each colour, in palette order (:func:`harmony.colour.jab_to_hex`).
    names : tuple of str
        :func:`colour_name` of each colour.
    threshold : float
        The neutral threshold the names were made with.
    """

    hex: tuple
    names: tuple
    threshold: float


def colour_labels(jab, threshold=7.0):
    """:class:`ColourLabels` of the colours ``jab`` (k, 3): one colour conversion for all of them."""
    jab = np.asarray(jab, dtype=float).reshape(-1, 3)
    codes = tuple(colour.jab_to_hex(jab)) if len(jab) else ()
    return ColourLabels(codes, tuple(colour_name(c, threshold) for c in jab), float(threshold))


# --------------------------------------------------------------------------------------------
# The score and its explanation
# --------------------------------------------------------------------------------------------


def _owners(categories):
    """How the sentence names the two products: "the rug's", "the first sofa's", "the first product's"."""
    a, b = categories
    if a and b and a != b:
        return f"the {a}'s", f"the {b}'s"
    if a and a == b:
        return f"the first {a}'s", f"the second {b}'s"
    return "the first product's", "the second product's"


def _phrase(rule, pair, jab_a, jab_b, pair_rules):
    """The words linking the two colours: the rule's own phrase, else one that fits the pair."""
    if rule.phrase:
        return rule.phrase
    ja, jb = jab_a[pair.index_a], jab_b[pair.index_b]
    t, f = pair_rules.neutral_threshold, pair_rules.neutral_fade
    return rule.default_phrase(ja, jb, float(neutrality(ja, t, f)), float(neutrality(jb, t, f)), pair.value)


def _rule_label(rule):
    """The rule's name as words ("split complementary"); the published model by its authors."""
    if rule.kind == "ou_luo" and rule.name == "ou_luo":
        return "Ou & Luo model"
    return rule.name.replace("_", " ")


def explain_reason(pairs, categories, pair_rules, jab_a, jab_b, raw):
    """One sentence naming the colour pair that drove the score, and the worst clash if any.

    Each colour pair is spoken of by its net effect (the sum of the rules on it, see
    :func:`net_colour_pairs`) and in the words of the rule that leads it with that sign, so no
    colour pair is praised and faulted in one sentence. The "but" clause names a different
    colour pair whose net effect is negative.

    Parameters
    ----------
    pairs : sequence of ColourPair
        Largest absolute net contribution first, one per colour pair (as in :attr:`PairScore.pairs`).
    categories : (str, str)
        Category names; empty strings give "the first/second product's", and one category
        twice gives "the first/second sofa's".
    pair_rules : harmony.rules.PairRules
    jab_a, jab_b : ndarray, shape (n, 3) and (m, 3)
        The palettes' colours (for rule phrases that depend on them).
    raw : float
    """
    if not pairs:
        return "no rule found anything to say about these two palettes"
    who_a, who_b = _owners(categories)

    def clause(p):
        rule = pair_rules.rule(p.rule)
        phrase = _phrase(rule, p, jab_a, jab_b, pair_rules)
        label = _rule_label(rule)
        # The rule's name closes the clause unless the phrase already says it ("clashes with").
        tail = "" if label.casefold() in phrase.casefold() else f": {label}"
        return (
            f"{who_a} {p.name_a} ({p.share_a * 100:.0f} %) {phrase} "
            f"{who_b} {p.name_b} ({p.share_b * 100:.0f} %){tail}"
        )

    best = next((p for p in pairs if p.value > 0), None)
    worst = next((p for p in pairs if p.value < 0), None)
    if best is None:
        return clause(worst)
    if worst is not None and (raw < pair_rules.midpoint or abs(worst.value) >= 0.5 * best.value):
        return f"{clause(best)}; but {clause(worst)}"
    return clause(best)


def _labels_of(labels, jab, used, threshold, name):
    """(hex by index, name by index) for the colours ``used``, from ``labels`` or computed."""
    if labels is None:
        fresh = colour_labels(jab[used], threshold) if used else ColourLabels((), (), threshold)
        return dict(zip(used, fresh.hex)), dict(zip(used, fresh.names))
    if len(labels.hex) != len(jab) or labels.threshold != threshold:
        raise ValueError(
            f"{name} must label the palette's {len(jab)} colours with threshold {threshold:g}, "
            f"got {len(labels.hex)} colours and threshold {labels.threshold:g}"
        )
    return labels.hex, labels.names


def pair_score(pal_a, pal_b, pair_rules, top=5, *, labels_a=None, labels_b=None):
    """The exact score of two palettes under ``pair_rules``, with its explanation.

    Parameters
    ----------
    pal_a, pal_b : harmony.photo.palette.Palette
        Anything with ``jab`` (k, 3) and ``weights`` (k,) works; ``pal_a`` belongs to the first
        category of ``pair_rules``.
    pair_rules : harmony.rules.PairRules
        From :meth:`harmony.rules.RuleSet.for_pair`.
    top : int
        How many colour pairs to keep in :attr:`PairScore.pairs`.
    labels_a, labels_b : ColourLabels, optional
        The palettes' :func:`colour_labels` made with ``pair_rules.neutral_threshold``, when the
        caller scores one palette many times (the feed); computed here when not given.

    Returns
    -------
    PairScore

    Notes
    -----
    Vectorised over colour pairs: one (n, m) array per rule, no Python loop over colours.
    ``raw`` equals ``pal_a.weights @ pair_rules.kernel(pal_a.jab, pal_b.jab) @ pal_b.weights``.
    """
    jab_a = np.asarray(pal_a.jab, dtype=float)
    jab_b = np.asarray(pal_b.jab, dtype=float)
    w_a = np.asarray(pal_a.weights, dtype=float)
    w_b = np.asarray(pal_b.weights, dtype=float)
    terms = pair_rules.kernel_terms(jab_a, jab_b)
    outer = np.multiply.outer(w_a, w_b)
    names = [name for name, _ in terms]
    stack = np.stack([k for _, k in terms]) * outer if terms else np.zeros((0,) + outer.shape)
    return _explained(stack, names, w_a, w_b, jab_a, jab_b, pair_rules, top, labels_a, labels_b)


#: Palette pairs per kernel call of :func:`pair_scores` (bounds its memory).
SCORE_BATCH = 512


def pair_scores(pals_a, pals_b, pair_rules, top=5, *, labels_a=None, labels_b=None):
    """:func:`pair_score` of each pair ``(pals_a[i], pals_b[i])``, with one kernel call per batch.

    Parameters
    ----------
    pals_a, pals_b : sequence of Palette
        Of equal length; ``pals_a[i]`` belongs to the first category of ``pair_rules``.
    pair_rules : harmony.rules.PairRules
    top : int
    labels_a, labels_b : sequence of ColourLabels, optional
        One per palette (see :func:`pair_score`).

    Returns
    -------
    list of PairScore
        Equal to ``[pair_score(a, b, pair_rules, top) for a, b in zip(pals_a, pals_b)]``; the
        rules' terms of :data:`SCORE_BATCH` pairs are evaluated in one broadcast call of
        :meth:`harmony.rules.PairRules.pairwise_terms` on zero-weight-padded palettes, then cut
        back to each palette's own colours.
    """
    from harmony.rules.screen import PaletteStack

    pals_a, pals_b = list(pals_a), list(pals_b)
    if len(pals_a) != len(pals_b):
        raise ValueError(f"pals_a and pals_b must have the same length, got {len(pals_a)} and {len(pals_b)}")
    out = []
    for p0 in range(0, len(pals_a), SCORE_BATCH):
        part_a, part_b = pals_a[p0 : p0 + SCORE_BATCH], pals_b[p0 : p0 + SCORE_BATCH]
        sa, sb = PaletteStack.from_palettes(part_a), PaletteStack.from_palettes(part_b)
        terms = pair_rules.pairwise_terms(sa.jab[:, :, None, :], sb.jab[:, None, :, :])
        names = [name for name, _ in terms]
        for q, (pa, pb) in enumerate(zip(part_a, part_b)):
            n, m = len(pa.weights), len(pb.weights)
            jab_a = np.asarray(pa.jab, dtype=float)
            jab_b = np.asarray(pb.jab, dtype=float)
            w_a = np.asarray(pa.weights, dtype=float)
            w_b = np.asarray(pb.weights, dtype=float)
            outer = np.multiply.outer(w_a, w_b)
            if terms:
                stack = np.stack([t[q, :n, :m] for _, t in terms]) * outer
            else:
                stack = np.zeros((0,) + outer.shape)
            la = None if labels_a is None else labels_a[p0 + q]
            lb = None if labels_b is None else labels_b[p0 + q]
            out.append(_explained(stack, names, w_a, w_b, jab_a, jab_b, pair_rules, top, la, lb))
    return out


def net_colour_pairs(stack, top):
    """The colour pairs with the largest net effect, and the rule that leads each one.

    A colour pair's *net* value is the sum of every rule's contribution on it; an explanation
    speaks of a colour pair by that sum only, so one pair is never said to both "sit close in
    hue" and "clash" (two rules of opposite sign on the same two colours).

    Parameters
    ----------
    stack : ndarray, shape (rules, n, m)
        Each rule's weighted contribution to the raw score per colour pair.
    top : int
        How many colour pairs to return at most (pairs with a net value of exactly 0 are left out).

    Returns
    -------
    rule, i, j : ndarray of int, shape (count,)
        Indices of the leading rule (the largest contribution with the sign of the net value) and
        of the two colours, largest absolute net value first; ties go to the lower flat index
        (colour a, then colour b), as a stable sort orders them.
    net : ndarray, shape (count,)
        The net values.
    """
    empty = np.zeros(0, dtype=int)
    if stack.size == 0 or top <= 0:
        return empty, empty, empty, np.zeros(0)
    net = stack.sum(axis=0)
    flat = np.abs(net).ravel()
    count = min(int(top), int(np.count_nonzero(flat)))
    if count == 0:
        return empty, empty, empty, np.zeros(0)
    # The `count` largest without sorting all n x m entries.
    if count < flat.size:
        kth = np.partition(flat, flat.size - count)[flat.size - count]
        cand = np.flatnonzero(flat >= kth)
    else:
        cand = np.arange(flat.size)
    order = cand[np.lexsort((cand, -flat[cand]))][:count]
    i_idx, j_idx = np.unravel_index(order, net.shape)
    values = net[i_idx, j_idx]
    per_rule = stack[:, i_idx, j_idx] * np.sign(values)[None, :]  # same sign as the net: > 0
    r_idx = np.argmax(per_rule, axis=0)
    return r_idx, i_idx, j_idx, values


def _explained(stack, names, w_a, w_b, jab_a, jab_b, pair_rules, top, labels_a, labels_b):
    """The PairScore of a pair from its weighted per-rule contributions ``stack`` (rules, n, m)."""
    per_rule = stack.reshape(len(names), -1).sum(axis=1)
    raw = float(per_rule.sum())
    contributions = tuple((name, float(v)) for name, v in zip(names, per_rule))

    pairs = ()
    r_idx, i_idx, j_idx, net = net_colour_pairs(stack, top)
    if len(net):
        t = pair_rules.neutral_threshold
        hex_a, word_a = _labels_of(labels_a, jab_a, sorted(set(i_idx.tolist())), t, "labels_a")
        hex_b, word_b = _labels_of(labels_b, jab_b, sorted(set(j_idx.tolist())), t, "labels_b")
        pairs = tuple(
            ColourPair(
                hex_a=hex_a[i], hex_b=hex_b[j], rule=names[r], value=float(v),
                share_a=float(w_a[i]), share_b=float(w_b[j]),
                name_a=word_a[i], name_b=word_b[j],
                index_a=int(i), index_b=int(j),
            )
            for r, i, j, v in zip(r_idx.tolist(), i_idx.tolist(), j_idx.tolist(), net.tolist())
        )
    reason = explain_reason(pairs, pair_rules.categories, pair_rules, jab_a, jab_b, raw)
    return PairScore(
        score=to_unit(raw, pair_rules),
        raw=raw,
        categories=tuple(pair_rules.categories),
        section=pair_rules.section,
        contributions=contributions,
        pairs=pairs,
        reason=reason,
    )


def scores_and_reasons(stack_a, stack_b, index_a, index_b, pair_rules, *, labels_a, labels_b, top=5):
    """Scores and reason sentences of many pairs at once: the feed's fast path.

    Equal, value for value and character for character, to ``[(ps.score, ps.reason) for ps in
    pair_scores(...)]`` over the pairs ``(a[index_a[t]], b[index_b[t]])``: the rules' terms,
    their weighted sums and the choice of the largest colour pairs are computed for all pairs of
    the same palette sizes in one broadcast call; only the sentence itself is put together pair by
    pair, by :func:`explain_reason` with the colour pairs it reads (the first helping and the
    first hurting one of the ``top`` largest).

    Parameters
    ----------
    stack_a, stack_b : harmony.rules.screen.PaletteStack
        The palettes of each side (zero-weight padding is cut off by ``sizes``).
    index_a, index_b : ndarray of int, shape (t,)
        Pairs as indices into the stacks.
    pair_rules : harmony.rules.PairRules
    labels_a, labels_b : sequence of ColourLabels
        Per palette of each stack (:func:`colour_labels` with ``pair_rules.neutral_threshold``).
    top : int

    Returns
    -------
    scores : ndarray, shape (t,)
    reasons : list of str
    """
    index_a = np.asarray(index_a, dtype=np.int64)
    index_b = np.asarray(index_b, dtype=np.int64)
    t = index_a.shape[0]
    scores = np.empty(t)
    reasons = [None] * t
    if t == 0:
        return scores, reasons
    size_a = _sizes(labels_a)
    size_b = _sizes(labels_b)
    na, nb = size_a[index_a], size_b[index_b]
    key = na * (int(nb.max()) + 1) + nb
    order = np.argsort(key, kind="stable")
    bounds = np.flatnonzero(np.diff(key[order])) + 1
    for group in np.split(order, bounds):
        for g0 in range(0, group.size, SCORE_BATCH):
            rows = group[g0 : g0 + SCORE_BATCH]
            _explain_group(stack_a, stack_b, index_a[rows], index_b[rows], rows, pair_rules,
                           labels_a, labels_b, top, scores, reasons)
    return scores, reasons


def _largest(mag, keep):
    """Column indices of the ``keep`` largest entries of each row, largest first, ties to the
    lower column (the order of a stable sort of ``-mag``), without sorting whole rows."""
    g, width = mag.shape
    if keep >= width:
        return np.argsort(-mag, axis=1, kind="stable")
    kth = np.partition(mag, width - keep, axis=1)[:, width - keep]
    flat = np.flatnonzero(mag >= kth[:, None])
    r, c = np.divmod(flat, width)
    order = np.lexsort((c, -mag.ravel()[flat], r))
    r, c = r[order], c[order]
    start = np.searchsorted(r, np.arange(g))
    return c[start[:, None] + np.arange(keep)]


def _sizes(labels):
    return np.fromiter((len(lab.hex) for lab in labels), dtype=np.int64, count=len(labels))


def _explain_group(stack_a, stack_b, ia, ib, rows, pair_rules, labels_a, labels_b, top, scores, reasons):
    """Score and explain pairs whose palettes all have the same sizes (n, m)."""
    n, m = len(labels_a[ia[0]].hex), len(labels_b[ib[0]].hex)
    jab_a = stack_a.jab[ia, :n]
    jab_b = stack_b.jab[ib, :m]
    w_a = stack_a.weights[ia, :n]
    w_b = stack_b.weights[ib, :m]
    terms = pair_rules.pairwise_terms(jab_a[:, :, None, :], jab_b[:, None, :, :])
    names = [name for name, _ in terms]
    g = ia.shape[0]
    outer = w_a[:, :, None] * w_b[:, None, :]
    if terms:
        stack = np.stack([np.broadcast_to(k, outer.shape) for _, k in terms], axis=1) * outer[:, None]
    else:
        stack = np.zeros((g, 0, n, m))
    per_rule = stack.reshape(g, len(names), n * m).sum(axis=2)
    # Row by row this is float(per_rule[q].sum()): numpy sums each row of a contiguous array
    # with the same pairwise loop as a 1-d sum (the golden feed test holds it to the last bit).
    raw = per_rule.sum(axis=1)
    scores[rows] = to_unit(raw, pair_rules)
    if stack.size == 0 or top <= 0:
        for q, row in enumerate(rows):
            reasons[row] = explain_reason((), pair_rules.categories, pair_rules, jab_a[q], jab_b[q], float(raw[q]))
        return
    # As net_colour_pairs, for the whole group: colour pairs by their net value over the rules,
    # the largest first (ties to the lower flat index), each led by its largest same-sign rule.
    flat = stack.sum(axis=1).reshape(g, n * m)
    mag = np.abs(flat)
    keep = min(int(top), n * m)
    best = _largest(mag, keep)
    vals = np.take_along_axis(flat, best, axis=1)
    live = np.take_along_axis(mag, best, axis=1) != 0  # a prefix of each row: zeros sort last
    by_rule = np.take_along_axis(stack.reshape(g, len(names), n * m), best[:, None, :], axis=2)
    r_idx = np.argmax(by_rule * np.sign(vals)[:, None, :], axis=1)
    i_idx, j_idx = np.divmod(best, m)
    # explain_reason reads the first helping and the first hurting colour pair of each row.
    helps, hurts = live & (vals > 0), live & (vals < 0)
    has_p, has_n = helps.any(axis=1), hurts.any(axis=1)
    q_all = np.arange(g)
    s_p, s_n = np.argmax(helps, axis=1), np.argmax(hurts, axis=1)
    v_p, v_n = vals[q_all, s_p], vals[q_all, s_n]
    both = has_p & has_n & ((raw < pair_rules.midpoint) | (np.abs(v_n) >= 0.5 * v_p))
    words = _Words(pair_rules, names, labels_a, labels_b, ia, ib, jab_a, jab_b)
    text_p = words.clauses(q_all[has_p], s_p[has_p], r_idx, i_idx, j_idx, vals, w_a, w_b)
    text_n = words.clauses(q_all[has_n], s_n[has_n], r_idx, i_idx, j_idx, vals, w_a, w_b)
    out = np.empty(g, dtype=object)
    out[:] = "no rule found anything to say about these two palettes"
    out[has_p] = text_p
    out[has_n & ~has_p] = text_n[~has_p[has_n]]
    if both.any():
        out[both] = [f"{a}; but {b}" for a, b in zip(out[both].tolist(), text_n[both[has_n]].tolist())]
    for row, text in zip(rows.tolist(), out.tolist()):
        reasons[row] = text


#: "0" .. "100": a share in per cent as the sentence prints it (f"{share * 100:.0f}").
_PERCENT = np.array([str(k) for k in range(101)], dtype=object)


def _percent(shares):
    """f"{s * 100:.0f}" of each share, element-wise (an object array of str).

    Python's ``.0f`` rounds the double ``s * 100`` half to even, as :func:`numpy.rint` does, so
    a table lookup gives the same text; anything outside 0..100 is formatted one by one.
    """
    x = np.asarray(shares, dtype=float) * 100.0
    r = np.rint(x)
    ok = (r >= 0) & (r <= 100) & ~np.signbit(x)
    out = _PERCENT[np.where(ok, r, 0).astype(np.int64)]
    if not ok.all():
        out[~ok] = [f"{v:.0f}" for v in x[~ok].tolist()]
    return out


class _Words:
    """The clauses of :func:`explain_reason` for many colour pairs of one group at once.

    A clause is ``"{who_a} {name_a} ({pct_a} %) {phrase} {who_b} {name_b} ({pct_b} %){tail}"``;
    phrase and tail depend only on the rule and on which of its few phrases it picks, so they
    come from a small table built once per group.
    """

    def __init__(self, pair_rules, names, labels_a, labels_b, ia, ib, jab_a, jab_b):
        self.pair_rules, self.names = pair_rules, names
        self.who_a, self.who_b = _owners(pair_rules.categories)
        self.jab_a, self.jab_b = jab_a, jab_b
        self.labels_a, self.labels_b, self.ia, self.ib = labels_a, labels_b, ia, ib
        self._neutral = None

    def _neutrality(self):
        if self._neutral is None:
            t, f = self.pair_rules.neutral_threshold, self.pair_rules.neutral_fade
            self._neutral = (neutrality(self.jab_a, t, f), neutrality(self.jab_b, t, f))
        return self._neutral

    def clauses(self, q, s, r_idx, i_idx, j_idx, vals, w_a, w_b):
        """Clause texts (object array) of row ``q[t]``'s ``s[t]``-th colour pair."""
        if q.size == 0:
            return np.empty(0, dtype=object)
        r, i, j, v = r_idx[q, s], i_idx[q, s], j_idx[q, s], vals[q, s]
        mids, tails = np.empty(q.size, dtype=object), np.empty(q.size, dtype=object)
        for rule_no in np.unique(r).tolist():
            rule = self.pair_rules.rule(self.names[rule_no])
            at = np.flatnonzero(r == rule_no)
            if rule.phrase:
                options, pick = (rule.phrase,), np.zeros(at.size, dtype=np.int64)
            else:
                na, nb = self._neutrality()
                qa, ca, cb = q[at], i[at], j[at]
                options = rule.phrases()
                pick = np.asarray(rule.phrase_index(self.jab_a[qa, ca], self.jab_b[qa, cb], na[qa, ca],
                                                    nb[qa, cb], v[at]), dtype=np.int64)
            label = _rule_label(rule)
            # The rule's name closes the clause unless the phrase already says it ("clashes with").
            mids[at] = np.array([f" {phrase} {self.who_b} " for phrase in options], dtype=object)[pick]
            tails[at] = np.array(["" if label.casefold() in phrase.casefold() else f": {label}"
                                  for phrase in options], dtype=object)[pick]
        name_a = [self.labels_a[x].names[y] for x, y in zip(self.ia[q].tolist(), i.tolist())]
        name_b = [self.labels_b[x].names[y] for x, y in zip(self.ib[q].tolist(), j.tolist())]
        pct_a, pct_b = _percent(w_a[q, i]).tolist(), _percent(w_b[q, j]).tolist()
        who_a = self.who_a
        out = np.empty(q.size, dtype=object)
        out[:] = [f"{who_a} {a} ({pa} %){mid}{b} ({pb} %){tail}"
                  for a, pa, mid, b, pb, tail in zip(name_a, pct_a, mids.tolist(), name_b, pct_b, tails.tolist())]
        return out
