"""What the duty engineer reads (issue 15, items 3 and 6): results on the design water lines
said plainly and kept out of trends, changes and "the lowest"; numbers rounded by quantity;
tables that never cut a value; CSV without float noise; gaps and trigger lines drawn apart.

INVENTED DATA (tests/watch/board_fixtures.py): an invented two-section site.
"""

from __future__ import annotations

import csv
import io
import json
import re
import shutil
import subprocess
import sys
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tests.watch.board_fixtures import DAYS, NOW, make_workspace
from watch import assessment_status
from watch.board import build_board, collect_status, fos_series, section_page_name
from watch.cli import main
from watch.formatting import number_text, plain_number, short_time
from watch.plots import TRIGGER_COLOUR, break_at_gaps, fos_history_figure, heads_figure
from watch.report import build_report
from watch.section_status import sections_status

PDFTOTEXT = shutil.which("pdftotext")
needs_poppler = pytest.mark.skipif(PDFTOTEXT is None, reason="pdftotext (poppler-utils) not installed")

#: The assessment of day 5 and the last one (day 10) are made results on the design water
#: lines, with a factor of safety lower than any other: a "lowest" or a trend that took them
#: would show it.
DESIGN_DAYS = (5, DAYS)
DESIGN_FOS = 0.777


@pytest.fixture(scope="module")
def design(tmp_path_factory):
    """A workspace whose store holds results on the design water lines, and a calibrated
    parameter version with unrounded strengths (c' 1.32806 kPa, phi' 22.4817 deg)."""
    workspace = make_workspace(tmp_path_factory.mktemp("duty") / "ws")
    start = NOW - timedelta(days=DAYS)
    with workspace.open_store() as store, store.atomic():
        for day in DESIGN_DAYS:
            store.conn.execute(
                "UPDATE assessments SET status = ?, converged = 0, fos = ?, message = ? "
                "WHERE section_id = 'S-1' AND time_utc = ?",
                (assessment_status.ON_DESIGN_LINES, DESIGN_FOS,
                 "a water line with piezometers fell back to its design line",
                 (start + timedelta(days=day)).strftime("%Y-%m-%dT%H:%M:%SZ")),
            )
        row = store.conn.execute("SELECT id, parameters_json FROM section_versions").fetchone()
        parameters = json.loads(row[1])
        clay = next(m for m in parameters["material"] if m["name"] == "Weak clay")
        clay["cohesion"], clay["friction_angle"] = 1.32806, 22.4817
        store.conn.execute("UPDATE section_versions SET parameters_json = ? WHERE id = ?",
                           (json.dumps(parameters), row[0]))
        # An alert whose message is longer than its column: the table must wrap it, not cut it.
        cursor = store.conn.execute(
            "INSERT INTO alerts (section_id, rule, level, state, message, raised_utc, updated_utc) "
            "VALUES ('S-1', 'rain-long', 'watch', 'firing', ?, ?, ?)",
            ("rain at RG-1 against the invented intensity-duration curve at or above 0.65 "
             "for the whole of the wet week", "2026-01-18T09:05:00Z", "2026-01-19T09:07:00Z"),
        )
        # The report lists the alerts' stored events (watch.alert_history): raised, then updated.
        for time, old, new in (("2026-01-18T09:05:00Z", "inactive", "firing"),
                               ("2026-01-19T09:07:00Z", "firing", "firing")):
            store.conn.execute(
                "INSERT INTO alert_events (alert_id, time_utc, event, old_state, new_state, episode, "
                "value, created_utc) VALUES (?, ?, 'state change', ?, ?, 1, 0.7, ?)",
                (cursor.lastrowid, time, old, new, time))
    return workspace


def _s1(workspace):
    with workspace.open_store(read_only=True) as store:
        return next(s for s in collect_status(workspace, store, NOW).sections if s.id == "S-1")


