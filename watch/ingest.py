"""Ingest of feed files: every good reading stored exactly once, every bad row reported, no file
ever lost, even when the process is killed half-way.

The life of a file::

    incoming/NAME  --claim (atomic rename)-->  incoming/.claimed/NAME
        --one transaction: file record + readings + rejected rows, COMMIT (synchronous FULL)-->
    processed/NAME            (something could be read)
    rejected/NAME + NAME.reason.txt   (nothing could be read)

A crash before COMMIT leaves the file claimed and the store without a trace of it; a crash
after COMMIT leaves it claimed with its record stored. ``reconcile`` (run at the start of every
ingest) finishes the move in the second case and puts the file back into incoming/ in the first.
Nothing is ever deleted. A file whose checksum matches an ingested one is archived without
re-reading; a reading whose (instrument, time) is already stored is not stored again, and a
different value for the same key is reported as a rejected row (the stored value stays): each
reading is stored exactly once. Two deliberate exceptions leave a record of their own
(``ingested_files.purpose``): ``apply_corrections`` reads a corrected re-delivery and replaces
the stored values it differs from, keeping each replaced one in ``superseded_values`` with who,
when and why; ``reread`` reads an archived file again after a configuration fix and stores
only what is not stored yet.
"""

from __future__ import annotations

import errno
import fcntl
import hashlib
import json
import os
import shutil
import sqlite3
import stat
import time
from dataclasses import dataclass, field, replace
from datetime import datetime, timedelta, timezone
from itertools import repeat
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from watch.clock import Clock
from watch.config import FeedSpec, Piezometer, SiteConfig
from watch.errors import BusyError, FeedError, StoreError, UserError, WorkspaceError
from watch.feeds import FeedReader, RowProblem, bounded_lines, clipped, open_feed_bytes, wide_encoding
from watch.quality import (
    Previous,
    USUAL_INTERVAL_READINGS,
    RainBefore,
    assess_piezometer,
    assess_rain_gauge,
    rain_record,
    time_window_problems,
)
from watch.store import Store, parse_utc_text, utc_text
from watch.text import printable
from watch.workspace import Workspace

__all__ = [
    "FileSummary", "IngestReport", "Correction", "ingest", "reread", "apply_corrections", "reconcile",
    "record_first_look", "look_at_incoming", "settle_rain_record", "settle_piezometer_flags", "SUMMARY_ROWS",
    "TEMPORARY_SUFFIXES", "SIGHTINGS_FILE",
]  # fmt: skip

#: Names that loggers and copy tools use while a file is still being written.
TEMPORARY_SUFFIXES = (".tmp", ".part", ".partial", ".filepart", ".crdownload", ".temp", "~")

#: Rows per executemany call: bounds memory, costs nothing measurable in speed.
_INSERT_BATCH = 50_000

#: Files smaller than this get no progress bar.
_PROGRESS_MIN_BYTES = 1 << 20

#: Rejected rows listed in a rejected file's reason file.
_REASON_FILE_ROWS = 20

#: Rejected rows listed (line, instrument, reason) in a file's summary (``ingest --json``); all
#: of them stay in the store (``slipwatch rejected-rows``).
SUMMARY_ROWS = 1000

#: Errors of the store or the disk rather than of the file being read: the file is put back
#: into incoming/ for the next pass instead of being rejected.
_STORE_OR_DISK_ERRORS = (sqlite3.Error, StoreError, OSError)

#: First looks at the files waiting in incoming/ (name -> size, mtime, when seen), kept
#: between passes in the workspace: a file is taken once it has not changed for
#: ``min_file_age_seconds`` of the ingest's clock.
SIGHTINGS_FILE = ".ingest-sightings.json"


@dataclass
class FileSummary:
    name: str
    status: str  # 'ingested' | 'rejected' | 'already ingested' | 'refused' | 'failed'
    feed: str | None = None
    accepted: int = 0
    duplicates: int = 0
    rejected: int = 0
    flagged: int = 0
    missing: int = 0  # empty cells and cells holding a missing-value marker
    corrected: int = 0  # stored values a correction replaced (kept in superseded_values)
    repeated_times_resolved: int = 0  # lines at a local time that occurs twice, placed by row order
    reason: str | None = None
    archived_as: str | None = None
    notes: list[str] = field(default_factory=list)
    #: The first SUMMARY_ROWS rejected rows: {"line", "instrument_id", "reason"}.
    rejected_rows: list[dict] = field(default_factory=list)
    unexpected: bool = False  # rejected because reading it raised an error nobody foresaw

    @property
    def failed(self) -> bool:
        """The watch itself failed on this file (an unforeseen error, or the store or disk
        failing), as opposed to a file whose content is bad."""
        return self.status == "failed" or self.unexpected

    def line(self) -> str:
        """One summary line; control characters of names and values are escaped."""
        return printable(self._line())

    def _line(self) -> str:
        if self.status == "already ingested":
            return f"{self.name}: already ingested ({self.reason}); archived as {self.archived_as}"
        if self.status == "refused":
            return f"{self.name}: REFUSED: {self.reason}; moved to {self.archived_as}"
        if self.status == "failed":
            return f"{self.name}: FAILED: {self.reason}"
        counts = (
            f"{self.accepted} accepted, {self.duplicates} duplicates, {self.rejected} rejected, "
            f"{self.flagged} flagged, {self.missing} empty"
        )
        if self.corrected:
            counts += f", {self.corrected} corrected (the values replaced are kept)"
        if self.repeated_times_resolved:
            counts += (f", {self.repeated_times_resolved} at local times that occur twice (clocks went back) "
                       "placed by row order")  # fmt: skip
        if self.status == "rejected":
            return f"{self.name}: REJECTED: {self.reason} ({counts}); moved to {self.archived_as}"
        notes = "".join(f"; note: {n}" for n in self.notes)
        return f"{self.name}: {counts}; archived as {self.archived_as}{notes}"


