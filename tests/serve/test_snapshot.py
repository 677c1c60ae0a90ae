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


# ------------------------------------------------------------------ edited rules and curation files

PIN = 'format = 1\n[[pin]]\nproduct = "SOF-001"\npartner = "RUG-005"\nrank = 1\n'
BLOCK = 'format = 1\n[[block]]\nproduct = "SOF-002"\npartner = "RUG-008"\n'


def _edit(path, text):
    """Write ``path`` as an editor saving to a new file and renaming it does (a new inode)."""
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)


def _watched_copies(demo_db, tmp_path, rules=True, curation=True):
    """A LiveStore on a copy of the store, watching copies of the rules file and a curation file."""
    from harmony.suggest.curation import load_curation

    db, rules_path, cur = tmp_path / "copy.db", tmp_path / "rules.toml", tmp_path / "curation.toml"
    shutil.copy(demo_db, db)
    shutil.copy(DEFAULT_RULES, rules_path)
    cur.write_text(PIN, encoding="utf-8")
    live = LiveStore(db, load_rules(rules_path), rules_path=rules_path if rules else None,
                     curation=load_curation(cur) if curation else None, curation_path=cur if curation else None)
    return live, rules_path, cur


def test_an_edited_curation_file_gives_a_snapshot_with_the_same_data(demo_db, tmp_path):
    live, _, cur = _watched_copies(demo_db, tmp_path, rules=False)
    try:
        old = live.snapshot
        assert old.curation.pins[0].partner == "RUG-005"
        assert live.check() is False
        cur.touch()  # a new modification time, the same bytes: nothing to load
        assert live.check() is False and live.snapshot is old
        _edit(cur, BLOCK)
        assert live.check() is True
        new = live.snapshot
        assert new.generation == old.generation + 1 and not new.curation.pins
        assert new.curation.blocks[0].partner == "RUG-008"
        assert new.curation.sha256 == _digest(cur)
        # The store's data and the rules are taken over; the answer caches start empty.
        assert new.category_data is old.category_data and new.rules is old.rules
        assert new.cache is not old.cache and len(new.cache) == 0
        assert live.reload_errors == []
    finally:
        live.close()


def test_a_broken_edit_keeps_the_last_good_file_and_says_why(demo_db, tmp_path):
    live, rules_path, cur = _watched_copies(demo_db, tmp_path)
    try:
        old = live.snapshot
        _edit(cur, PIN.replace("rank = 1", "rank = 0"))  # a rank must be at least 1
        _edit(rules_path, rules_path.read_text(encoding="utf-8") + "\n[rule.broken\n")  # not TOML
        assert live.check() is False and live.snapshot is old
        errors = live.reload_errors
        assert len(errors) == 2 and all("\n" not in e for e in errors)
        assert errors[0].startswith("rules.toml") and errors[1].startswith("curation.toml:")
        assert "rank" in errors[1]
        assert str(tmp_path) not in " ".join(errors)  # file names only: health answers show them
        # Looking again without another edit changes nothing; fixing the file loads it.
        assert live.check() is False
        _edit(cur, BLOCK)
        assert live.check() is True and live.snapshot.curation.blocks
        assert len(live.reload_errors) == 1
    finally:
        live.close()


def test_an_edited_rules_file_gives_new_scores_and_new_screens(demo_db, tmp_path):
    live, rules_path, _ = _watched_copies(demo_db, tmp_path, curation=False)
    try:
        old = live.snapshot
        pair = old.rules.for_pair("sofa", "rug")
        screen = old.screen("sofa", "rug", pair)
        text = rules_path.read_text(encoding="utf-8")
        assert text.count("weight = 0.6     # common practice: a neutral") == 1
        _edit(rules_path, text.replace("weight = 0.6     # common practice: a neutral", "weight = 0.1  # a neutral"))
        assert live.check() is True
        new = live.snapshot
        assert new.rules is not old.rules and live.rules is new.rules
        assert live.rules_sha256 == _digest(rules_path)
        neutral = dict((r.name, w) for r, w in new.rules.for_pair("sofa", "rug").terms)["neutral_anchor"]
        assert neutral == pytest.approx(0.1 * dict((r.name, w) for r, w in pair.terms)["neutral_anchor"] / 0.6)
        # The products are the same objects; the screens are made again under the new rules.
        assert new.category_data is not old.category_data
        assert new.category_data["sofa"] is old.category_data["sofa"]
        assert new.screen("sofa", "rug", new.rules.for_pair("sofa", "rug")) is not screen
    finally:
        live.close()


def test_a_loader_that_fails_in_its_own_way_keeps_the_watcher_going(tmp_path):
    from harmony.serve.watched import WatchedFile

    path = tmp_path / "settings.toml"
    path.write_text("a = 1\n", encoding="utf-8")

    def load(p):
        if "broken" in p.read_text(encoding="utf-8"):
            raise KeyError("a bug of the loader, not a HarmonyError")
        return p.read_text(encoding="utf-8")

    watched = WatchedFile(path, "settings file", load, "a = 1\n")
    _edit(path, "broken\n")
    assert watched.poll() is False and watched.value == "a = 1\n"
    assert watched.error.startswith("settings.toml: cannot load the settings file: KeyError")
    _edit(path, "a = 2\n")
    assert watched.poll() is True and watched.value == "a = 2\n" and watched.error is None


def test_an_edit_made_while_the_caller_loads_is_not_missed(tmp_path):
    # The version is noted before the caller's load; an edit landing between that load and the
    # watcher's start must still be loaded (without the note, the watcher would take the edited
    # bytes for the version in force).
    from harmony.serve.watched import WatchedFile, file_version

    path = tmp_path / "settings.toml"
    path.write_text("a = 1\n", encoding="utf-8")
    version = file_version(path)
    value = path.read_text(encoding="utf-8")  # the caller's load
    _edit(path, "a = 2\n")  # the edit during start-up
    watched = WatchedFile(path, "settings file", lambda p: p.read_text(encoding="utf-8"), value, version)
    assert watched.poll() is True and watched.value == "a = 2\n"
    # Without the note the edit goes unseen: the reason for the parameter.
    late = WatchedFile(path, "settings file", lambda p: p.read_text(encoding="utf-8"), value)
    assert late.poll() is False and late.value == "a = 1\n"
