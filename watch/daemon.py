"""`slipwatch run`: the service that keeps a workspace up to date through the wet season.

Two jobs run on an APScheduler ``BackgroundScheduler`` with interval triggers in UTC:

* the assessment job, every ``interval_minutes``: one assessment cycle (watch.cycle.run_cycle:
  ingest what is waiting, water lines, factors of safety, triggers, queued notifications), then
  the delivery of everything due;
* the delivery job, every ``delivery_seconds``: a look at incoming/ (watch.ingest.look_at_incoming,
  which records the first look at new files and takes nothing) and the delivery, so that
  grouped messages and retries go out between cycles. It skips its turn while the assessment
  job runs (that job ingests and delivers itself).

Both jobs have ``coalesce=True``, ``max_instances=1`` and an explicit ``misfire_grace_time``.
Each run processes everything pending, not one time window, so a late, skipped or coalesced
run loses nothing: the next one picks it all up.

Second looks: the ingest takes a file from incoming/ only when two looks at least
``min_file_age_seconds`` apart found it unchanged (watch.ingest). When a cycle, or the look
of the delivery job, leaves files waiting for their second look, a one-off cycle is scheduled
for the moment the first of them can be taken (by the injected clock). So a file arriving
just after a cycle is assessed about ``delivery_seconds + min_file_age_seconds`` after it
arrived (90 s by default) instead of up to two intervals later. The one-off cycle is left out
when the regular cycle comes within :data:`SECOND_LOOK_SLACK_SECONDS` of it; each cycle
replaces the one planned before it (a look only brings it forward); and only one cycle runs at
a time: a cycle that finds another one running skips its turn (the running one ingests
everything waiting and plans the next second look itself).

One daemon per workspace: ``.daemon.lock`` is held with ``fcntl.flock`` for the life of the
process (the OS drops it if the process dies) and names the holder (pid, host, start time), so
a second ``slipwatch run`` refuses with a message saying who holds it.

SIGTERM or Ctrl-C (SIGINT): no new job starts; the running one finishes its cycle (the
delivery stops between messages); then the process exits with status 0. Should the running job
still be busy after ``stop_timeout_seconds`` (default 60 s), the process exits anyway with
status 1: every store write is one transaction, so the unfinished one is rolled back and
nothing is half-written; an ingest claimed file is settled by the next ingest. A second signal
exits at once on the same terms. So the process is gone at most ``stop_timeout_seconds`` plus
about a second after the first signal.
"""

from __future__ import annotations

import errno
import fcntl
import json
import logging
import logging.handlers
import os
import signal
import socket
import threading
import time
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

from apscheduler.executors.pool import ThreadPoolExecutor
from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.date import DateTrigger
from apscheduler.triggers.interval import IntervalTrigger

from watch.clock import Clock, ManualClock, SystemClock
from watch.config import SiteConfig, TableReader
from watch.errors import ConfigError, UserError, WorkspaceError
from watch.ingest import look_at_incoming
from watch.notify import DeliveryReport, deliver_pending, missing_credentials, notify_settings
from watch.store import utc_text
from watch.workspace import Workspace

__all__ = ["DaemonSettings", "DaemonLock", "daemon_settings", "run_once", "run_daemon", "LOCK_FILE", "LOGGER",
           "SECOND_LOOK_SLACK_SECONDS"]

LOCK_FILE = ".daemon.lock"
LOGGER = "slipwatch"

_EXIT_CLEAN, _EXIT_FORCED = 0, 1
_EXIT_FAILED = 1  # run --once: the cycle, the ingest or a section failed

#: A second-look cycle due less than this before the next regular cycle is left to that one
#: [s]: two cycles a few seconds apart would do the same work twice.
SECOND_LOOK_SLACK_SECONDS = 60.0

_SECOND_LOOK_JOB = "second-look"


@dataclass(frozen=True)
class DaemonSettings:
    """The ``[daemon]`` table of site.toml (docs/formats.md section 2), with defaults."""

    interval_minutes: float = 15.0
    delivery_seconds: float = 60.0
    misfire_grace_seconds: float | None = None  # default: one interval of the job
    stop_timeout_seconds: float = 60.0
    log_file: Path = Path("slipwatch.log")


