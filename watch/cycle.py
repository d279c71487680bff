"""The assessment cycle: ingest what is waiting, rebuild the water lines, re-evaluate the factor
of safety of every section, store the assessment, evaluate the triggers and queue the
notifications and inspection requests, each section in one transaction.

``run_cycle`` is the one entry point the daemon and ``slipwatch assess`` call.
``replay_season`` drives it through a season with a manual clock, delivering the feed files
as a logger would, so that a whole wet season runs in a test.

Calculation per section: warm re-evaluation of the surfaces kept by the section's last full
search (cached in the store, so a restart keeps the warm state), and a full critical-surface
search when none is cached, when the cached one is older than ``[cycle]
full_search_every_hours`` or ran on another parameter version, or when the warm result advises
one (the factor of safety moved beyond ``full_search_tolerance``, or another cached surface
became critical). A section whose inputs (parameter version, water lines and the readings
behind them) did not change since its last assessment is not calculated again.

What the triggers see: the factor of safety only when it rests on live readings and converged;
when a water line that has piezometers fell back to its design line, or the calculation failed
or did not converge, the owner's levels keep their state (no silent "all clear") and the
data-quality alerts say why.
"""

from __future__ import annotations

import hashlib
import json
import math
import shutil
import time
from collections import Counter
from dataclasses import asdict, dataclass, field, replace
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from solver.errors import SolverError
from solver.search import (
    RankedSurface,
    SearchResult,
    SearchSettings,
    every_method,
    warm_reevaluate,
)
from solver.slicing import slice_surface
from watch.alerting import (SectionContext, last_evaluations, process_section_alerts, release_shelved,
                            site_context)
from watch.analysis import analyse, surface_of
from watch.assessment_status import ON_DESIGN_LINES, fos_basis
from watch.clock import Clock, ManualClock
from watch.config import SiteConfig
from watch.errors import BusyError, UserError
from watch.executors import InProcessExecutor, SectionExecutor, SectionFailure, executor_for
from watch.groundwater import rate_of_rise
from watch.ingest import ingest, record_first_look
from watch.lifecycle import OUT_OF_SERVICE, service_state
from watch.parameters import current_section, follow_section_file
from watch.rainfall import DEFAULT_DRY_GAP_H, event_exceedance, rain_record_reach, window_totals
from watch.store import Store, parse_utc_text, utc_text
from watch.text import printable
from watch.triggers import (NEVER_REPORTED_AGE_H, RAIN_CURVES, SECTION_FILE_RULE, SITE_ALERTS, AlertSettings,
                            SectionRule, alert_settings, section_gauge)
from watch.waterlines import section_with_lines, store_water_lines, water_lines_from_store
from watch.workspace import Workspace

__all__ = [
    "SectionOutcome",
    "CycleReport",
    "SectionTask",
    "SectionResult",
    "compute_section",
    "cycle_executor",
    "run_cycle",
    "replay_season",
    "ReplayReport",
    "season_summary",
    "search_to_json",
    "search_from_json",
]

#: Sections the coordinator writes per transaction: one commit (and its disk flush) per group
#: instead of per section; a crash loses at most the group being written, whose sections are
#: calculated again by the next cycle (their inputs were not recorded as assessed).
WRITE_BATCH = 32

#: How far back a "suspect readings since the last cycle" check looks at most.
_SUSPECT_LOOKBACK = timedelta(days=7)



@dataclass
class SectionOutcome:
    """What one cycle did for one section."""

    section_id: str
    status: str  # ok | no live data | not converged | failed | unchanged | a state out of service
    fos: float | None = None
    method: str | None = None
    evaluation: str | None = None  # full search | warm re-evaluation
    live: bool = True  # the factor of safety rests on live readings
    assessment_id: int | None = None
    changes: list[str] = field(default_factory=list)  # alert state changes, in words
    notifications: int = 0
    inspections: int = 0
    warnings: list[str] = field(default_factory=list)
    message: str = ""
    seconds: float = 0.0
    chattering: list[str] = field(default_factory=list)  # those of ``warnings`` on chattering


@dataclass
class CycleReport:
    """What one run of the cycle did."""

    at: datetime
    started: datetime
    files: list[str] = field(default_factory=list)  # ingest summary lines
    ingest_failures: list[str] = field(default_factory=list)  # what the watch failed on while ingesting
    #: Files the ingest left waiting for their second look (IngestReport.second_looks), and
    #: when the first of them can be taken: the daemon runs a cycle then.
    second_looks: int = 0
    second_look_due: datetime | None = None
    site_changes: list[str] = field(default_factory=list)  # state changes of the site's own alerts
    site_notifications: int = 0  # queued by them
    sections: list[SectionOutcome] = field(default_factory=list)
    released: list[str] = field(default_factory=list)  # alerts un-shelved (expired)
    chattering: list[str] = field(default_factory=list)
    seconds: float = 0.0
    executor: str = "in-process"  # where the sections were calculated
    retries: int = 0  # calculation attempts repeated after a worker died, raised or stalled

    @property
    def failed(self) -> list[SectionOutcome]:
        return [s for s in self.sections if s.status in ("failed", "not converged")]

    @property
    def notifications(self) -> int:
        return sum(s.notifications for s in self.sections) + self.site_notifications

    @property
    def ok(self) -> bool:
        """Nothing failed: the ingest read what it took and every section was assessed
        (the commands exit non-zero otherwise)."""
        return not self.ingest_failures and not self.failed

    def to_dict(self) -> dict:
        return {
            "at_utc": utc_text(self.at),
            "started_utc": utc_text(self.started),
            "seconds": round(self.seconds, 3),
            "files": self.files,
            "ingest_failures": self.ingest_failures,
            "second_looks": self.second_looks,
            "second_look_due_utc": None if self.second_look_due is None else utc_text(self.second_look_due),
            "site_changes": self.site_changes,
            "sections": [asdict(s) | {"fos_basis": fos_basis(s.status)} for s in self.sections],
            "released": self.released,
            "chattering": self.chattering,
            "executor": self.executor,
            "retries": self.retries,
        }


