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
    (
        2,
        "water lines",
        """
        -- Every water line an assessment used, with the readings it was drawn through
        -- (instrument, time_utc, head_m, source_file_id, source_line of each), so that any
        -- factor of safety traces back to the feed rows. assessment_id is NULL for lines
        -- stored outside an assessment (forecasts, replays).
        CREATE TABLE water_lines (
            id INTEGER PRIMARY KEY,
            assessment_id INTEGER REFERENCES assessments(id),
            section_id TEXT NOT NULL,
            line_name TEXT NOT NULL,
            time_utc TEXT NOT NULL,
            points_json TEXT NOT NULL,
            source TEXT NOT NULL,
            fallback TEXT NOT NULL,
            fallback_reason TEXT NOT NULL DEFAULT '',
            readings_json TEXT NOT NULL,
            details_json TEXT NOT NULL DEFAULT '{}',
            created_utc TEXT NOT NULL
        );
        CREATE INDEX water_lines_assessment ON water_lines(assessment_id);
        CREATE INDEX water_lines_section_time ON water_lines(section_id, time_utc);
        -- Rainfall-response models calibrated per piezometer; the newest usable one of an
        -- instrument forecasts its heads and stands in for it when its readings are unusable.
        CREATE TABLE response_models (
            id INTEGER PRIMARY KEY,
            instrument_id TEXT NOT NULL,
            gauge_id TEXT NOT NULL,
            calibrated_utc TEXT NOT NULL,
            record_start_utc TEXT NOT NULL,
            record_end_utc TEXT NOT NULL,
            step_h REAL NOT NULL,
            base_head_m REAL NOT NULL,
            gain_m_per_mm REAL NOT NULL,
            recession_h REAL NOT NULL,
            lag_steps INTEGER NOT NULL,
            nse REAL,
            rmse_m REAL,
            min_nse REAL NOT NULL,
            n_observations INTEGER NOT NULL,
            missing_rain_steps INTEGER NOT NULL DEFAULT 0,
            converged INTEGER NOT NULL,
            usable INTEGER NOT NULL,
            reason TEXT NOT NULL
        );
        CREATE INDEX response_models_instrument ON response_models(instrument_id, calibrated_utc);
        """,
    ),
    (
        3,
        "assessment cycle",
        """
        -- An assessment records how its factor of safety was obtained and what it rests on;
        -- inputs_key is a digest of those inputs (section version, readings used), so a cycle
        -- whose inputs did not change does not calculate again.
        ALTER TABLE assessments ADD COLUMN status TEXT NOT NULL DEFAULT 'ok';
        ALTER TABLE assessments ADD COLUMN evaluation TEXT;
        ALTER TABLE assessments ADD COLUMN fos_by_method_json TEXT NOT NULL DEFAULT '[]';
        ALTER TABLE assessments ADD COLUMN warnings_json TEXT NOT NULL DEFAULT '[]';
        ALTER TABLE assessments ADD COLUMN inputs_key TEXT;
        ALTER TABLE assessments ADD COLUMN duration_s REAL;
        -- The surfaces kept by each section's last full search, so that warm re-evaluation
        -- survives a restart. One row per section, replaced by every full search.
        CREATE TABLE search_cache (
            section_id TEXT PRIMARY KEY REFERENCES sections(id),
            section_version_id INTEGER REFERENCES section_versions(id),
            time_utc TEXT NOT NULL,
            search_json TEXT NOT NULL,
            created_utc TEXT NOT NULL
        );
        -- alerts (migration 1) holds the stored state of every alert, one row per
        -- (section, rule): the state machine record in state_json, the firing episode, what
        -- was notified, acknowledgement and shelving.
        ALTER TABLE alerts ADD COLUMN kind TEXT NOT NULL DEFAULT 'level';
        ALTER TABLE alerts ADD COLUMN quantity TEXT;
        ALTER TABLE alerts ADD COLUMN rank INTEGER NOT NULL DEFAULT 0;
        ALTER TABLE alerts ADD COLUMN episode INTEGER NOT NULL DEFAULT 0;
        ALTER TABLE alerts ADD COLUMN notified_episode INTEGER NOT NULL DEFAULT 0;
        ALTER TABLE alerts ADD COLUMN last_value REAL;
        ALTER TABLE alerts ADD COLUMN acknowledged_episode INTEGER;
        ALTER TABLE alerts ADD COLUMN acknowledged_note TEXT;
        ALTER TABLE alerts ADD COLUMN shelved_until_utc TEXT;
        ALTER TABLE alerts ADD COLUMN shelved_by TEXT;
        ALTER TABLE alerts ADD COLUMN shelved_reason TEXT;
        ALTER TABLE alerts ADD COLUMN shelved_utc TEXT;
        CREATE UNIQUE INDEX alerts_section_rule ON alerts(section_id, rule);
        -- Every state change, acknowledgement and shelving of an alert.
        CREATE TABLE alert_events (
            id INTEGER PRIMARY KEY,
            alert_id INTEGER NOT NULL REFERENCES alerts(id),
            time_utc TEXT NOT NULL,
            event TEXT NOT NULL,
            old_state TEXT,
            new_state TEXT,
            episode INTEGER,
            value REAL,
            assessment_id INTEGER REFERENCES assessments(id),
            by_name TEXT,
            note TEXT,
            created_utc TEXT NOT NULL
        );
        CREATE INDEX alert_events_alert ON alert_events(alert_id, time_utc);
        -- Notifications queued in the same transaction as the change that causes them;
        -- watch.notify delivers them and never edits these rows.
        CREATE TABLE notification_outbox (
            id INTEGER PRIMARY KEY,
            idempotency_key TEXT NOT NULL UNIQUE,
            site_id TEXT,
            section_id TEXT,
            alert_id INTEGER REFERENCES alerts(id),
            kind TEXT NOT NULL CHECK (kind IN ('firing', 'resolved', 'escalated',
                'de-escalated', 'repeat', 'inspection', 'data')),
            level TEXT,
            subject TEXT NOT NULL,
            body TEXT NOT NULL,
            payload_json TEXT NOT NULL,
            created_utc TEXT NOT NULL
        );
        CREATE INDEX notification_outbox_alert ON notification_outbox(alert_id);
        -- inspections (migration 1): one request per alert and firing episode.
        ALTER TABLE inspections ADD COLUMN level TEXT;
        ALTER TABLE inspections ADD COLUMN episode INTEGER;
        ALTER TABLE inspections ADD COLUMN due_utc TEXT;
        ALTER TABLE inspections ADD COLUMN checklist_json TEXT NOT NULL DEFAULT '[]';
        ALTER TABLE inspections ADD COLUMN closed_by TEXT;
        CREATE UNIQUE INDEX inspections_alert_episode ON inspections(alert_id, episode);
        -- One row per run of the cycle: when, for which time, and what it did.
        CREATE TABLE cycles (
            id INTEGER PRIMARY KEY,
            at_utc TEXT NOT NULL,
            started_utc TEXT NOT NULL,
            finished_utc TEXT,
            report_json TEXT
        );
        """,
    ),
    (
        4,
        "notification delivery",
        """
        -- One row per outbox notification and receiver (channel + recipient); round 0 is the
        -- notification itself, round n its n-th repeat while the alarm stands. Rows sent
        -- together share a message_key, fixed when the message is formed, so that a retry
        -- re-sends the same message under the same idempotency key.
        CREATE TABLE deliveries (
            id INTEGER PRIMARY KEY,
            outbox_id INTEGER NOT NULL REFERENCES notification_outbox(id),
            channel TEXT NOT NULL CHECK (channel IN ('log', 'email', 'webhook')),
            recipient TEXT NOT NULL,
            round INTEGER NOT NULL DEFAULT 0,
            status TEXT NOT NULL CHECK (status IN ('pending', 'sent', 'failed')),
            message_key TEXT,
            grouped_utc TEXT,
            attempts INTEGER NOT NULL DEFAULT 0,
            next_attempt_utc TEXT NOT NULL,
            last_error TEXT,
            created_utc TEXT NOT NULL,
            sent_utc TEXT,
            UNIQUE (outbox_id, channel, recipient, round)
        );
        CREATE INDEX deliveries_message ON deliveries(message_key);
        CREATE INDEX deliveries_receiver ON deliveries(channel, recipient, status);
        -- Every send attempt of a message, successful or not.
        CREATE TABLE delivery_attempts (
            id INTEGER PRIMARY KEY,
            message_key TEXT NOT NULL,
            channel TEXT NOT NULL,
            recipient TEXT NOT NULL,
            attempt INTEGER NOT NULL,
            time_utc TEXT NOT NULL,
            status TEXT NOT NULL CHECK (status IN ('sent', 'failed')),
            error TEXT,
            outbox_ids_json TEXT NOT NULL
        );
        CREATE INDEX delivery_attempts_message ON delivery_attempts(message_key);
        """,
    ),
    (
        5,
        "back-analysis",
        """
        -- Every back-analysis run of a slip case: what was solved, with which inputs (the case
        -- file's checksum, the section versions and water lines used) and what it found.
        CREATE TABLE back_analyses (
            id INTEGER PRIMARY KEY,
            case_id TEXT NOT NULL,
            case_file TEXT NOT NULL,
            case_sha256 TEXT NOT NULL,
            section_id TEXT NOT NULL,
            failed_utc TEXT NOT NULL,
            material TEXT NOT NULL,
            form TEXT NOT NULL,
            method TEXT NOT NULL,
            best_json TEXT,
            result_json TEXT NOT NULL,
            ran_utc TEXT NOT NULL
        );
        CREATE INDEX back_analyses_case ON back_analyses(case_id, ran_utc);
        -- Every parameter version made from a back-analysis: which section, which version,
        -- the strength applied, from which case, who decided it and when.
        CREATE TABLE calibrations (
            id INTEGER PRIMARY KEY,
            back_analysis_id INTEGER REFERENCES back_analyses(id),
            section_id TEXT NOT NULL REFERENCES sections(id),
            section_version_id INTEGER NOT NULL REFERENCES section_versions(id),
            material TEXT NOT NULL,
            strength_json TEXT NOT NULL,
            case_id TEXT NOT NULL,
            failed_utc TEXT NOT NULL,
            calibrated_by TEXT NOT NULL,
            created_utc TEXT NOT NULL
        );
        CREATE INDEX calibrations_section ON calibrations(section_id, created_utc);
        """,
    ),
    (
        7,
        "corrections and re-reads",
        """
        -- Why a file was read: an ordinary delivery, a correction (re-delivered values that
        -- replace stored ones, applied by someone for a reason) or a re-read of an archived
        -- file after a configuration fix. A re-read reads content already ingested, so only
        -- deliveries and corrections keep a checksum unique.
        ALTER TABLE ingested_files ADD COLUMN purpose TEXT NOT NULL DEFAULT 'delivery'
            CHECK (purpose IN ('delivery', 'correction', 'reread'));
        ALTER TABLE ingested_files ADD COLUMN applied_by TEXT;
        ALTER TABLE ingested_files ADD COLUMN note TEXT;
        DROP INDEX ingested_files_sha256;
        CREATE UNIQUE INDEX ingested_files_sha256 ON ingested_files(sha256)
            WHERE status = 'ingested' AND purpose != 'reread';
        -- Every stored value a correction replaced: the row as it was (values_json), where it
        -- came from, what replaced it, who made the correction, when and why.
        CREATE TABLE superseded_values (
            id INTEGER PRIMARY KEY,
            measurement TEXT NOT NULL CHECK (measurement IN ('readings', 'rainfall')),
            instrument_id TEXT NOT NULL,
            time_utc TEXT NOT NULL,
            raw_value REAL NOT NULL,
            quality TEXT NOT NULL,
            values_json TEXT NOT NULL,
            source_file_id INTEGER NOT NULL REFERENCES ingested_files(id),
            source_line INTEGER NOT NULL,
            replaced_by_file_id INTEGER NOT NULL REFERENCES ingested_files(id),
            replaced_by_line INTEGER NOT NULL,
            corrected_by TEXT NOT NULL,
            reason TEXT NOT NULL,
            corrected_utc TEXT NOT NULL
        );
        CREATE INDEX superseded_values_key ON superseded_values(instrument_id, time_utc);
        """,
    ),
    (
        8,
        "section files and service states",
        """
        -- The digest of the section file each parameter version rests on: a file whose content
        -- changed becomes a new version (watch.parameters.follow_section_file); a calibrated
        -- version carries the digest of the file version it was calibrated from.
        ALTER TABLE section_versions ADD COLUMN file_sha256 TEXT;
        -- The expiry of a 'shelved' event, so that an alert's state at any past time can be
        -- rebuilt from its events alone (watch.alert_history).
        ALTER TABLE alert_events ADD COLUMN until_utc TEXT;
        -- Service state of each section, set by an engineer: 'in-service', 'slipped',
        -- 'closed', 'under-repair'. The newest row at or before a time is the state then; a
        -- section without rows is in service. section_version_id: the version in force when
        -- the state was set (a slipped section returns to service on a newer one).
        CREATE TABLE service_states (
            id INTEGER PRIMARY KEY,
            section_id TEXT NOT NULL,
            state TEXT NOT NULL CHECK (state IN ('in-service', 'slipped', 'closed', 'under-repair')),
            time_utc TEXT NOT NULL,
            by_name TEXT NOT NULL,
            note TEXT NOT NULL,
            section_version_id INTEGER REFERENCES section_versions(id),
            created_utc TEXT NOT NULL
        );
        CREATE INDEX service_states_section ON service_states(section_id, time_utc);
        """,
    ),
    (
        10,
        "calibration checks and overrides",
        """
        -- What a calibration was checked against (the back-analysis' own consistency checks
        -- and each calibrated section's record: FoS with the new strength at its worst stored
        -- times), as JSON, and the reason an engineer gave for storing it although a check
        -- failed (NULL: every check passed).
        ALTER TABLE calibrations ADD COLUMN checks_json TEXT NOT NULL DEFAULT '[]';
        ALTER TABLE calibrations ADD COLUMN override_reason TEXT;
        """,
    ),
    (
        14,
        "rain after a gap in the record",
        """
        -- A cumulative gauge's reading whose increment spans a gap in its record: the time of
        -- the reading it is counted from (its depth fell some time between then and its own
        -- time); NULL for a reading that covers the gauge's usual interval (watch.quality).
        ALTER TABLE rainfall ADD COLUMN gap_start_utc TEXT;
        """,
    ),
]