def daemon_settings(config: SiteConfig, root: Path) -> DaemonSettings:
    """Read ``[daemon]`` of the site file; the log file is relative to the workspace ``root``."""
    r = TableReader(str(config.path) if config.path else "site.toml")
    t = r.table(config.raw, "daemon", "[daemon]")
    where = "[daemon]"
    r.keys(t, where, {"interval_minutes", "delivery_seconds", "misfire_grace_seconds",
                      "stop_timeout_seconds", "log_file"})  # fmt: skip
    default = DaemonSettings()
    values = {}
    for key in ("interval_minutes", "delivery_seconds", "stop_timeout_seconds", "misfire_grace_seconds"):
        value = r.number(t, where, key, default=getattr(default, key))
        if value is not None and value <= 0:
            r.fail(where, key, f"must be > 0, got {value}")
        values[key] = value
    log_file = Path(r.get(t, where, "log_file", str, default=str(default.log_file)))
    return DaemonSettings(log_file=log_file if log_file.is_absolute() else root / log_file, **values)


class DaemonLock:
    """One daemon per workspace: an advisory ``flock`` on ``.daemon.lock``, which also records
    who holds it, for the message a second daemon gives."""

    def __init__(self, workspace: Workspace, clock: Clock):
        self.path = workspace.root / LOCK_FILE
        self.clock = clock
        self.handle = None

    def __enter__(self) -> DaemonLock:
        handle = self.path.open("a+", encoding="utf-8")
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as error:
            handle.close()
            if error.errno in (errno.EAGAIN, errno.EACCES):
                raise WorkspaceError(self._held_message()) from None
            raise
        handle.seek(0)
        handle.truncate()
        holder = {"pid": os.getpid(), "host": socket.gethostname(), "started_utc": utc_text(self.clock.now())}
        handle.write(json.dumps(holder) + "\n")
        handle.flush()
        self.handle = handle
        return self

    def __exit__(self, *exc) -> None:
        self.handle.seek(0)
        self.handle.truncate()
        self.handle.flush()
        fcntl.flock(self.handle, fcntl.LOCK_UN)
        self.handle.close()

    def _held_message(self) -> str:
        try:
            holder = json.loads(self.path.read_text(encoding="utf-8") or "{}")
        except (OSError, ValueError):
            holder = {}
        who = (f"process {holder.get('pid', '?')} on {holder.get('host', '?')}, running since "
               f"{holder.get('started_utc', '?')}") if holder else "another process"  # fmt: skip
        return (f"another `slipwatch run` is already watching {self.path.parent} ({who}; lock "
                f"{self.path.name}); stop that one first, or use `slipwatch assess` for one cycle")


def run_once(workspace: Workspace, clock: Clock, *, should_stop=None, log: logging.Logger | None = None):
    """One assessment cycle and the delivery of everything due: what the assessment job does.

    Returns ``(cycle report, DeliveryReport)``. A failing cycle is logged and does not stop
    the delivery of what was queued before it. Usable without the daemon, e.g. to replay a
    season with a ``ManualClock``.
    """
    log = log or logging.getLogger(LOGGER)
    cycle_report = None
    try:
        cycle_report = _cycle(workspace, clock)
        for line in _report_lines(cycle_report):
            log.info(line)
    except UserError as error:
        log.error("assessment cycle failed: %s", error)
    except Exception:  # noqa: BLE001 - the service keeps running; the traceback goes to the log
        log.exception("assessment cycle failed unexpectedly")
    return cycle_report, _deliver(workspace, clock, should_stop, log)


def _cycle(workspace: Workspace, clock: Clock):
    from watch import cycle  # looked up per call, so that tests can stand in for run_cycle

    return cycle.run_cycle(workspace, clock, progress=False)


def _deliver(workspace: Workspace, clock: Clock, should_stop, log: logging.Logger) -> DeliveryReport | None:
    try:
        with workspace.open_store() as store:
            report = deliver_pending(workspace, store, clock, should_stop=should_stop)
    except UserError as error:
        log.error("notification delivery failed: %s", error)
        return None
    except Exception:  # noqa: BLE001
        log.exception("notification delivery failed unexpectedly")
        return None
    if report.deliveries_created or report.messages_sent or report.attempts_failed or report.gave_up:
        for line in report.lines():
            (log.warning if report.attempts_failed else log.info)(line)
    return report


