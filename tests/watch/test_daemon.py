"""`slipwatch run` (watch.daemon): one daemon per workspace, a clean stop on SIGTERM that
leaves no half-written assessment, the scheduler's settings, and the job's wiring of the
assessment cycle to the delivery of notifications.

The subprocess tests replace watch.cycle.run_cycle with a small stand-in (written into a
driver script) so that "mid-cycle" is a known moment: the stand-in writes an assessment of five
rows in one transaction, slowly, and leaves a marker file once it has begun. Every wait is
bounded; nothing asserts on speed.
"""

from __future__ import annotations

import contextlib
import json
import signal
import subprocess
import sys
import textwrap
import threading
import time
import types
from collections import Counter
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from click.testing import CliRunner

import watch
from watch import daemon
from watch.cli import main
from watch.clock import ManualClock
from watch.cycle import CycleReport, SectionOutcome
from watch.errors import ConfigError
from watch.workspace import init_workspace

START = datetime(2026, 1, 15, 6, 0, tzinfo=timezone.utc)
WAIT_S = 60  # upper bound of every wait on a subprocess; never reached when things work

DRIVER = textwrap.dedent(
    """
    import os, sys, time, types
    import watch
    from watch.cycle import CycleReport, SectionOutcome
    from watch.store import utc_text

    MODE, MARKER = os.environ["FAKE_CYCLE"], os.environ["FAKE_MARKER"]

    def run_cycle(workspace, clock, *, sections=None, at=None, progress=False):
        if MODE == "quick":
            return CycleReport(at=clock.now(), started=clock.now())
        with workspace.open_store() as store, store.atomic():
            for i in range(5):
                store.conn.execute(
                    "INSERT INTO assessments (section_id, time_utc, method, fos, converged, created_utc) "
                    "VALUES ('FH-010', ?, 'stand-in', 1.3, 1, ?)", (utc_text(clock.now()), utc_text(clock.now())))
                if i == 0:
                    open(MARKER, "w").close()
                time.sleep(0.4 if MODE == "slow" else 3600)
        return CycleReport(at=clock.now(), started=clock.now())

    fake = types.ModuleType("watch.cycle")
    fake.run_cycle = run_cycle
    sys.modules["watch.cycle"] = fake
    watch.cycle = fake

    from watch.cli import main
    main(sys.argv[1:])
    """
)


def _workspace(tmp_path: Path, extra: str = ""):
    ws = init_workspace(tmp_path / "ws")
    if extra:
        ws.site_file.write_text(ws.site_file.read_text() + "\n" + extra, encoding="utf-8")
    return ws


def _start(tmp_path: Path, ws, mode: str, *args: str) -> tuple[subprocess.Popen, Path]:
    driver = tmp_path / "driver.py"
    driver.write_text(DRIVER, encoding="utf-8")
    marker = tmp_path / f"marker-{mode}"
    env = {"FAKE_CYCLE": mode, "FAKE_MARKER": str(marker), "PATH": "/usr/bin:/bin"}
    process = subprocess.Popen([sys.executable, str(driver), "run", "-w", str(ws.root), *args], env=env,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)  # fmt: skip
    return process, marker


def _wait_for(condition, what: str, process: subprocess.Popen | None = None) -> None:
    deadline = time.monotonic() + WAIT_S
    while not condition():
        if process is not None and process.poll() is not None:
            raise AssertionError(f"process ended before {what}: {process.communicate()}")
        if time.monotonic() > deadline:
            raise AssertionError(f"gave up waiting {WAIT_S} s for {what}")
        time.sleep(0.05)


def _log(ws) -> str:
    path = ws.root / "slipwatch.log"
    return path.read_text() if path.exists() else ""


def _assessment_rows(ws) -> int:
    with ws.open_store() as store:
        assert store.integrity_check() == "ok"
        return store.conn.execute("SELECT COUNT(*) FROM assessments").fetchone()[0]


# --- subprocess: lock and stop ----------------------------------------------------------------