@dataclass
class IngestReport:
    files: list[FileSummary] = field(default_factory=list)
    waiting: list[str] = field(default_factory=list)  # left for the next pass, with the reason
    reconciled: list[str] = field(default_factory=list)
    #: Files left waiting only for their second look: name -> the earliest time (by the
    #: ingest's clock) at which a pass takes them if they have not changed by then.
    second_looks: dict[str, datetime] = field(default_factory=dict)

    @property
    def second_look_due(self) -> datetime | None:
        """When the first of the files waiting for their second look can be taken, or None."""
        return min(self.second_looks.values(), default=None)

    @property
    def failures(self) -> list[FileSummary]:
        """Files the watch itself failed on (see FileSummary.failed)."""
        return [f for f in self.files if f.failed]


def ingest(workspace: Workspace, files: list[Path | str] | None = None, now: datetime | None = None,
           progress: bool = True, echo=None) -> IngestReport:  # fmt: skip
    """Ingest the named files, or every file ready in the drop folder.

    Named files are copied in (the originals stay where they are); drop-folder files are
    claimed by renaming them. ``echo`` (e.g. ``click.echo``) receives one summary line per file
    as soon as it is done.
    """
    now = now or datetime.now(timezone.utc)
    report = IngestReport()
    with _IngestLock(workspace):
        config = workspace.config()
        with workspace.open_store() as store:
            with store.atomic():
                store.sync_site(config, utc_text(now))
            report.reconciled = reconcile(workspace, store)
            if files:
                claims = [_claim_named(workspace, Path(f)) for f in files]
            else:
                claims = _claim_waiting(workspace, config, now, report)
            for refused in report.files if echo else ():
                echo(refused.line())
            for claim in claims:
                summary = _ingest_one(workspace, store, config, claim, now, progress)
                report.files.append(summary)
                if echo:
                    echo(summary.line())
    report.waiting = [printable(line) for line in report.waiting]
    report.reconciled = [printable(line) for line in report.reconciled]
    return report


def _ingest_one(workspace: Workspace, store: Store, config: SiteConfig, claim: _Claim, now: datetime,
                progress: bool) -> FileSummary:  # fmt: skip
    """Ingest one claimed file whatever happens: should the store or the disk fail, the file
    is left for the next pass (back in incoming/, or claimed for the next ingest to settle when
    its record was committed) and the summary says ``failed``; the other files are still
    ingested."""
    try:
        return _ingest_claimed(workspace, store, config, claim, now, progress)
    except _STORE_OR_DISK_ERRORS as error:
        return FileSummary(claim.name, "failed", reason=f"could not be ingested ({type(error).__name__}: {error}); "
                                                        "left for the next pass")  # fmt: skip


# --- claiming -------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Claim:
    path: Path  # in incoming/.claimed/
    name: str  # the delivered name
    marker: Path | None = None  # done-marker left in incoming/ until the file is archived
    complete: bool = False  # the deliverer marked it finished: a last line without line end is a row


def _claim_waiting(workspace: Workspace, config: SiteConfig, now: datetime, report: IngestReport) -> list[_Claim]:
    """Claim the files of incoming/ that are finished: a regular file (never a link, device
    or folder, which are moved to rejected/ unread) that either has its done-marker or has
    kept its size and modification time between two looks at least ``min_file_age_seconds``
    apart and ends with a line end. The looks are timed by ``now`` (the ingest's clock),
    never by the file's own time stamp, which a copy may carry over from elsewhere."""
    settings = config.ingest
    done = settings.done_suffix
    first_looks = _load_sightings(workspace)
    looks: dict[str, list] = {}
    claims = []
    for path, info, kind in _delivered(workspace, done):
        name = path.name
        if kind == "not regular":
            report.files.append(_refuse(workspace, path, info))
            continue
        if kind == "marker":
            if not path.with_name(name[: -len(done)]).exists():
                _archive_orphan_marker(workspace, path, settings.min_file_age_seconds)
            continue
        if kind == "temporary":
            report.waiting.append(f"{name} (temporary name: still being written)")
            continue
        marker = path.with_name(name + done) if done else None
        marked = kind == "marked"
        if not marked:
            look = [info.st_size, info.st_mtime_ns]
            first = first_looks.get(name)
            if first is None or first[:2] != look:
                first = [*look, utc_text(now)]
            looks[name] = first
            unchanged = (now - parse_utc_text(first[2])).total_seconds()
            if unchanged < settings.min_file_age_seconds:
                report.second_looks[name] = parse_utc_text(first[2]) + timedelta(seconds=settings.min_file_age_seconds)
                report.waiting.append(f"{name} (unchanged for {max(unchanged, 0):.0f} s of the "
                                      f"{settings.min_file_age_seconds:g} s of min_file_age_seconds)")  # fmt: skip
                continue
            if not _ends_with_line_end(path, info.st_size):
                report.waiting.append(f"{name} (its last line has no line end yet: still being written"
                                      + (f"; {name}{done} marks it finished" if done else "") + ")")  # fmt: skip
                continue
        target = workspace.claimed / name
        if target.exists():
            report.waiting.append(f"{name} (a file of that name is still claimed)")
            continue
        try:
            os.rename(path, target)
        except FileNotFoundError:  # taken by someone else between listing and claiming
            continue
        after = os.lstat(target)
        if (after.st_size, after.st_mtime_ns) != (info.st_size, info.st_mtime_ns) or not stat.S_ISREG(after.st_mode):
            _move_no_clobber(target, workspace.incoming, name)
            report.waiting.append(f"{name} (still growing)")
            continue
        looks.pop(name, None)
        claims.append(_Claim(target, name, marker if marked else None, complete=marked))
    _save_sightings(workspace, looks)
    return claims


def _delivered(workspace: Workspace, done: str | None):
    """The entries of incoming/ in name order (dot-names left out), each as ``(path, lstat,
    kind)``: kind is 'not regular' (a link, folder, device...), 'marker' (a done-marker),
    'temporary' (a name a file has while it is written), 'marked' (a file whose done-marker
    exists) or 'plain'."""
    for path in sorted(workspace.incoming.iterdir()):
        name = path.name
        if name.startswith("."):
            continue
        info = os.lstat(path)
        if not stat.S_ISREG(info.st_mode):
            kind = "not regular"
        elif done and name.endswith(done):
            kind = "marker"
        elif name.endswith(TEMPORARY_SUFFIXES):
            kind = "temporary"
        else:
            marker = path.with_name(name + done) if done else None
            kind = "marked" if marker is not None and marker.is_file() and not marker.is_symlink() else "plain"
        yield path, info, kind


