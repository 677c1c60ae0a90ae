"""Room templates: the shipped templates load; every problem of a bad file is reported at once."""

from pathlib import Path

import pytest

from harmony.errors import RoomError
from harmony.resources import DEMO_DIR
from harmony.suggest.room import RoomSlot, load_room, parse_room

BAD = Path(__file__).parent.parent / "data" / "rooms"
SHOP_CATEGORIES = {
    "sofa", "armchair", "coffee table", "rug", "floor lamp", "cushion", "dining table",
    "dining chair", "pendant lamp", "bed", "bedside table", "desk", "desk chair",
}


@pytest.mark.parametrize("name", ["living_room", "dining_corner", "bedroom", "home_office"])
def test_shipped_templates_load(name):
    room = load_room(DEMO_DIR / f"{name}.toml")
    assert room.slots and room.budget > 0
    # ISO 4217 lists EUR as the euro's alphabetic code.
    assert room.currency == "EUR"
    assert {s.category for s in room.slots} <= SHOP_CATEGORIES
    assert any(s.required for s in room.slots)


def test_dining_corner_contents():
    room = load_room(DEMO_DIR / "dining_corner.toml")
    chairs = room.slot("chairs")
    assert chairs == RoomSlot("chairs", "dining chair", 4, True, 0.2)
    assert room.pair_weight("chairs", "table") == 3.0
    assert room.pair_weight("table", "pendant") == room.default_weight
    assert not room.slot("pendant").required


def test_categories_are_normalised():
    room = parse_room('name = "x"\nbudget = 10\ncurrency = "EUR"\n[[slot]]\nname = "a"\ncategory = "  Dining   CHAIR "\n')
    assert room.slots[0].category == "dining chair"
    assert room.slots[0].quantity == 1 and room.slots[0].required and room.slots[0].visible_share == 1.0


def test_every_problem_listed_with_line_and_key():
    path = BAD / "many_problems.toml"
    with pytest.raises(RoomError) as info:
        load_room(path)
    # One line, as for rule files: the problems joined by "; " and listed on err.problems.
    assert "\n" not in str(info.value)
    lines = str(info.value).split("; ")
    assert list(info.value.problems) == lines
    assert len(lines) == 11
    expected = [
        ":4: colour: unknown key",
        ":1: name: a non-empty string",
        ":2: budget: a positive number is required, got -5",
        ":3: currency: an ISO 4217 code",
        ":9: slot[1].quantity: an integer >= 1",
        ":12: slot[2].name: duplicate slot name 'table'",
        ":13: slot[2].category:",
        ":14: slot[2].required: true or false",
        ":15: slot[2].visible_share: a positive number",
        ":18: pair[1].slots: unknown slot 'sideboard'",
        ":19: pair[1].weight: a number >= 0",
    ]
    for line, want in zip(lines, expected):
        assert line.startswith(str(path)) and want in line


@pytest.mark.parametrize(
    "name, pattern",
    [
        ("syntax.toml", r"syntax\.toml:3: toml: "),
        ("no_slots.toml", r"no_slots\.toml:1: slot: at least one \[\[slot\]\]"),
        ("only_optional.toml", r"only_optional\.toml:5: slot: at least one slot must be required"),
        ("same_pair.toml", r"same_pair\.toml:18: pair\[2\]\.slots: pair chair / desk listed twice"),
    ],
)
def test_bad_templates(name, pattern):
    with pytest.raises(RoomError, match=pattern):
        load_room(BAD / name)


def test_same_slot_twice_in_a_pair():
    with pytest.raises(RoomError, match=r":22: pair\[3\]\.slots: the two slots must differ"):
        load_room(BAD / "same_pair.toml")


def test_missing_file():
    with pytest.raises(RoomError, match=r"nowhere\.toml: no such room template"):
        load_room(BAD / "nowhere.toml")


def test_boolean_is_not_a_quantity():
    text = 'name = "x"\nbudget = 10\ncurrency = "EUR"\n[[slot]]\nname = "a"\ncategory = "desk"\nquantity = true\n'
    with pytest.raises(RoomError, match=r"<room>:7: slot\[1\]\.quantity: an integer >= 1 is required, got True"):
        parse_room(text)


# ----------------------------------------------------------------- the room-level view (roomview)

import numpy as np  # noqa: E402

from harmony import colour  # noqa: E402
from harmony.photo.palette import Palette  # noqa: E402
from harmony.suggest.roomview import colour_groups, proportion_distance, room_view  # noqa: E402


def test_proportions_of_an_exact_60_30_10_room():
    # The 60-30-10 rule of thumb (common practice): three distinct colours at 60/30/10 fit it exactly.
    jab = colour.srgb1_to_jab([[0.9, 0.88, 0.82], [0.2, 0.3, 0.5], [0.8, 0.3, 0.1]])
    sofa = Palette(jab[:1], [1.0])
    rug = Palette(jab[1:2], [1.0])
    cushion = Palette(jab[2:], [1.0])
    # visible shares quantity x visible_share: 1 x 0.6, 1 x 0.3, 2 x 0.05
    view = room_view([sofa, rug, cushion], [0.6, 0.3, 0.1])
    assert view.shares == pytest.approx((0.6, 0.3, 0.1))
    assert view.distance == pytest.approx(0.0, abs=1e-12)
    assert view.weights.sum() == pytest.approx(1.0)


def test_single_colour_room_and_distance_by_hand():
    grey = Palette(colour.srgb1_to_jab([[0.5, 0.5, 0.5]]), [1.0])
    view = room_view([grey, grey], [1.0, 2.0])
    assert view.shares == (1.0, 0.0, 0.0)
    assert view.distance == pytest.approx(0.5 * (0.4 + 0.3 + 0.1))
    assert view.template.name == "N"
    assert proportion_distance((0.5, 0.3, 0.2)) == pytest.approx(0.1)


def test_near_colours_are_grouped():
    # Delta E in CAM02-UCS: two shades about 3 apart join one group, a far colour does not.
    jab = np.array([[60.0, 10.0, 10.0], [61.0, 12.0, 8.0], [30.0, -20.0, -5.0]])
    leads, shares = colour_groups(jab, [0.5, 0.2, 0.3])
    assert shares == pytest.approx([0.7, 0.3])
    assert leads[0] == pytest.approx(jab[0])


def test_bad_visible_shares():
    grey = Palette(colour.srgb1_to_jab([[0.5, 0.5, 0.5]]), [1.0])
    with pytest.raises(ValueError, match="one visible share per palette"):
        room_view([grey], [1.0, 2.0])
    with pytest.raises(ValueError, match="not all zero"):
        room_view([grey], [0.0])


def test_the_renamed_size_key_says_its_new_name():
    text = 'name = "r"\nbudget = 10\ncurrency = "EUR"\n[[slot]]\nname = "a"\ncategory = "sofa"\nsize = 0.5\n'
    with pytest.raises(RoomError, match=r"x.toml:7: slot\[1\].size: renamed 'visible_share'"):
        parse_room(text, "x.toml")
