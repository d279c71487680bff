"""Section lifecycle (issue 15, item 4): a section marked slipped is no longer assessed on its
pre-slip geometry, shows its state instead of a level, keeps its alerts open until an engineer
closes them with a note, and returns to service on a new geometry version. Behaviour checks on
the invented demo data (no reference values)."""

import json
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from click.testing import CliRunner

from watch.alert_history import alert_history
from watch.board import build_board
from watch.cli import main
from watch.clock import ManualClock
from watch.cycle import replay_season, run_cycle
from watch.errors import UserError
from watch.lifecycle import close_alert, service_state, set_service_state
from watch.section_status import format_sections, sections_status
from watch.store import utc_text
from tests.watch.cycle_helpers import make_workspace

ROOT = Path(__file__).resolve().parents[2]
JANUARY = ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"
START = datetime(2026, 1, 14, 6, tzinfo=timezone.utc)
STEP = timedelta(hours=6)
SLIP = START + timedelta(hours=54)  # 16 Jan 12:00, WC-040 at red (tests/watch/test_cycle.py)
END = START + timedelta(days=4)


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def slipped(tmp_path_factory):
    """WC-040 through the storm, marked slipped at 16 Jan 12:00 and replayed on to 18 Jan."""
    workspace = make_workspace(tmp_path_factory.mktemp("slip") / "ws")
    clock = ManualClock(START)
    replay_season(workspace, START, SLIP, STEP, clock, feeds=[JANUARY], sections=["WC-040"])
    red = next(a for a in _alerts(workspace) if a["rule"] == "fos-red")
    assert red["state"] == "firing"
    with pytest.raises(UserError, match="is in service: its alerts clear by themselves"):
        close_alert(workspace, clock, red["id"], "R. Tilling", "too early")
    state = set_service_state(workspace, clock, "WC-040", "slipped", "R. Tilling", "slip at the crest, 20 m")
    reports = replay_season(workspace, SLIP + STEP, END, STEP, clock, feeds=[], sections=["WC-040"],
                            keep_reports=True).reports  # fmt: skip
    return workspace, clock, state, reports


def _alerts(workspace):
    with workspace.open_store(read_only=True) as store:
        return store.alert_rows("WC-040")


def test_a_slipped_section_is_not_assessed_and_its_alerts_stay_open(slipped):
    workspace, _, state, reports = slipped
    assert state.time_utc == utc_text(SLIP) and state.by == "R. Tilling"
    assert {r.sections[0].status for r in reports} == {"slipped"}
    with workspace.open_store(read_only=True) as store:
        assert store.last_assessment("WC-040")["time_utc"] == utc_text(SLIP)
        later = [e for e in alert_history(store, SLIP + timedelta(seconds=1), END, "WC-040")]
    assert later == []  # nothing "resolves" after the slip
    red = next(a for a in _alerts(workspace) if a["rule"] == "fos-red")
    assert red["state"] == "firing"


def test_a_slipped_section_shows_its_state_instead_of_a_level(slipped, tmp_path):
    workspace, _, _, _ = slipped
    row = next(s for s in sections_status(workspace, END) if s["section_id"] == "WC-040")
    assert row["service_state"] == "slipped" and row["level"] is None
    assert row["service_state_note"] == "set by R. Tilling: slip at the crest, 20 m"
    text = "\n".join(format_sections([row]))
    assert "level SLIPPED" in text and "not assessed, alerts held" in text
    board = build_board(workspace, END, tmp_path / "board").to_dict()["sections"]
    section = next(s for s in board if s["section_id"] == "WC-040")
    assert section["level"] == "slipped" and section["service_state"] == "slipped"
    assert board[0]["section_id"] == "WC-040"  # a slipped section heads the board
    # Before the slip it was at red, in service.
    before = next(s for s in sections_status(workspace, SLIP - STEP) if s["section_id"] == "WC-040")
    assert before["service_state"] == "in-service"


def test_return_to_service_needs_new_geometry_and_closed_alerts(slipped):
    workspace, clock, _, _ = slipped
    with pytest.raises(UserError, match="still the one in force then"):
        set_service_state(workspace, clock, "WC-040", "in-service", "R. Tilling", "rebuilt")
    path = workspace.sections / "wc_040.toml"
    path.write_text("# regraded after the slip of 16 January\n" + path.read_text(encoding="utf-8"), encoding="utf-8")
    with pytest.raises(UserError, match="still has open alerts"):
        set_service_state(workspace, clock, "WC-040", "in-service", "R. Tilling", "rebuilt")
    open_levels = [a for a in _alerts(workspace) if a["kind"] == "level" and a["state"] in ("firing", "pending")]
    assert open_levels
    for alert in open_levels:
        result = _run("alerts", "close", alert["id"], "--by", "R. Tilling", "--note", "slip confirmed; rebuilt",
                      "-w", workspace.root)  # fmt: skip
        assert result.exit_code == 0, result.output
    with workspace.open_store(read_only=True) as store:
        closed = [e for e in alert_history(store, section_id="WC-040") if e["event"] == "closed"]
    assert len(closed) == len(open_levels)
    assert all(e["by"] == "R. Tilling" and e["new_state"] == "resolved" for e in closed)
    clock.advance(STEP)
    back = set_service_state(workspace, clock, "WC-040", "in-service", "R. Tilling", "rebuilt to the new profile")
    clock.advance(STEP)
    report = run_cycle(workspace, clock, sections=["WC-040"])
    assert report.sections[0].status not in ("slipped", "failed")
    with workspace.open_store(read_only=True) as store:
        assessment = store.last_assessment("WC-040")
        version = store.section_version_row(assessment["section_version_id"])
        assert service_state(store, "WC-040", clock.now()).state == "in-service"
    assert assessment["time_utc"] == utc_text(clock.now())
    assert version["id"] == back.section_version_id and version["version"] == 2


def test_section_state_commands(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    result = _run("section-state", "set", "FE-210", "closed", "--by", "A. Marsh", "--note", "road closed for works",
                  "--at", "2026-01-20T08:00Z", "-w", workspace.root)  # fmt: skip
    assert result.exit_code == 0, result.output
    listed = json.loads(_run("section-state", "--json", "-w", workspace.root).output)
    assert listed == [{"section_id": "FE-210", "state": "closed", "time_utc": "2026-01-20T08:00:00Z",
                       "by": "A. Marsh", "note": "road closed for works", "section_version_id": 1}]
    again = _run("section-state", "set", "FE-210", "closed", "--by", "A. Marsh", "--note", "x", "-w", workspace.root)
    assert again.exit_code == 1 and "already closed" in again.output
    earlier = _run("section-state", "set", "FE-210", "under-repair", "--by", "A. Marsh", "--note", "x",
                   "--at", "2026-01-19T08:00Z", "-w", workspace.root)  # fmt: skip
    assert earlier.exit_code == 1 and "cannot be set before it" in earlier.output
    unknown = _run("section-state", "set", "XX-1", "closed", "--by", "A. Marsh", "--note", "x", "-w", workspace.root)
    assert unknown.exit_code == 1 and "XX-1" in unknown.output
    for command in (["section-state"], ["section-state", "set"], ["alerts", "close"], ["alerts", "history"]):
        help_text = _run(*command, "--help").output
        assert "Example" in help_text, command