def look_at_incoming(workspace: Workspace, now: datetime) -> datetime | None:
    """Look at incoming/ between ingest passes, taking nothing: record the first look at
    every file that is new or changed since it was last looked at, and return when the first
    of those can be taken (``now`` for a file with its done-marker), or None when there is
    nothing new (and when an ingest is running: it looks itself). For the daemon, so that a
    file's first look does not wait for the next cycle."""
    try:
        with _IngestLock(workspace):
            settings = workspace.config().ingest
            looks = _load_sightings(workspace)
            seen = utc_text(now)  # as stored: the ingest times the second look from this text
            due = []
            for path, info, kind in _delivered(workspace, settings.done_suffix):
                if kind == "marked":
                    due.append(now)
                elif kind == "plain" and looks.get(path.name, [])[:2] != [info.st_size, info.st_mtime_ns]:
                    looks[path.name] = [info.st_size, info.st_mtime_ns, seen]
                    due.append(parse_utc_text(seen) + timedelta(seconds=settings.min_file_age_seconds))
            _save_sightings(workspace, looks)
    except BusyError:
        return None
    return min(due, default=None)


def _ends_with_line_end(path: Path, size: int) -> bool:
    """Whether the file's last byte ends a line; a UTF-16/32 file counts as ended (its
    encoding is refused when it is read, whatever its end)."""
    if size == 0:
        return False
    with path.open("rb") as handle:
        if wide_encoding(handle.read(4)) is not None:
            return True
        handle.seek(size - 1)
        return handle.read(1) in (b"\n", b"\r")


def _refuse(workspace: Workspace, path: Path, info: os.stat_result) -> FileSummary:
    """Move what is not a regular file out of incoming/ unread (a link is moved, not followed)."""
    kind = ("symbolic link" if stat.S_ISLNK(info.st_mode) else "folder" if stat.S_ISDIR(info.st_mode)
            else "device" if stat.S_ISBLK(info.st_mode) or stat.S_ISCHR(info.st_mode)
            else "named pipe" if stat.S_ISFIFO(info.st_mode) else "socket" if stat.S_ISSOCK(info.st_mode)
            else "special file")  # fmt: skip
    reason = f"a {kind}, not a regular file: feeds are read only from regular files delivered into incoming/"
    destination = _move_no_clobber(path, workspace.rejected, path.name)
    _write_reason(destination, reason, [], 0)
    return FileSummary(path.name, "refused", reason=reason, archived_as=_relative(workspace, destination))


def record_first_look(workspace: Workspace, name: str, seen: datetime) -> None:
    """Record that the file ``incoming/NAME`` was looked at, as it is now, at ``seen``: as if
    an ingest pass had seen it then. For replays that deliver a logger's files after the fact,
    and for tests."""
    info = os.lstat(workspace.incoming / name)
    looks = _load_sightings(workspace)
    looks[name] = [info.st_size, info.st_mtime_ns, utc_text(seen)]
    _save_sightings(workspace, looks)


def _load_sightings(workspace: Workspace) -> dict[str, list]:
    try:
        looks = json.loads((workspace.root / SIGHTINGS_FILE).read_text(encoding="utf-8"))
    except (FileNotFoundError, ValueError):  # none yet, or unreadable: look again from now
        return {}
    return looks if isinstance(looks, dict) else {}


def _save_sightings(workspace: Workspace, looks: dict[str, list]) -> None:
    path = workspace.root / SIGHTINGS_FILE
    temporary = path.with_name(path.name + ".tmp")
    temporary.write_text(json.dumps(looks), encoding="utf-8")
    os.replace(temporary, path)


def _claim_named(workspace: Workspace, path: Path) -> _Claim:
    if not path.is_file():
        raise UserError(f"feed file {path} not found")
    if path.absolute().parent.resolve() == workspace.incoming.resolve():
        if not stat.S_ISREG(os.lstat(path).st_mode):
            raise UserError(f"{printable(str(path))} is a symbolic link, not a regular file: files in incoming/ "
                            "are read only as regular files; name the file it points to instead")  # fmt: skip
        target = workspace.claimed / path.name
        if target.exists():
            raise WorkspaceError(f"{path.name} is already claimed in {workspace.claimed}; run ingest again")
        os.rename(path, target)
        return _Claim(target, path.name)
    # Copy under a hidden name first so a half-made copy is never taken for a delivery.
    partial = workspace.claimed / f".partial-{path.name}"
    target = workspace.claimed / path.name
    if target.exists():
        raise WorkspaceError(f"{path.name} is already claimed in {workspace.claimed}; run ingest again")
    shutil.copyfile(path, partial)
    _fsync_file(partial)
    os.rename(partial, target)
    return _Claim(target, path.name)


def reconcile(workspace: Workspace, store: Store) -> list[str]:
    """Settle files left claimed by an ingest that stopped: archive those whose record was
    committed, put the others back into incoming/. Returns one line per file settled."""
    lines = []
    for path in sorted(workspace.claimed.iterdir()):
        if path.name.startswith(".partial-"):
            # An unfinished copy of a named file: the original is still where it was given.
            _move_no_clobber(path, workspace.rejected, path.name)
            lines.append(f"{path.name}: unfinished copy moved to rejected/ (ingest the original again)")
            continue
        sha, _ = _sha256(path)
        records = [r for r in store.file_records(sha) if not (workspace.root / r["archived_as"]).exists()]
        committed = next((r for r in records if r["archived_as"]), None)
        if committed is None:
            destination = _move_no_clobber(path, workspace.incoming, path.name)
            lines.append(f"{path.name}: not committed before the stop; put back as {_relative(workspace, destination)}")
            continue
        planned = workspace.root / committed["archived_as"]
        if committed["status"] == "rejected" and not planned.with_name(planned.name + ".reason.txt").exists():
            _write_reason(planned, committed["reason"] or "", [], 0)
        destination = _move_to(path, planned)
        if destination != planned:
            store.set_archived_as(committed["id"], _relative(workspace, destination))
        lines.append(f"{path.name}: committed before the stop; archived as {_relative(workspace, destination)}")
    return lines


# --- one file ----------------------------------------------------------------------------------