def test_a_second_daemon_on_the_same_workspace_refuses_and_names_the_first(tmp_path):
    ws = _workspace(tmp_path)
    first, _ = _start(tmp_path, ws, "quick", "--interval", "60")
    try:
        _wait_for(lambda: "assessment cycle done" in _log(ws), "the first daemon's cycle", first)
        second, _ = _start(tmp_path, ws, "quick", "--once")
        _, second_err = second.communicate(timeout=WAIT_S)
        assert second.returncode == 1
        assert "another `slipwatch run` is already watching" in second_err
        assert f"process {first.pid} on" in second_err and "running since" in second_err
    finally:
        first.send_signal(signal.SIGTERM)
        out, err = first.communicate(timeout=WAIT_S)
    assert first.returncode == 0, err
    assert "stopped cleanly" in _log(ws)
    assert (ws.root / ".daemon.lock").read_text() == ""  # holder details cleared at exit


def test_sigterm_mid_cycle_finishes_the_cycle_then_exits_cleanly(tmp_path):
    ws = _workspace(tmp_path)
    process, marker = _start(tmp_path, ws, "slow")
    _wait_for(marker.exists, "the cycle to begin", process)
    process.send_signal(signal.SIGTERM)
    out, err = process.communicate(timeout=WAIT_S)
    assert process.returncode == 0, err
    assert _assessment_rows(ws) == 5  # the cycle under way was finished, whole
    log = _log(ws)
    assert log.index("received SIGTERM") < log.index("assessment cycle done") < log.index("stopped cleanly")
    assert log.count("assessment cycle starting") == 1  # no new work after the signal


def test_a_cycle_that_outlasts_the_stop_timeout_is_abandoned_without_a_trace(tmp_path):
    ws = _workspace(tmp_path, "[daemon]\nstop_timeout_seconds = 0.5\n")
    process, marker = _start(tmp_path, ws, "stuck")
    _wait_for(marker.exists, "the cycle to begin", process)
    process.send_signal(signal.SIGTERM)
    process.communicate(timeout=WAIT_S)
    assert process.returncode == 1
    assert _assessment_rows(ws) == 0  # its transaction was rolled back: no half-written assessment
    assert "did not finish within 0.5 s" in _log(ws)


# --- in-process: settings, scheduler, jobs ----------------------------------------------------


@pytest.fixture
def fake_cycle(monkeypatch):
    calls = []

    def install(run_cycle):
        fake = types.ModuleType("watch.cycle")

        def recorded(workspace, clock, **kwargs):
            calls.append(clock.now())
            return run_cycle(workspace, clock, **kwargs)

        fake.run_cycle = recorded
        monkeypatch.setitem(sys.modules, "watch.cycle", fake)
        monkeypatch.setattr(watch, "cycle", fake, raising=False)
        return calls

    return install


def _queue_notification(workspace, clock, **kwargs):
    with workspace.open_store() as store, store.atomic():
        store.conn.execute(
            "INSERT INTO notification_outbox (idempotency_key, site_id, section_id, kind, level, subject, body, "
            "payload_json, created_utc) VALUES (?, 'fernhollow', 'FH-010', 'firing', 'red', 'FH-010 at red', "
            "'Factor of safety 1.02.', '{}', ?)",
            (f"FH-010/fos-red/{clock.now().isoformat()}/firing", clock.now().strftime("%Y-%m-%dT%H:%M:%SZ")),
        )  # fmt: skip
    return CycleReport(at=clock.now(), started=clock.now(), files=["stand-in: one notification queued"])


def test_run_once_runs_the_cycle_then_delivers_what_it_queued(tmp_path, fake_cycle):
    ws = _workspace(tmp_path)
    calls = fake_cycle(_queue_notification)
    clock = ManualClock(START)
    cycle_report, delivery = daemon.run_once(ws, clock)
    assert calls == [START] and cycle_report.files == ["stand-in: one notification queued"]
    assert delivery.messages_sent == 1
    assert "FH-010 at red" in (ws.root / "notifications.log").read_text()


def test_a_failing_cycle_is_logged_and_earlier_notifications_still_go_out(tmp_path, fake_cycle, caplog):
    ws = _workspace(tmp_path)
    clock = ManualClock(START)
    _queue_notification(ws, clock)

    def broken(workspace, clock, **kwargs):
        raise ConfigError("site.toml: [[trigger]] 'x' key 'clear' is missing")

    fake_cycle(broken)
    cycle_report, delivery = daemon.run_once(ws, clock)
    assert cycle_report is None and delivery.messages_sent == 1
    assert "assessment cycle failed: site.toml: [[trigger]] 'x' key 'clear' is missing" in caplog.text


