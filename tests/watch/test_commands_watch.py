"""`slipwatch assess`, `alerts` (ack, shelve) and `inspections` (close, CSV) in-process against
a workspace in tmp_path, plus the shelving and acknowledgement rules (invented demo data;
behaviour checks only)."""

import csv
import json
from datetime import datetime, timedelta, timezone

import pytest
from click.testing import CliRunner

from tests.watch.cycle_helpers import ROOT, make_workspace
from watch.alerting import acknowledge, list_alerts, shelve
from watch.cli import main
from watch.clock import ManualClock
from watch.cycle import replay_season, run_cycle
from watch.errors import UserError

JANUARY = ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"
RED_AT = datetime(2026, 1, 16, 6, tzinfo=timezone.utc)


@pytest.fixture(scope="module")
def red(tmp_path_factory):
    """WC-040 assessed once on the morning of 16 January 2026: red fires."""
    workspace = make_workspace(tmp_path_factory.mktemp("red") / "ws")
    clock = ManualClock(RED_AT)
    replay_season(workspace, RED_AT, RED_AT, timedelta(hours=6), clock, feeds=[JANUARY], sections=["WC-040"])
    return workspace


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.mark.parametrize("command", [["assess"], ["alerts"], ["alerts", "ack"], ["alerts", "shelve"],
                                     ["inspections"], ["inspections", "close"]])  # fmt: skip
def test_every_command_has_help_with_an_example(command):
    result = _run(*command, "--help")
    assert result.exit_code == 0
    assert "Example" in result.output


def test_alerts_lists_the_open_alerts_worst_first_as_json(red):
    result = _run("alerts", "--open", "--json", "-w", red.root)
    assert result.exit_code == 0, result.output
    rows = json.loads(result.output)
    assert rows[0]["rule"] == "fos-red" and rows[0]["state"] == "firing"
    assert all(r["state"] in ("firing", "pending") for r in rows)


def test_inspections_list_and_csv(red, tmp_path):
    path = tmp_path / "open.csv"
    result = _run("inspections", "--open", "--csv", path, "-w", red.root)
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(path.open(encoding="utf-8")))
    assert [(r["section_id"], r["level"], r["status"]) for r in rows] == [("WC-040", "red", "open")]
    assert "bulging or heave at the toe" in rows[0]["checklist"]


def test_status_shows_sections_worst_first_with_the_caution(red):
    result = _run("status", "-w", red.root)
    assert result.exit_code == 0, result.output
    assert "WC-040" in result.output.split("sections (worst first):")[1].splitlines()[1]
    assert "level red" in result.output
    assert "Caution" in result.output
    data = json.loads(_run("status", "--json", "-w", red.root).output)
    assert data["sections"][0]["section_id"] == "WC-040" and data["sections"][0]["level"] == "red"
    assert "instruments" in data  # the instrument part of status is kept


def test_ack_and_close_from_the_command_line(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(RED_AT)
    replay_season(workspace, RED_AT, RED_AT, timedelta(hours=6), clock, feeds=[JANUARY], sections=["WC-040"])
    alert_id = next(a["id"] for a in list_alerts(workspace, clock) if a["rule"] == "fos-red")
    result = _run("alerts", "ack", alert_id, "--by", "R. Tilling", "--note", "crew on the way", "-w", workspace.root)
    assert result.exit_code == 0, result.output
    assert next(a for a in list_alerts(workspace, clock) if a["id"] == alert_id)["acknowledged"]
    inspection = json.loads(_run("inspections", "--json", "-w", workspace.root).output)[0]["id"]
    result = _run("inspections", "close", inspection, "--note", "cracks at the crest, 20 mm", "--by", "R. Tilling",
                  "-w", workspace.root)  # fmt: skip
    assert result.exit_code == 0, result.output
    again = _run("inspections", "close", inspection, "--note", "x", "--by", "y", "-w", workspace.root)
    assert again.exit_code == 1
    assert "already closed" in again.output


def test_assess_needs_a_section_or_all(red):
    result = _run("assess", "-w", red.root)
    assert result.exit_code == 1
    assert "--section ID (repeatable) or --all" in result.output


def test_acknowledging_a_quiet_alert_is_refused(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(RED_AT)
    replay_season(workspace, RED_AT, RED_AT, timedelta(hours=6), clock, feeds=[JANUARY], sections=["WC-040"])
    quiet = next(a["id"] for a in list_alerts(workspace, clock) if a["state"] == "inactive")
    with pytest.raises(UserError, match="nothing to acknowledge"):
        acknowledge(workspace, clock, quiet, "R. Tilling")
    with pytest.raises(UserError, match="no alert 9999"):
        acknowledge(workspace, clock, 9999, "R. Tilling")


def test_shelving_needs_an_expiry_in_the_near_future(red):
    clock = ManualClock(RED_AT + timedelta(hours=1))
    alert_id = list_alerts(red, clock)[0]["id"]
    with pytest.raises(UserError, match="is not in the future"):
        shelve(red, clock, alert_id, RED_AT, "logger repair", "R. Tilling")
    with pytest.raises(UserError, match="more than 31 days ahead"):
        shelve(red, clock, alert_id, RED_AT + timedelta(days=40), "logger repair", "R. Tilling")
    with pytest.raises(UserError, match="needs who"):
        shelve(red, clock, alert_id, RED_AT + timedelta(days=1), "", "R. Tilling")


def test_a_shelved_firing_is_held_and_released_when_the_shelving_expires(tmp_path):
    # Shelve the WC-040 stale-data alert before the feed stops; its news is held while
    # shelved, and told at the first cycle after the shelving expires if it still fires.
    workspace = make_workspace(tmp_path / "ws")
    start = datetime(2026, 1, 20, 6, tzinfo=timezone.utc)
    clock = ManualClock(start)
    cut = tmp_path / "wendlecombe_2026-01.csv"
    lines = JANUARY.read_text(encoding="utf-8").splitlines(keepends=True)
    cut.write_text("".join(lines[: lines.index(next(l for l in lines if l.startswith("20/01/2026 06:00"))) + 1]),
                   encoding="utf-8")  # fmt: skip
    replay_season(workspace, start, start, timedelta(hours=6), clock, feeds=[cut], sections=["WC-040"])
    stale = next(a["id"] for a in list_alerts(workspace, clock) if a["rule"] == "data-stale")
    shelve(workspace, clock, stale, start + timedelta(hours=30), "logger being replaced", "R. Tilling")
    for _ in range(4):  # the feed has stopped: 12:00 ... 06:00 next day
        clock.advance(timedelta(hours=6))
        run_cycle(workspace, clock, sections=["WC-040"])
    with workspace.open_store(read_only=True) as store:
        assert store.alert_row(stale)["state"] == "firing"
        assert store.outbox(stale) == []  # held while shelved
    clock.advance(timedelta(hours=6))  # past the expiry
    report = run_cycle(workspace, clock, sections=["WC-040"])
    assert report.released == ["WC-040/data-stale"]
    with workspace.open_store(read_only=True) as store:
        assert [r["kind"] for r in store.outbox(stale)] == ["data"]
        assert store.alert_row(stale)["shelved_until_utc"] is None