def _ingest_claimed(workspace: Workspace, store: Store, config: SiteConfig, claim: _Claim, now: datetime,
                    progress: bool, correction: Correction | None = None) -> FileSummary:  # fmt: skip
    try:
        sha, size = _sha256(claim.path)
        prior = store.ingested_file(sha)
    except BaseException:
        _move_no_clobber(claim.path, workspace.incoming, claim.name)
        raise
    if prior is not None:
        destination = _move_no_clobber(claim.path, workspace.processed, claim.name)
        _archive_marker(claim, destination.parent)
        return FileSummary(
            claim.name, "already ingested", prior["feed"],
            reason=f"same content as {prior['name']}, file #{prior['id']}, ingested {prior['ingested_utc']}",
            archived_as=_relative(workspace, destination),
        )  # fmt: skip
    feed = config.feed_for(claim.name)
    try:
        try:
            with store.atomic():
                summary, problems, file_id = _read_file(store, config, claim.path, claim.name, sha, size, now,
                                                        progress, correction, complete=claim.complete)  # fmt: skip
                folder = workspace.rejected if summary.status == "rejected" else workspace.processed
                planned = _free_name(folder, claim.name)
                summary.archived_as = _relative(workspace, planned)
                store.finish_file(file_id, summary.status, summary.reason, summary.__dict__, summary.archived_as)
        except _STORE_OR_DISK_ERRORS:
            raise
        except Exception as error:  # noqa: BLE001 - one unreadable file must not stop the watch
            # An error nobody foresaw while reading: its transaction was rolled back; the file
            # goes to rejected/ with the error as reason, in a transaction of its own.
            summary = FileSummary(claim.name, "rejected", feed.name if feed else None, unexpected=True,
                                  reason=f"unexpected error while reading the file ({type(error).__name__}: "
                                         f"{clipped(str(error))}); nothing of it is stored; please report this")  # fmt: skip
            problems = []
            with store.atomic():
                file_id = store.add_file(claim.name, summary.feed, sha, size, archived_as="",
                                         ingested_utc=utc_text(now))  # fmt: skip
                planned = _free_name(workspace.rejected, claim.name)
                summary.archived_as = _relative(workspace, planned)
                store.finish_file(file_id, summary.status, summary.reason, summary.__dict__, summary.archived_as)
    except BaseException:
        # Not committed: hand the file back to the drop folder untouched, then report.
        _move_no_clobber(claim.path, workspace.incoming, claim.name)
        raise
    if summary.status == "rejected":
        _write_reason(planned, summary.reason, problems, summary.rejected)
    _move_to(claim.path, planned)
    _archive_marker(claim, planned.parent)
    return summary


@dataclass(frozen=True)
class Correction:
    """Who applies a corrected file, why, and when (the injected clock's time)."""

    by: str
    reason: str
    at: datetime


def _read_file(store: Store, config: SiteConfig, path: Path, name: str, sha: str, size: int, now: datetime,
               progress: bool, correction: Correction | None = None, purpose: str = "delivery",
               complete: bool = False) -> tuple[FileSummary, list[RowProblem], int]:  # fmt: skip
    """Record the file and read it into the store (inside atomic()): its summary (status
    'rejected' with the reason when nothing could be read), the first rejected rows and the id
    of its record. With ``correction``, stored readings the file gives other values for are
    replaced, the old ones kept in ``superseded_values``. ``complete``: the deliverer marked the
    file finished (a last line without line end is then a row)."""
    feed = config.feed_for(name)
    summary = FileSummary(name, "ingested", feed.name if feed else None)
    if correction is not None:
        purpose = "correction"
    file_id = store.add_file(name, summary.feed, sha, size, archived_as="", ingested_utc=utc_text(now),
                             purpose=purpose, applied_by=correction.by if correction else None,
                             note=correction.reason if correction else None)  # fmt: skip
    problems: list[RowProblem] = []
    if feed is None:
        patterns = ", ".join(f"{f.name}: {f.pattern}" for f in config.feeds) or "no [[feed]] in site.toml"
        summary.reason = f"no [[feed]] pattern matches the name {name!r} ({patterns})"
    else:
        try:
            reader = FeedReader(path, feed, complete=complete)
            _load(store, config, reader, file_id, now, progress, summary, problems, correction)
            summary.notes = reader.header_notes
            summary.repeated_times_resolved = reader.repeated_times_resolved
        except FeedError as error:
            summary.reason = str(error)
        if summary.reason is None and summary.accepted + summary.duplicates + summary.corrected == 0:
            summary.reason = (
                "no reading could be read"
                + (f" ({summary.rejected} rows rejected)" if summary.rejected else "")
                + (f" ({summary.missing} values marked missing)" if summary.missing else "")
                + ("" if summary.rejected or summary.missing else " (no data rows)")
            )
    if summary.reason is not None:
        summary.status = "rejected"
    _fill_line_texts(store, file_id, path, feed, problems)
    summary.rejected_rows = [{"line": p.line, "instrument_id": p.instrument_id, "reason": p.reason}
                             for p in problems]  # fmt: skip
    return summary, problems, file_id


def reread(workspace: Workspace, archived: Path | str, clock: Clock, progress: bool = False) -> FileSummary:
    """Read a file archived in processed/ or rejected/ again, as site.toml reads it now (after a
    configuration fix: a column mapped, a feed added). Only readings not stored yet are stored;
    the same value again is a duplicate, another value a rejected row (``apply_corrections``
    replaces values). The file stays where it is; a new file record (purpose 'reread') names it."""
    path = _archived_file(workspace, Path(archived))
    now = clock.now()
    with _IngestLock(workspace):
        config = workspace.config()
        with workspace.open_store() as store:
            sha, size = _sha256(path)
            with store.atomic():
                store.sync_site(config, utc_text(now))
                summary, _, file_id = _read_file(store, config, path, path.name, sha, size, now, progress,
                                                 purpose="reread")  # fmt: skip
                summary.archived_as = _relative(workspace, path)
                store.finish_file(file_id, summary.status, summary.reason, summary.__dict__, summary.archived_as)
    return summary