_READING_COLUMNS = (
    "instrument_id", "time_utc", "raw_value", "temperature_c", "barometric_kpa",
    "pore_pressure_kpa", "head_m", "quality", "source_file_id", "source_line",
)  # fmt: skip
_RAINFALL_COLUMNS = (
    "gauge_id", "time_utc", "raw_value", "rain_mm", "quality", "gap_start_utc", "source_file_id", "source_line",
)  # fmt: skip
#: Columns and id column of each measurement table, in the order rows are inserted.
_MEASUREMENT_COLUMNS = {
    "readings": (_READING_COLUMNS, "instrument_id"),
    "rainfall": (_RAINFALL_COLUMNS, "gauge_id"),
}
#: Columns of ``alerts`` that Store.update_alert may set (migrations 1 and 3).
_ALERT_COLUMNS = frozenset({
    "level", "state", "message", "state_json", "updated_utc", "acknowledged_utc", "acknowledged_by",
    "kind", "quantity", "rank", "episode", "notified_episode", "last_value", "acknowledged_episode",
    "acknowledged_note", "shelved_until_utc", "shelved_by", "shelved_reason", "shelved_utc",
})


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

    def sync_site(self, config, updated_utc: str) -> None:
        """Record the site, its sections and instruments as configured at ``updated_utc``
        (the caller's clock; inside atomic())."""
        now = updated_utc
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

    def record_section_version(self, section_id: str, parameters: dict, provenance: str, created_utc: str,
                               file_sha256: str | None = None) -> int:  # fmt: skip
        """Store the section's parameters as a new version when they, or the digest of the
        section file they rest on, differ from the newest version's; return the version number
        in force (inside atomic()). ``created_utc``: the caller's clock."""
        text = json.dumps(parameters, sort_keys=True, default=str)
        checksum = hashlib.sha256(text.encode()).hexdigest()
        last = self.conn.execute(
            "SELECT version, checksum, file_sha256 FROM section_versions WHERE section_id = ? "
            "ORDER BY version DESC LIMIT 1",
            (section_id,),
        ).fetchone()
        if last and last[1] == checksum and (file_sha256 is None or last[2] == file_sha256):
            return last[0]
        version = (last[0] + 1) if last else 1
        self.conn.execute(
            "INSERT INTO section_versions (section_id, version, parameters_json, checksum, "
            "provenance, created_utc, file_sha256) VALUES (?, ?, ?, ?, ?, ?, ?)",
            (section_id, version, text, checksum, provenance, created_utc, file_sha256),
        )
        return version

    def set_version_file_digest(self, version_id: int, file_sha256: str) -> None:
        """Note the section-file digest of a version stored before migration 8 (inside atomic())."""
        self.conn.execute("UPDATE section_versions SET file_sha256 = ? WHERE id = ?", (file_sha256, version_id))

    # --- service states of sections (migration 8; watch.service) -------------------------------

    def add_service_state(self, row: dict) -> int:
        """Add a ``service_states`` row (inside atomic()); return its id."""
        return self._insert_row("service_states", row)

    def service_state_rows(self, section_id: str | None = None, at_or_before_utc: str | None = None) -> list[dict]:
        """Service-state changes, in time order (of a section; up to a time)."""
        sql, params = _filtered("SELECT * FROM service_states WHERE 1 = 1",
                                (("section_id = ?", section_id), ("time_utc <= ?", at_or_before_utc)))
        return list(self.db.query(sql + " ORDER BY time_utc, id", params))

    # --- ingest (all inside atomic()) ---------------------------------------------------------

    def ingested_file(self, sha256: str) -> dict | None:
        """The record of a file already ingested with this checksum, or None."""
        rows = list(
            self.db.query(
                "SELECT * FROM ingested_files WHERE sha256 = ? AND status = 'ingested' ORDER BY id LIMIT 1",
                [sha256],
            )
        )
        return rows[0] if rows else None

    def file_records(self, sha256: str) -> list[dict]:
        """Every record (ingested or rejected) of files with this checksum, newest first."""
        return list(
            self.db.query("SELECT * FROM ingested_files WHERE sha256 = ? ORDER BY id DESC", [sha256])
        )

    def add_file(self, name: str, feed: str | None, sha256: str, size_bytes: int, archived_as: str,
                 ingested_utc: str, purpose: str = "delivery", applied_by: str | None = None,
                 note: str | None = None) -> int:  # fmt: skip
        """Record a file being ingested; ``ingested_utc`` is the ingest's clock time (a replay
        passes its manual clock). ``purpose``: 'delivery', 'correction'
        (with who applied it and why) or 'reread' (migration 7)."""
        cursor = self.conn.execute(
            "INSERT INTO ingested_files (name, feed, sha256, size_bytes, status, archived_as, "
            "ingested_utc, purpose, applied_by, note) VALUES (?, ?, ?, ?, 'ingested', ?, ?, ?, ?, ?)",
            (name, feed, sha256, size_bytes, archived_as, ingested_utc, purpose, applied_by, note),
        )
        return cursor.lastrowid

    def supersede(self, table: str, rows: Iterable[Sequence], corrected_by: str, reason: str,
                  corrected_utc: str) -> int:  # fmt: skip
        """Replace stored readings (``rows`` in the columns of ``insert_readings`` or
        ``insert_rainfall``, keys already stored) and keep each replaced row in
        ``superseded_values`` with who, when and why (inside atomic()). Return the number."""
        columns, id_column = _MEASUREMENT_COLUMNS[table]
        assignments = ", ".join(f"{c} = ?" for c in columns[2:])
        count = 0
        for row in rows:
            key = (row[0], row[1])
            old = self.conn.execute(f"SELECT * FROM {table} WHERE {id_column} = ? AND time_utc = ?", key)
            names = [d[0] for d in old.description]
            values = old.fetchone()
            if values is None:
                raise StoreError(f"no stored reading of {key[0]} at {key[1]} to correct")
            was = dict(zip(names, values))
            self.conn.execute(
                "INSERT INTO superseded_values (measurement, instrument_id, time_utc, raw_value, quality, "
                "values_json, source_file_id, source_line, replaced_by_file_id, replaced_by_line, corrected_by, "
                "reason, corrected_utc) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (table, *key, was["raw_value"], was["quality"], json.dumps(was, sort_keys=True),
                 was["source_file_id"], was["source_line"], row[-2], row[-1], corrected_by, reason, corrected_utc),
            )  # fmt: skip
            self.conn.execute(f"UPDATE {table} SET {assignments} WHERE {id_column} = ? AND time_utc = ?",
                              (*row[2:], *key))  # fmt: skip
            count += 1
        return count

    def superseded_values(self, instrument_id: str, start_utc: str | None = None,
                          end_utc: str | None = None) -> list[dict]:  # fmt: skip
        """The values corrections replaced for one instrument, by time then order of correction,
        with the names of the files involved (migration 7)."""
        sql = (
            "SELECT s.*, f.name AS source_file, g.name AS replaced_by_file FROM superseded_values s "
            "JOIN ingested_files f ON f.id = s.source_file_id "
            "JOIN ingested_files g ON g.id = s.replaced_by_file_id WHERE s.instrument_id = ?"
        )
        where, params = _between("s.time_utc", start_utc, end_utc)
        return list(self.db.query(sql + where + " ORDER BY s.time_utc, s.id", [instrument_id, *params]))

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

    def discard_reading(self, table: str, instrument_id: str, time_utc: str, file_id: int) -> str | None:
        """Remove a reading stored by the file being ingested (``file_id``; inside its
        transaction), when a later row of the same file gives another value for its key; return
        its quality, or None when no such reading of that file is stored."""
        id_column = {"readings": "instrument_id", "rainfall": "gauge_id"}.get(table)
        if id_column is None:
            raise StoreError(f"no such measurement table {table!r}")
        row = self.conn.execute(
            f"DELETE FROM {table} WHERE {id_column} = ? AND time_utc = ? AND source_file_id = ? RETURNING quality",
            (instrument_id, time_utc, file_id),
        ).fetchone()
        return None if row is None else row[0]

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

    def rain_before(self, gauge_id: str, before_utc: str) -> tuple:
        """(base time, base raw, last time, last raw) of a gauge before a time: its last reading
        that can be the base of a running total (quality 'ok' or 'no_baseline') and its last
        reading of any quality; None for what is not stored."""
        base = self.conn.execute(
            "SELECT time_utc, raw_value FROM rainfall WHERE gauge_id = ? AND time_utc < ? "
            "AND quality IN ('ok', 'no_baseline') ORDER BY time_utc DESC LIMIT 1",
            (gauge_id, before_utc),
        ).fetchone() or (None, None)
        last = self.conn.execute(
            "SELECT time_utc, raw_value FROM rainfall WHERE gauge_id = ? AND time_utc < ? "
            "ORDER BY time_utc DESC LIMIT 1",
            (gauge_id, before_utc),
        ).fetchone() or (None, None)
        return (*base, *last)

    def rain_times_before(self, gauge_id: str, before_utc: str, count: int) -> list[str]:
        """Times of a gauge's last ``count`` readings (any quality) before a time, oldest first."""
        rows = self.conn.execute(
            "SELECT time_utc FROM rainfall WHERE gauge_id = ? AND time_utc < ? ORDER BY time_utc DESC LIMIT ?",
            (gauge_id, before_utc, count),
        ).fetchall()
        return [row[0] for row in reversed(rows)]

    def rain_rows_from(self, gauge_id: str, start_utc: str) -> list[tuple]:
        """(time_utc, raw_value, rain_mm, quality, gap_start_utc) of a gauge from a time on, in
        time order."""
        return self.conn.execute(
            "SELECT time_utc, raw_value, rain_mm, quality, gap_start_utc FROM rainfall WHERE gauge_id = ? "
            "AND time_utc >= ? ORDER BY time_utc",
            (gauge_id, start_utc),
        ).fetchall()

    def set_reading_quality(self, instrument_id: str, rows: Iterable[Sequence]) -> int:
        """Set the quality of stored piezometer readings, rows (quality, time_utc) (inside atomic())."""
        return self.conn.executemany(
            "UPDATE readings SET quality = ? WHERE instrument_id = ? AND time_utc = ?",
            ((quality, instrument_id, time) for quality, time in rows),
        ).rowcount

    def set_rain(self, gauge_id: str, rows: Iterable[Sequence]) -> int:
        """Set (rain_mm, quality, gap_start_utc, time_utc) of stored readings of a gauge (inside
        atomic())."""
        return self.conn.executemany(
            "UPDATE rainfall SET rain_mm = ?, quality = ?, gap_start_utc = ? WHERE gauge_id = ? AND time_utc = ?",
            ((rain, quality, gap, gauge_id, time) for rain, quality, gap, time in rows),
        ).rowcount

    # --- queries ------------------------------------------------------------------------------

    def rejected_rows(self, start_utc: str | None = None, end_utc: str | None = None) -> list[dict]:
        """Rejected rows of the files ingested in a period (by the file's ``ingested_utc``), in
        file and line order: file name, file id, ingested_utc, line, instrument_id, reason,
        raw_text."""
        sql = (
            "SELECT f.name AS file, f.id AS file_id, f.ingested_utc, r.line, r.instrument_id, r.reason, "
            "r.raw_text FROM rejected_rows r JOIN ingested_files f ON f.id = r.file_id WHERE 1 = 1"
        )
        where, params = _between("f.ingested_utc", start_utc, end_utc)
        return list(self.db.query(sql + where + " ORDER BY f.id, r.line IS NULL, r.line, r.id", params))

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
        where, params = _between("t.time_utc", start_utc, end_utc)
        return list(self.db.query(sql + where + " ORDER BY t.time_utc", [instrument_id, *params]))

    def readings_with_corrections(self, instrument_id: str, start_utc: str | None = None,
                                  end_utc: str | None = None) -> list[dict]:  # fmt: skip
        """``readings`` with, on each row, ``superseded``: the values corrections replaced at
        that time (oldest first; migration 7), an empty list for a reading never corrected."""
        rows = self.readings(instrument_id, start_utc, end_utc)
        replaced: dict[str, list[dict]] = {}
        for old in self.superseded_values(instrument_id, start_utc, end_utc):
            replaced.setdefault(old["time_utc"], []).append({
                key: old[key] for key in ("raw_value", "quality", "source_file", "source_line", "replaced_by_file",
                                          "replaced_by_line", "corrected_by", "reason", "corrected_utc")
            })  # fmt: skip
        for row in rows:
            row["superseded"] = replaced.get(row["time_utc"], [])
        return rows

    def instrument_summary(self, at_or_before_utc: str = "9999") -> list[dict]:
        """Per configured instrument: kind, newest reading time, count, count by quality (of the
        readings at or before a time; default all)."""
        rows = []
        for instrument_id, kind in self.conn.execute("SELECT id, kind FROM instruments ORDER BY id"):
            table, id_column = ("rainfall", "gauge_id") if kind == "rain_gauge" else ("readings", "instrument_id")
            newest, count, flagged = self.conn.execute(
                f"SELECT MAX(time_utc), COUNT(*), COALESCE(SUM(quality != 'ok'), 0) FROM {table} "
                f"WHERE {id_column} = ? AND time_utc <= ?",
                (instrument_id, at_or_before_utc),
            ).fetchone()
            rows.append(
                {"instrument_id": instrument_id, "kind": kind, "newest_utc": newest,
                 "readings": count, "flagged": flagged}  # fmt: skip
            )
        return rows

    def files_with_readings(self, instrument_ids: Sequence[str], start_utc: str, end_utc: str) -> list[dict]:
        """The ingested files that hold readings (piezometer or rain) of the instruments in
        [start_utc, end_utc]: name, ingested_utc, row counts, and the number, first and last
        time of those readings; in order of their first reading."""
        marks = ", ".join("?" * len(instrument_ids))
        if not instrument_ids:
            return []
        return list(self.db.query(
            "WITH used AS (SELECT source_file_id AS id, time_utc FROM readings WHERE instrument_id IN "
            f"({marks}) AND time_utc >= ? AND time_utc <= ? UNION ALL SELECT source_file_id, time_utc "
            f"FROM rainfall WHERE gauge_id IN ({marks}) AND time_utc >= ? AND time_utc <= ?) "
            "SELECT f.id, f.name, f.ingested_utc, f.status, f.rows_accepted, f.rows_rejected, "
            "f.rows_flagged, COUNT(*) AS readings_in_period, MIN(u.time_utc) AS first_utc, "
            "MAX(u.time_utc) AS last_utc FROM used u JOIN ingested_files f ON f.id = u.id "
            "GROUP BY f.id ORDER BY first_utc, f.id",
            [*instrument_ids, start_utc, end_utc, *instrument_ids, start_utc, end_utc],
        ))

    def counts(self) -> dict[str, int]:
        tables = ("ingested_files", "readings", "rainfall", "rejected_rows")
        return {t: self.conn.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0] for t in tables}

    # --- section parameter versions (back-analysis issue) ------------------------------------

    def latest_section_version(self, section_id: str) -> dict | None:
        """The newest ``section_versions`` row of a section (with its row ``id``), or None."""
        rows = list(self.db.query(
            "SELECT * FROM section_versions WHERE section_id = ? ORDER BY version DESC LIMIT 1",
            [section_id],
        ))
        return rows[0] if rows else None

    def section_version_rows(self, section_id: str) -> list[dict]:
        """Every stored parameter version of a section, oldest first."""
        return list(self.db.query(
            "SELECT * FROM section_versions WHERE section_id = ? ORDER BY version", [section_id]
        ))

    def section_version_row(self, version_id: int) -> dict | None:
        """One ``section_versions`` row by its row id (what assessments refer to), or None."""
        rows = list(self.db.query("SELECT * FROM section_versions WHERE id = ?", [version_id]))
        return rows[0] if rows else None

    def add_back_analysis(self, row: dict) -> int:
        """Insert a ``back_analyses`` row (migration 5; inside atomic()); return its id."""
        columns = ("case_id", "case_file", "case_sha256", "section_id", "failed_utc", "material",
                   "form", "method", "best_json", "result_json", "ran_utc")
        cursor = self.conn.execute(
            f"INSERT INTO back_analyses ({', '.join(columns)}) "
            f"VALUES ({', '.join('?' * len(columns))})",
            tuple(row[c] for c in columns),
        )
        return cursor.lastrowid

    def back_analysis_row(self, back_analysis_id: int) -> dict | None:
        rows = list(self.db.query("SELECT * FROM back_analyses WHERE id = ?", [back_analysis_id]))
        return rows[0] if rows else None

    def add_calibration(self, row: dict) -> int:
        """Insert a ``calibrations`` row (migrations 5 and 10; inside atomic()); return its id."""
        columns = ("back_analysis_id", "section_id", "section_version_id", "material",
                   "strength_json", "case_id", "failed_utc", "calibrated_by", "created_utc",
                   "checks_json", "override_reason")
        cursor = self.conn.execute(
            f"INSERT INTO calibrations ({', '.join(columns)}) "
            f"VALUES ({', '.join('?' * len(columns))})",
            tuple(row[c] for c in columns),
        )
        return cursor.lastrowid

    def assessments_by_fos(self, section_id: str, at_or_before_utc: str) -> list[dict]:
        """The section's assessments with a usable factor of safety (converged, from live
        readings: status 'ok') at or before a time, lowest factor of safety first."""
        return list(self.db.query(
            "SELECT * FROM assessments WHERE section_id = ? AND time_utc <= ? AND fos IS NOT NULL "
            "AND status = 'ok' ORDER BY fos, time_utc, id", [section_id, at_or_before_utc]))

    def calibration_rows(self, section_id: str | None = None) -> list[dict]:
        sql, params = "SELECT * FROM calibrations", []
        if section_id is not None:
            sql, params = sql + " WHERE section_id = ?", [section_id]
        return list(self.db.query(sql + " ORDER BY id", params))

    # --- water lines and rainfall response (groundwater issue) -------------------------------

    def latest_reading_before(self, instrument_id: str, before_utc: str) -> dict | None:
        """The last stored reading of a piezometer strictly before a time, any quality, with the
        name of its file; None when there is none."""
        rows = list(self.db.query(
            "SELECT t.*, f.name AS source_file FROM readings t "
            "JOIN ingested_files f ON f.id = t.source_file_id "
            "WHERE t.instrument_id = ? AND t.time_utc < ? ORDER BY t.time_utc DESC LIMIT 1",
            [instrument_id, before_utc],
        ))
        return rows[0] if rows else None

    def insert_water_line(self, row: dict) -> int:
        """Insert one ``water_lines`` row (keys = its columns but id); return its id."""
        columns = [c for c in row if c != "id"]
        cursor = self.conn.execute(
            f"INSERT INTO water_lines ({', '.join(columns)}) "
            f"VALUES ({', '.join('?' * len(columns))})",
            [row[c] for c in columns],
        )
        return cursor.lastrowid

    def water_line_rows(
        self, *, assessment_id: int | None = None, section_id: str | None = None
    ) -> list[dict]:
        """Stored water lines of an assessment or a section, in time and name order."""
        sql, params = _filtered("SELECT * FROM water_lines WHERE 1 = 1",
                                (("assessment_id = ?", assessment_id), ("section_id = ?", section_id)))
        return list(self.db.query(sql + " ORDER BY time_utc, line_name, id", params))

    def insert_response_model(self, row: dict) -> int:
        """Insert one ``response_models`` row (keys = its columns but id); return its id."""
        columns = [c for c in row if c != "id"]
        cursor = self.conn.execute(
            f"INSERT INTO response_models ({', '.join(columns)}) "
            f"VALUES ({', '.join('?' * len(columns))})",
            [row[c] for c in columns],
        )
        return cursor.lastrowid

    def latest_response_model(self, instrument_id: str, at_utc: str | None = None) -> dict | None:
        """The newest response model of a piezometer whose record ends at or before ``at_utc``
        (default: any), or None."""
        sql, params = "SELECT * FROM response_models WHERE instrument_id = ?", [instrument_id]
        if at_utc is not None:
            sql += " AND record_end_utc <= ?"
            params.append(at_utc)
        rows = list(self.db.query(sql + " ORDER BY calibrated_utc DESC, id DESC LIMIT 1", params))
        return rows[0] if rows else None


    # --- notification delivery (migration 4; watch.notify) ----------------------------------

    def outbox_rows_without_deliveries(self) -> list[dict]:
        """Outbox rows nobody has queued for delivery yet, oldest first."""
        return list(self.db.query(
            "SELECT * FROM notification_outbox o WHERE NOT EXISTS "
            "(SELECT 1 FROM deliveries d WHERE d.outbox_id = o.id) ORDER BY o.id"
        ))

    def alert_receivers(self, alert_id: int) -> list[tuple[str, str]]:
        """(channel, recipient) of every delivery made for earlier rows of an alert."""
        return [tuple(r) for r in self.conn.execute(
            "SELECT DISTINCT d.channel, d.recipient FROM deliveries d "
            "JOIN notification_outbox o ON o.id = d.outbox_id WHERE o.alert_id = ? "
            "ORDER BY d.id", (alert_id,),
        )]

    def add_deliveries(self, rows: Iterable[Sequence]) -> int:
        """rows: (outbox_id, channel, recipient, round, created_utc); pending and due at once.
        A delivery already queued is left alone. Return the number added."""
        return self.conn.executemany(
            "INSERT INTO deliveries (outbox_id, channel, recipient, round, status, "
            "next_attempt_utc, created_utc) VALUES (?, ?, ?, ?, 'pending', ?5, ?5) "
            "ON CONFLICT (outbox_id, channel, recipient, round) DO NOTHING",
            rows,
        ).rowcount

    def standing_alarm_deliveries(self, now_utc: str, sent_before_utc: str) -> list[tuple]:
        """(outbox_id, channel, recipient, round) of the newest delivery, to each receiver, of
        each standing alarm sent at or before ``sent_before_utc``. An alarm stands when its
        alert fires, is neither acknowledged in this episode nor shelved, and the newest
        change people were told of is 'firing', 'escalated' or 'data'."""
        return [tuple(r) for r in self.conn.execute(
            "WITH newest AS (SELECT alert_id, MAX(id) AS id FROM notification_outbox "
            "  WHERE alert_id IS NOT NULL "
            "  AND kind IN ('firing', 'escalated', 'data', 'resolved', 'de-escalated') GROUP BY alert_id), "
            "standing AS (SELECT n.id FROM newest n JOIN notification_outbox o ON o.id = n.id "
            "  JOIN alerts a ON a.id = n.alert_id "
            "  WHERE o.kind IN ('firing', 'escalated', 'data') AND a.state = 'firing' "
            "  AND (a.acknowledged_episode IS NULL OR a.acknowledged_episode < a.episode) "
            "  AND (a.shelved_until_utc IS NULL OR a.shelved_until_utc <= ?)), "
            "last AS (SELECT d.outbox_id, d.channel, d.recipient, MAX(d.round) AS round "
            "  FROM deliveries d JOIN standing s ON s.id = d.outbox_id "
            "  GROUP BY d.outbox_id, d.channel, d.recipient) "
            "SELECT l.outbox_id, l.channel, l.recipient, l.round FROM last l "
            "JOIN deliveries d ON d.outbox_id = l.outbox_id AND d.channel = l.channel "
            "  AND d.recipient = l.recipient AND d.round = l.round "
            "WHERE d.status = 'sent' AND d.sent_utc <= ? ORDER BY l.outbox_id",
            (now_utc, sent_before_utc),
        )]

    def ungrouped_deliveries(self) -> list[tuple]:
        """(delivery id, site_id, channel, recipient) of pending deliveries not yet in a message."""
        return [tuple(r) for r in self.conn.execute(
            "SELECT d.id, o.site_id, d.channel, d.recipient FROM deliveries d "
            "JOIN notification_outbox o ON o.id = d.outbox_id "
            "WHERE d.status = 'pending' AND d.message_key IS NULL ORDER BY d.id"
        )]

    def last_grouped_utc(self, site_id: str, channel: str, recipient: str) -> str | None:
        """When the newest message of a site to a receiver was formed, or None."""
        return self.conn.execute(
            "SELECT MAX(d.grouped_utc) FROM deliveries d JOIN notification_outbox o "
            "ON o.id = d.outbox_id WHERE o.site_id IS ? AND d.channel = ? AND d.recipient = ?",
            (site_id, channel, recipient),
        ).fetchone()[0]

    def group_deliveries(self, delivery_ids: Sequence[int], message_key: str, grouped_utc: str) -> None:
        """Put deliveries into one message, due at once."""
        self.conn.executemany(
            "UPDATE deliveries SET message_key = ?, grouped_utc = ?, next_attempt_utc = ? "
            "WHERE id = ? AND message_key IS NULL",
            [(message_key, grouped_utc, grouped_utc, i) for i in delivery_ids],
        )

    def due_delivery_messages(self, now_utc: str) -> list[str]:
        """Keys of the pending messages whose next attempt is due, oldest first."""
        return [r[0] for r in self.conn.execute(
            "SELECT message_key FROM deliveries WHERE status = 'pending' AND message_key IS NOT NULL "
            "GROUP BY message_key HAVING MIN(next_attempt_utc) <= ? ORDER BY MIN(id)",
            (now_utc,),
        )]

    def delivery_message_rows(self, message_key: str) -> list[dict]:
        """The pending deliveries of one message with their outbox rows."""
        return list(self.db.query(
            "SELECT d.id AS delivery_id, d.channel, d.recipient, d.round, d.attempts, "
            "d.grouped_utc, o.id AS outbox_id, o.idempotency_key, o.site_id, o.section_id, "
            "o.alert_id, o.kind, o.level, o.subject, o.body, o.payload_json, o.created_utc "
            "FROM deliveries d JOIN notification_outbox o ON o.id = d.outbox_id "
            "WHERE d.message_key = ? AND d.status = 'pending' ORDER BY o.id, d.round",
            [message_key],
        ))

    def record_delivery_attempt(self, message_key: str, channel: str, recipient: str, attempt: int,
                                time_utc: str, error: str | None, outbox_ids: list[int],
                                next_attempt_utc: str, give_up: bool) -> None:  # fmt: skip
        """Record one send attempt of a message and move its deliveries on (inside atomic())."""
        self.conn.execute(
            "INSERT INTO delivery_attempts (message_key, channel, recipient, attempt, time_utc, "
            "status, error, outbox_ids_json) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (message_key, channel, recipient, attempt, time_utc, "sent" if error is None else "failed",
             error, json.dumps(outbox_ids)),
        )  # fmt: skip
        if error is None:
            self.conn.execute(
                "UPDATE deliveries SET status = 'sent', attempts = ?, sent_utc = ?, last_error = NULL "
                "WHERE message_key = ? AND status = 'pending'",
                (attempt, time_utc, message_key),
            )
        else:
            self.conn.execute(
                "UPDATE deliveries SET status = ?, attempts = ?, next_attempt_utc = ?, last_error = ? "
                "WHERE message_key = ? AND status = 'pending'",
                ("failed" if give_up else "pending", attempt, next_attempt_utc, error, message_key),
            )

    def pending_delivery_count(self) -> int:
        return self.conn.execute("SELECT COUNT(*) FROM deliveries WHERE status = 'pending'").fetchone()[0]

    def requeue_failed_deliveries(self, now_utc: str, message_key: str | None = None) -> int:
        """Failed deliveries (of one message, or all) pending again with a fresh count of
        attempts; the attempts made stay in delivery_attempts. Return the number requeued."""
        sql = "UPDATE deliveries SET status = 'pending', attempts = 0, next_attempt_utc = ? WHERE status = 'failed'"
        params: list = [now_utc]
        if message_key is not None:
            sql += " AND message_key = ?"
            params.append(message_key)
        return self.conn.execute(sql, params).rowcount

    def delivery_messages(self, status: str | None = None, limit: int = 100) -> list[dict]:
        """One row per message, newest first: receiver, status, notification count, attempts,
        last error, formed and sent times."""
        sql = (
            "SELECT message_key, channel, recipient, MIN(status) AS status, COUNT(*) AS notifications, "
            "MAX(attempts) AS attempts, MAX(last_error) AS last_error, MIN(grouped_utc) AS grouped_utc, "
            "MAX(next_attempt_utc) AS next_attempt_utc, MAX(sent_utc) AS sent_utc FROM deliveries "
            "WHERE message_key IS NOT NULL GROUP BY message_key"
        )
        params: list = []
        if status is not None:
            sql += " HAVING MIN(status) = ?"
            params.append(status)
        return list(self.db.query(sql + " ORDER BY MIN(id) DESC LIMIT ?", [*params, limit]))
    # --- assessment cycle, alerts and inspections (migration 3; watch.cycle) -------------------

    def insert_assessment(self, row: dict) -> int:
        """Add an ``assessments`` row (columns as keys); return its id (inside atomic())."""
        return self._insert_row("assessments", row)

    def last_assessment(self, section_id: str, at_or_before_utc: str | None = None,
                        with_fos: bool = False) -> dict | None:  # fmt: skip
        """The newest assessment of a section (at or before a time; with ``with_fos``, the newest
        whose factor of safety is usable: converged and from live readings, status 'ok')."""
        sql, params = "SELECT * FROM assessments WHERE section_id = ?", [section_id]
        if at_or_before_utc is not None:
            sql += " AND time_utc <= ?"
            params.append(at_or_before_utc)
        if with_fos:
            sql += " AND fos IS NOT NULL AND status = 'ok'"
        rows = list(self.db.query(sql + " ORDER BY time_utc DESC, id DESC LIMIT 1", params))
        return rows[0] if rows else None

    def cached_search(self, section_id: str) -> dict | None:
        rows = list(self.db.query("SELECT * FROM search_cache WHERE section_id = ?", [section_id]))
        return rows[0] if rows else None

    def save_search(self, section_id: str, version_id: int | None, time_utc: str, search_json: str,
                    created_utc: str) -> None:  # fmt: skip
        """Keep the section's latest full search (replaces the previous one; inside atomic())."""
        self.conn.execute(
            "INSERT INTO search_cache (section_id, section_version_id, time_utc, search_json, "
            "created_utc) VALUES (?, ?, ?, ?, ?) ON CONFLICT (section_id) DO UPDATE SET "
            "section_version_id = excluded.section_version_id, time_utc = excluded.time_utc, "
            "search_json = excluded.search_json, created_utc = excluded.created_utc",
            (section_id, version_id, time_utc, search_json, created_utc),
        )

    def alert_rows(self, section_id: str | None = None, states: Sequence[str] | None = None) -> list[dict]:
        """Stored alerts, by section and rule."""
        sql, params = "SELECT * FROM alerts WHERE 1 = 1", []
        if section_id is not None:
            sql += " AND section_id = ?"
            params.append(section_id)
        if states:
            sql += f" AND state IN ({', '.join('?' * len(states))})"
            params.extend(states)
        return list(self.db.query(sql + " ORDER BY section_id, rank DESC, rule", params))

    def alert_row(self, alert_id: int) -> dict | None:
        rows = list(self.db.query("SELECT * FROM alerts WHERE id = ?", [alert_id]))
        return rows[0] if rows else None

    def add_alert(self, row: dict) -> int:
        """Add an alert (one per section and rule; inside atomic()); return its id."""
        return self._insert_row("alerts", row)

    def update_alert(self, alert_id: int, values: dict) -> None:
        """Set columns of an alert (inside atomic())."""
        unknown = set(values) - _ALERT_COLUMNS
        if unknown:
            raise StoreError(f"alerts has no column(s) {sorted(unknown)}")
        assignments = ", ".join(f"{column} = ?" for column in values)
        self.conn.execute(f"UPDATE alerts SET {assignments} WHERE id = ?", (*values.values(), alert_id))

    def add_alert_event(self, row: dict) -> int:
        return self._insert_row("alert_events", row)

    def alert_events(self, alert_id: int | None = None) -> list[dict]:
        sql, params = "SELECT * FROM alert_events", []
        if alert_id is not None:
            sql, params = sql + " WHERE alert_id = ?", [alert_id]
        return list(self.db.query(sql + " ORDER BY id", params))

    def alert_event_rows(self, start_utc: str | None = None, end_utc: str | None = None,
                         section_id: str | None = None, alert_ids: Sequence[int] | None = None) -> list[dict]:  # fmt: skip
        """Alert events in [start_utc, end_utc] (either open), in time order, each with its
        alert's section, rule, kind, level and rank (``event_id`` is the event's row id)."""
        sql, params = _filtered(
            "SELECT e.*, e.id AS event_id, a.section_id, a.rule, a.kind, a.level, a.rank, a.quantity "
            "FROM alert_events e JOIN alerts a ON a.id = e.alert_id WHERE 1 = 1",
            (("e.time_utc >= ?", start_utc), ("e.time_utc <= ?", end_utc), ("a.section_id = ?", section_id)))
        if alert_ids is not None:
            sql += f" AND e.alert_id IN ({', '.join('?' * len(alert_ids))})"
            params.extend(alert_ids)
        return list(self.db.query(sql + " ORDER BY e.time_utc, e.id", params))

    def queue_notification(self, row: dict) -> int | None:
        """Add a ``notification_outbox`` row; an idempotency key already queued is left alone
        (returns None then). Inside atomic(), with the state change that causes it."""
        return self._insert_row("notification_outbox", row, conflict="idempotency_key")

    def outbox(self, alert_id: int | None = None) -> list[dict]:
        sql, params = "SELECT * FROM notification_outbox", []
        if alert_id is not None:
            sql, params = sql + " WHERE alert_id = ?", [alert_id]
        return list(self.db.query(sql + " ORDER BY id", params))

    def open_inspection(self, row: dict) -> int | None:
        """Add an inspection request; one per alert and firing episode (None when it exists)."""
        return self._insert_row("inspections", row, conflict="alert_id, episode")

    def inspection_rows(self, open_only: bool = False, section_id: str | None = None) -> list[dict]:
        sql, params = "SELECT * FROM inspections WHERE 1 = 1", []
        if open_only:
            sql += " AND status = 'open'"
        if section_id is not None:
            sql += " AND section_id = ?"
            params.append(section_id)
        return list(self.db.query(sql + " ORDER BY requested_utc, id", params))

    def close_inspection(self, inspection_id: int, completed_utc: str, closed_by: str, note: str) -> None:
        self.conn.execute(
            "UPDATE inspections SET status = 'closed', completed_utc = ?, closed_by = ?, notes = ? "
            "WHERE id = ?",
            (completed_utc, closed_by, note, inspection_id),
        )

    def newest_reading(self, instrument_id: str, at_or_before_utc: str) -> dict | None:
        """The newest stored reading of a piezometer or rain gauge at or before a time, any
        quality: ``time_utc``, ``quality``, ``value`` (head_m or rain_mm)."""
        kind = self.conn.execute("SELECT kind FROM instruments WHERE id = ?", (instrument_id,)).fetchone()
        table, column, value = ("readings", "instrument_id", "head_m")
        if kind and kind[0] == "rain_gauge":
            table, column, value = ("rainfall", "gauge_id", "rain_mm")
        rows = list(self.db.query(
            f"SELECT time_utc, quality, {value} AS value FROM {table} WHERE {column} = ? "
            "AND time_utc <= ? ORDER BY time_utc DESC LIMIT 1",
            [instrument_id, at_or_before_utc],
        ))
        return rows[0] if rows else None

    def start_cycle(self, at_utc: str, started_utc: str) -> int:
        return self._insert_row("cycles", {"at_utc": at_utc, "started_utc": started_utc})

    def finish_cycle(self, cycle_id: int, finished_utc: str, report_json: str) -> None:
        self.conn.execute("UPDATE cycles SET finished_utc = ?, report_json = ? WHERE id = ?",
                          (finished_utc, report_json, cycle_id))  # fmt: skip

    def last_ingest_failures(self) -> tuple[str, list[str]] | None:
        """(when, what) of the newest finished cycle whose ingest failed: its ``at_utc`` and the
        lines of its report's ``ingest_failures``; None when no cycle's ingest ever failed."""
        row = self.conn.execute(
            "SELECT at_utc, json_extract(report_json, '$.ingest_failures') FROM cycles "
            "WHERE finished_utc IS NOT NULL AND json_array_length(report_json, '$.ingest_failures') > 0 "
            "ORDER BY id DESC LIMIT 1"
        ).fetchone()
        return None if row is None else (row[0], json.loads(row[1]))

    def _insert_row(self, table: str, row: dict, conflict: str | None = None) -> int | None:
        # Column names come from our own code, never from input; values are ? parameters.
        columns = ", ".join(row)
        sql = f"INSERT INTO {table} ({columns}) VALUES ({', '.join('?' * len(row))})"
        if conflict:
            sql += f" ON CONFLICT ({conflict}) DO NOTHING"
        cursor = self.conn.execute(sql, tuple(row.values()))
        return cursor.lastrowid if cursor.rowcount else None


def _between(column: str, start_utc: str | None, end_utc: str | None) -> tuple[str, list[str]]:
    """SQL conditions (each starting with AND) and parameters for ``start <= column <= end``;
    a bound that is None is left open. ``column`` comes from our own code, never from input."""
    sql, params = "", []
    if start_utc is not None:
        sql, params = sql + f" AND {column} >= ?", [*params, start_utc]
    if end_utc is not None:
        sql, params = sql + f" AND {column} <= ?", [*params, end_utc]
    return sql, params


def _filtered(sql: str, conditions: Iterable[tuple[str, object]]) -> tuple[str, list]:
    """``sql`` (ending in a WHERE clause) with ``AND condition`` for each (condition, value)
    whose value is not None, and the ? parameters."""
    params = []
    for condition, value in conditions:
        if value is not None:
            sql += f" AND {condition}"
            params.append(value)
    return sql, params


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