def run_cycle(
    workspace: Workspace,
    clock: Clock,
    *,
    sections: list[str] | None = None,
    at: datetime | None = None,
    progress: bool = False,
    ingest_waiting: bool = True,
    executor: SectionExecutor | None = None,
    compute=None,
) -> CycleReport:
    """Run one assessment cycle.

    Parameters
    ----------
    workspace : Workspace
    clock : Clock
        Gives "now": the ingest's time, the time records are written, shelving expiry.
    sections : list of str, optional
        Section ids to assess (default: every section of the site file).
    at : datetime, optional
        Time to assess (default now). An earlier time re-assesses the past; alerts that were
        already evaluated later are then left alone (alerts never go back in time).
    progress : bool
        Progress bar over the sections (sections done, failed, rate).
    ingest_waiting : bool
        Ingest the files waiting in incoming/ first (default).
    executor : SectionExecutor, optional
        Where the sections are calculated (:mod:`watch.executors`; default in this process).
        Only this process writes to the store, whatever the executor.
    compute : callable, optional
        The per-section calculation, ``SectionTask -> SectionResult`` (default
        :func:`compute_section`); another one is for tests and instrumentation.

    Returns
    -------
    CycleReport
    """
    started_wall = time.perf_counter()
    now = clock.now()
    at = now if at is None else _aware(at)
    if at > now:
        raise UserError(f"cannot assess {utc_text(at)}: it is later than now ({utc_text(now)})")
    report = CycleReport(at=at, started=now)
    ingest_ran = ingest_waiting
    if ingest_waiting:
        try:
            ingested = ingest(workspace, now=now, progress=False)
        except BusyError as error:  # another ingest is at it: the files wait for it or the next cycle
            report.files = [printable(f"ingest left to the one running: {error}")]
            ingest_ran = False
        except Exception as error:  # noqa: BLE001 - a failed ingest must not stop the assessment
            report.ingest_failures = [printable(f"the ingest failed: {type(error).__name__}: {error}")]
        else:
            report.files = [f.line() for f in ingested.files]
            report.ingest_failures = [f.line() for f in ingested.failures]
            report.second_looks, report.second_look_due = len(ingested.second_looks), ingested.second_look_due
    config = workspace.config()
    settings = alert_settings(config)
    chosen = _chosen_sections(config, sections)
    # Without an executor given, the site file's [cycle] cluster decides (the daemon's case);
    # an executor made here (a pool, a local Dask cluster) lives for this cycle only.
    owned = executor is None
    if owned:
        executor = cycle_executor(workspace) if settings.cycle.cluster else InProcessExecutor()
    compute = compute_section if compute is None else compute
    with workspace.open_store() as store:
        with store.atomic():
            cycle_id = store.start_cycle(utc_text(at), utc_text(now))
        report.released = release_shelved(store, config, settings, now)
        try:
            report.sections = _assess_sections(workspace, store, config, settings, chosen, at, now,
                                               executor, compute, progress)  # fmt: skip
        finally:
            if owned:
                executor.close()
        if ingest_ran:
            with store.atomic():
                _record_site_alerts(store, config, settings, report, now)
        report.executor = executor.describe()
        report.retries = executor.retries
        report.chattering = [c for s in report.sections for c in s.chattering]
        report.seconds = time.perf_counter() - started_wall
        with store.atomic():
            store.finish_cycle(cycle_id, utc_text(clock.now()), json.dumps(report.to_dict(), default=str))
    return report


def _record_site_alerts(store: Store, config: SiteConfig, settings: AlertSettings, report: CycleReport,
                        now: datetime) -> None:  # fmt: skip
    """Evaluate the site's own data-quality alerts (the ingest failing) at ``now``, inside the
    caller's transaction; their changes and notifications go into ``report``."""
    rules = settings.site_rules()
    if not rules:
        return
    context = site_context(config, now, report.ingest_failures)
    values = {rule.rule.name: float(bool(report.ingest_failures)) for rule in rules}
    result = process_section_alerts(store, config, settings, SITE_ALERTS, rules, values, now, now, context)
    report.site_changes = result.changes
    report.site_notifications = result.notifications