def apply_corrections(workspace: Workspace, path: Path | str, by: str, reason: str, clock: Clock,
                      progress: bool = False) -> FileSummary:  # fmt: skip
    """Read a corrected (re-delivered) feed file: readings it gives another value for replace the
    stored ones, which are kept in ``superseded_values`` with who, when and why; readings not
    stored yet are stored; the file is archived in processed/ like a delivery. Assessments made
    later use the corrected values; those made before keep the values they used."""
    if not by.strip() or not reason.strip():
        raise UserError("a correction needs who applies it (--by) and why (--reason)")
    correction = Correction(by.strip(), reason.strip(), clock.now())
    with _IngestLock(workspace):
        config = workspace.config()
        with workspace.open_store() as store:
            with store.atomic():
                store.sync_site(config, utc_text(correction.at))
            claim = _claim_named(workspace, Path(path))
            return _ingest_claimed(workspace, store, config, claim, correction.at, progress, correction)


def _archived_file(workspace: Workspace, path: Path) -> Path:
    """An archived feed file, given relative to the workspace or absolute; UserError otherwise."""
    if not path.is_absolute() and not path.exists():
        path = workspace.root / path
    resolved = path.resolve()
    folders = (workspace.processed.resolve(), workspace.rejected.resolve())
    if resolved.parent not in folders or not resolved.is_file() or resolved.name.endswith(".reason.txt"):
        raise UserError(f"{path} is not a feed file archived in {workspace.processed} or {workspace.rejected}")
    return resolved


def _load(store: Store, config: SiteConfig, reader: FeedReader, file_id: int, now: datetime, progress: bool,
          summary: FileSummary, problems: list[RowProblem], correction: Correction | None = None) -> None:  # fmt: skip
    """Read ``reader`` block by block into the store. Rejected rows are written to the store
    with each block (a file of millions of bad rows must not pile up in memory); ``problems``
    keeps the first SUMMARY_ROWS, for the summary and the reason file."""
    instruments = config.instruments
    bar = tqdm(
        total=reader.size, unit="B", unit_scale=True, desc=reader.path.name, leave=False,
        disable=True if not progress or reader.size < _PROGRESS_MIN_BYTES else None,
    )  # fmt: skip
    conflicted: set[tuple[str, str]] = set()  # (instrument, time) given by the file with different values
    with bar:
        for chunk in reader.chunks():
            bar.update(chunk.bytes_read)
            summary.missing += chunk.missing
            pending = list(chunk.problems)
            _load_block(store, config, reader.spec, chunk.readings, file_id, now, summary, pending, conflicted,
                        correction)  # fmt: skip
            _flush_problems(store, file_id, pending, problems, summary)


def _load_block(store: Store, config: SiteConfig, feed: FeedSpec, rows: pd.DataFrame, file_id: int,
                now: datetime, summary: FileSummary, problems: list[RowProblem], conflicted: set[tuple[str, str]],
                correction: Correction | None = None) -> None:  # fmt: skip
    """Check and insert the readings of one block; its rejected rows go to ``problems``.
    ``conflicted``: the keys the file gave earlier with different values (none is stored;
    updated here)."""
    instruments = config.instruments
    if len(rows) == 0:
        return
    known = rows["instrument_id"].isin(instruments.keys()).to_numpy()
    for line, iid in rows.loc[~known, ["line", "instrument_id"]].itertuples(index=False):
        problems.append(RowProblem(int(line), None, f"instrument {iid!r} is not in site.toml", iid))
    rows = rows[known]
    # Another logger's instrument in this feed is a mix-up of files or channels, not a reading.
    delivered = rows["instrument_id"].isin(feed.delivers).to_numpy()
    for line, iid in rows.loc[~delivered, ["line", "instrument_id"]].itertuples(index=False):
        problems.append(RowProblem(int(line), None, f"instrument {iid!r} is not delivered by feed {feed.name!r} "
                                                    f"(its instruments: {', '.join(sorted(feed.delivers))})", iid))
    rows = rows[delivered]
    in_window, reasons = time_window_problems(rows["time_utc"].to_numpy(dtype="datetime64[s]"), now, config.ingest)
    for line, iid, reason in zip(rows["line"].to_numpy()[~in_window], rows["instrument_id"].to_numpy()[~in_window],
                                 reasons[~in_window]):  # fmt: skip
        problems.append(RowProblem(int(line), None, reason, iid))
    rows = rows[in_window]
    if conflicted and len(rows):
        keys = list(zip(rows["instrument_id"], _utc_text(rows["time_utc"].to_numpy())))
        again = np.array([key in conflicted for key in keys], dtype=bool)
        for (iid, when), line in zip([k for k, hit in zip(keys, again) if hit], rows["line"].to_numpy()[again]):
            problems.append(RowProblem(int(line), None, f"{iid} at {when} is given more than once in this file "
                                                        "with different values: none of them is stored", iid))  # fmt: skip
        rows = rows[~again]
    rows = _settle_repeats(rows, summary, problems, conflicted)
    piezometer_parts, rain_parts = [], []
    for iid, group in rows.groupby("instrument_id", sort=False):
        group = group.sort_values("time_utc", kind="stable")
        first = _utc_text(group["time_utc"].to_numpy()[:1])[0]
        instrument = instruments[iid]
        if isinstance(instrument, Piezometer):
            previous = _previous(store.previous_reading(iid, first))
            assessed, lacking = assess_piezometer(group, instrument, config.ingest, previous)
            problems.extend(RowProblem(line, None, reason, iid) for line, reason in lacking)
            piezometer_parts.append(assessed)
        else:
            rain_parts.append(assess_rain_gauge(group, instrument, _rain_before(store, iid, first)))
    for table, parts in (("readings", piezometer_parts), ("rainfall", rain_parts)):
        if parts:
            _insert(store, table, pd.concat(parts, ignore_index=True), file_id, summary, problems, conflicted,
                    correction)  # fmt: skip
    # Readings that landed inside the stored record (a late or out-of-order file, or a
    # correction) change what the readings after them are: the rain of a cumulative gauge (and
    # whether it follows a gap), the spike and flat-line flags of a piezometer. Derive the span
    # from the block's first reading on again.
    for part in rain_parts:
        iid, first = part["instrument_id"].iat[0], _utc_text(part["time_utc"].to_numpy()[:1])[0]
        if correction is not None or _inside_record(store, part):
            settle_rain_record(store, instruments[iid], first)
    for part in piezometer_parts:
        if len(part) and (correction is not None or _inside_record(store, part)):
            first = _utc_text(part["time_utc"].to_numpy()[:1])[0]
            settle_piezometer_flags(store, config, instruments[part["instrument_id"].iat[0]], first)


