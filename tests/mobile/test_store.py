"""The SQLite store: schema and migrations, transactions, revisions, units kept, full disk."""

import sqlite3

import pytest

from mobile.store import SCHEMA_VERSION, Store, StoreError


def test_fresh_store_is_at_the_latest_schema_with_wal_and_full_sync(store):
    assert store.schema_version() == SCHEMA_VERSION
    assert store.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert store.conn.execute("PRAGMA synchronous").fetchone()[0] == 2  # sqlite docs: FULL = 2
    assert store.integrity_ok()


def test_version_1_database_is_migrated_and_keeps_its_data(tmp_path):
    folder = tmp_path / "old"
    # A version-1 file: made now, then stripped of what migration 2 adds.
    s = Store.open(folder)
    s.create_test("T1", {"crew": "A"})
    s.add_reading("T1", "static@H1", 500000.0, "psi", "72.5")
    with s.transaction() as conn:
        conn.execute("DROP TABLE settings")
        conn.execute("DROP INDEX readings_by_test")
        conn.execute("DROP TABLE checks")  # and of what migration 3 adds
        conn.execute("ALTER TABLE revisions DROP COLUMN finished_at")
        conn.execute("UPDATE schema_version SET version = 1")
    s.close()
    s = Store.open(folder)
    assert s.schema_version() == SCHEMA_VERSION
    assert s.readings("T1")["static@H1"].entered_text == "72.5"
    s.set_setting("units", "si")
    assert s.get_setting("units") == "si"
    s.close()


def test_newer_schema_is_refused_with_a_message(tmp_path):
    s = Store.open(tmp_path)
    with s.transaction() as conn:
        conn.execute("UPDATE schema_version SET version = ?", (SCHEMA_VERSION + 1,))
    s.close()
    with pytest.raises(StoreError, match="newer than this app"):
        Store.open(tmp_path)


def test_transaction_rolls_back_and_keeps_the_original_error(store):
    store.create_test("T1", {})
    with pytest.raises(ZeroDivisionError):
        with store.transaction() as conn:
            conn.execute("INSERT INTO readings (test_id, revision, slot, si_value, unit, entered_text,"
                         " entered_at) VALUES ('T1', 1, 'static@H', 1.0, 'psi', '1', 'now')")
            1 / 0
    assert store.readings("T1") == {}


def test_transaction_turns_sqlite_errors_into_store_errors(store):
    with pytest.raises(StoreError, match="could not save the thing") as info:
        with store.transaction("save the thing") as conn:
            conn.execute("INSERT INTO no_such_table VALUES (1)")
    assert isinstance(info.value.__cause__, sqlite3.Error)


def test_each_value_keeps_its_unit_and_text(store):
    store.create_test("T1", {})
    store.add_reading("T1", "static@H1", 482633.0, "kPa", "482.633")
    r = store.readings("T1")["static@H1"]
    assert (r.si_value, r.unit, r.entered_text) == (482633.0, "kPa", "482.633")


def test_correction_is_a_new_revision_and_old_ones_stay_readable(store):
    store.create_test("T1", {"crew": "A"})
    store.add_reading("T1", "static@H1", 1.0, "psi", "1")
    store.finish("T1")
    with pytest.raises(StoreError, match="finished"):
        store.add_reading("T1", "static@H1", 2.0, "psi", "2")
    with pytest.raises(StoreError, match="say why"):
        store.new_revision("T1", "  ")
    assert store.new_revision("T1", "gauge re-read") == 2
    store.add_reading("T1", "static@H1", 2.0, "psi", "2")
    assert store.readings("T1", 1)["static@H1"].si_value == 1.0
    assert store.readings("T1", 2)["static@H1"].si_value == 2.0
    assert [r.si_value for r in store.history("T1")] == [1.0, 2.0]
    assert [r["reason"] for r in store.revisions("T1")] == ["", "gauge re-read"]


def test_duplicate_test_id_is_refused(store):
    store.create_test("T1", {})
    with pytest.raises(StoreError, match="already used"):
        store.create_test("T1", {})


def test_non_finite_value_is_never_stored(store):
    store.create_test("T1", {})
    for bad in (float("nan"), float("inf")):
        with pytest.raises(StoreError):
            store.add_reading("T1", "static@H1", bad, "psi", "x")
    assert store.history("T1") == []


def test_full_disk_gives_a_clear_error_and_saved_data_stay(store):
    """SQLITE_FULL is provoked with PRAGMA max_page_count (sqlite docs: the write then fails with
    'database or disk is full', the same error a full card gives)."""
    store.create_test("T1", {})
    store.add_reading("T1", "static@H1", 1.0, "psi", "1")
    pages = store.conn.execute("PRAGMA page_count").fetchone()[0]
    store.conn.execute(f"PRAGMA max_page_count = {pages}")
    with pytest.raises(StoreError, match="storage is full") as info:
        for i in range(2000):  # fill the last page, then one more write fails
            store.add_reading("T1", f"pitot@o{i}", 2.0, "psi", "x" * 500)
    assert "intact" in str(info.value)
    assert store.readings("T1")["static@H1"].si_value == 1.0
    assert store.integrity_ok()


def test_version_2_corrections_keep_their_finished_revision(tmp_path):
    """Migration 3: a test under correction in an older file still has a finished revision."""
    s = Store.open(tmp_path / "old")
    s.create_test("T1", {})
    s.finish("T1")
    s.new_revision("T1", "re-read")
    s.create_test("T2", {})
    with s.transaction() as conn:
        conn.execute("DROP TABLE checks")
        conn.execute("ALTER TABLE revisions DROP COLUMN finished_at")
        conn.execute("UPDATE schema_version SET version = 2")
    s.close()
    s = Store.open(tmp_path / "old")
    assert s.last_finished_revision("T1") == 1
    assert s.last_finished_revision("T2") is None
    s.close()