def _assess_sections(workspace, store: Store, config, settings: AlertSettings, chosen: list[str],
                     at: datetime, now: datetime, executor: SectionExecutor, compute, progress: bool,
                     ) -> list[SectionOutcome]:  # fmt: skip
    """Prepare every section from the store and submit the ones to calculate; write the
    sections (assessment, water lines, cached search, alerts) in transactions of
    :data:`WRITE_BATCH`, in the order of ``chosen`` whatever order the workers finish in, so
    row ids do not depend on the executor. A section is in the store with all its rows or not
    at all."""
    bar = tqdm(total=len(chosen), disable=not progress, unit="section", desc="assess")
    prepared: dict[str, tuple[_Calculation, float]] = {}  # and the seconds it took
    computed: dict[str, SectionResult | SectionFailure] = {}
    outcomes: list[SectionOutcome] = []
    failed = 0

    def write_ready(at_least: int = WRITE_BATCH):
        """Write the sections ready in ``chosen`` order, ``at_least`` of them at a time (fewer
        only at the end), each group in one transaction."""
        nonlocal failed
        while True:
            ready = []
            for section_id in chosen[len(outcomes):len(outcomes) + WRITE_BATCH]:
                if section_id not in prepared or (prepared[section_id][0].status == "pending"
                                                  and section_id not in computed):  # fmt: skip
                    break
                ready.append(section_id)
            if not ready or len(ready) < min(at_least, len(chosen) - len(outcomes)):
                return
            with store.atomic():
                written = []
                for section_id in ready:
                    calc, seconds = prepared[section_id]
                    if calc.status == "pending":
                        result = computed[section_id]
                        _take_result(calc, result)
                        seconds += getattr(result, "seconds", 0.0)
                    written.append(_record_section(store, config, settings, section_id, calc, at, now, seconds,
                                                   gauges))  # fmt: skip
            for section_id, outcome in zip(ready, written):
                computed.pop(section_id, None)
                del prepared[section_id]
                outcomes.append(outcome)
                failed += outcome.status in ("failed", "not converged")
                bar.update(1)
            bar.set_postfix(failed=failed)

    gauges = _GaugeRecords(store, at, _rain_reach(settings))
    executor.start(compute)
    with executor:
        for section_id in chosen:
            started = time.perf_counter()
            calc, task = _prepare(workspace, store, config, settings, section_id, at, now)
            prepared[section_id] = (calc, time.perf_counter() - started)
            if task is not None:
                executor.submit(section_id, task)
            for done_id, result in executor.ready():
                computed[done_id] = result
            write_ready()
        for section_id, result in executor.results():
            computed[section_id] = result
            write_ready()
        write_ready(at_least=1)
    bar.close()
    if len(outcomes) != len(chosen):  # an executor that lost a section is a bug, not a result
        missing = [s for s in chosen if s not in {o.section_id for o in outcomes}]
        raise RuntimeError(f"the {executor.name} executor returned no result for {', '.join(missing)}")
    return outcomes


def cycle_executor(workspace: Workspace, cluster: str | None = None, workers: int | None = None,
                   ) -> SectionExecutor:  # fmt: skip
    """The executor of a cycle: ``cluster`` (Dask scheduler address or ``local:N``) or
    ``workers`` (> 1: a local process pool) as given, else the site file's ``[cycle] cluster``,
    else this process."""
    cycle = alert_settings(workspace.config()).cycle
    if cluster is None and workers is None:
        cluster = cycle.cluster
    return executor_for(cluster, workers, sections_per_task=cycle.sections_per_task)


def _chosen_sections(config: SiteConfig, sections: list[str] | None) -> list[str]:
    known = [s.id for s in config.sections]
    if not sections:
        return known
    sections = list(dict.fromkeys(sections))  # a section named twice is assessed once
    unknown = [s for s in sections if config.section_ref(s) is None]
    if unknown:
        raise UserError(f"section(s) {', '.join(unknown)} not in the site file (sections: "
                        f"{', '.join(known) or 'none'})")  # fmt: skip
    return list(sections)


# --- one section ------------------------------------------------------------------------------


@dataclass
class _Calculation:
    status: str
    section: object = None
    version_id: int | None = None
    lines: dict | None = None
    fos: float | None = None
    method: str | None = None
    evaluation: str | None = None
    critical: RankedSurface | None = None
    by_method: list[dict] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    message: str = ""
    new_search: SearchResult | None = None
    new_search_json: str | None = None
    inputs: dict = field(default_factory=dict)
    inputs_key: str = ""
    live: bool = True
    file_problem: str | None = None  # what is wrong with the section file (the last valid version runs)


@dataclass(frozen=True)
class SectionTask:
    """All a worker needs to calculate one section: no store, no clock, picklable.

    ``section`` already carries this cycle's water lines; ``cached_search_json`` is the warm
    state (None when a full search is due: none cached for this parameter version, or the
    scheduled one)."""

    section_id: str
    section: object
    cached_search_json: str | None
    full_search_tolerance: float

    @property
    def full_search(self) -> bool:
        """Whether the worker will run a full search (nothing warm to start from); a warm
        re-evaluation may still end in one when it advises it."""
        return self.cached_search_json is None


@dataclass
class SectionResult:
    """A worker's answer for one section (plain and picklable)."""

    section_id: str
    status: str  # ok | not converged | failed
    fos: float | None = None
    method: str | None = None  # the governing method
    evaluation: str | None = None  # full search | warm re-evaluation
    critical: RankedSurface | None = None
    by_method: list[dict] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    message: str = ""
    new_search_json: str | None = None  # the kept surfaces, when a full search ran
    seconds: float = 0.0


def compute_section(task: SectionTask) -> SectionResult:
    """Factor of safety of one prepared section: warm re-evaluation of the cached surfaces,
    or a full search when none is cached or the warm result advises one. Pure: what runs on a
    worker. A library error is a failed result, not an exception."""
    started = time.perf_counter()
    calc = _Calculation("ok")
    try:
        cached = None if task.cached_search_json is None else search_from_json(task.cached_search_json)
        _solve(task.section, cached, task.full_search_tolerance, calc)
    except (UserError, SolverError) as error:
        calc.status, calc.message = "failed", f"factor of safety could not be calculated: {error}"
    return SectionResult(
        task.section_id, calc.status, fos=calc.fos, method=calc.method, evaluation=calc.evaluation,
        critical=calc.critical, by_method=calc.by_method, warnings=calc.warnings, message=calc.message,
        new_search_json=None if calc.new_search is None else search_to_json(calc.new_search),
        seconds=time.perf_counter() - started,
    )  # fmt: skip


