"""The fields every row of a feed shares, whichever step made it (the feed, a blend, the look-alikes)."""

from dataclasses import asdict, dataclass

__all__ = ["PartnerRow"]


@dataclass(frozen=True)
class PartnerRow:
    """``partner`` (a product of ``partner_category``) is the ``rank``-th suggestion for ``product``
    (of ``category``); ``score`` is in [0, 1] and ``reason`` is its explanation sentence."""

    product: str
    category: str
    partner: str
    partner_category: str
    rank: int
    score: float
    reason: str

    def to_dict(self):
        return asdict(self)
