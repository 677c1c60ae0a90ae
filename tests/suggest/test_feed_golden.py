"""The feed's bytes against a stored feed: speed work must change no score and no reason.

``data/feed_golden.jsonl.gz`` is the JSONL feed (default rules, top 3) of the synthetic store
below, written by the per-row sentence path this project used before the feed's reasons were
vectorised (silver: this project's own output, a regression guard only). The store's palettes
are random sRGB colours from a seeded generator: test inputs, not check values.

The stored file was written on another machine. numpy picks its exp and other loops by the
processor's instruction set, so a score may differ there in its last bits (seen: 2e-15 on an
AVX2-only processor against the machine that wrote the file); scores are compared to 1e-12 and
every other field, the order of the rows and the partners included, byte for byte.
"""

import gzip
import json
from pathlib import Path

import numpy as np
import pytest

from harmony.rules import load_rules
from harmony.shop.store import Store
from harmony.suggest import feed as feed_module
from harmony.suggest.feed_run import write_feed_stream

from test_feed import make_store
from test_feed_stream import synthetic_palettes

GOLDEN = Path(__file__).parent / "data" / "feed_golden.jsonl.gz"
CATEGORIES = ("sofa", "rug", "cushion", "armchair", "floor lamp")


def golden_items():
    rng = np.random.default_rng(20240614)
    pals = synthetic_palettes(200, rng)
    return [(f"G{n:04d}", CATEGORIES[n % len(CATEGORIES)], 0 if n % 13 == 5 else None, pal)
            for n, pal in enumerate(pals)]


def write_golden_store_feed(folder, **options):
    db = make_store(folder, golden_items())
    with Store(db) as store:
        path, _, _ = write_feed_stream(store, load_rules(), folder / "feed.jsonl", top=3, warn=lambda m: None,
                                       **options)
    return path.read_bytes()


@pytest.mark.parametrize("screened", [False, True])
def test_feed_bytes_equal_the_stored_feed(tmp_path, monkeypatch, screened):
    # "screened" sends every category pair through the screen and its exact re-rank, which must
    # find the same partners as scoring all pairs exactly (40 x 37 pairs per category pair).
    if screened:
        monkeypatch.setattr(feed_module, "EXACT_PAIRS", 0)
    got = write_golden_store_feed(tmp_path)
    want = gzip.decompress(GOLDEN.read_bytes())
    assert len(want) > 100_000
    got_rows, want_rows = got.decode().splitlines(), want.decode().splitlines()
    assert len(got_rows) == len(want_rows)
    for n, (g, w) in enumerate(zip(got_rows, want_rows), start=1):
        g, w = json.loads(g), json.loads(w)
        assert g["score"] == pytest.approx(w["score"], abs=1e-12, rel=0), f"line {n}"
        g["score"] = w["score"]
        assert g == w, f"line {n}"
        assert list(g) == list(w), f"line {n}: field order"