def _report_lines(report) -> list[str]:
    """A cycle report (watch.cycle.CycleReport) in a few log lines."""
    if report is None:
        return []
    lines = [f"ingested {line}" for line in report.files] + [f"INGEST FAILED: {line}" for line in report.ingest_failures]
    lines += [f"site alert {change}" for change in report.site_changes]
    for s in report.sections:
        fos = "" if s.fos is None else f", FoS {s.fos:.3f}" + (f" ({s.method})" if s.method else "")
        text = f"{s.section_id}: {s.status}{fos}" + ("" if s.live else ", not on live readings")
        if s.message:
            text += f"; {s.message}"
        lines.append(text + "".join(f"; {c}" for c in s.changes))
    lines += [f"un-shelved: {r}" for r in report.released] + [f"warning: {c}" for c in report.chattering]
    if report.second_look_due is not None:
        lines.append(f"{report.second_looks} file(s) in incoming/ wait for their second look; the first "
                     f"can be taken at {utc_text(report.second_look_due)}")  # fmt: skip
    lines.append(f"cycle at {utc_text(report.at)}: {len(report.sections)} sections, "
                 f"{len(report.failed)} failed, {report.notifications} notifications queued")  # fmt: skip
    return lines


class _Jobs:
    """The scheduled jobs. One job runs at a time (``busy``) and one cycle at a time
    (``cycling``); ``scheduler`` is set once the scheduler exists, for the second looks."""

    def __init__(self, workspace: Workspace, clock: Clock, stop: threading.Event, log: logging.Logger):
        self.workspace, self.clock, self.stop, self.log = workspace, clock, stop, log
        self.busy = threading.Lock()
        self.cycling = threading.Lock()
        self.scheduler: BackgroundScheduler | None = None

    def assess(self) -> None:
        """The regular assessment cycle."""
        self._cycle("assessment cycle")

    def second_look(self) -> None:
        """The one-off cycle that takes the files whose second look is due."""
        self._cycle("second-look cycle")

    def _cycle(self, what: str) -> None:
        if self.stop.is_set():
            return
        if not self.cycling.acquire(blocking=False):
            self.log.info("%s skipped: another cycle is running (it takes whatever is waiting)", what)
            return
        try:
            with self.busy:
                self.log.info("%s starting", what)
                cycle_report, _ = run_once(self.workspace, self.clock, should_stop=self.stop.is_set, log=self.log)
                self.log.info("%s done", what)
                # The cycle's ingest has seen everything waiting: its plan replaces any other.
                self._plan_second_look(None if cycle_report is None else cycle_report.second_look_due)
        finally:
            self.cycling.release()

    def _plan_second_look(self, due: datetime | None, keep_earlier: bool = False) -> None:
        """Plan the second-look cycle at ``due`` (by the injected clock; None: none is needed),
        replacing the one planned before (``keep_earlier``: unless that one comes first), and
        leaving it out when the regular cycle comes first (within SECOND_LOOK_SLACK_SECONDS)."""
        if self.scheduler is None or self.stop.is_set():
            return
        if due is None:
            self._drop_second_look()
            return
        # The scheduler runs on the system clock; the wait is measured on the injected one.
        wait = max(0.0, (due - self.clock.now()).total_seconds())
        run_at = datetime.now(timezone.utc) + timedelta(seconds=wait)
        planned = self.scheduler.get_job(_SECOND_LOOK_JOB)
        if keep_earlier and planned is not None and planned.next_run_time <= run_at:
            return
        regular = self.scheduler.get_job("assess")
        if regular is not None and regular.next_run_time is not None and \
                regular.next_run_time <= run_at + timedelta(seconds=SECOND_LOOK_SLACK_SECONDS):
            self._drop_second_look()
            self.log.info("second look left to the regular cycle at %s", utc_text(regular.next_run_time))
            return
        self.scheduler.add_job(
            self.second_look, DateTrigger(run_at, timezone=timezone.utc), id=_SECOND_LOOK_JOB,
            name="second-look cycle", replace_existing=True, coalesce=True, max_instances=1,
            misfire_grace_time=None,
        )  # fmt: skip
        self.log.info("second-look cycle planned in %.0f s (%s by the service's clock)", wait, utc_text(due))

    def _drop_second_look(self) -> None:
        if self.scheduler.get_job(_SECOND_LOOK_JOB) is not None:
            self.scheduler.remove_job(_SECOND_LOOK_JOB)

    def deliver(self) -> None:
        """The delivery of what is due, after a look at incoming/ (so that a file's first look
        does not wait for the next cycle)."""
        if self.stop.is_set() or not self.busy.acquire(blocking=False):
            return  # a running cycle ingests and delivers itself
        try:
            self._look()
            _deliver(self.workspace, self.clock, self.stop.is_set, self.log)
        finally:
            self.busy.release()

    def _look(self) -> None:
        try:
            due = look_at_incoming(self.workspace, self.clock.now())
        except UserError as error:
            self.log.error("look at incoming/ failed: %s", error)
            return
        except Exception:  # noqa: BLE001 - the service keeps running; the next cycle's ingest reports it
            self.log.exception("look at incoming/ failed unexpectedly")
            return
        if due is not None:
            self._plan_second_look(due, keep_earlier=True)