@pytest.mark.parametrize("failure", ["cycle raises", "ingest failed", "section failed"])
def test_run_once_exits_non_zero_when_something_failed(tmp_path, fake_cycle, failure):
    ws = _workspace(tmp_path)

    def failing(workspace, clock, **kwargs):
        if failure == "cycle raises":
            raise RuntimeError("stand-in for a broken cycle")
        report = CycleReport(at=clock.now(), started=clock.now())
        if failure == "ingest failed":
            report.ingest_failures = ["x.csv: FAILED: could not be ingested (stand-in)"]
        else:
            report.sections = [SectionOutcome("S-1", "failed", message="stand-in")]
        return report

    fake_cycle(failing)
    assert daemon.run_daemon(ws, once=True, clock=ManualClock(START), install_signal_handlers=False) == 1
    assert "the cycle failed or something in it failed" in _log(ws)


def test_run_once_exits_zero_when_all_went_well(tmp_path, fake_cycle):
    ws = _workspace(tmp_path)
    fake_cycle(lambda workspace, clock, **kwargs: CycleReport(at=clock.now(), started=clock.now()))
    assert daemon.run_daemon(ws, once=True, clock=ManualClock(START), install_signal_handlers=False) == 0


def test_scheduler_jobs_coalesce_run_one_at_a_time_and_have_a_misfire_grace(tmp_path):
    ws = _workspace(tmp_path, "[daemon]\ninterval_minutes = 10\ndelivery_seconds = 30\n")
    settings = daemon.daemon_settings(ws.config(), ws.root)
    jobs = daemon._Jobs(ws, ManualClock(START), threading.Event(), daemon.logging.getLogger("test"))
    scheduler = daemon._scheduler(jobs, settings)
    scheduler.start(paused=True)
    try:
        by_id = {job.id: job for job in scheduler.get_jobs()}
    finally:
        scheduler.shutdown(wait=False)
    assess, deliver = by_id["assess"], by_id["deliver"]
    assert (assess.coalesce, assess.max_instances, assess.misfire_grace_time) == (True, 1, 600)
    assert (deliver.coalesce, deliver.max_instances, deliver.misfire_grace_time) == (True, 1, 30)
    assert assess.trigger.interval.total_seconds() == 600 and str(assess.trigger.timezone) == "UTC"
    assert deliver.trigger.interval.total_seconds() == 30 and str(deliver.trigger.timezone) == "UTC"


def test_daemon_stops_when_asked_and_the_delivery_job_waits_for_a_running_cycle(tmp_path, fake_cycle):
    ws = _workspace(tmp_path, "[daemon]\ndelivery_seconds = 0.2\n")
    stop = threading.Event()
    in_cycle, release = threading.Event(), threading.Event()

    def slow(workspace, clock, **kwargs):
        in_cycle.set()
        release.wait(WAIT_S)
        return CycleReport(at=clock.now(), started=clock.now())

    fake_cycle(slow)
    result = []
    thread = threading.Thread(target=lambda: result.append(
        daemon.run_daemon(ws, clock=ManualClock(START), stop=stop, install_signal_handlers=False)))  # fmt: skip
    thread.start()
    assert in_cycle.wait(WAIT_S)
    jobs_busy_skip = daemon._Jobs(ws, ManualClock(START), threading.Event(), daemon.logging.getLogger("t"))
    with jobs_busy_skip.busy:  # the delivery job gives way to a running cycle instead of waiting
        jobs_busy_skip.deliver()
    stop.set()
    release.set()
    thread.join(WAIT_S)
    assert result == [0]
    assert "stopped cleanly" in _log(ws)


# --- second looks: a file is taken as soon as it is safely finished ------------------------------


@contextlib.contextmanager
def _paused_scheduler(ws, clock):
    """The daemon's jobs on its scheduler, started paused: nothing runs by itself; the test calls
    the jobs as the scheduler would. The regular cycle is moved to where it stands after its
    first run (one interval, 15 minutes, ahead)."""
    jobs = daemon._Jobs(ws, clock, threading.Event(), daemon.logging.getLogger("test-second-look"))
    scheduler = daemon._scheduler(jobs, daemon.DaemonSettings())
    scheduler.start(paused=True)
    try:
        scheduler.modify_job("assess", next_run_time=datetime.now(timezone.utc) + timedelta(minutes=15))
        yield jobs, scheduler
    finally:
        scheduler.shutdown(wait=False)