def _record_section(store: Store, config, settings: AlertSettings, section_id: str, calc: _Calculation,
                    at: datetime, now: datetime, seconds: float, gauges: "_GaugeRecords") -> SectionOutcome:  # fmt: skip
    """The coordinator's half: the assessment, its water lines, the new cached search and the
    alerts of one section, inside the caller's transaction. ``seconds``: the preparation and
    calculation time so far (the time spent waiting for a worker is not the section's)."""
    started = time.perf_counter() - seconds
    if calc.status in OUT_OF_SERVICE:
        return SectionOutcome(section_id, calc.status, message=calc.message)
    rules = [replace(r, description=f"section file problem: {calc.file_problem}")
             if r.rule.name == SECTION_FILE_RULE and calc.file_problem else r
             for r in settings.rules_for(config, section_id)]  # fmt: skip
    context = _context(store, config, settings, section_id, calc, at, gauges)
    values = {r.rule.name: _observe(store, r, calc, context, at, gauges) for r in rules}
    outcome = SectionOutcome(
        section_id, calc.status, fos=calc.fos, method=calc.method, evaluation=calc.evaluation,
        live=calc.live, warnings=list(calc.warnings), message=calc.message,
    )  # fmt: skip
    if calc.status != "unchanged":
        outcome.assessment_id = store.insert_assessment(_assessment_row(calc, section_id, at, now,
                                                                        time.perf_counter() - started))
        if calc.lines:
            store_water_lines(store, outcome.assessment_id, section_id, at, calc.lines,
                              created_utc=utc_text(now))  # fmt: skip
        if calc.new_search_json is not None:
            store.save_search(section_id, calc.version_id, utc_text(at), calc.new_search_json,
                              utc_text(now))  # fmt: skip
    context.assessment_id = outcome.assessment_id
    result = process_section_alerts(store, config, settings, section_id, rules, values, at, now, context)
    outcome.changes = result.changes
    outcome.notifications = result.notifications
    outcome.inspections = result.inspections
    outcome.warnings += result.warnings
    outcome.chattering = result.chattering
    outcome.seconds = time.perf_counter() - started
    return outcome


def _prepare(workspace, store: Store, config, settings: AlertSettings, section_id: str,
             at: datetime, now: datetime) -> tuple[_Calculation, SectionTask | None]:  # fmt: skip
    """Water lines and inputs from the store; the task to calculate, or None when the section
    is settled without one (inputs could not be prepared, or unchanged since its last
    assessment). Any library error becomes a failed calculation."""
    try:
        check = follow_section_file(workspace, store, section_id, now, config=config)
        state = service_state(store, section_id, at)
        if state is not None and not state.in_service:
            # Versions still follow the file (the post-slip or repaired geometry is loaded so),
            # but the section is neither calculated nor are its alerts evaluated.
            return _Calculation(state.state, version_id=check.version_id,
                                message=f"not assessed: {state.describe()}; its alerts are held"), None  # fmt: skip
        if check.version_id is None:
            return _Calculation("failed", message=f"inputs could not be prepared: {check.problem}",
                                file_problem=check.problem), None  # fmt: skip
        section, version_id = current_section(workspace, store, section_id, now, config=config)
        lines = water_lines_from_store(store, section, config, at)
    except (UserError, SolverError) as error:
        return _Calculation("failed", message=f"inputs could not be prepared: {error}"), None
    except Exception as error:  # noqa: BLE001 - one section's unforeseen error must not stop the others
        return _Calculation("failed", message=f"inputs could not be prepared (unexpected error "
                                              f"{type(error).__name__}: {error})"), None  # fmt: skip
    calc = _Calculation("pending", section=section, version_id=version_id, lines=lines,
                        file_problem=check.problem)
    if check.new_version is not None:
        calc.warnings.append(f"section file {check.file} changed: parameter version {check.new_version}")
    if check.problem is not None:
        calc.warnings.append(f"section file problem: {check.problem}")
    instrumented = {p.water_line for p in config.piezometers_of(section_id)}
    for name, line in lines.items():
        if line.fallback != "none":
            calc.warnings.append(f"water line {name}: {line.fallback} ({line.fallback_reason})")
        if name in instrumented and line.source == "design line":
            calc.live = False
    calc.inputs = _inputs(version_id, lines)
    calc.inputs_key = hashlib.sha256(json.dumps(calc.inputs, sort_keys=True).encode()).hexdigest()
    last = store.last_assessment(section_id)
    if last is not None and last["inputs_key"] == calc.inputs_key and last["status"] != "failed":
        calc.status = "unchanged"
        calc.message = f"inputs unchanged since the assessment at {last['time_utc']}"
        return calc, None
    current = section_with_lines(section, lines)
    try:
        cached = _cached_search_json(store, section_id, version_id, at, settings.cycle.full_search_every_hours)
    except (UserError, SolverError) as error:
        calc.status, calc.message = "failed", f"factor of safety could not be calculated: {error}"
        return calc, None
    return calc, SectionTask(section_id, current, cached, settings.cycle.full_search_tolerance)


def _take_result(calc: _Calculation, result: SectionResult | SectionFailure) -> None:
    """Fold a worker's answer into the prepared calculation."""
    if isinstance(result, SectionFailure):
        calc.status = "failed"
        calc.message = (f"factor of safety could not be calculated: {result.attempts} attempt(s) "
                        f"failed, the last with {result.message}")  # fmt: skip
        return
    calc.status, calc.fos, calc.method, calc.evaluation = result.status, result.fos, result.method, result.evaluation
    calc.critical, calc.by_method, calc.message = result.critical, result.by_method, result.message
    calc.warnings += result.warnings
    calc.new_search_json = result.new_search_json
    if calc.status == "ok" and not calc.live:
        calc.status = ON_DESIGN_LINES
        calc.message = ("a water line with piezometers fell back to its design line: the factor of "
                        "safety does not rest on readings")