def _inside_record(store: Store, part: pd.DataFrame) -> bool:
    """Whether the store holds a reading of the part's instrument later than the part's last:
    the part landed inside the stored record rather than after it."""
    last = _utc_text(part["time_utc"].to_numpy()[-1:])[0]
    newest = store.newest_reading(part["instrument_id"].iat[0], "9999-12-31T23:59:59Z")
    return newest is not None and newest["time_utc"] > last


def settle_piezometer_flags(store: Store, config: SiteConfig, piezometer: Piezometer, start_utc: str) -> int:
    """Check the stored readings of a piezometer from ``start_utc`` on again (quality flags, from
    their raw values and the reading before), after a correction changed one of them or a late
    file landed before them. Returns
    the readings whose flag changed (inside atomic())."""
    stored = store.readings(piezometer.id, start_utc)
    if not stored:
        return 0
    rows = pd.DataFrame(stored)
    rows["time_utc"] = np.array([_time64(t) for t in rows["time_utc"]], dtype="datetime64[s]")
    rows["line"] = rows["source_line"]
    for column in ("raw_value", "temperature_c", "barometric_kpa"):
        rows[column] = pd.to_numeric(rows[column], errors="coerce").astype(float)
    previous = _previous(store.previous_reading(piezometer.id, start_utc))
    assessed, _ = assess_piezometer(rows, piezometer, config.ingest, previous)
    changed = assessed[assessed["quality"].to_numpy() != rows.loc[assessed.index, "quality"].to_numpy()]
    return store.set_reading_quality(piezometer.id, zip(changed["quality"], _utc_text(changed["time_utc"].to_numpy())))


def settle_rain_record(store: Store, gauge, start_utc: str) -> int:
    """Derive the rain and quality of a gauge's stored readings from ``start_utc`` on again from
    their raw values (``watch.quality.rain_record``), so the stored depths do not depend on the
    order in which files arrived or on corrections made later. Returns the readings changed
    (inside atomic())."""
    rows = store.rain_rows_from(gauge.id, start_utc)
    if not rows:
        return 0
    times, raw, rain, quality, gap = zip(*rows)
    times = np.array([_time64(t) for t in times], dtype="datetime64[s]")
    new_rain, new_quality, new_gap = rain_record(times, np.array(raw, dtype=float), gauge,
                                                 _rain_before(store, gauge.id, start_utc))  # fmt: skip
    new_gap = _utc_text_or_none(new_gap)
    old_rain = np.array([np.nan if r is None else r for r in rain], dtype=float)
    same_rain = (old_rain == new_rain) | (np.isnan(old_rain) & np.isnan(new_rain))
    changed = np.flatnonzero(~same_rain | (np.array(quality, dtype=object) != new_quality)
                             | (np.array(gap, dtype=object) != new_gap))  # fmt: skip
    text = _utc_text(times)
    return store.set_rain(gauge.id, ((None if np.isnan(new_rain[i]) else float(new_rain[i]), new_quality[i],
                                      new_gap[i], text[i]) for i in changed))  # fmt: skip


def _rain_before(store: Store, gauge_id: str, before_utc: str) -> RainBefore:
    base_time, base_raw, last_time, last_raw = store.rain_before(gauge_id, before_utc)
    recent = store.rain_times_before(gauge_id, before_utc, USUAL_INTERVAL_READINGS + 1)
    return RainBefore(_time64(base_time), np.nan if base_raw is None else base_raw,
                      _time64(last_time), np.nan if last_raw is None else last_raw,
                      tuple(_time64(t) for t in recent))  # fmt: skip


def _utc_text_or_none(times: np.ndarray) -> np.ndarray:
    """Store text of datetime64 times, None for NaT."""
    times = np.asarray(times, dtype="datetime64[s]")
    text = np.full(len(times), None, dtype=object)
    known = ~np.isnat(times)
    if known.any():
        text[known] = _utc_text(times[known])
    return text


def _time64(text: str | None) -> np.datetime64 | None:
    """datetime64[s] of a store time ('...Z'), None for None."""
    return None if text is None else np.datetime64(text[:-1], "s")


def _settle_repeats(rows: pd.DataFrame, summary: FileSummary, problems: list[RowProblem],
                    conflicted: set[tuple[str, str]]) -> pd.DataFrame:  # fmt: skip
    """Rows of one block that give the same instrument and time more than once: when they are
    identical, the first is kept and the others count as duplicates; when their values differ,
    none can be trusted over the others and every one of them is rejected."""
    key = ["instrument_id", "time_utc"]
    repeated = rows.duplicated(key, keep=False).to_numpy()
    if not repeated.any():
        return rows
    values = ["raw_value", "temperature_c", "barometric_kpa"]
    group = rows[repeated]
    versions = group.drop_duplicates(key + values).groupby(key, sort=False).size()
    differing = group.set_index(key).index.isin(versions[versions > 1].index)
    for (iid, when), rows_of_key in group[differing].groupby(key, sort=False):
        lines = rows_of_key["line"].tolist()
        shown = ", ".join(f"{v:g}" for v in rows_of_key["raw_value"].drop_duplicates())
        when = _utc_text(np.array([np.datetime64(when, "s")]))[0]
        conflicted.add((iid, when))
        reason = (f"{iid} at {when} is given {len(lines)} times in this file with "
                  f"different values ({shown}; lines {', '.join(map(str, lines))}): none of them is stored")  # fmt: skip
        problems.extend(RowProblem(int(line), None, reason, iid) for line in lines)
    drop = np.zeros(len(rows), dtype=bool)
    drop[np.flatnonzero(repeated)[differing]] = True
    extra = rows.duplicated(key, keep="first").to_numpy() & ~drop
    summary.duplicates += int(extra.sum())
    return rows[~(drop | extra)]


def _flush_problems(store: Store, file_id: int, pending: list[RowProblem], kept: list[RowProblem],
                    summary: FileSummary) -> None:  # fmt: skip
    """Store one block's rejected rows; keep the first few for the reason file."""
    if not pending:
        return
    pending.sort(key=lambda p: (p.line is None, p.line or 0))
    store.add_rejected_rows((file_id, p.line, p.instrument_id, clipped(p.raw_text), p.reason) for p in pending)
    summary.rejected += len(pending)
    kept.extend(pending[: max(0, SUMMARY_ROWS - len(kept))])


