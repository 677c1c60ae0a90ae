"""The server's view of the store: read-only, and a new snapshot after another connection commits."""

from harmony.demo.products import CATEGORY_COUNTS  # the demo shop's size
import hashlib
import shutil

import pytest

from harmony.errors import StoreError
from harmony.resources import DEFAULT_RULES
from harmony.rules import load_rules
from harmony.shop.store import Store
from harmony.serve.snapshot import LiveStore


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_read_only_store_refuses_writes_and_leaves_the_file_alone(demo_db, tmp_path):
    db = tmp_path / "copy.db"
    shutil.copy(demo_db, db)
    before = _digest(db)
    live = LiveStore(db, load_rules(DEFAULT_RULES))
    try:
        assert live.check() is False  # nothing changed
        assert len(live.snapshot) == sum(CATEGORY_COUNTS.values()) - 2  # the fixture holds two back
    finally:
        live.close()
    with Store(db, read_only=True) as store:
        with pytest.raises(StoreError, match="cannot write"):
            store.record([("0" * 64, None, "a reason")], "x")
    assert _digest(db) == before


def test_a_commit_elsewhere_gives_a_new_snapshot(demo_db, tmp_path):
    db = tmp_path / "copy.db"
    shutil.copy(demo_db, db)
    live = LiveStore(db, load_rules(DEFAULT_RULES))
    try:
        old = live.snapshot
        with Store(db) as writer, writer._transaction() as tx:  # another connection commits
            tx.execute("UPDATE products SET stock = 0 WHERE id = 'RUG-018'")
        assert live.check() is True
        new = live.snapshot
        assert new.generation == old.generation + 1 and new.version != old.version
        assert "RUG-018" not in new.category_data["rug"].partner_ids
        # Categories that did not change are taken over as they are.
        assert new.category_data["sofa"] is old.category_data["sofa"]
        assert new.category_data["rug"] is not old.category_data["rug"]
    finally:
        live.close()