def _waiting(seconds: float):
    """A stand-in cycle that leaves one file waiting for its second look, due ``seconds`` after
    the clock's now."""

    def cycle(workspace, clock, **kwargs):
        return CycleReport(at=clock.now(), started=clock.now(), second_looks=1,
                           second_look_due=clock.now() + timedelta(seconds=seconds))  # fmt: skip

    return cycle


FH_FILE = "fh_2026-01-15.csv"
# One row of the example site's feed (its logger keeps UK time, which is UTC in January).
FH_ROWS = "Timestamp,PZ1_kPa,PZ2_digits,Rain_tips,PZ2_degC\n2026-01-15 05:45,12.5,,,\n"


def test_a_file_arriving_after_a_cycle_is_taken_at_its_second_look_not_an_interval_later(tmp_path):
    # The real cycle and ingest on the example workspace (min_file_age_seconds = 30, 15-minute
    # interval): the cycle that first sees the file plans a one-off cycle 30 s (by the service's
    # clock) later; that cycle takes it and plans nothing more.
    ws = _workspace(tmp_path)
    clock = ManualClock(START)
    with _paused_scheduler(ws, clock) as (jobs, scheduler):
        (ws.incoming / FH_FILE).write_text(FH_ROWS, encoding="utf-8")
        before = datetime.now(timezone.utc)
        jobs.assess()
        after = datetime.now(timezone.utc)
        assert (ws.incoming / FH_FILE).exists()  # first look only
        planned = scheduler.get_job("second-look")
        assert before + timedelta(seconds=30) <= planned.next_run_time <= after + timedelta(seconds=30)
        clock.advance(timedelta(seconds=30))
        planned.func()  # what the scheduler runs when it comes due
        assert not (ws.incoming / FH_FILE).exists() and (ws.processed / FH_FILE).exists()
        assert scheduler.get_job("second-look") is None
    with ws.open_store(read_only=True) as store:
        assert [r["pore_pressure_kpa"] for r in store.readings("PZ-1", None, None)] == [12.5]


def test_between_cycles_the_delivery_job_looks_at_incoming_and_plans_the_second_look(tmp_path):
    # A file arriving after a cycle gets its first look from the delivery job (every
    # delivery_seconds), not from the next cycle 15 minutes later; the look takes nothing.
    from watch.ingest import SIGHTINGS_FILE

    ws = _workspace(tmp_path)
    clock = ManualClock(START)
    with _paused_scheduler(ws, clock) as (jobs, scheduler):
        jobs.assess()  # nothing waiting: nothing planned
        assert scheduler.get_job("second-look") is None
        clock.advance(timedelta(seconds=60))
        (ws.incoming / FH_FILE).write_text(FH_ROWS, encoding="utf-8")
        before = datetime.now(timezone.utc)
        jobs.deliver()
        after = datetime.now(timezone.utc)
        planned = scheduler.get_job("second-look").next_run_time
        assert before + timedelta(seconds=30) <= planned <= after + timedelta(seconds=30)
        assert json.loads((ws.root / SIGHTINGS_FILE).read_text())[FH_FILE][2] == "2026-01-15T06:01:00Z"
        assert (ws.incoming / FH_FILE).exists()
        clock.advance(timedelta(seconds=10))
        jobs.deliver()  # looked at again, unchanged: the plan stands
        assert scheduler.get_job("second-look").next_run_time == planned
        clock.advance(timedelta(seconds=20))
        scheduler.get_job("second-look").func()
        assert (ws.processed / FH_FILE).exists() and scheduler.get_job("second-look") is None


def test_a_second_look_close_to_the_regular_cycle_is_left_to_it(tmp_path, fake_cycle, caplog):
    ws = _workspace(tmp_path)
    calls = fake_cycle(_waiting(30))
    with _paused_scheduler(ws, ManualClock(START)) as (jobs, scheduler):
        scheduler.modify_job("assess", next_run_time=datetime.now(timezone.utc) + timedelta(seconds=45))
        with caplog.at_level("INFO"):
            jobs.assess()
        assert calls == [START] and scheduler.get_job("second-look") is None
        assert "second look left to the regular cycle" in caplog.text