def _insert(store: Store, table: str, rows: pd.DataFrame, file_id: int, summary: FileSummary,
            problems: list[RowProblem], conflicted: set[tuple[str, str]],
            correction: Correction | None = None) -> None:  # fmt: skip
    ids = rows["instrument_id"].to_numpy(dtype=object)
    times = _utc_text(rows["time_utc"].to_numpy())
    lines = rows["line"].to_numpy(dtype=np.int64)
    raw = rows["raw_value"].to_numpy(dtype=float)
    quality = rows["quality"].to_numpy(dtype=object)
    if table == "readings":
        columns = (ids, times, raw, rows["temperature_c"].to_numpy(), rows["barometric_kpa"].to_numpy(),
                   rows["pore_pressure_kpa"].to_numpy(), rows["head_m"].to_numpy(), quality, None, lines)  # fmt: skip
        insert = store.insert_readings
    else:
        gap_start = _utc_text_or_none(rows["gap_start"].to_numpy())
        columns = (ids, times, raw, rows["rain_mm"].to_numpy(), quality, gap_start, None, lines)
        insert = store.insert_rainfall
    inserted = 0
    # Batches bound the Python objects alive at once (one tuple per row is ~10 objects).
    for start in range(0, len(rows), _INSERT_BATCH):
        part = slice(start, start + _INSERT_BATCH)
        inserted += insert(zip(*(repeat(file_id) if c is None else c[part].tolist() for c in columns)))
    flagged = quality != "ok"
    if inserted == len(rows):
        summary.accepted += inserted
        summary.flagged += int(flagged.sum())
        return
    # Some keys were stored already: sort the rows left out into duplicates (same raw value)
    # and conflicts (different value: reported, the stored value is kept), unless this file is
    # a correction of values stored from other files.
    ids, times = ids.tolist(), times.tolist()
    stored = pd.DataFrame(
        store.stored_versions(table, dict.fromkeys(zip(ids, times))),
        columns=["instrument_id", "time_utc", "stored_raw", "stored_file_id", "stored_line", "stored_file"],
    )
    mine = pd.DataFrame({"instrument_id": ids, "time_utc": times, "raw_value": raw, "line": lines, "flagged": flagged})
    merged = mine.merge(stored, on=["instrument_id", "time_utc"], how="left", validate="many_to_one")
    ours = (merged["stored_file_id"] == file_id) & (merged["stored_line"] == merged["line"])
    left_out = merged[~ours]
    same = left_out["stored_raw"] == left_out["raw_value"]
    summary.accepted += int(ours.sum())
    summary.flagged += int((ours & merged["flagged"]).sum())
    summary.duplicates += int(same.sum())
    conflicts = left_out[~same]
    if correction is not None:
        replace = conflicts["stored_file_id"] != file_id
        positions = conflicts.index[replace].to_numpy()
        summary.corrected += store.supersede(
            table, zip(*(repeat(file_id) if c is None else c[positions].tolist() for c in columns)),
            correction.by, correction.reason, utc_text(correction.at),
        )  # fmt: skip
        summary.flagged += int(merged["flagged"].to_numpy()[positions].sum())
        conflicts = conflicts[~replace]
    for r in conflicts.itertuples(index=False):
        if r.stored_file_id == file_id:
            # Given twice by this file with different values (in different blocks): neither is
            # stored, as within one block (_settle_repeats).
            conflicted.add((r.instrument_id, r.time_utc))
            quality = store.discard_reading(table, r.instrument_id, r.time_utc, file_id)
            if quality is not None:
                summary.accepted -= 1
                summary.flagged -= quality != "ok"
            reason = (f"{r.instrument_id} at {r.time_utc} is given more than once in this file with different "
                      f"values ({r.stored_raw:g}, {r.raw_value:g}; lines {r.stored_line}, {r.line}): none of "
                      "them is stored")  # fmt: skip
            problems.extend(RowProblem(int(line), None, reason, r.instrument_id)
                            for line in ((r.stored_line,) if quality is not None else ()) + (r.line,))  # fmt: skip
            continue
        where = f"file {r.stored_file}"
        problems.append(
            RowProblem(int(r.line), None,
                       f"conflicts with the stored reading of {r.instrument_id} at {r.time_utc}: stored "
                       f"raw value {r.stored_raw:g} ({where}, line {r.stored_line}), this row {r.raw_value:g}; "
                       "the stored value is kept (replace it with `slipwatch correct`)", r.instrument_id)  # fmt: skip
        )


def _fill_line_texts(store: Store, file_id: int, path: Path, feed, kept: list[RowProblem]) -> None:
    """Give the stored rejected rows of a file that were rejected after parsing (quality, time,
    conflicts) their raw line text, cut to RAW_TEXT_CHARS: one streaming pass over the file, in
    batches of rows, so memory does not grow with the number of rejected rows or their length."""
    encoding = feed.encoding if feed else "utf-8"
    last_line, batch = 0, 50_000
    handle = numbered = None
    number, raw = 0, b""
    try:
        while True:
            rows = store.conn.execute(
                "SELECT id, line FROM rejected_rows WHERE file_id = ? AND raw_text IS NULL "
                "AND line IS NOT NULL AND line > ? ORDER BY line LIMIT ?",
                (file_id, last_line, batch),
            ).fetchall()
            if not rows:
                break
            if handle is None:
                handle = open_feed_bytes(path)
                numbered = enumerate(bounded_lines(handle), start=1)
            updates = []
            for row_id, line in rows:
                while number < line:
                    number, (raw, _) = next(numbered, (line, (None, 0)))
                if raw is not None and number == line:
                    updates.append((clipped(raw.decode(encoding, errors="replace")), row_id))
            store.conn.executemany("UPDATE rejected_rows SET raw_text = ? WHERE id = ?", updates)
            last_line = rows[-1][1]
    finally:
        if handle is not None:
            handle.close()
    texts = _line_texts(path, feed, {p.line for p in kept if p.raw_text is None and p.line is not None})
    kept[:] = [replace(p, raw_text=texts.get(p.line)) if p.raw_text is None else p for p in kept]


