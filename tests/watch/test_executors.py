"""The assessment cycle through its executors: a local process pool and a local Dask cluster
must store exactly what the in-process cycle stores, and a worker that dies mid-cycle costs a
retry, never a lost or doubled assessment. Behaviour checks on the invented demo site (no
published reference applies: the reference here is the in-process cycle itself)."""

import os
import shutil
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from functools import partial
from pathlib import Path

import pytest

from watch.clock import ManualClock
from watch.cycle import compute_section, run_cycle
from watch.errors import ConfigError, UserError
from watch.ingest import record_first_look
from watch.executors import (
    InProcessExecutor,
    ProcessPoolSectionExecutor,
    SectionFailure,
    executor_for,
)
from watch.store import utc_text
from watch.workspace import open_workspace
from tests.watch.cycle_helpers import make_workspace

ROOT = Path(__file__).resolve().parents[2]
JANUARY = ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"
# Two cycles: the first runs full searches (nothing cached), the second re-evaluates warm.
# The clock stands after the month so that the whole feed is ingested (readings later than
# "now" are refused) and the cycles assess earlier times.
FIRST = datetime(2026, 1, 15, 6, tzinfo=timezone.utc)
SECOND = FIRST + timedelta(hours=6)
NOW = datetime(2026, 2, 1, tzinfo=timezone.utc)

# Columns that measure the run rather than the result.
_TIMING = {"duration_s"}


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """A workspace with the January feed waiting in incoming/ (no cycle run yet)."""
    workspace = make_workspace(tmp_path_factory.mktemp("executors") / "ws")
    target = workspace.incoming / JANUARY.name
    shutil.copy(JANUARY, target)
    record_first_look(workspace, JANUARY.name, FIRST - timedelta(hours=1))  # delivered an hour before
    return workspace


def _copy(base, folder: Path):
    shutil.copytree(base.root, folder)
    return open_workspace(folder)


def _two_cycles(workspace, make_executor=None, compute=None):
    clock = ManualClock(NOW)
    reports = []
    for moment in (FIRST, SECOND):
        executor = make_executor() if make_executor else None
        reports.append(run_cycle(workspace, clock, at=moment, executor=executor, compute=compute))
    return reports


def _stored(workspace) -> dict:
    """Every row the cycles wrote that depends on the calculation, in id order."""
    tables = ("assessments", "water_lines", "search_cache", "alerts", "alert_events", "notification_outbox",
              "inspections")  # fmt: skip
    with workspace.open_store(read_only=True) as store:
        out = {}
        for table in tables:
            cursor = store.conn.execute(f"SELECT * FROM {table} ORDER BY rowid")
            names = [d[0] for d in cursor.description]
            out[table] = [{k: v for k, v in zip(names, row) if k not in _TIMING} for row in cursor.fetchall()]
    return out


@pytest.fixture(scope="module")
def in_process(base, tmp_path_factory):
    workspace = _copy(base, tmp_path_factory.mktemp("inproc") / "ws")
    reports = _two_cycles(workspace)
    return _stored(workspace), reports


def test_the_reference_cycles_search_then_re_evaluate(in_process):
    stored, reports = in_process
    first, second = ([s.evaluation for s in r.sections] for r in reports)
    assert first and all(e == "full search" for e in first)
    assert "warm re-evaluation" in second
    assert len(stored["assessments"]) == sum(s.status != "unchanged" for r in reports for s in r.sections)


def test_a_process_pool_stores_what_the_in_process_cycle_stores(base, in_process, tmp_path):
    workspace = _copy(base, tmp_path / "ws")
    reports = _two_cycles(workspace, lambda: ProcessPoolSectionExecutor(2))
    assert _stored(workspace) == in_process[0]
    assert all(r.executor == "process pool, 2 worker(s)" and r.retries == 0 for r in reports)


def test_a_local_dask_cluster_stores_what_the_in_process_cycle_stores(base, in_process, tmp_path):
    pytest.importorskip("dask.distributed")
    workspace = _copy(base, tmp_path / "ws")
    reports = _two_cycles(workspace, lambda: executor_for("local:2"))
    assert _stored(workspace) == in_process[0]
    assert all(r.executor.startswith("dask at local:2") for r in reports)


def dies_once(marker: Path, section_id: str, task):
    """The calculation, except that the worker running ``section_id`` dies the first time
    (the marker file remembers it across processes)."""
    if task.section_id == section_id and not marker.exists():
        marker.write_text("killed once")
        os._exit(1)
    return compute_section(task)


def _assert_killed_once_then_recovered(workspace, reports, in_process, marker):
    assert marker.exists()
    assert all(s.status != "failed" for r in reports for s in r.sections)
    stored = _stored(workspace)
    keys = [(a["section_id"], a["time_utc"]) for a in stored["assessments"]]
    assert len(keys) == len(set(keys)) == len(in_process[0]["assessments"])
    assert stored == in_process[0]


