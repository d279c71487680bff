"""The SQLite store: one thin class over sqlite-utils.

Conventions (used by every table and every caller):

* Times are UTC text ``'YYYY-MM-DDTHH:MM:SSZ'`` (ISO 8601, whole seconds). Text sorts in time
  order, reads unambiguously in any SQLite client, and is what ``TIME_FORMAT`` writes.
* Values carry their canonical names with units: ``pore_pressure_kpa``, ``head_m``,
  ``rain_mm``, ``fos``.
* Each reading keeps its source: ``source_file_id`` (-> ``ingested_files.id``, which holds the
  file name and checksum) and ``source_line`` (1-based line in that file).

Concurrency and durability: the store runs in WAL mode with a busy timeout, so the service can
write while CLI readers (opened read-only) read. Write transactions start with
``BEGIN IMMEDIATE`` (``Store.atomic``), so a writer waits for the write lock up front instead of
failing half-way; commits are ``synchronous = FULL``, durable before an ingested file is moved.
Migrations are numbered and named, and recorded in the ``migrations`` table.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import asdict
from datetime import datetime, timezone
from pathlib import Path

import sqlite_utils

from watch.errors import StoreError

__all__ = ["Store", "MIGRATIONS", "TIME_FORMAT", "utc_text", "parse_utc_text"]

TIME_FORMAT = "%Y-%m-%dT%H:%M:%SZ"

#: How long a connection waits for another writer's lock before giving up [ms].
BUSY_TIMEOUT_MS = 30_000

#: Page cache of a writing connection [KiB].
WRITER_CACHE_KIB = 64 * 1024

#: (number, name, SQL). Append only; never edit an applied migration.
MIGRATIONS: list[tuple[int, str, str]] = [
    (
        1,
        "initial schema",
        """
        CREATE TABLE sites (
            id TEXT PRIMARY KEY,
            name TEXT NOT NULL DEFAULT '',
            owner TEXT NOT NULL DEFAULT '',
            time_zone TEXT NOT NULL DEFAULT 'UTC',
            updated_utc TEXT NOT NULL
        );
        CREATE TABLE sections (
            id TEXT PRIMARY KEY,
            site_id TEXT NOT NULL REFERENCES sites(id),
            file TEXT NOT NULL,
            gauge_id TEXT,
            updated_utc TEXT NOT NULL
        );
        -- Every change of a section's parameters is a new version; assessments name the
        -- version they used, so a result can always be traced to its inputs.
        CREATE TABLE section_versions (
            id INTEGER PRIMARY KEY,
            section_id TEXT NOT NULL REFERENCES sections(id),
            version INTEGER NOT NULL,
            parameters_json TEXT NOT NULL,
            checksum TEXT NOT NULL,
            provenance TEXT NOT NULL,
            created_utc TEXT NOT NULL,
            UNIQUE (section_id, version)
        );
        CREATE TABLE instruments (
            id TEXT PRIMARY KEY,
            kind TEXT NOT NULL CHECK (kind IN ('piezometer', 'rain_gauge')),
            section_id TEXT,
            config_json TEXT NOT NULL,
            updated_utc TEXT NOT NULL
        );
        CREATE TABLE ingested_files (
            id INTEGER PRIMARY KEY,
            name TEXT NOT NULL,
            feed TEXT,
            sha256 TEXT NOT NULL,
            size_bytes INTEGER NOT NULL,
            status TEXT NOT NULL CHECK (status IN ('ingested', 'rejected')),
            reason TEXT,
            rows_accepted INTEGER NOT NULL DEFAULT 0,
            rows_duplicate INTEGER NOT NULL DEFAULT 0,
            rows_rejected INTEGER NOT NULL DEFAULT 0,
            rows_flagged INTEGER NOT NULL DEFAULT 0,
            rows_missing INTEGER NOT NULL DEFAULT 0,
            archived_as TEXT NOT NULL,
            ingested_utc TEXT NOT NULL
        );
        -- A rejected file may be fixed and delivered again; only an ingested one is final.
        CREATE UNIQUE INDEX ingested_files_sha256 ON ingested_files(sha256)
            WHERE status = 'ingested';
        CREATE TABLE readings (
            instrument_id TEXT NOT NULL,
            time_utc TEXT NOT NULL,
            raw_value REAL NOT NULL,
            temperature_c REAL,
            barometric_kpa REAL,
            pore_pressure_kpa REAL,
            head_m REAL,
            quality TEXT NOT NULL,
            source_file_id INTEGER NOT NULL REFERENCES ingested_files(id),
            source_line INTEGER NOT NULL,
            PRIMARY KEY (instrument_id, time_utc)
        ) WITHOUT ROWID;
        CREATE TABLE rainfall (
            gauge_id TEXT NOT NULL,
            time_utc TEXT NOT NULL,
            raw_value REAL NOT NULL,
            rain_mm REAL,
            quality TEXT NOT NULL,
            source_file_id INTEGER NOT NULL REFERENCES ingested_files(id),
            source_line INTEGER NOT NULL,
            PRIMARY KEY (gauge_id, time_utc)
        ) WITHOUT ROWID;
        CREATE TABLE rejected_rows (
            id INTEGER PRIMARY KEY,
            file_id INTEGER NOT NULL REFERENCES ingested_files(id),
            line INTEGER,
            instrument_id TEXT,
            raw_text TEXT,
            reason TEXT NOT NULL
        );
        CREATE INDEX rejected_rows_file ON rejected_rows(file_id);
        CREATE TABLE assessments (
            id INTEGER PRIMARY KEY,
            section_id TEXT NOT NULL REFERENCES sections(id),
            section_version_id INTEGER REFERENCES section_versions(id),
            time_utc TEXT NOT NULL,
            method TEXT NOT NULL,
            fos REAL,
            converged INTEGER NOT NULL,
            iterations INTEGER,
            message TEXT,
            surface_json TEXT,
            inputs_json TEXT,
            created_utc TEXT NOT NULL
        );
        CREATE INDEX assessments_section_time ON assessments(section_id, time_utc);
        CREATE TABLE alerts (
            id INTEGER PRIMARY KEY,
            section_id TEXT,
            instrument_id TEXT,
            rule TEXT NOT NULL,
            level TEXT,
            state TEXT NOT NULL,
            message TEXT,
            state_json TEXT,
            raised_utc TEXT NOT NULL,
            updated_utc TEXT NOT NULL,
            acknowledged_utc TEXT,
            acknowledged_by TEXT
        );
        CREATE TABLE notifications (
            id INTEGER PRIMARY KEY,
            alert_id INTEGER REFERENCES alerts(id),
            channel TEXT NOT NULL,
            recipient TEXT NOT NULL,
            subject TEXT,
            status TEXT NOT NULL,
            error TEXT,
            created_utc TEXT NOT NULL,
            sent_utc TEXT
        );
        CREATE TABLE inspections (
            id INTEGER PRIMARY KEY,
            section_id TEXT REFERENCES sections(id),
            alert_id INTEGER REFERENCES alerts(id),
            reason TEXT NOT NULL,
            status TEXT NOT NULL,
            requested_utc TEXT NOT NULL,
            completed_utc TEXT,
            notes TEXT
        );
        """,
    ),
]

_READING_COLUMNS = (
    "instrument_id", "time_utc", "raw_value", "temperature_c", "barometric_kpa",
    "pore_pressure_kpa", "head_m", "quality", "source_file_id", "source_line",
)  # fmt: skip
_RAINFALL_COLUMNS = (
    "gauge_id", "time_utc", "raw_value", "rain_mm", "quality", "source_file_id", "source_line",
)  # fmt: skip


def utc_text(moment: datetime) -> str:
    """A timezone-aware datetime as the store's UTC text."""
    if moment.tzinfo is None:
        raise ValueError(f"naive datetime {moment!r}: give a time zone")
    return moment.astimezone(timezone.utc).strftime(TIME_FORMAT)


