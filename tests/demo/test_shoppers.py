"""The simulated demo shoppers (invented data: properties of the generator, not check values).

The harmony taste is checked against the Ou & Luo (2006) model as implemented in
harmony.colour.ou_luo (itself checked against the paper's equations in tests/colour).
"""

import math

import numpy as np
import pytest

from harmony.colour.ou_luo import jab_to_lab, two_colour_harmony
from harmony.demo import shoppers
from harmony.photo.palette import Palette
from harmony.resources import DEMO_DIR
from harmony.shop.catalogue import Product
from harmony.shop.events import read_events


def chromatic(hue_deg, j=60.0, m=25.0):
    h = math.radians(hue_deg)
    return [j, m * math.cos(h), m * math.sin(h)]


def test_harmony_taste_is_ou_luo_weighted_by_share():
    a = Palette(jab=[chromatic(30.0), [80.0, 1.0, 1.0]], weights=[0.7, 0.3])
    b = Palette(jab=[chromatic(200.0, j=40.0), chromatic(50.0, m=10.0), [20.0, 0.5, 0.5]], weights=[0.5, 0.3, 0.2])
    want = sum(wa * wb * float(two_colour_harmony(jab_to_lab(np.array(ca)), jab_to_lab(np.array(cb))))
               for ca, wa in zip(a.jab, a.weights) for cb, wb in zip(b.jab, b.weights))
    assert shoppers.appeal(a, b, "harmony") == pytest.approx(want, abs=1e-9)


def test_contrast_taste_is_the_largest_difference_of_big_colours():
    a = Palette(jab=[[90.0, 0.0, 0.0], [20.0, 0.0, 0.0]], weights=[0.95, 0.05])  # the dark 5 % is too small
    b = Palette(jab=[[30.0, 0.0, 0.0]], weights=[1.0])
    assert shoppers.appeal(a, b, "contrast") == pytest.approx(0.60)
    assert shoppers.appeal(a, b, "price") == 0.0
    with pytest.raises(ValueError, match="unknown taste"):
        shoppers.appeal(a, b, "loud")


def test_tastes_use_no_rule():
    # Ou & Luo's model (unlike the rules) has no bump at opposite hues: for three base hues, equal
    # colours score highest and opposite hues score no better than a quarter-turn give or take
    # 0.15 (the model's own hue term moves values by that much).
    for h0 in (30.0, 120.0, 250.0):
        base = Palette(jab=[chromatic(h0)], weights=[1.0])
        v = {d: shoppers.appeal(base, Palette(jab=[chromatic(h0 + d)], weights=[1.0]), "harmony") for d in (0, 90, 180)}
        assert v[0] > v[90] and v[0] > v[180] and v[180] < v[90] + 0.15, (h0, v)


def small_shop(n=12):
    products, palettes = [], {}
    for cat in ("sofa", "rug"):
        for i in range(n):
            pid = f"{cat}{i}"
            products.append(Product(pid, cat, 100.0 + 10 * i))
            palettes[pid] = Palette(jab=[chromatic(360.0 * i / n + (15 if cat == "rug" else 0), j=30.0 + 40.0 * (i % 2))], weights=[1.0])
    return products, palettes


def test_simulation_is_deterministic_and_well_formed():
    products, palettes = small_shop()
    one = shoppers.simulate_sessions(products, palettes, [["sofa", "rug"]], np.random.default_rng(1), 50)
    two = shoppers.simulate_sessions(products, palettes, [["sofa", "rug"]], np.random.default_rng(1), 50)
    assert one == two
    assert shoppers.events_csv(one).splitlines()[0] == "session,product,event,timestamp"
    carted = set()
    for sid, pid, event, _ in one:
        if event == "cart":
            carted.add((sid, pid))
        if event == "purchase":
            assert (sid, pid) in carted
    assert len([r for r in one if r[1] in shoppers.RETIRED_IDS]) == len(shoppers.RETIRED_IDS)


def test_harmony_shoppers_pick_what_the_model_rates(monkeypatch):
    products, palettes = small_shop()
    monkeypatch.setattr(shoppers, "TASTE_SHARES", {"harmony": 1.0})
    rows = shoppers.simulate_sessions(products, palettes, [["sofa", "rug"]], np.random.default_rng(2), 300)
    carts = {}
    for sid, pid, event, _ in rows:
        carts.setdefault(sid, {})[pid] = event
    chosen, rugs = [], [p for p in palettes if p.startswith("rug")]
    for items in carts.values():
        sofa = next((p for p in items if p.startswith("sofa")), None)
        for p, event in items.items():
            if p.startswith("rug") and event == "cart" and sofa:
                chosen.append(shoppers.appeal(palettes[sofa], palettes[p], "harmony"))
    everyone = [shoppers.appeal(palettes[s], palettes[r], "harmony") for s in palettes if s.startswith("sofa") for r in rugs]
    assert len(chosen) > 30 and np.mean(chosen) > np.mean(everyone)


def test_ceiling_method_ranks_by_expected_appeal():
    products, palettes = small_shop(4)
    method = shoppers.TasteMethod(palettes, products)
    sofa, rugs = products[0], products[4:]
    got = method(sofa, rugs)
    cheapest = min(r.price for r in rugs)
    want = [shoppers.expected_appeal(palettes[sofa.id], palettes[r.id], r.price, cheapest) for r in rugs]
    np.testing.assert_allclose(got, want, atol=1e-12)


def test_committed_demo_log_is_small_and_matches_the_catalogue():
    from harmony.shop.catalogue import read_catalogue

    path = DEMO_DIR / "shop" / "events.csv"
    assert path.stat().st_size < 1_000_000
    ids = {p.id for p in read_catalogue(DEMO_DIR / "shop" / "catalogue.csv").products}
    log = read_events(path, known_products=ids)
    assert {pid for pid, _ in log.unknown} == set(shoppers.RETIRED_IDS)
    assert set(log.counts()) == {"view", "cart", "purchase"}


@pytest.mark.slow
def test_demo_log_regenerates_identically(tmp_path):
    db = tmp_path / "shop.db"  # shared, so the later runs reuse the extracted palettes
    a, n = shoppers.write_demo_events(tmp_path / "a.csv", db_path=db, sessions=60)
    b, _ = shoppers.write_demo_events(tmp_path / "b.csv", db_path=db, sessions=60)
    assert a.read_bytes() == b.read_bytes() and n > 60
    full, _ = shoppers.write_demo_events(tmp_path / "full.csv", db_path=db)
    assert full.read_bytes() == shoppers.DEFAULT_EVENTS_PATH.read_bytes(), (
        "demo_room_sets/shop/events.csv is stale: regenerate it with python -m harmony.demo.shoppers"
    )