def test_each_cycle_replaces_the_planned_second_look(tmp_path, fake_cycle):
    ws = _workspace(tmp_path)
    fake_cycle(_waiting(120))
    with _paused_scheduler(ws, ManualClock(START)) as (jobs, scheduler):
        jobs.assess()
        first = scheduler.get_job("second-look").next_run_time
        fake_cycle(_waiting(300))
        jobs.second_look()
        (job,) = [j for j in scheduler.get_jobs() if j.id == "second-look"]
        assert job.next_run_time - first >= timedelta(seconds=170)  # 300 s instead of 120 s
        fake_cycle(lambda workspace, clock, **kwargs: CycleReport(at=clock.now(), started=clock.now()))
        jobs.assess()  # nothing waits any more
        assert scheduler.get_job("second-look") is None


def test_a_second_look_never_runs_a_cycle_while_another_runs(tmp_path, fake_cycle, caplog):
    ws = _workspace(tmp_path)
    calls = fake_cycle(_waiting(30))
    with _paused_scheduler(ws, ManualClock(START)) as (jobs, scheduler):
        with jobs.cycling, caplog.at_level("INFO"):  # a cycle under way
            jobs.second_look()
            jobs.assess()
        assert calls == []
        assert caplog.text.count("skipped: another cycle is running") == 2
        jobs.second_look()
        assert calls == [START]


def test_ingest_says_when_waiting_files_can_be_taken(tmp_path):
    # Each command meets a new file (first looked at by that command), so that whatever time
    # passes between the commands, there is a file waiting for its second look.
    ws = _workspace(tmp_path)
    runner, where = CliRunner(), ["-w", str(ws.root)]
    (ws.incoming / "fh_a.csv").write_text(FH_ROWS, encoding="utf-8")
    result = runner.invoke(main, ["ingest"] + where)
    assert result.exit_code == 0, result.output
    assert "file(s) wait for their second look: run `slipwatch ingest` again in " in result.output
    assert "or leave it to `slipwatch run`" in result.output
    (ws.incoming / "fh_b.csv").write_text(FH_ROWS.replace("05:45", "05:50"), encoding="utf-8")
    assessed = runner.invoke(main, ["assess", "--all"] + where)
    assert "file(s) in incoming/ wait for their second look, due " in assessed.output
    (ws.incoming / "fh_c.csv").write_text(FH_ROWS.replace("05:45", "05:55"), encoding="utf-8")
    data = json.loads(runner.invoke(main, ["ingest", "--json"] + where).output)
    assert "fh_c.csv" in data["second_looks"] and data["second_look_due_utc"] == min(data["second_looks"].values())


@pytest.mark.parametrize(
    "toml, match",
    [
        ("[daemon]\ninterval_minutes = 0\n", "interval_minutes.*> 0"),
        ("[daemon]\nstop_timeout_seconds = -1\n", "stop_timeout_seconds.*> 0"),
        ("[daemon]\nevery = 5\n", "'every' is unknown"),
    ],
)
def test_bad_daemon_configuration_names_the_key(tmp_path, toml, match):
    ws = _workspace(tmp_path, toml)
    with pytest.raises(ConfigError, match=match):
        daemon.daemon_settings(ws.config(), ws.root)


def test_daemon_refuses_to_start_without_its_credential_variables(tmp_path, monkeypatch):
    monkeypatch.delenv("TEST_DAEMON_HOOK_SECRET", raising=False)
    ws = _workspace(tmp_path, '[[notify.webhook]]\nname = "ops"\nurl = "http://127.0.0.1:9/"\n'
                    'secret_env = "TEST_DAEMON_HOOK_SECRET"\n')  # fmt: skip
    result = CliRunner().invoke(main, ["run", "--once", "-w", str(ws.root)])
    assert result.exit_code == 1
    assert "TEST_DAEMON_HOOK_SECRET named in site.toml [notify] are not set" in result.output
    assert not (ws.root / "slipwatch.log").exists()


def test_run_rejects_a_non_positive_interval(tmp_path):
    ws = _workspace(tmp_path)
    result = CliRunner().invoke(main, ["run", "--interval", "0", "-w", str(ws.root)])
    assert result.exit_code == 1 and "--interval must be > 0 minutes, got 0" in result.output