def test_design_line_results_stay_out_of_trends_changes_and_the_lowest(design):
    section = _s1(design)
    usable, on_design, breaks = fos_series(section.history)
    assert [a.time for a in on_design] == [NOW - timedelta(days=DAYS - d) for d in DESIGN_DAYS]
    assert all(a.fos != DESIGN_FOS for a in usable)
    # The line stops where the design-line result of day 5 lies between days 4 and 6.
    assert breaks == [i == 4 for i in range(len(usable) - 1)]
    assert section.worst.fos != DESIGN_FOS and section.worst.usable
    week = [a for a in usable if a.time >= NOW - timedelta(days=7)]
    assert section.fos_change["7 days"] == pytest.approx(week[-1].fos - week[0].fos, rel=1e-12)
    # The latest result is on the design lines: 24 h holds one result on readings only.
    assert section.fos_change["24 h"] is None


def test_board_says_design_lines_and_never_did_not_converge(design, tmp_path):
    result = build_board(design, NOW, tmp_path / "board")
    index = (tmp_path / "board" / "index.html").read_text(encoding="utf-8")
    page = (tmp_path / "board" / section_page_name("S-1")).read_text(encoding="utf-8")
    for text in (index, page):
        assert "converge" not in text.lower().replace("converged, on live readings", "")
        assert "on the design water lines" in text or "on the DESIGN water lines" in text
    # The overview shows the newest factor of safety on readings (day 9) in bold, and the
    # design-line result beside it, said to be one.
    s1 = _s1(design)
    shown = [a for a in s1.history if a.usable][-1]
    assert f"<strong>{shown.fos:.2f}</strong>" in index
    assert f"{DESIGN_FOS:.2f} on the design water lines: no live readings" in index
    entry = next(s for s in result.to_dict()["sections"] if s["section_id"] == "S-1")
    assert entry["assessment_status"] == assessment_status.ON_DESIGN_LINES
    assert entry["fos_basis"] == assessment_status.FOS_BASIS_DESIGN_LINES


def test_status_gives_the_live_factor_of_safety_and_the_design_one_apart(design):
    rows = {row["section_id"]: row for row in sections_status(design, NOW)}
    s1 = rows["S-1"]
    live = [a for a in _s1(design).history if a.usable][-1]
    assert s1["fos"] == pytest.approx(live.fos, rel=1e-12)
    assert s1["fos_basis"] == assessment_status.FOS_BASIS_READINGS
    assert s1["fos_on_design_lines"] == pytest.approx(DESIGN_FOS, rel=1e-12)
    assert any("design water lines" in p for p in s1["data_problems"])
    assert not any("converge" in p for p in s1["data_problems"])


@needs_poppler
def test_pdf_says_design_lines_rounds_by_quantity_and_never_cuts_a_value(design):
    result = build_report(design, "S-1", NOW - timedelta(days=30), NOW, NOW,
                          design.root / "reports" / "duty.pdf")
    text = subprocess.run([PDFTOTEXT, "-layout", str(result.path), "-"], check=True,
                          capture_output=True, text=True).stdout
    # The reported (lowest) assessment rests on readings, never on the design lines.
    assert result.stored_fos != DESIGN_FOS
    assert "2 on the design water lines" in text
    assert "NOT converged" not in text and "not converged" not in text
    # c' to 0.1 kPa and phi' to 0.1 deg (watch.formatting.DIGITS); never the stored digits.
    materials = next(line for line in text.splitlines() if line.strip().startswith("Weak clay"))
    assert materials.split()[5:7] == ["1.3", "22.5"], materials  # "Weak clay" is two words
    assert "1.32806" not in text and "22.4817" not in text
    # Every time in a table is whole ("YYYY-MM-DD HH:MM"), none cut to "2026-01-18T09:0".
    assert "2026-01-18 09:05" in text and "2026-01-19 09:07" in text
    assert not re.search(r"\d{4}-\d\d-\d\d[ T]\d\d?:?\d?(?![\d:])", text)
    # The long alert message is wrapped in its column: every word of it is on the page, in order.
    words = "for the whole of the wet week".split()
    flat = " ".join(text.split())
    assert re.search(r"\s.*?".join(map(re.escape, words)), flat)


