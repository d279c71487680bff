"""One clock for every record (issue 15, items 2 and 5): a replay stores the replayed times only;
`assess --at` and `run --at` write the time they were given; `status`, `alerts` and `board` at a
past time show the alert states of that time; the report lists the alerts, inspections and files
of its window; `alerts history` lists the state changes with who acknowledged them. Behaviour
checks on the invented demo data (no reference values)."""

import json
import re
import shutil
import subprocess
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from click.testing import CliRunner

from watch.alerting import acknowledge, list_alerts
from watch.board import build_board
from watch.cli import main
from watch.clock import ManualClock
from watch.cycle import replay_season
from watch.report import build_report
from watch.section_status import sections_status
from watch.store import parse_utc_text, utc_text
from tests.watch.cycle_helpers import make_workspace

ROOT = Path(__file__).resolve().parents[2]
JANUARY = ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"
START = datetime(2026, 1, 14, 6, tzinfo=timezone.utc)
STEP = timedelta(hours=6)
END = START + timedelta(days=4)


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def replayed(tmp_path_factory):
    """WC-040 through the January storm, 6-hourly; the red alert is acknowledged at the first
    cycle after it fires."""
    workspace = make_workspace(tmp_path_factory.mktemp("clock") / "ws")
    clock = ManualClock(START)
    acknowledged = {}

    def on_cycle(report):
        if acknowledged:
            return
        red = [a for a in list_alerts(workspace, clock) if a["rule"] == "fos-red" and a["state"] == "firing"]
        if red:
            acknowledge(workspace, clock, red[0]["id"], "R. Tilling", "crew on the way")
            acknowledged["at"] = clock.now()

    replay_season(workspace, START, END, STEP, clock, feeds=[JANUARY], sections=["WC-040"], on_cycle=on_cycle)
    assert acknowledged, "the storm should fire the red level"
    times = set()
    moment = START
    while moment <= END:
        times.add(utc_text(moment))
        moment += STEP
    return workspace, times, acknowledged["at"]


def test_a_replay_stores_the_replayed_clock_everywhere(replayed):
    workspace, times, _ = replayed
    with workspace.open_store(read_only=True) as store:
        q = lambda sql: [r[0] for r in store.conn.execute(sql)]  # noqa: E731
        stamped = {
            "alert events": q("SELECT time_utc FROM alert_events") + q("SELECT created_utc FROM alert_events"),
            "alerts": q("SELECT raised_utc FROM alerts") + q("SELECT updated_utc FROM alerts"),
            "acknowledgements": q("SELECT acknowledged_utc FROM alerts WHERE acknowledged_utc IS NOT NULL"),
            "outbox": q("SELECT created_utc FROM notification_outbox"),
            "inspections": q("SELECT requested_utc FROM inspections"),
            "versions": q("SELECT created_utc FROM section_versions"),
            "files": q("SELECT ingested_utc FROM ingested_files"),
            "assessments": q("SELECT created_utc FROM assessments") + q("SELECT time_utc FROM assessments"),
            "cycles": q("SELECT at_utc FROM cycles") + q("SELECT started_utc FROM cycles")
            + q("SELECT finished_utc FROM cycles"),
            "sections": q("SELECT updated_utc FROM sections"),
            "water lines": q("SELECT created_utc FROM water_lines"),
        }
        inspections = list(store.db.query("SELECT level, requested_utc, due_utc FROM inspections"))
    for table, values in stamped.items():
        assert values, table
        assert set(values) <= times, f"{table}: {sorted(set(values) - times)[:3]} not replayed times"
    # inspection_due_hours of config/site.toml: red 6 h, amber 48 h
    due = {"red": timedelta(hours=6), "amber": timedelta(hours=48)}
    for row in inspections:
        assert parse_utc_text(row["due_utc"]) - parse_utc_text(row["requested_utc"]) == due[row["level"]]


def test_status_alerts_and_board_at_a_past_time_show_the_states_of_then(replayed, tmp_path):
    workspace, _, acknowledged_at = replayed
    during = acknowledged_at
    # during the storm: red firing, acknowledged; at the end: resolved
    then = {a["rule"]: a for a in list_alerts(workspace, ManualClock(END), at=during)}
    assert then["fos-red"]["state"] == "firing" and then["fos-red"]["acknowledged_by"] == "R. Tilling"
    now = {a["rule"]: a for a in list_alerts(workspace, ManualClock(END))}
    assert now["fos-red"]["state"] == "resolved"
    status_then = {s["section_id"]: s for s in sections_status(workspace, during)}["WC-040"]
    status_end = {s["section_id"]: s for s in sections_status(workspace, END)}["WC-040"]
    assert status_then["level"] == "red" and status_end["level"] != "red"
    assert status_then["assessed_utc"] == utc_text(during)
    board_then = build_board(workspace, during, tmp_path / "then").to_dict()["sections"]
    board_end = build_board(workspace, END, tmp_path / "end").to_dict()["sections"]
    section_then = next(s for s in board_then if s["section_id"] == "WC-040")
    assert section_then["level"] == "red" and section_then["assessed_utc"] == utc_text(during)
    assert next(s for s in board_end if s["section_id"] == "WC-040")["level"] != "red"
    # The same through the command line.
    result = _run("alerts", "--at", utc_text(during), "--json", "-w", workspace.root)
    assert result.exit_code == 0, result.output
    assert {a["rule"]: a["state"] for a in json.loads(result.output)}["fos-red"] == "firing"
    result = _run("status", "--at", utc_text(during), "--json", "-w", workspace.root)
    assert result.exit_code == 0, result.output
    row = next(s for s in json.loads(result.output)["sections"] if s["section_id"] == "WC-040")
    assert row["level"] == "red"