def test_deliveries_command_lists_and_retries(tmp_path, fake_cycle):
    ws = _workspace(tmp_path)
    fake_cycle(_queue_notification)
    daemon.run_once(ws, ManualClock(START))
    runner = CliRunner()
    listed = runner.invoke(main, ["deliveries", "--json", "-w", str(ws.root)])
    assert listed.exit_code == 0, listed.output
    (row,) = json.loads(listed.output)
    assert (row["channel"], row["status"], row["notifications"]) == ("log", "sent", 1)
    retried = runner.invoke(main, ["deliveries", "--retry", "all", "-w", str(ws.root)])
    assert retried.exit_code == 1 and "no failed message at all to retry" in retried.output


# --- with the real assessment cycle -----------------------------------------------------------


def test_storm_through_the_real_cycle_every_firing_gets_its_resolved_once(tmp_path, monkeypatch):
    # The invented demo site (with its shipped example levels and rules) and feeds around the
    # January storm, one cycle every 6 h with the delivery after each (what the daemon's
    # assessment job does). An added rule on 24-h rain makes sure something fires and clears
    # in the window; the check is about delivery, not about the levels.
    import shutil

    from watch.cycle import replay_season
    from watch.notify import deliver_pending

    for name in ("http_proxy", "https_proxy", "HTTP_PROXY", "HTTPS_PROXY", "all_proxy", "ALL_PROXY"):
        monkeypatch.delenv(name, raising=False)  # 127.0.0.1 only, never through a proxy
    repo = Path(__file__).resolve().parents[2]
    hook = _Receiver()
    try:
        ws = init_workspace(tmp_path / "ws", repo / "config" / "site.toml")
        for section_file in (repo / "config" / "sections").glob("*.toml"):
            shutil.copy2(section_file, ws.sections / section_file.name)
        ws.site_file.write_text(ws.site_file.read_text() + textwrap.dedent(f"""
            [[notify.webhook]]
            name = "control-room"
            url = "{hook.url}"

            [[trigger]]
            name = "test-rain-24h"
            quantity = "rain_mm"
            level = "watch"
            window_hours = 24
            trigger = 30.0
            clear = 5.0
            on_delay_hours = 0
            off_delay_hours = 0
            """), encoding="utf-8")  # fmt: skip
        start = datetime(2026, 1, 15, tzinfo=timezone.utc)
        clock = ManualClock(start)

        def deliver(_report):
            with ws.open_store() as store:
                assert deliver_pending(ws, store, clock).errors == []

        replay_season(ws, start, datetime(2026, 1, 17, 6, tzinfo=timezone.utc), timedelta(hours=6), clock,
                      feeds=sorted((repo / "demo_feeds").glob("*.csv")), on_cycle=deliver)  # fmt: skip
    finally:
        hook.close()
    received = [n for body in hook.bodies for n in body["notifications"]]
    keys = [n["idempotency_key"] for n in received]
    assert len(keys) == len(set(keys))  # nothing twice
    # A notification announces every rule of its level that changed alike in the cycle.
    def alerts_of(n):
        return [r["alert_id"] for r in n["details"].get("rules") or [{"alert_id": n["alert_id"]}]]
    told = [a for n in received if n["kind"] in ("firing", "escalated", "data") for a in alerts_of(n)]
    cleared = [a for n in received if n["kind"] in ("resolved", "de-escalated") for a in alerts_of(n)]
    with ws.open_store() as store:
        outbox = store.conn.execute("SELECT COUNT(*) FROM notification_outbox").fetchone()[0]
        firing_now = {r[0] for r in store.conn.execute("SELECT id FROM alerts WHERE state = 'firing'")}
        assert outbox == len(received) and store.pending_delivery_count() == 0
    assert told
    # every episode told as firing was told it cleared, exactly once, unless it still fires
    open_episodes = Counter(told)
    open_episodes.subtract(cleared)
    assert {a: n for a, n in open_episodes.items() if n} == {a: 1 for a in set(told) & firing_now}


class _Receiver:
    """A webhook receiver on 127.0.0.1 that keeps the JSON bodies."""

    def __init__(self):
        from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

        self.bodies = []
        bodies = self.bodies

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self):
                bodies.append(json.loads(self.rfile.read(int(self.headers["Content-Length"]))))
                self.send_response(204)
                self.end_headers()

            def log_message(self, *args):
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/"
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    def close(self):
        self.server.shutdown()
        self.server.server_close()