def test_numbers_for_people_and_for_csv():
    # Decimals by quantity (module watch.formatting): FoS 0.01, c' and phi' 0.1.
    assert number_text(1.32806, "cohesion") == "1.3"
    assert number_text(22.4817, "friction_angle") == "22.5"
    assert number_text(1.2349, "fos") == "1.23"
    assert number_text(float("nan")) == "n/a"
    # 0.1 * 14 is 1.4000000000000001 in binary floating point (IEEE 754 double).
    assert repr(0.1 * 14) == "1.4000000000000001"
    assert plain_number(0.1 * 14) == "1.4"
    assert float(plain_number(66.10355443425077)) == pytest.approx(66.10355443425077, rel=1e-11)
    assert plain_number(3.0) == "3.0" and plain_number(7) == 7 and plain_number("x") == "x"
    assert short_time("2026-11-09T09:00:00Z") == "2026-11-09 09:00"


def test_readings_csv_has_no_float_noise(design):
    with design.open_store() as store, store.atomic():
        store.conn.execute("UPDATE readings SET head_m = ? WHERE instrument_id = 'PZ-1' AND "
                           "time_utc = (SELECT MIN(time_utc) FROM readings)", (0.1 * 14,))
    outcome = CliRunner().invoke(main, ["readings", "PZ-1", "-w", str(design.root), "--csv"])
    assert outcome.exit_code == 0, outcome.output
    rows = list(csv.DictReader(io.StringIO(outcome.output)))
    assert rows[0]["head_m"] == "1.4"
    assert not re.search(r"\d\.\d*0000000\d|\d\.\d*9999999\d", outcome.output)