def run_daemon(workspace: Workspace, *, interval_minutes: float | None = None, once: bool = False,
               clock: Clock | None = None, stop: threading.Event | None = None,
               install_signal_handlers: bool = True, echo: bool = False,
               at: datetime | None = None, until: datetime | None = None) -> int:  # fmt: skip
    """Run the service until SIGTERM/SIGINT (or ``stop`` is set); return the exit status.

    ``once``: one assessment cycle and delivery, then return. ``interval_minutes`` overrides
    ``[daemon] interval_minutes``. ``at``: step through time on a manual clock instead: one
    cycle and delivery at ``at``, then (with ``until``) one every interval up to ``until``,
    every record carrying the clock's time; then return. Raises WorkspaceError when another
    daemon holds the workspace, ConfigError for a bad configuration or a credential variable
    that is not set. ``echo`` also writes the log to standard error (the journal under systemd).
    """
    if until is not None and at is None:
        raise UserError("--until needs --at (the first time to step from)")
    if at is not None and until is not None and until < at:
        raise UserError(f"--until {utc_text(until)} is before --at {utc_text(at)}")
    clock = clock or (SystemClock() if at is None else ManualClock(at))
    stop = stop or threading.Event()
    config = workspace.config()
    settings = daemon_settings(config, workspace.root)
    if interval_minutes is not None:
        if interval_minutes <= 0:
            raise UserError(f"--interval must be > 0 minutes, got {interval_minutes}")
        settings = DaemonSettings(**{**settings.__dict__, "interval_minutes": float(interval_minutes)})
    missing = missing_credentials(notify_settings(config, workspace.root))
    if missing:
        raise ConfigError(f"environment variable(s) {', '.join(missing)} named in site.toml [notify] "
                          "are not set; set them in the service environment (e.g. a systemd "
                          "EnvironmentFile)")  # fmt: skip
    with DaemonLock(workspace, clock):
        log, handlers = _open_log(settings.log_file, echo)
        try:
            if at is not None:
                step = timedelta(minutes=settings.interval_minutes)
                while True:
                    log.info("cycle as at %s (slipwatch run --at) in %s", utc_text(clock.now()), workspace.root)
                    run_once(workspace, clock, log=log)
                    if until is None or clock.now() + step > until or stop.is_set():
                        return _EXIT_CLEAN
                    clock.advance(step)
            if once:
                log.info("one cycle (slipwatch run --once) in %s", workspace.root)
                cycle_report, _ = run_once(workspace, clock, log=log)
                if cycle_report is None or not cycle_report.ok:
                    log.error("slipwatch run --once: the cycle failed or something in it failed (see above)")
                    return _EXIT_FAILED
                return _EXIT_CLEAN
            return _serve(workspace, clock, settings, stop, log, install_signal_handlers)
        finally:
            for handler in handlers:
                log.removeHandler(handler)
                handler.close()


