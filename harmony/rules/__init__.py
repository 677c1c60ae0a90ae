"""The harmony rules: the stylist's TOML file, its rule kinds, the exact pair score, the screen, the wheel picture.

May import :mod:`harmony.colour`, :mod:`harmony.photo` (the ``Palette`` type) and
:func:`harmony.shop.catalogue.normalise_category`; nothing above.

The bilinear contract that the pair score and the all-pairs screen rely on::

    raw(pa, pb) = pa.weights @ pair_rules.kernel(pa.jab, pb.jab) @ pb.weights
"""

from harmony.rules.fileformat import FORMAT_VERSION, load_rules, parse_rules
from harmony.rules.kinds import (
    RULE_KINDS,
    HueRule,
    LightnessRule,
    NeutralRule,
    OuLuoRule,
)
from harmony.rules.ruleset import (
    PairRules,
    RuleSet,
    UnmatchedPair,
    unmatched_pair_warnings,
)

__all__ = [
    "FORMAT_VERSION",
    "RULE_KINDS",
    "HueRule",
    "NeutralRule",
    "LightnessRule",
    "OuLuoRule",
    "PairRules",
    "RuleSet",
    "UnmatchedPair",
    "load_rules",
    "parse_rules",
    "unmatched_pair_warnings",
]
