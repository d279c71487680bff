"""The SQLite store: migrations, WAL, read-only readers, transactions, natural-key inserts, backup."""

import sqlite3

import pytest

from watch.errors import StoreError
from watch.store import MIGRATIONS, Store, parse_utc_text, utc_text


def _reading(instrument="P1", time="2026-10-01T00:00:00Z", raw=10.0, file_id=1, line=2):
    return (instrument, time, raw, None, None, raw, 50.0, "ok", file_id, line)


def _file(store, name="a.csv", sha="s1"):
    return store.add_file(name, "feed", sha, 10, archived_as=f"processed/{name}",
                          ingested_utc="2026-10-01T06:00:00Z")


def test_new_store_is_migrated_and_in_wal_mode(tmp_path):
    with Store(tmp_path / "s.db") as store:
        assert store.schema_version == MIGRATIONS[-1][0]
        names = [r[0] for r in store.conn.execute("SELECT name FROM migrations ORDER BY number")]
        assert names == [m[1] for m in MIGRATIONS]
        assert store.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert store.conn.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL
        assert store.conn.execute("PRAGMA busy_timeout").fetchone()[0] > 0
        for table in ("sites", "sections", "section_versions", "instruments", "readings", "rainfall",
                      "ingested_files", "rejected_rows", "assessments", "alerts", "notifications",
                      "inspections"):  # fmt: skip
            assert table in store.db.table_names()
    # Opening again applies nothing.
    with Store(tmp_path / "s.db") as store:
        assert store.migrate() == []


def test_read_only_reader_cannot_write(tmp_path):
    Store(tmp_path / "s.db").close()
    with Store(tmp_path / "s.db", read_only=True) as reader:
        with pytest.raises(StoreError, match="is open read-only"):
            with reader.atomic():
                pass
        with pytest.raises(sqlite3.OperationalError, match="readonly"):
            reader.conn.execute("INSERT INTO sites (id, updated_utc) VALUES ('x', 'y')")
    with pytest.raises(StoreError, match="does not exist; create the workspace"):
        Store(tmp_path / "missing.db", read_only=True)


def test_atomic_rolls_back_everything_on_error(tmp_path):
    with Store(tmp_path / "s.db") as store:
        with pytest.raises(RuntimeError, match="boom"):
            with store.atomic():
                file_id = _file(store)
                store.insert_readings([_reading(file_id=file_id)])
                raise RuntimeError("boom")
        assert store.counts() == {"ingested_files": 0, "readings": 0, "rainfall": 0, "rejected_rows": 0}


def test_natural_key_insert_counts_and_keeps_the_first_value(tmp_path):
    with Store(tmp_path / "s.db") as store, store.atomic():
        file_id = _file(store)
        assert store.insert_readings([_reading(line=2), _reading(time="2026-10-01T00:15:00Z", line=3)]) == 2
        # Same key again, other value: not inserted, counted, the stored value stays.
        assert store.insert_readings([_reading(raw=99.0, line=4)]) == 0
        assert store.conn.execute("SELECT raw_value FROM readings").fetchall() == [(10.0,), (10.0,)]


def test_other_constraint_violations_are_not_swallowed(tmp_path):
    # ON CONFLICT names the natural key only; a NOT NULL violation still raises (unlike INSERT OR IGNORE).
    with Store(tmp_path / "s.db") as store, store.atomic():
        file_id = _file(store)
        with pytest.raises(sqlite3.IntegrityError, match="NOT NULL constraint failed: readings.raw_value"):
            store.insert_readings([("P1", "2026-10-01T00:00:00Z", None, None, None, None, None, "ok", file_id, 2)])


def test_foreign_key_to_the_file_record_is_enforced(tmp_path):
    with Store(tmp_path / "s.db") as store, store.atomic():
        with pytest.raises(sqlite3.IntegrityError, match="FOREIGN KEY constraint failed"):
            store.insert_readings([_reading(file_id=42)])


def test_checksum_unique_among_ingested_files_only(tmp_path):
    with Store(tmp_path / "s.db") as store, store.atomic():
        first = _file(store, sha="same")
        store.finish_file(first, "rejected", "bad", dict.fromkeys(("accepted", "duplicates", "rejected", "flagged", "missing"), 0), "rejected/a.csv")
        _file(store, sha="same")  # a fixed re-delivery of a rejected file is allowed
        with pytest.raises(sqlite3.IntegrityError, match="UNIQUE constraint failed: ingested_files.sha256"):
            _file(store, sha="same")


def test_second_writer_waits_then_fails_clearly(tmp_path):
    with Store(tmp_path / "s.db") as first, Store(tmp_path / "s.db", busy_timeout_ms=50) as second:
        with first.atomic():
            with pytest.raises(StoreError, match="cannot start a write .* database is locked"):
                with second.atomic():
                    pass
            # A reader still reads while the writer holds its transaction (WAL).
            with Store(tmp_path / "s.db", read_only=True) as reader:
                assert reader.counts()["readings"] == 0


def test_backup_is_consistent_and_checked(tmp_path):
    with Store(tmp_path / "s.db") as store:
        with store.atomic():
            store.insert_readings([_reading(file_id=_file(store))])
        copy = store.backup(tmp_path / "copy.db")
        with pytest.raises(StoreError, match="exists; choose a new file name"):
            store.backup(copy)
    with Store(copy, read_only=True) as restored:
        assert restored.counts()["readings"] == 1
        assert restored.integrity_check() == "ok"


def test_newer_store_is_refused(tmp_path):
    with Store(tmp_path / "s.db") as store:
        store.conn.execute("INSERT INTO migrations VALUES (999, 'future', 'x')")
    with pytest.raises(StoreError, match="schema version 999, newer than this slipwatch"):
        Store(tmp_path / "s.db")


def test_section_versions_change_only_with_parameters(tmp_path):
    with Store(tmp_path / "s.db") as store, store.atomic():
        store.conn.execute("INSERT INTO sites (id, updated_utc) VALUES ('s', 'x')")
        store.conn.execute("INSERT INTO sections (id, site_id, file, updated_utc) VALUES ('A', 's', 'a.toml', 'x')")
        when = "2026-11-02T00:00:00Z"
        assert store.record_section_version("A", {"c": 5.0}, "sections/a.toml", when, "d1") == 1
        assert store.record_section_version("A", {"c": 5.0}, "sections/a.toml", when, "d1") == 1
        assert store.record_section_version("A", {"c": 4.0}, "back-analysis 2026-11-02", when, "d1") == 2
        # the same parameters from an edited file (another digest) are a new version
        assert store.record_section_version("A", {"c": 4.0}, "sections/a.toml", when, "d2") == 3


def test_utc_text_round_trip():
    moment = parse_utc_text("2026-10-25T01:30:00Z")
    assert utc_text(moment) == "2026-10-25T01:30:00Z"
    with pytest.raises(ValueError, match="naive datetime"):
        utc_text(moment.replace(tzinfo=None))