def _line_texts(path: Path, feed, wanted: set[int]) -> dict[int, str]:
    """Raw text of the given lines, cut to RAW_TEXT_CHARS (one streaming pass; only for rows
    rejected after parsing)."""
    if not wanted:
        return {}
    texts, last = {}, max(wanted)
    encoding = feed.encoding if feed else "utf-8"
    with open_feed_bytes(path) as handle:
        for number, (raw, _) in enumerate(bounded_lines(handle), start=1):
            if number in wanted:
                texts[number] = clipped(raw.decode(encoding, errors="replace"))
            if number >= last:
                break
    return texts


def _previous(row) -> Previous | None:
    if row is None:
        return None
    time, raw, since, head_time, head = row
    return Previous(_time64(time), raw, _time64(since), _time64(head_time), np.nan if head is None else head)


def _utc_text(times: np.ndarray) -> np.ndarray:
    """Store text of datetime64 times; each distinct time is formatted once (the readings of a
    wide row share their time)."""
    codes, uniques = pd.factorize(times.astype("datetime64[s]").view(np.int64))
    text = np.datetime_as_string(uniques.view("datetime64[s]"), unit="s", timezone="UTC")
    return text.astype(object)[codes]


# --- files -------------------------------------------------------------------------------------


def _sha256(path: Path) -> tuple[str, int]:
    digest = hashlib.sha256()
    size = 0
    with path.open("rb") as handle:
        while block := handle.read(1 << 20):
            digest.update(block)
            size += len(block)
    return digest.hexdigest(), size


def _free_name(folder: Path, name: str) -> Path:
    """``folder/name``, or ``folder/stem.N.suffix`` with the first free N: never overwrite."""
    candidate = folder / name
    stem, suffix = os.path.splitext(name)
    n = 1
    while candidate.exists() or candidate.with_name(candidate.name + ".reason.txt").exists():
        candidate = folder / f"{stem}.{n}{suffix}"
        n += 1
    return candidate


def _move_to(path: Path, destination: Path) -> Path:
    """Move to the planned destination; should it have been taken meanwhile, to a free name."""
    if destination.exists():
        return _move_no_clobber(path, destination.parent, destination.name)
    os.rename(path, destination)
    _fsync_dir(destination.parent)
    return destination


def _move_no_clobber(path: Path, folder: Path, name: str) -> Path:
    destination = _free_name(folder, name)
    os.rename(path, destination)
    _fsync_dir(folder)
    return destination


def _write_reason(archived: Path, reason: str, problems: list[RowProblem], total: int) -> None:
    lines = [printable(f"slipwatch rejected {archived.name}: {reason}")]
    for p in problems[:_REASON_FILE_ROWS]:
        lines.append(printable(f"line {p.line}: {p.reason}"))
    if total > len(problems[:_REASON_FILE_ROWS]):
        more = total - len(problems[:_REASON_FILE_ROWS])
        lines.append(f"... and {more} more (list them with `slipwatch rejected-rows`)")
    reason_file = archived.with_name(archived.name + ".reason.txt")
    reason_file.write_text("\n".join(lines) + "\n", encoding="utf-8")
    _fsync_file(reason_file)


def _archive_marker(claim: _Claim, folder: Path) -> None:
    if claim.marker is not None and claim.marker.exists():
        _move_no_clobber(claim.marker, folder, claim.marker.name)


def _archive_orphan_marker(workspace: Workspace, marker: Path, min_age: float) -> None:
    # A marker whose file was archived by an ingest that stopped before moving the marker.
    if time.time() - marker.stat().st_mtime >= min_age:
        _move_no_clobber(marker, workspace.processed, marker.name)


def _relative(workspace: Workspace, path: Path) -> str:
    return str(path.relative_to(workspace.root))


def _fsync_file(path: Path) -> None:
    with path.open("rb") as handle:
        os.fsync(handle.fileno())


def _fsync_dir(folder: Path) -> None:
    # Make the rename itself durable (POSIX: a directory entry is persisted by syncing the folder).
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


class _IngestLock:
    """One ingest at a time per workspace (an advisory lock the OS drops if the process dies)."""

    def __init__(self, workspace: Workspace):
        self.path = workspace.lock_file
        self.handle = None

    def __enter__(self):
        self.handle = self.path.open("a+")
        try:
            fcntl.flock(self.handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as error:
            self.handle.close()
            if error.errno in (errno.EAGAIN, errno.EACCES):
                raise BusyError(
                    f"another ingest is running in {self.path.parent} (lock {self.path.name}); "
                    "wait for it to finish"
                ) from None
            raise
        return self

    def __exit__(self, *exc):
        fcntl.flock(self.handle, fcntl.LOCK_UN)
        self.handle.close()


# --- status ------------------------------------------------------------------------------------


def workspace_status(workspace: Workspace, now: datetime | None = None) -> dict:
    """Per configured instrument: newest reading, its age, stale flag and counts; plus the files
    waiting in the drop folder and the store's totals. Opens the store read-only."""
    now = now or datetime.now(timezone.utc)
    config = workspace.config()
    with workspace.open_store(read_only=True) as store:
        summary = {row["instrument_id"]: row for row in store.instrument_summary(utc_text(now))}
        totals = store.counts()
    instruments = []
    for iid, instrument in config.instruments.items():
        row = summary.get(iid, {"newest_utc": None, "readings": 0, "flagged": 0})
        age = None
        if row["newest_utc"]:
            newest = datetime.strptime(row["newest_utc"], "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=timezone.utc)
            age = (now - newest).total_seconds() / 3600.0
        instruments.append(
            {
                "instrument_id": iid,
                "kind": instrument.kind,
                "newest_utc": row["newest_utc"],
                "age_hours": None if age is None else round(age, 2),
                "stale": age is None or age > config.ingest.stale_hours,
                "readings": row["readings"],
                "flagged": row["flagged"],
            }
        )
    waiting = sorted(p.name for p in workspace.incoming.iterdir() if p.is_file() and not p.name.startswith("."))
    claimed = sorted(p.name for p in workspace.claimed.iterdir())
    return {
        "site": config.id,
        "now_utc": now.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "stale_hours": config.ingest.stale_hours,
        "instruments": instruments,
        "incoming": waiting,
        "claimed": claimed,
        "totals": totals,
    }