def _solve(current, cached: SearchResult | None, full_search_tolerance: float, calc: _Calculation) -> None:
    reasons = ["no cached search for this parameter version" if cached is None else ""]
    if cached is not None:
        try:
            warm = warm_reevaluate(current, cached, full_search_tolerance=full_search_tolerance)
        except SolverError as error:
            reasons = [f"warm re-evaluation impossible: {error}"]
        else:
            if not warm.full_search_advised:
                calc.evaluation, calc.method, calc.critical = "warm re-evaluation", warm.method, warm.critical
                calc.fos = float(warm.fos)
                calc.by_method = _by_method(current, warm.critical, cached.settings)
                _check_converged(calc)
                return
            reasons = list(warm.reasons)
    analysis = analyse(current)
    calc.evaluation, calc.method, calc.critical = "full search", analysis.method, analysis.critical
    calc.fos = float(analysis.fos)
    calc.new_search = analysis.search
    calc.by_method = [asdict(m) for m in analysis.by_method]
    calc.warnings += [f"full search: {r}" for r in reasons if r] + list(analysis.search.notes)
    _check_converged(calc)


def _check_converged(calc: _Calculation) -> None:
    governing = next((m for m in calc.by_method if m["method"] == calc.method), None)
    if not calc.critical.converged or (governing is not None and not governing["converged"]):
        calc.status = "not converged"
        calc.message = f"{calc.method} did not converge on the critical surface" + (
            f": {governing['message']}" if governing and governing["message"] else "")
    elif not math.isfinite(calc.fos):
        calc.status, calc.message = "failed", "the factor of safety is not a number"


def _cached_search_json(store: Store, section_id: str, version_id, at: datetime, every_hours: float):
    row = store.cached_search(section_id)
    if row is None or row["section_version_id"] != version_id:
        return None
    if abs(at - parse_utc_text(row["time_utc"])) >= timedelta(hours=every_hours):
        return None  # scheduled full search
    if "faces" not in json.loads(row["search_json"]):
        # Cached by a version that searched one face of some two-faced sections (and named the
        # slip ends otherwise): search again so that every face is watched.
        return None
    return row["search_json"]


def _by_method(section, critical: RankedSurface, settings: SearchSettings) -> list[dict]:
    slices = slice_surface(section, surface_of(critical), settings.n_slices,
                           direction=critical.direction)
    return [
        {"method": name, "fos": float(r.fos[0]), "converged": bool(r.converged[0]),
         "admissible": bool(r.admissible[0]), "iterations": int(r.iterations[0]),
         "message": r.message[0]}  # fmt: skip
        for name, r in every_method(slices, settings).items()
    ]


def _inputs(version_id, lines) -> dict:
    return {
        "section_version_id": version_id,
        "water_lines": {
            name: {
                "source": line.source,
                "fallback": line.fallback,
                "points_m": np.round(np.asarray(line.points, dtype=float), 4).tolist(),
                "readings": [{k: r.get(k) for k in ("instrument_id", "time_utc", "head_m",
                                                    "source_file_id", "source_line")}
                             for r in line.readings],  # fmt: skip
            }
            for name, line in lines.items()
        },
    }


def _assessment_row(calc: _Calculation, section_id: str, at: datetime, now: datetime, seconds: float) -> dict:
    critical = calc.critical
    governing = next((m for m in calc.by_method if m["method"] == calc.method), {})
    return {
        "section_id": section_id,
        "section_version_id": calc.version_id,
        "time_utc": utc_text(at),
        "method": calc.method or "",
        "fos": calc.fos if calc.fos is not None and math.isfinite(calc.fos) else None,
        "converged": int(calc.status == "ok"),
        "iterations": governing.get("iterations"),
        "message": calc.message,
        "surface_json": json.dumps(_surface_dict(critical)) if critical else None,
        "inputs_json": json.dumps(calc.inputs, default=str),
        "created_utc": utc_text(now),
        "status": calc.status,
        "evaluation": calc.evaluation,
        "fos_by_method_json": json.dumps(calc.by_method, default=_plain),
        "warnings_json": json.dumps(calc.warnings),
        "inputs_key": calc.inputs_key,
        "duration_s": round(seconds, 4),
    }


# --- what the triggers see ----------------------------------------------------------------------


def _context(store: Store, config: SiteConfig, settings: AlertSettings, section_id: str, calc: _Calculation,
             at: datetime, gauges: "_GaugeRecords") -> SectionContext:
    """The facts every message of the section repeats: factor of safety and trend, water, rain
    and data age."""
    at_text = utc_text(at)
    # Only a factor of safety from live readings is shown (never the design lines' one).
    fos, method = (calc.fos, calc.method) if calc.status == "ok" else (None, None)
    if calc.status == "unchanged":
        last = store.last_assessment(section_id, at_text, with_fos=True)
        if last is not None:
            fos, method = last["fos"], last["method"]
    earlier = store.last_assessment(section_id, utc_text(at - timedelta(hours=24)), with_fos=True)
    instruments = [p.id for p in config.piezometers_of(section_id)]
    gauge = section_gauge(config, section_id)
    ages = {}
    for iid in instruments + ([gauge] if gauge else []):
        newest = store.newest_reading(iid, at_text)
        ages[iid] = None if newest is None else (at - parse_utc_text(newest["time_utc"])).total_seconds() / 3600
    rain = gauges.series(gauge) if gauge else None
    water = {}
    for name, line in (calc.lines or {}).items():
        water[name] = {"source": line.source, "heads_m": dict(line.heads_used)}
    return SectionContext(
        site_id=config.id, site_name=config.name, section_id=section_id,
        section_name=getattr(calc.section, "name", "") or "", at=at, fos=fos, method=method,
        fos_24h_ago=None if earlier is None else earlier["fos"], status=calc.status,
        message=calc.message, live=calc.live, water=water, gauge=gauge,
        rain_24h_mm=_total(rain, at, 24.0), rain_7d_mm=_total(rain, at, 168.0), ages_h=ages,
        rain=None if rain is None else rain[0], stale_hours=settings.data.stale_hours,
        last_evaluated=last_evaluations(store, section_id),
    )  # fmt: skip