def test_a_closed_pipe_ends_the_output_quietly(design):
    """`slipwatch readings ... | head -1`: the reader closes the pipe early."""
    command = Path(sys.executable).parent / "slipwatch"
    for arguments in (["readings", "PZ-1", "--csv"], ["status"]):
        process = subprocess.Popen([str(command), *arguments, "-w", str(design.root)],
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        # Closed before the command (still importing) writes anything: every write meets a
        # pipe without reader.
        process.stdout.close()
        _, error = process.communicate(timeout=120)
        assert error == b"", (arguments, error)


# --- plots ----------------------------------------------------------------------------------------


def test_a_silence_is_drawn_as_a_gap():
    start = datetime(2026, 1, 1, tzinfo=timezone.utc)
    times = [start + timedelta(hours=h) for h in range(10)] + \
            [start + timedelta(hours=58 + h) for h in range(10)]  # a 2-day silence
    values = np.arange(20.0)
    drawn_times, drawn = break_at_gaps(times, values)
    assert len(drawn) == 21 and np.isnan(drawn).sum() == 1
    gap = int(np.flatnonzero(np.isnan(drawn))[0])
    assert drawn_times[gap - 1] == times[9] and drawn_times[gap + 1] == times[10]
    # Regular data are left alone; a forced break adds its gap.
    assert np.isnan(break_at_gaps(times[:10], values[:10])[1]).sum() == 0
    forced = break_at_gaps(times[:10], values[:10], breaks=[i == 3 for i in range(9)])[1]
    assert np.isnan(forced).sum() == 1


def test_trigger_lines_differ_from_every_series_in_colour_and_dash():
    start = datetime(2026, 1, 1, tzinfo=timezone.utc)
    times = [start + timedelta(hours=h) for h in range(48)]
    levels = {"watch": 1.3, "amber": 1.2, "red": 1.1}
    figures = [
        fos_history_figure("S-1", times, np.linspace(1.4, 1.15, 48), levels=levels,
                           design_times=[times[5]], design_fos=[1.0]),
        heads_figure("heads", {f"P{i}": (times, np.linspace(60 + i, 61 + i, 48)) for i in range(6)},
                     levels={"watch P1": 61.5, "amber P1": 62.0}),
    ]
    import matplotlib.colors as colours
    import matplotlib.pyplot as plt

    try:
        for figure in figures:
            lines = figure.axes[0].get_lines()
            triggers = [l for l in lines if l.get_label().startswith("Trigger")]
            series = [l for l in lines if not l.get_label().startswith(("Trigger", "On design", "_"))]
            assert triggers and series
            for trigger in triggers:
                assert colours.to_hex(trigger.get_color()) == TRIGGER_COLOUR.lower()
                assert trigger.get_linestyle() not in ("-", "None")
            for line in series:
                assert colours.to_hex(line.get_color()) != TRIGGER_COLOUR.lower()
                assert line.get_linestyle() == "-"
            # Results on the design lines: markers only, never joined to the series.
            for line in lines:
                if line.get_label().startswith("On design"):
                    assert line.get_linestyle() == "None" and line.get_marker() == "s"
    finally:
        for figure in figures:
            plt.close(figure)


def test_the_section_figure_draws_the_piezometers_and_their_readings(design, tmp_path):
    build_board(design, NOW, tmp_path / "board")
    page = (tmp_path / "board" / section_page_name("S-1")).read_text(encoding="utf-8")
    assert "Piezometers: black line from collar to tip" in page
    # The instrument table shows the latest value with its unit, and its age.
    # Fixture: PZ-1 head 66.0 + 1.5 m over the record, the last reading at NOW (67.50 m).
    assert "head 67.50 m" in page
    assert "rain in the interval 1.0 mm" in page


def test_a_new_parameter_version_breaks_the_series_and_is_no_change_of_the_slope(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    with workspace.open_store() as store, store.atomic():
        old = store.conn.execute("SELECT id, parameters_json FROM section_versions").fetchone()
        parameters = json.loads(old[1])
        next(m for m in parameters["material"] if m["name"] == "Weak clay")["cohesion"] = 3.5
        store.record_section_version("S-1", parameters, "calibrated (test)",
                                     (NOW - timedelta(days=2)).strftime("%Y-%m-%dT%H:%M:%SZ"))
        new = store.latest_section_version("S-1")["id"]
        assert new != old[0]
        store.conn.execute("UPDATE assessments SET section_version_id = ? WHERE time_utc >= ?",
                           (new, (NOW - timedelta(days=1)).strftime("%Y-%m-%dT%H:%M:%SZ")))
    section = _s1(workspace)
    usable, _, breaks = fos_series(section.history)
    # Days 9 and 10 run on the new version: the line stops between days 8 and 9.
    assert breaks == [i == DAYS - 2 for i in range(len(usable) - 1)]
    # The 7-day change is taken on the new version only (days 9 and 10).
    assert section.fos_change["7 days"] == pytest.approx(usable[-1].fos - usable[-2].fos, rel=1e-12)


def test_only_a_line_fed_by_piezometers_falling_back_is_a_data_problem(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    with workspace.open_store() as store, store.atomic():
        latest = store.conn.execute("SELECT MAX(id) FROM assessments WHERE section_id = 'S-1'").fetchone()[0]
        store.conn.execute("UPDATE water_lines SET fallback = 'design line', fallback_reason = "
                           "'no usable reading of PZ-1' WHERE assessment_id = ?", (latest,))
        store.conn.execute(
            "INSERT INTO water_lines (assessment_id, section_id, line_name, time_utc, points_json, "
            "source, fallback, fallback_reason, readings_json, created_utc) SELECT assessment_id, "
            "section_id, 'till', time_utc, points_json, 'design line', 'design line', "
            "'no piezometer informs this line', '[]', created_utc FROM water_lines WHERE assessment_id = ?",
            (latest,))
    problems = _s1(workspace).data_problems
    # PZ-1 feeds 'clay' (site file); no piezometer feeds 'till', which is its design line by design.
    assert any(p.startswith("water line 'clay' from the design line") for p in problems)
    assert not any("'till'" in p for p in problems)