def parse_utc_text(text: str) -> datetime:
    return datetime.strptime(text, TIME_FORMAT).replace(tzinfo=timezone.utc)


def _now_text() -> str:
    return utc_text(datetime.now(timezone.utc))


class Store:
    """The workspace database. Open with ``Store(path)`` (writer; creates and migrates) or
    ``Store(path, read_only=True)`` (CLI reader; the file must exist and be up to date)."""

    def __init__(self, path: Path | str, read_only: bool = False, busy_timeout_ms: int = BUSY_TIMEOUT_MS):
        if busy_timeout_ms < 0:
            raise StoreError(f"busy timeout must be >= 0 ms, got {busy_timeout_ms}")
        self.path = Path(path)
        self.read_only = read_only
        try:
            if read_only:
                if not self.path.exists():
                    raise StoreError(
                        f"store {self.path} does not exist; create the workspace with `slipwatch init`"
                    )
                conn = sqlite3.connect(
                    f"{self.path.resolve().as_uri()}?mode=ro", uri=True, isolation_level=None,
                    timeout=busy_timeout_ms / 1000, check_same_thread=False,
                )  # fmt: skip
            else:
                conn = sqlite3.connect(
                    self.path, isolation_level=None, timeout=busy_timeout_ms / 1000,
                    check_same_thread=False,
                )  # fmt: skip
            conn.execute(f"PRAGMA busy_timeout = {int(busy_timeout_ms)}")
            if not read_only:
                conn.execute("PRAGMA journal_mode = WAL")
                conn.execute("PRAGMA synchronous = FULL")
                conn.execute("PRAGMA foreign_keys = ON")
                # A big ingest transaction touches many pages; a page cache that holds them
                # avoids spilling and rewriting pages before the commit.
                conn.execute(f"PRAGMA cache_size = -{WRITER_CACHE_KIB}")
        except sqlite3.Error as error:
            raise StoreError(f"cannot open store {self.path}: {error}") from None
        self.db = sqlite_utils.Database(conn, execute_plugins=False)
        self.conn = conn
        if read_only:
            self._check_version()
        else:
            self.migrate()

    # --- life cycle ---------------------------------------------------------------------------

    def close(self) -> None:
        self.conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @contextmanager
    def atomic(self) -> Iterator[Store]:
        """One write transaction (BEGIN IMMEDIATE ... COMMIT); rolled back on any exception."""
        if self.read_only:
            raise StoreError(f"store {self.path} is open read-only")
        if self.conn.in_transaction:
            raise StoreError("a transaction is already open; transactions do not nest")
        try:
            self.conn.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as error:
            raise StoreError(f"cannot start a write on {self.path}: {error} (another writer?)") from None
        try:
            yield self
        except BaseException:
            if self.conn.in_transaction:
                self.conn.execute("ROLLBACK")
            raise
        self.conn.execute("COMMIT")

    # --- schema -------------------------------------------------------------------------------

    @property
    def schema_version(self) -> int:
        if "migrations" not in self.db.table_names():
            return 0
        row = self.conn.execute("SELECT MAX(number) FROM migrations").fetchone()
        return row[0] or 0

    def migrate(self) -> list[str]:
        """Apply pending migrations in one transaction; return the names applied."""
        applied = []
        with self.atomic():
            self.conn.execute(
                "CREATE TABLE IF NOT EXISTS migrations ("
                "number INTEGER PRIMARY KEY, name TEXT NOT NULL, applied_utc TEXT NOT NULL)"
            )
            current = self.schema_version
            latest = MIGRATIONS[-1][0]
            if current > latest:
                raise StoreError(
                    f"store {self.path} has schema version {current}, newer than this slipwatch "
                    f"({latest}); upgrade slipwatch"
                )
            for number, name, sql in MIGRATIONS:
                if number > current:
                    for statement in _statements(sql):
                        self.conn.execute(statement)
                    self.conn.execute(
                        "INSERT INTO migrations (number, name, applied_utc) VALUES (?, ?, ?)",
                        (number, name, _now_text()),
                    )
                    applied.append(name)
        return applied

    def _check_version(self) -> None:
        current, latest = self.schema_version, MIGRATIONS[-1][0]
        if current != latest:
            raise StoreError(
                f"store {self.path} has schema version {current}, this slipwatch expects {latest}; "
                "run a writing command (e.g. `slipwatch ingest`) to migrate it"
            )

    def integrity_check(self) -> str:
        """'ok' or SQLite's list of problems."""
        rows = self.conn.execute("PRAGMA integrity_check").fetchall()
        return "\n".join(r[0] for r in rows)

    def backup(self, destination: Path | str) -> Path:
        """Copy the live store consistently (SQLite backup API) and check the copy."""
        destination = Path(destination)
        if destination.exists():
            raise StoreError(f"backup destination {destination} exists; choose a new file name")
        if not destination.parent.is_dir():
            raise StoreError(f"folder {destination.parent} does not exist")
        target = sqlite3.connect(destination)
        try:
            self.conn.backup(target)
            result = "\n".join(r[0] for r in target.execute("PRAGMA integrity_check").fetchall())
        finally:
            target.close()
        if result != "ok":
            raise StoreError(f"backup {destination} failed its integrity check: {result}")
        return destination

    # --- configuration ------------------------------------------------------------------------

    def sync_site(self, config) -> None:
        """Record the site, its sections and instruments as configured now (inside atomic())."""
        now = _now_text()
        self.conn.execute(
            "INSERT INTO sites (id, name, owner, time_zone, updated_utc) VALUES (?, ?, ?, ?, ?) "
            "ON CONFLICT (id) DO UPDATE SET name = excluded.name, owner = excluded.owner, "
            "time_zone = excluded.time_zone, updated_utc = excluded.updated_utc",
            (config.id, config.name, config.owner, config.time_zone, now),
        )
        for s in config.sections:
            self.conn.execute(
                "INSERT INTO sections (id, site_id, file, gauge_id, updated_utc) VALUES (?, ?, ?, ?, ?) "
                "ON CONFLICT (id) DO UPDATE SET site_id = excluded.site_id, file = excluded.file, "
                "gauge_id = excluded.gauge_id, updated_utc = excluded.updated_utc",
                (s.id, config.id, s.file, s.gauge, now),
            )
        for item in (*config.piezometers, *config.rain_gauges):
            self.conn.execute(
                "INSERT INTO instruments (id, kind, section_id, config_json, updated_utc) "
                "VALUES (?, ?, ?, ?, ?) ON CONFLICT (id) DO UPDATE SET kind = excluded.kind, "
                "section_id = excluded.section_id, config_json = excluded.config_json, "
                "updated_utc = excluded.updated_utc",
                (item.id, item.kind, getattr(item, "section", None), _config_json(item), now),
            )

    def record_section_version(self, section_id: str, parameters: dict, provenance: str) -> int:
        """Store the section's parameters as a new version when they changed; return the
        version number in force (inside atomic())."""
        text = json.dumps(parameters, sort_keys=True, default=str)
        checksum = hashlib.sha256(text.encode()).hexdigest()
        last = self.conn.execute(
            "SELECT version, checksum FROM section_versions WHERE section_id = ? "
            "ORDER BY version DESC LIMIT 1",
            (section_id,),
        ).fetchone()
        if last and last[1] == checksum:
            return last[0]
        version = (last[0] + 1) if last else 1
        self.conn.execute(
            "INSERT INTO section_versions (section_id, version, parameters_json, checksum, "
            "provenance, created_utc) VALUES (?, ?, ?, ?, ?, ?)",
            (section_id, version, text, checksum, provenance, _now_text()),
        )
        return version

    # --- ingest (all inside atomic()) ---------------------------------------------------------

    def ingested_file(self, sha256: str) -> dict | None:
        """The record of a file already ingested with this checksum, or None."""
        rows = list(
            self.db.query(
                "SELECT * FROM ingested_files WHERE sha256 = ? AND status = 'ingested'", [sha256]
            )
        )
        return rows[0] if rows else None

    def file_records(self, sha256: str) -> list[dict]:
        """Every record (ingested or rejected) of files with this checksum, newest first."""
        return list(
            self.db.query("SELECT * FROM ingested_files WHERE sha256 = ? ORDER BY id DESC", [sha256])
        )

    def add_file(self, name: str, feed: str | None, sha256: str, size_bytes: int, archived_as: str) -> int:
        cursor = self.conn.execute(
            "INSERT INTO ingested_files (name, feed, sha256, size_bytes, status, archived_as, "
            "ingested_utc) VALUES (?, ?, ?, ?, 'ingested', ?, ?)",
            (name, feed, sha256, size_bytes, archived_as, _now_text()),
        )
        return cursor.lastrowid

    def finish_file(self, file_id: int, status: str, reason: str | None, counts: dict, archived_as: str) -> None:
        self.conn.execute(
            "UPDATE ingested_files SET status = ?, reason = ?, rows_accepted = ?, rows_duplicate = ?, "
            "rows_rejected = ?, rows_flagged = ?, rows_missing = ?, archived_as = ? WHERE id = ?",
            (
                status, reason, counts["accepted"], counts["duplicates"], counts["rejected"],
                counts["flagged"], counts["missing"], archived_as, file_id,
            ),
        )  # fmt: skip

    def set_archived_as(self, file_id: int, archived_as: str) -> None:
        with self.atomic():
            self.conn.execute("UPDATE ingested_files SET archived_as = ? WHERE id = ?", (archived_as, file_id))

    def add_rejected_rows(self, rows: Iterable[Sequence]) -> int:
        """rows: (file_id, line, instrument_id, raw_text, reason)."""
        cursor = self.conn.executemany(
            "INSERT INTO rejected_rows (file_id, line, instrument_id, raw_text, reason) VALUES (?, ?, ?, ?, ?)",
            rows,
        )
        return cursor.rowcount

    def insert_readings(self, rows: Iterable[Sequence]) -> int:
        """Insert piezometer readings (columns as ``_READING_COLUMNS``); a row whose
        (instrument_id, time_utc) is already stored is left out. Return the number inserted."""
        return self._insert("readings", _READING_COLUMNS, ("instrument_id", "time_utc"), rows)

    def insert_rainfall(self, rows: Iterable[Sequence]) -> int:
        """As insert_readings, for rain gauges (columns as ``_RAINFALL_COLUMNS``)."""
        return self._insert("rainfall", _RAINFALL_COLUMNS, ("gauge_id", "time_utc"), rows)

    def _insert(self, table: str, columns: tuple[str, ...], key: tuple[str, ...], rows) -> int:
        # ON CONFLICT on the natural key only: any other constraint violation still raises
        # (INSERT OR IGNORE would swallow those too).
        sql = (
            f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' * len(columns))}) "
            f"ON CONFLICT ({', '.join(key)}) DO NOTHING"
        )
        return self.conn.executemany(sql, rows).rowcount

    def stored_versions(self, table: str, keys: Iterable[Sequence]) -> list[tuple]:
        """For (id, time_utc, ...) keys, the stored (id, time_utc, raw_value, source_file_id,
        source_line, file name); used to sort not-inserted rows into duplicates and conflicts."""
        id_column = "instrument_id" if table == "readings" else "gauge_id"
        if table not in ("readings", "rainfall"):
            raise StoreError(f"no such measurement table {table!r}")
        self.conn.execute("CREATE TEMP TABLE IF NOT EXISTS _keys (id TEXT, time_utc TEXT)")
        self.conn.execute("DELETE FROM _keys")
        self.conn.executemany("INSERT INTO _keys VALUES (?, ?)", keys)
        rows = self.conn.execute(
            f"SELECT t.{id_column}, t.time_utc, t.raw_value, t.source_file_id, t.source_line, f.name "
            f"FROM _keys k JOIN {table} t ON t.{id_column} = k.id AND t.time_utc = k.time_utc "
            "JOIN ingested_files f ON f.id = t.source_file_id"
        ).fetchall()
        self.conn.execute("DELETE FROM _keys")
        return rows

    def previous_reading(self, instrument_id: str, before_utc: str) -> tuple | None:
        """(time_utc, raw_value, flat_since_utc, head_time_utc, head_m) before a time:
        the last stored reading, the time of the first reading of the run of identical raw
        values that ends with it, and the last reading whose value was within its valid range
        (an out-of-range value is no base for a rate of rise)."""
        row = self.conn.execute(
            "SELECT time_utc, raw_value FROM readings WHERE instrument_id = ? AND time_utc < ? "
            "ORDER BY time_utc DESC LIMIT 1",
            (instrument_id, before_utc),
        ).fetchone()
        if row is None:
            return None
        in_range = self.conn.execute(
            "SELECT time_utc, head_m FROM readings WHERE instrument_id = ? AND time_utc < ? "
            "AND quality != 'out_of_range' ORDER BY time_utc DESC LIMIT 1",
            (instrument_id, before_utc),
        ).fetchone() or (None, None)
        different = self.conn.execute(
            "SELECT time_utc FROM readings WHERE instrument_id = ? AND time_utc < ? AND raw_value != ? "
            "ORDER BY time_utc DESC LIMIT 1",
            (instrument_id, row[0], row[1]),
        ).fetchone()
        if different is None:
            since = self.conn.execute(
                "SELECT MIN(time_utc) FROM readings WHERE instrument_id = ?", (instrument_id,)
            ).fetchone()[0]
        else:
            since = self.conn.execute(
                "SELECT time_utc FROM readings WHERE instrument_id = ? AND time_utc > ? "
                "ORDER BY time_utc LIMIT 1",
                (instrument_id, different[0]),
            ).fetchone()[0]
        return (row[0], row[1], since, *in_range)

    def previous_rain_total(self, gauge_id: str, before_utc: str) -> float | None:
        """Raw value of the gauge's last stored reading before a time (cumulative gauges)."""
        row = self.conn.execute(
            "SELECT raw_value FROM rainfall WHERE gauge_id = ? AND time_utc < ? "
            "ORDER BY time_utc DESC LIMIT 1",
            (gauge_id, before_utc),
        ).fetchone()
        return None if row is None else row[0]

    # --- queries ------------------------------------------------------------------------------

    def readings(self, instrument_id: str, start_utc: str | None = None, end_utc: str | None = None) -> list[dict]:
        """Stored readings of one piezometer or rain gauge in time order, with their source."""
        table, id_column = ("readings", "instrument_id")
        kind = self.conn.execute("SELECT kind FROM instruments WHERE id = ?", (instrument_id,)).fetchone()
        if kind and kind[0] == "rain_gauge":
            table, id_column = ("rainfall", "gauge_id")
        sql = (
            f"SELECT t.*, f.name AS source_file FROM {table} t "
            f"JOIN ingested_files f ON f.id = t.source_file_id WHERE t.{id_column} = ?"
        )
        params: list = [instrument_id]
        if start_utc is not None:
            sql += " AND t.time_utc >= ?"
            params.append(start_utc)
        if end_utc is not None:
            sql += " AND t.time_utc <= ?"
            params.append(end_utc)
        return list(self.db.query(sql + " ORDER BY t.time_utc", params))

    def instrument_summary(self) -> list[dict]:
        """Per configured instrument: kind, newest reading time, count, count by quality."""
        rows = []
        for instrument_id, kind in self.conn.execute("SELECT id, kind FROM instruments ORDER BY id"):
            table, id_column = ("rainfall", "gauge_id") if kind == "rain_gauge" else ("readings", "instrument_id")
            newest, count, flagged = self.conn.execute(
                f"SELECT MAX(time_utc), COUNT(*), COALESCE(SUM(quality != 'ok'), 0) FROM {table} "
                f"WHERE {id_column} = ?",
                (instrument_id,),
            ).fetchone()
            rows.append(
                {"instrument_id": instrument_id, "kind": kind, "newest_utc": newest,
                 "readings": count, "flagged": flagged}  # fmt: skip
            )
        return rows

    def counts(self) -> dict[str, int]:
        tables = ("ingested_files", "readings", "rainfall", "rejected_rows")
        return {t: self.conn.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0] for t in tables}


def _statements(sql: str) -> list[str]:
    """Split a migration script into statements (sqlite3.complete_statement keeps ';' inside
    literals and triggers intact)."""
    statements, current = [], ""
    for line in sql.splitlines(keepends=True):
        current += line
        if sqlite3.complete_statement(current):
            if current.strip():
                statements.append(current.strip())
            current = ""
    if current.strip():
        raise StoreError(f"incomplete SQL statement in a migration: {current.strip()[:60]!r}")
    return statements


def _config_json(item) -> str:
    return json.dumps(asdict(item), sort_keys=True, default=str)