def _observe(store: Store, rule: SectionRule, calc: _Calculation, context: SectionContext, at: datetime,
             gauges: "_GaugeRecords"):
    """The value a rule watches at ``at``; None when there is no trustworthy value (the alert
    then keeps its state)."""
    quantity = rule.rule.quantity
    at_text = utc_text(at)
    if quantity == "fos":
        return calc.fos if calc.status == "ok" else None
    if quantity == "section_file":
        return 1.0 if calc.file_problem else 0.0
    if quantity == "failed":
        if calc.status in ("unchanged", ON_DESIGN_LINES):
            return None
        return 0.0 if calc.status == "ok" else 1.0
    if quantity == "age_h":
        return max((NEVER_REPORTED_AGE_H if age is None else age for age in context.ages_h.values()),
                   default=None)  # fmt: skip
    if quantity == "flat":
        newest = store.newest_reading(rule.instrument, at_text)
        return None if newest is None else float(newest["quality"] == "flat")
    if quantity == "suspect":
        since = context.last_evaluated.get(rule.rule.name) or at - timedelta(hours=context.stale_hours)
        since = max(since, at - _SUSPECT_LOOKBACK)
        rows = store.readings(rule.instrument, utc_text(since + timedelta(seconds=1)), at_text)
        return float(any(r["quality"] in ("out_of_range", "spike") for r in rows))
    if quantity in ("head_m", "rise_m_per_h"):
        return _head_value(store, rule, at, context.stale_hours)
    if quantity == "rain_mm":
        return _total(_fresh(context, rule.instrument, gauges), at, rule.window_hours)
    if quantity == "rain_id_ratio":
        if _fresh(context, rule.instrument, gauges) is None:
            return None
        return gauges.id_ratio(rule.instrument, rule.curve, rule.dry_gap_hours)
    raise UserError(f"rule {rule.rule.name!r}: no way to observe quantity {quantity!r}")


def _head_value(store: Store, rule: SectionRule, at: datetime, stale_hours: float):
    window = timedelta(hours=rule.window_hours or stale_hours)
    rows = [r for r in store.readings(rule.instrument, utc_text(at - window), utc_text(at))
            if r["quality"] == "ok" and r["head_m"] is not None]  # fmt: skip
    if not rows:
        return None
    if rule.rule.quantity == "head_m":
        return float(rows[-1]["head_m"])
    first, last = rows[0], rows[-1]
    hours = (parse_utc_text(last["time_utc"]) - parse_utc_text(first["time_utc"])).total_seconds() / 3600
    if hours < 0.5 * window.total_seconds() / 3600:
        return None  # too short a record in the window for a rate
    # The least-squares slope over every good reading of the window, not a difference of its
    # two ends (one noisy end reading would set that alone).
    rate = rate_of_rise([r["time_utc"] for r in rows], [float(r["head_m"]) for r in rows])
    return rate if math.isfinite(rate) else None


def _rain_series(store: Store, gauge: str, at: datetime, reach: pd.Timedelta) -> tuple[pd.Series, pd.Series] | None:
    """(rain_mm, gap_start) of the good reports of a gauge (watch.rainfall's series and the
    start of the gap each report after a gap covers, NaT for the others); None without any."""
    rows = [r for r in store.readings(gauge, utc_text(at - reach.to_pytimedelta()), utc_text(at))
            if r["quality"] == "ok" and r["rain_mm"] is not None]  # fmt: skip
    if not rows:
        return None
    index = pd.to_datetime([r["time_utc"] for r in rows], utc=True)
    gap_start = pd.Series(pd.to_datetime([r["gap_start_utc"] for r in rows], utc=True), index=index)
    return pd.Series([float(r["rain_mm"]) for r in rows], index=index, name="rain_mm"), gap_start


def _rain_reach(settings: AlertSettings) -> pd.Timedelta:
    """How far back the cycle reads each gauge: the 24 h and 7 days the messages quote, every
    rain window of the site's rules and the longest event their curves can be compared with
    (watch.rainfall.rain_record_reach)."""
    windows = [24.0, 168.0] + [t.window_hours for t in settings.triggers if t.window_hours]
    curves = tuple(RAIN_CURVES[c] for c in sorted({t.curve for t in settings.triggers if t.curve}))
    gap = max([t.dry_gap_hours for t in settings.triggers if t.dry_gap_hours]
              + [DEFAULT_DRY_GAP_H])  # fmt: skip
    return rain_record_reach(curves, gap, window_hours=windows)


def _fresh(context: SectionContext, gauge: str, gauges: "_GaugeRecords") -> tuple[pd.Series, pd.Series] | None:
    """The rain record of a gauge, or None when the gauge is stale: a gauge that stopped
    reporting must not read as a dry spell."""
    age = context.ages_h.get(gauge)
    if age is None or age > context.stale_hours:
        return None
    return gauges.series(gauge)


