"""TOML files saved with a UTF-8 byte order mark (U+FEFF, which some Windows editors write first)
read as the same file without it: rules, curation files and room templates."""

from harmony.resources import DEFAULT_RULES, room_template
from harmony.rules import load_rules
from harmony.suggest.curation import load_curation
from harmony.suggest.room import load_room

BOM = "\ufeff".encode("utf-8")


def test_rules_curation_and_room_files_with_a_byte_order_mark(tmp_path):
    rules = tmp_path / "rules.toml"
    rules.write_bytes(BOM + DEFAULT_RULES.read_bytes())
    assert load_rules(rules).pairs == load_rules(DEFAULT_RULES).pairs
    cur = tmp_path / "cur.toml"
    cur.write_bytes(BOM + b'format = 1\n\n[[pin]]\nproduct = "A"\npartner = "B"\nrank = 2\n')
    pins = load_curation(cur).pins
    assert [(p.product, p.partner, p.rank, p.line) for p in pins] == [("A", "B", 2, 3)]  # line numbers unchanged
    room = tmp_path / "room.toml"
    room.write_bytes(BOM + room_template("dining_corner").read_bytes())
    assert load_room(room).slots == load_room(room_template("dining_corner")).slots