def test_alert_history_lists_changes_and_who_acknowledged(replayed):
    workspace, _, acknowledged_at = replayed
    result = _run("alerts", "history", "--section", "WC-040", "--from", utc_text(START), "--to", utc_text(END),
                  "--json", "-w", workspace.root)
    assert result.exit_code == 0, result.output
    rows = json.loads(result.output)
    red = [r for r in rows if r["rule"] == "fos-red"]
    assert "firing" in [r["new_state"] for r in red if r["event"] == "state change"]
    ack = next(r for r in red if r["event"] == "acknowledged")
    assert ack["by"] == "R. Tilling" and ack["time_utc"] == utc_text(acknowledged_at)
    assert all(r["section_id"] == "WC-040" for r in rows)
    assert [r["time_utc"] for r in rows] == sorted(r["time_utc"] for r in rows)
    firing = next(r for r in red if r["new_state"] == "firing")
    assert firing["level"] == "red" and firing["value"] <= 1.20  # at or below red's trigger (site.toml)
    # a window after the storm holds none of it
    later = _run("alerts", "history", "--from", utc_text(END + timedelta(days=1)), "--json", "-w", workspace.root)
    assert json.loads(later.output) == []
    text = _run("alerts", "history", "--section", "WC-040", "-w", workspace.root).output
    assert "acknowledged by R. Tilling: crew on the way" in text


def test_the_board_shows_each_sections_alert_timeline(replayed, tmp_path):
    workspace, _, _ = replayed
    result = build_board(workspace, END, tmp_path / "board")
    page = (result.out / next(p.name for p in result.pages if "WC-040" in p.name)).read_text(encoding="utf-8")
    timeline = page[page.index("Alert timeline"):page.index("Section, water lines")]
    assert "fos-red" in timeline and "-&gt; firing" in timeline and "firing -&gt; resolved" in timeline
    assert "R. Tilling" in timeline


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="pdftotext (poppler-utils) not installed")
def test_a_report_lists_the_alerts_inspections_and_files_of_its_window(replayed, tmp_path):
    workspace, _, _ = replayed
    result = build_report(workspace, "WC-040", START, END, END, tmp_path / "r.pdf")
    text = subprocess.run(["pdftotext", "-layout", str(result.path), "-"], capture_output=True, text=True,
                          check=True).stdout  # fmt: skip
    section = text[text.index("Alert events in the period"):]
    assert "fos-red" in section and "R. Tilling" in section
    assert re.search(r"Feed files with readings of this section in the period: [1-9]", text)
    assert re.search(r"wendlecombe_2026-01_d\d{3}\.csv", text)  # the pieces the replay delivered
    inspections = section[section.index("Inspection requests in the period"):]
    assert "none" not in inspections.splitlines()[1]


def test_assess_and_run_at_a_time_write_that_time(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    assert _run("ingest", JANUARY, "--no-progress", "-w", workspace.root).exit_code == 0
    at = datetime(2026, 1, 16, 6, tzinfo=timezone.utc)
    result = _run("assess", "--section", "WC-040", "--at", utc_text(at), "-w", workspace.root)
    assert result.exit_code == 0, result.output
    with workspace.open_store(read_only=True) as store:
        created = {r[0] for r in store.conn.execute(
            "SELECT created_utc FROM alert_events UNION SELECT created_utc FROM notification_outbox "
            "UNION SELECT requested_utc FROM inspections UNION SELECT created_utc FROM section_versions "
            "UNION SELECT raised_utc FROM alerts UNION SELECT created_utc FROM assessments")}
    assert created == {utc_text(at)}
    # run --at ... --until steps the clock through the period, one cycle per interval
    result = _run("run", "--at", utc_text(at + STEP), "--until", utc_text(at + 3 * STEP), "--interval", 360,
                  "-w", workspace.root)
    assert result.exit_code == 0, result.output
    with workspace.open_store(read_only=True) as store:
        cycles = [r[0] for r in store.conn.execute("SELECT at_utc FROM cycles ORDER BY id")]
    assert cycles == [utc_text(at + k * STEP) for k in range(4)]
    later = _run("assess", "--all", "--at", "2999-01-01T00:00Z", "-w", workspace.root)
    assert later.exit_code == 1 and "later than now" in later.output