class _GaugeRecords:
    """The rain record of each gauge up to the cycle's time, and its worst ratio to each
    intensity-duration curve, each worked out once per cycle: many sections share a gauge, and
    the ratio was the largest part of the coordinator's time per section. Within a cycle the
    readings do not change (the ingest runs before it, and this process is the only writer)."""

    def __init__(self, store: Store, at: datetime, reach: pd.Timedelta) -> None:
        self._store, self._at, self._reach = store, at, reach
        self._series: dict[str, tuple[pd.Series, pd.Series] | None] = {}
        self._ratios: dict[tuple, float | None] = {}

    def series(self, gauge: str) -> tuple[pd.Series, pd.Series] | None:
        """(rain_mm, gap_start) of the gauge (``_rain_series``)."""
        if gauge not in self._series:
            self._series[gauge] = _rain_series(self._store, gauge, self._at, self._reach)
        return self._series[gauge]

    def id_ratio(self, gauge: str, curve, dry_gap_h: float) -> float | None:
        """Ratio of the rain event under way at the gauge to the curve (0 with no event under
        way); None without rain records or when the event cannot be compared (outside the
        curve's durations, or starting before the record)."""
        key = (gauge, curve, dry_gap_h)
        if key not in self._ratios:
            record = self.series(gauge)
            ratio = (None if record is None
                     else event_exceedance(record[0], self._at, curve, dry_gap_h, record[1]).ratio)  # fmt: skip
            self._ratios[key] = ratio if ratio is not None and math.isfinite(ratio) else None
        return self._ratios[key]


def _total(record: tuple[pd.Series, pd.Series] | None, at: datetime, hours: float | None) -> float | None:
    """Rain over the ``hours`` before ``at`` (watch.rainfall.window_totals); None when there
    is no record, the record does not cover the whole window (a partial total) or the window
    holds only part of a gap whose rain was reported after it."""
    if record is None or hours is None:
        return None
    total = float(window_totals(record[0], at, hours, record[1])[0])
    return total if math.isfinite(total) else None


# --- cached searches as JSON --------------------------------------------------------------------


def search_to_json(result: SearchResult) -> str:
    """A search's kept surfaces and settings as JSON (the warm state kept in the store)."""
    return json.dumps({
        "surfaces": [_surface_dict(s) for s in result.surfaces],
        "method": result.method,
        "settings": asdict(result.settings),
        "n_trials": result.n_trials,
        "n_valid": result.n_valid,
        "rejected": dict(result.rejected),
        "filtered": dict(result.filtered),
        "stages": list(result.stages),
        "notes": list(result.notes),
        "faces": list(result.faces),
        "lattice_edge": list(result.lattice_edge),
        "lowest_tangent": list(result.lowest_tangent),
    }, default=_plain)  # fmt: skip


def search_from_json(text: str) -> SearchResult:
    data = json.loads(text)
    surfaces = tuple(_surface_from_dict(s) for s in data["surfaces"])
    return SearchResult(
        surfaces=surfaces, method=data["method"], settings=SearchSettings(**data["settings"]),
        n_trials=data["n_trials"], n_valid=data["n_valid"], rejected=Counter(data["rejected"]),
        filtered=Counter(data["filtered"]), stages=tuple(data["stages"]), notes=tuple(data["notes"]),
        faces=tuple(data["faces"]), lattice_edge=tuple(data["lattice_edge"]),
        lowest_tangent=tuple(data["lowest_tangent"]),
    )  # fmt: skip


#: Surface attributes that are NaN for polylines (JSON has no NaN: written as null).
_CIRCLE_KEYS = ("centre_x", "centre_y", "radius")


def _surface_dict(surface: RankedSurface) -> dict:
    values = asdict(surface)
    values["points"] = None if surface.points is None else np.asarray(surface.points, dtype=float).tolist()
    for key in _CIRCLE_KEYS:
        values[key] = float(values[key]) if math.isfinite(values[key]) else None
    return values


def _surface_from_dict(values: dict) -> RankedSurface:
    values = dict(values)
    values["points"] = None if values["points"] is None else np.asarray(values["points"], dtype=float)
    for key in _CIRCLE_KEYS:
        values[key] = math.nan if values[key] is None else values[key]
    return RankedSurface(**values)