def _serve(workspace: Workspace, clock: Clock, settings: DaemonSettings, stop: threading.Event,
           log: logging.Logger, install_signal_handlers: bool) -> int:  # fmt: skip
    jobs = _Jobs(workspace, clock, stop, log)
    scheduler = _scheduler(jobs, settings)
    previous = _install_handlers(stop, log) if install_signal_handlers else {}
    try:
        log.info("slipwatch run: watching %s every %g minutes (pid %d); stop with SIGTERM or Ctrl-C",
                 workspace.root, settings.interval_minutes, os.getpid())  # fmt: skip
        scheduler.start()
        while not stop.wait(timeout=1.0):
            pass
        log.info("stop requested: no new work; waiting up to %g s for the running job",
                 settings.stop_timeout_seconds)  # fmt: skip
        scheduler.shutdown(wait=False)
        if jobs.busy.acquire(timeout=settings.stop_timeout_seconds):
            jobs.busy.release()
            log.info("slipwatch run stopped cleanly")
            return _EXIT_CLEAN
        log.error("the running job did not finish within %g s; leaving without it (its open store "
                  "transaction is rolled back, so nothing is half-written)", settings.stop_timeout_seconds)  # fmt: skip
        _leave(_EXIT_FORCED)
        return _EXIT_FORCED  # only reached when _leave is replaced in tests
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


def _scheduler(jobs: _Jobs, settings: DaemonSettings) -> BackgroundScheduler:
    """The two jobs on interval triggers in UTC; the assessment job's first run is at once.
    The jobs plan their second-look cycles on this scheduler."""
    interval = settings.interval_minutes * 60.0
    grace = settings.misfire_grace_seconds
    # Three threads: the regular cycle, a second-look cycle (which skips its turn while the
    # regular one runs) and the delivery.
    scheduler = BackgroundScheduler(timezone=timezone.utc, executors={"default": ThreadPoolExecutor(3)})
    scheduler.add_job(
        jobs.assess, IntervalTrigger(seconds=interval, timezone=timezone.utc),
        id="assess", name="assessment cycle", next_run_time=datetime.now(timezone.utc),
        coalesce=True, max_instances=1, misfire_grace_time=max(1, round(grace or interval)),
    )  # fmt: skip
    scheduler.add_job(
        jobs.deliver, IntervalTrigger(seconds=settings.delivery_seconds, timezone=timezone.utc),
        id="deliver", name="notification delivery", coalesce=True, max_instances=1,
        misfire_grace_time=max(1, round(grace or settings.delivery_seconds)),
    )  # fmt: skip
    jobs.scheduler = scheduler
    return scheduler


def _install_handlers(stop: threading.Event, log: logging.Logger) -> dict:
    def on_signal(number, _frame):
        if stop.is_set():
            log.error("second stop signal (%s): leaving now", signal.Signals(number).name)
            _leave(_EXIT_FORCED)
        log.info("received %s", signal.Signals(number).name)
        stop.set()

    return {number: signal.signal(number, on_signal) for number in (signal.SIGTERM, signal.SIGINT)}


def _leave(status: int) -> None:
    # Worker threads may be inside a cycle; os._exit does not wait for them. SQLite rolls the
    # open transaction back (WAL: uncommitted pages are never visible).
    logging.shutdown()
    os._exit(status)


def _open_log(path: Path, echo: bool) -> tuple[logging.Logger, list[logging.Handler]]:
    path.parent.mkdir(parents=True, exist_ok=True)
    # WatchedFileHandler reopens the file after logrotate moves it.
    handler = logging.handlers.WatchedFileHandler(path, encoding="utf-8")
    formatter = logging.Formatter("%(asctime)s %(levelname)s %(message)s", "%Y-%m-%dT%H:%M:%SZ")
    formatter.converter = time.gmtime
    handler.setFormatter(formatter)
    handlers: list[logging.Handler] = [handler]
    if echo:  # under systemd, standard error goes to the journal
        console = logging.StreamHandler()
        console.setFormatter(formatter)
        handlers.append(console)
    log = logging.getLogger(LOGGER)
    log.setLevel(logging.INFO)
    for h in handlers:
        log.addHandler(h)
    return log, handlers