def test_a_pool_worker_killed_mid_cycle_costs_a_retry_not_a_result(base, in_process, tmp_path):
    workspace = _copy(base, tmp_path / "ws")
    marker = tmp_path / "killed"
    compute = partial(dies_once, marker, "WC-060")
    reports = _two_cycles(workspace, lambda: ProcessPoolSectionExecutor(2), compute=compute)
    _assert_killed_once_then_recovered(workspace, reports, in_process, marker)
    assert reports[0].retries >= 1


def test_a_dask_worker_killed_mid_cycle_costs_a_retry_not_a_result(base, in_process, tmp_path):
    pytest.importorskip("dask.distributed")
    workspace = _copy(base, tmp_path / "ws")
    marker = tmp_path / "killed"
    compute = partial(dies_once, marker, "WC-060")
    reports = _two_cycles(workspace, lambda: executor_for("local:2"), compute=compute)
    _assert_killed_once_then_recovered(workspace, reports, in_process, marker)


def _only_failure(report, section_id: str, *words: str) -> dict:
    """The report's outcomes by section, after checking that ``section_id`` alone failed and
    that its message says each of ``words``."""
    by_id = {s.section_id: s for s in report.sections}
    assert by_id[section_id].status == "failed"
    assert all(word in by_id[section_id].message for word in words), by_id[section_id].message
    assert all(s.status != "failed" for k, s in by_id.items() if k != section_id)
    return by_id


def raises_for(section_id: str, task):
    if task.section_id == section_id:
        raise RuntimeError(f"cannot calculate {section_id}")
    return compute_section(task)


def test_a_section_that_raises_in_a_dask_batch_is_retried_alone(base, in_process, tmp_path):
    """Warm re-evaluations travel in one task; the one that raises is resent on its own until
    its attempts are spent, and its neighbours in the batch are neither charged nor lost."""
    pytest.importorskip("dask.distributed")
    warm = [s.section_id for s in in_process[1][1].sections if s.evaluation == "warm re-evaluation"]
    assert len(warm) >= 2  # a batch with neighbours
    workspace = _copy(base, tmp_path / "ws")
    run_cycle(workspace, ManualClock(NOW), at=FIRST)  # full searches, to cache
    executor = executor_for("local:1", sections_per_task=4, max_attempts=2)
    report = run_cycle(workspace, ManualClock(NOW), at=SECOND, executor=executor,
                       compute=partial(raises_for, warm[0]))  # fmt: skip
    by_id = _only_failure(report, warm[0], "2 attempt(s) failed", f"cannot calculate {warm[0]}")
    assert report.executor.endswith("4 section(s) per task")
    assert [s.section_id for s in report.sections if s.evaluation == "warm re-evaluation"] == warm[1:]
    assert report.retries == 1
    with workspace.open_store(read_only=True) as store:
        rows = store.conn.execute("SELECT section_id FROM assessments WHERE time_utc = ?",
                                  (utc_text(SECOND),)).fetchall()
    assert sorted(r for (r,) in rows) == sorted(k for k, s in by_id.items() if s.status != "unchanged")


@dataclass(frozen=True)
class _Job:
    full_search: bool


def dask_task_key(job: _Job) -> str:
    from dask.distributed import get_worker

    return get_worker().get_current_task()


def test_dask_sends_warm_sections_in_batches_and_full_searches_alone():
    """Sections sharing a Dask task key travelled in one task."""
    pytest.importorskip("dask.distributed")
    executor = executor_for("local:1", sections_per_task=3)
    executor.start(dask_task_key)
    with executor:
        for i, full_search in enumerate([False, True, False, False, True, False]):
            executor.submit(f"S{i}", _Job(full_search))
        task_of = dict(executor.results())
    together = {}
    for section, key in task_of.items():
        together.setdefault(key, []).append(section)
    # Three warm ones fill a batch; the last one goes when the results are asked for.
    assert sorted(together.values()) == [["S0", "S2", "S3"], ["S1"], ["S4"], ["S5"]]


def always_dies(section_id: str, task):
    if task.section_id == section_id:
        os._exit(1)
    return compute_section(task)