def _plain(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def _aware(moment: datetime) -> datetime:
    if moment.tzinfo is None:
        raise UserError(f"time {moment!r} has no time zone; give UTC (e.g. 2026-01-16T06:00Z)")
    return moment.astimezone(timezone.utc)


# --- season replay ------------------------------------------------------------------------------


@dataclass
class ReplayReport:
    """A season driven through the cycle."""

    cycles: int = 0
    files_delivered: int = 0
    reports: list[CycleReport] = field(default_factory=list)
    seconds: float = 0.0


def replay_season(
    workspace: Workspace,
    start: datetime,
    end: datetime,
    step: timedelta,
    clock: ManualClock,
    *,
    feeds: list[Path] | None = None,
    sections: list[str] | None = None,
    delivery: timedelta | None = None,
    on_cycle=None,
    keep_reports: bool = False,
) -> ReplayReport:
    """Drive :func:`run_cycle` through a season with a manual clock.

    At each time from ``start`` to ``end`` in steps of ``step`` the clock is set to that time,
    the feed data that a logger would have delivered by then is dropped into incoming/, and one
    cycle runs. Each feed file is cut into deliveries of at most ``delivery`` (default
    ``step``) of logger data: a file named ``NAME.csv`` arrives as ``NAME_dNNN.csv`` pieces,
    each with the file's preamble and header, dropped when the clock passes its last reading,
    the way a logger uploading every few hours would deliver them. A whole month in one file
    would otherwise sit unseen for weeks and leave the cycle with nothing but stale data.
    Readings are timed with the feed's own time format and zone (rows whose time cannot be
    read go with the row before them, so the ingest reports them).

    Parameters
    ----------
    workspace : Workspace
    start, end : datetime (UTC)
    step : timedelta
        Time between cycles.
    clock : ManualClock
        Set to each cycle time in turn (must not be later than ``start``).
    feeds : list of Path, optional
        Feed files to deliver (default: none; the workspace's incoming/ is used as it is).
    sections : list of str, optional
        Sections to assess (default: every section).
    delivery : timedelta, optional
        Longest span of logger data per delivered piece (default ``step``).
    on_cycle : callable, optional
        Called with each CycleReport (e.g. to print progress).
    keep_reports : bool
        Keep every CycleReport in the result (memory grows with the season).
    """
    started = time.perf_counter()
    start, end = _aware(start), _aware(end)
    if step <= timedelta(0):
        raise UserError(f"replay step must be positive, got {step}")
    config = workspace.config()
    pieces = _delivery_pieces(config, feeds or [], start, delivery or step)
    result = ReplayReport()
    moment = start
    next_piece = 0
    while moment <= end:
        clock.set(moment)
        while next_piece < len(pieces) and pieces[next_piece][0] <= moment:
            _drop(workspace, *pieces[next_piece][1:], seen=moment)
            next_piece += 1
            result.files_delivered += 1
        report = run_cycle(workspace, clock, sections=sections)
        result.cycles += 1
        if keep_reports:
            result.reports.append(report)
        if on_cycle is not None:
            on_cycle(report)
        moment += step
    result.seconds = time.perf_counter() - started
    return result


def _delivery_pieces(config: SiteConfig, feeds: list[Path], start: datetime, span: timedelta) -> list[tuple]:
    """(due time, file name, text, encoding) of every piece, in due order. Data before ``start`` arrive
    in one first piece per file at ``start``."""
    pieces = []
    for path in feeds:
        path = Path(path)
        feed = config.feed_for(path.name)
        if feed is None:
            raise UserError(f"{path.name}: no [[feed]] pattern of the site file matches it")
        lines = path.read_text(encoding=feed.encoding).splitlines(keepends=True)
        head = feed.skip_rows + 1
        preamble, rows = lines[:head], lines[head:]
        times = _row_times(rows, preamble[-1], feed)
        groups: dict[datetime, list[str]] = {}
        for row, moment in zip(rows, times):
            due = start if moment <= start else start + math.ceil((moment - start) / span) * span
            groups.setdefault(due, []).append(row)
        stem, suffix = path.stem, path.suffix
        for k, (due, group) in enumerate(sorted(groups.items()), start=1):
            pieces.append((due, f"{stem}_d{k:03d}{suffix}", "".join(preamble + group), feed.encoding))
    pieces.sort(key=lambda p: (p[0], p[1]))
    return pieces


def _row_times(rows: list[str], header: str, feed) -> list[datetime]:
    """Approximate UTC time of each row (for delivery only; the ingest reads them properly)."""
    names = [n.strip().strip('"') for n in header.rstrip("\r\n").split(feed.delimiter)]
    column = names.index(feed.time_column)
    texts = [r.split(feed.delimiter)[column].strip().strip('"') if r.count(feed.delimiter) >= column else ""
             for r in rows]  # fmt: skip
    local = pd.to_datetime(pd.Series(texts), format=feed.time_format, errors="coerce")
    if local.dt.tz is None:
        local = local.dt.tz_localize(feed.time_zone, ambiguous="NaT", nonexistent="NaT")
    stamps = local.dt.tz_convert("UTC")
    times, previous = [], None
    for stamp in stamps:
        previous = stamp.to_pydatetime() if not pd.isna(stamp) else previous
        times.append(previous or datetime.min.replace(tzinfo=timezone.utc))
    return times


def _drop(workspace: Workspace, name: str, text: str, encoding: str, seen: datetime) -> None:
    """Put a delivered piece into incoming/ as a finished file (written aside, then renamed),
    looked at first an hour before ``seen`` (the logger finished it then), so that the ingest's
    two looks ``min_file_age_seconds`` apart are behind it."""
    temporary = workspace.incoming / f".{name}.tmp"
    temporary.write_text(text, encoding=encoding)
    shutil.move(temporary, workspace.incoming / name)
    record_first_look(workspace, name, seen - timedelta(hours=1))


def season_summary(workspace: Workspace) -> list[str]:
    """Lines for a person: every firing episode with its level, value and when it resolved,
    the notifications queued and the inspection requests opened (what the demo prints)."""
    lines = []
    with workspace.open_store(read_only=True) as store:
        alerts = {a["id"]: a for a in store.alert_rows()}
        opened: dict[tuple, dict] = {}
        for event in store.alert_events():
            if event["event"] not in ("state change", "closed"):
                continue
            key = (event["alert_id"], event["episode"])
            if event["new_state"] == "firing":
                opened[key] = {"fired": event, "resolved": None}
            elif event["new_state"] == "resolved" and key in opened:
                opened[key]["resolved"] = event
        for (alert_id, episode), item in sorted(opened.items(), key=lambda kv: kv[1]["fired"]["time_utc"]):
            alert, fired, resolved = alerts[alert_id], item["fired"], item["resolved"]
            value = "" if fired["value"] is None else f", value {fired['value']:.3g}"
            end = "still firing" if resolved is None else (
                f"closed {resolved['time_utc']} by {resolved['by_name']}: {resolved['note']}"
                if resolved["event"] == "closed" else f"resolved {resolved['time_utc']}")
            lines.append(f"{fired['time_utc']}  {alert['section_id']:<7} {alert['level'].upper():<6} "
                         f"{alert['rule']} ({alert['message']}{value}); {end}")  # fmt: skip
        kinds = Counter(row["kind"] for row in store.outbox())
        lines.append("notifications queued: " + (", ".join(f"{n} {k}" for k, n in sorted(kinds.items())) or "none"))
        for row in store.inspection_rows():
            lines.append(f"inspection #{row['id']} {row['section_id']} ({row['level']}) requested "
                         f"{row['requested_utc']}, due {row['due_utc']}, {row['status']}: {row['reason']}")  # fmt: skip
    return lines