def test_a_section_that_keeps_killing_its_worker_is_reported_failed(base, tmp_path):
    workspace = _copy(base, tmp_path / "ws")
    report = run_cycle(workspace, ManualClock(NOW), at=FIRST, executor=ProcessPoolSectionExecutor(2, max_attempts=2),
                       compute=partial(always_dies, "FE-210"))  # fmt: skip
    by_id = _only_failure(report, "FE-210", "2 attempt(s) failed", "died")
    with workspace.open_store(read_only=True) as store:
        rows = store.conn.execute("SELECT section_id, status FROM assessments").fetchall()
        states = store.conn.execute("SELECT state FROM alerts WHERE section_id = ? AND rule = ?",
                                    ("FE-210", "data-assessment")).fetchall()  # fmt: skip
    assert sorted(rows) == sorted((s.section_id, s.status) for s in report.sections)
    # Like any failed calculation, it raises the section's data-quality alert.
    assert [s for (s,) in states] in (["pending"], ["firing"])


def test_in_process_retries_are_bounded_and_reported():
    executor = InProcessExecutor(max_attempts=3)
    calls = []

    def flaky(task):
        calls.append(task)
        raise RuntimeError("boom")

    executor.start(flaky)
    executor.submit("S1", "task")
    assert list(executor.results()) == [("S1", SectionFailure("S1", 3, "RuntimeError: boom"))]
    assert len(calls) == 3 and executor.retries == 2


def test_executor_options_are_checked():
    with pytest.raises(ConfigError, match="local:N with N >= 1"):
        executor_for("local:0").start(compute_section)
    with pytest.raises(ConfigError, match="'nowhere'"):
        executor_for("nowhere")
    with pytest.raises(UserError, match="either --cluster or --workers"):
        executor_for("local:2", workers=2)
    with pytest.raises(ConfigError, match="max_attempts must be an integer >= 1, got 0"):
        InProcessExecutor(max_attempts=0)
    with pytest.raises(ConfigError, match="--workers must be >= 1, got 0"):
        executor_for(workers=0)
    with pytest.raises(ConfigError, match="sections per task must be an integer >= 1, got 0"):
        executor_for("local:2", sections_per_task=0)
    assert isinstance(executor_for(), InProcessExecutor)
    assert isinstance(executor_for(workers=2), ProcessPoolSectionExecutor)


def test_assess_all_on_a_process_pool_from_the_command_line(base, tmp_path):
    from click.testing import CliRunner

    from watch.cli import main

    workspace = _copy(base, tmp_path / "ws")
    result = CliRunner().invoke(main, ["assess", "--all", "--workers", "2", "--at", "2026-01-15T06:00Z",
                                       "-w", str(workspace.root)])  # fmt: skip
    assert result.exit_code == 0, result.output
    assert "4 section(s) in" in result.output and "on process pool, 2 worker(s)" in result.output
    assert "0 calculation(s) retried" in result.output
    bad = CliRunner().invoke(main, ["assess", "--all", "--cluster", "nowhere", "-w", str(workspace.root)])
    assert bad.exit_code == 1 and "cluster 'nowhere'" in bad.output


def _with_cluster(workspace, value: str):
    text = workspace.site_file.read_text(encoding="utf-8")
    assert text.count("[cycle]\n") == 1
    workspace.site_file.write_text(text.replace("[cycle]\n", f"[cycle]\ncluster = {value}\n"), encoding="utf-8")
    return open_workspace(workspace.root)


def test_the_site_file_names_the_cluster(tmp_path):
    from watch.cycle import cycle_executor
    from watch.executors import DaskSectionExecutor

    workspace = _with_cluster(make_workspace(tmp_path / "ws"), '"tcp://10.0.0.5:8786"')
    chosen = cycle_executor(workspace)
    assert isinstance(chosen, DaskSectionExecutor) and chosen.address == "tcp://10.0.0.5:8786"
    # The command line wins over the site file.
    assert isinstance(cycle_executor(workspace, workers=2), ProcessPoolSectionExecutor)
    batched = _with_cluster(make_workspace(tmp_path / "batched"), '"local:2"\nsections_per_task = 3')
    assert cycle_executor(batched).sections_per_task == 3
    zero = _with_cluster(make_workspace(tmp_path / "zero"), '"local:2"\nsections_per_task = 0')
    with pytest.raises(ConfigError, match="sections_per_task.*must be >= 1, got 0"):
        cycle_executor(zero)
    broken = _with_cluster(make_workspace(tmp_path / "bad"), '"10.0.0.5"')
    with pytest.raises(ConfigError, match="cluster.*'10.0.0.5'"):
        cycle_executor(broken)


def hangs(section_id: str, task):
    if task.section_id == section_id:
        import time

        time.sleep(600)
    return compute_section(task)


def test_a_hung_pool_worker_is_ended_and_its_section_reported_failed(base, tmp_path):
    workspace = _copy(base, tmp_path / "ws")
    executor = ProcessPoolSectionExecutor(2, max_attempts=2, stall_timeout_s=12.0)
    report = run_cycle(workspace, ManualClock(NOW), at=FIRST, executor=executor, compute=partial(hangs, "WC-060"))
    by_id = _only_failure(report, "WC-060", "within 12 s")
