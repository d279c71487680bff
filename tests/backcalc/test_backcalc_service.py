"""Tests of the service side of back-analysis: case files, parameter versions, calibration and
the `backcalc` / `calibrate` commands (in-process), on the invented demo site's configuration."""

from __future__ import annotations

import json
import re
import shutil
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from watch.backcalc import load_case, run_case
from watch.cli import main
from watch.clock import ManualClock
from watch.errors import CalibrationRefused, ConfigError, ModelError
from watch.parameters import calibrate, check_record, current_section, section_history
from watch.workspace import init_workspace

REPO = Path(__file__).resolve().parents[2]
DEMO_CASE = REPO / "config" / "slips" / "wc_060_2026-01.toml"
NOW = datetime(2026, 4, 2, 9, 0, tzinfo=timezone.utc)

#: A quick case on the demo section: the design water lines, one searched point, circles only.
QUICK_CASE = """
[slip]
id = "TEST-1"
section = "WC-060"
failed_at = "2026-01-16T06:00:00Z"

[surface]
points = [[12.0, 74.0], [14.0, 71.0], [17.4, 67.8], [21.4, 65.0], [26.0, 64.42], [31.5, 64.25],
          [33.4, 64.3]]

[water]
at_failure = "design lines"
{water_lines}

[back_analysis]
material = "Weak clay"
form = "{form}"
friction_angles = [10.0, 20.0, 5.0]
match_points = {points}
refine_points = 0
non_circular = false
water_change_m = 0.5
unit_weight_change_kn_m3 = 0
"""


@pytest.fixture()
def workspace(tmp_path):
    ws = init_workspace(tmp_path / "ws", REPO / "config" / "site.toml")
    for section in (REPO / "config" / "sections").glob("*.toml"):
        shutil.copy(section, ws.sections / section.name)
    return ws


def write_case(tmp_path, form="drained c'-phi'", points=2, water_lines=""):
    path = tmp_path / "case.toml"
    path.write_text(QUICK_CASE.format(form=form, points=points, water_lines=water_lines),
                    encoding="utf-8")
    return path


def test_current_section_records_the_file_as_version_1(workspace):
    with workspace.open_store() as store:
        section, version_id = current_section(workspace, store, "WC-040", now=NOW)
        again, same_id = current_section(workspace, store, "WC-040")
        history = section_history(store, "WC-040")
    assert section.id == "WC-040" and version_id == same_id
    assert [v.version for v in history] == [1]
    assert history[0].provenance.startswith("section file sections/wc_040.toml (sha256 ")
    assert history[0].provenance.endswith("seen 2026-04-02T09:00:00Z)")
    assert history[0].created_utc == "2026-04-02T09:00:00Z"
    with workspace.open_store(read_only=True) as store:
        assert current_section(workspace, store, "WC-060")[1] is None
    with workspace.open_store() as store, pytest.raises(ConfigError, match="'XX-1' is not listed"):
        current_section(workspace, store, "XX-1")


def test_demo_case_file_reads(workspace):
    case = load_case(DEMO_CASE)
    assert case.section_id == "WC-060" and case.form == "cohesion_friction"
    assert case.failed_at == datetime(2026, 1, 16, 6, tzinfo=timezone.utc)
    assert case.stood == (datetime(2025, 12, 22, 7, 15, tzinfo=timezone.utc),)
    np.testing.assert_array_equal(case.friction_angles, np.arange(0.0, 41.0, 2.0))


def test_case_file_errors_name_the_key(tmp_path):
    path = write_case(tmp_path, form="peak")
    with pytest.raises(ConfigError, match="form = 'peak' is not one of"):
        load_case(path)
    path.write_text(QUICK_CASE.format(form="residual", points=1, water_lines="")
                    .replace("refine_points", "refine_pionts"), encoding="utf-8")
    with pytest.raises(ConfigError, match="unknown key\\(s\\) refine_pionts"):
        load_case(path)


def test_missing_readings_at_failure_is_a_clear_error(workspace):
    # No feed was ingested into this workspace, so WC060-PA has no reading at the failure.
    with pytest.raises(ModelError, match="no usable readings for water line 'clay' of section "
                                         "'WC-060' at 2026-01-16T06:00:00Z"):
        run_case(workspace, DEMO_CASE, ManualClock(NOW), record=False)


def test_a_water_line_given_in_the_case_file_is_used(workspace, tmp_path):
    given = [[0.0, 71.0], [14.0, 70.6], [24.0, 67.6], [33.0, 64.6], [35.6, 62.85],
             [36.6, 62.85], [55.0, 63.0]]
    lines = f'[[water.line]]\nname = "clay"\npoints = {given}\n'
    outcome = run_case(workspace, write_case(tmp_path, "residual", 1, lines), ManualClock(NOW),
                       record=False)
    clay = outcome.at_failure["WC-060"].water_line("clay")
    np.testing.assert_array_equal(clay.points, given)
    assert outcome.water["WC-060 at failure 2026-01-16T06:00:00Z"]["clay"] == "given in the case file"
    assert outcome.result.locus.found[0]


def test_backcalc_and_calibrate_commands(workspace, tmp_path):
    runner = CliRunner()
    case = write_case(tmp_path)
    saved, plot = tmp_path / "result.json", tmp_path / "result.png"
    run = runner.invoke(main, ["backcalc", str(case), "-w", str(workspace.root), "--json",
                               "--save", str(saved), "--plot", str(plot)])
    assert run.exit_code == 0, run.output
    data = json.loads(run.output)
    assert data["case"]["method"] == "spencer" and data["best"] is not None
    assert data["back_analysis_id"] == 1 and plot.stat().st_size > 10_000
    assert json.loads(saved.read_text())["best"] == data["best"]

    text = runner.invoke(main, ["backcalc", str(case), "-w", str(workspace.root),
                                "--no-progress"])
    assert text.exit_code == 0, text.output
    assert "FoS = 1 locus" in text.output and "Best fit: c' =" in text.output

    assert data["consistency"]["consistent"] is True
    # WC-040 and WC-080 have no stored record in this workspace, so their record cannot be
    # checked: refused, nothing stored, one line.
    refused = runner.invoke(main, ["calibrate", str(saved), "--sections", "WC-040 WC-080",
                                   "--by", "T. Tester", "-w", str(workspace.root)])
    assert refused.exit_code == 1
    assert "refused: section WC-040: no stored assessment" in refused.output
    assert len(refused.output.strip().splitlines()) == 1
    reason = "record not yet ingested; checked by hand against the January storm"
    done = runner.invoke(main, ["calibrate", str(saved), "--sections", "WC-040 WC-080",
                                "--by", "T. Tester", "-w", str(workspace.root),
                                "--override", reason])
    assert done.exit_code == 0, done.output
    assert "WC-040: 'Weak clay'" in done.output and "WC-080: 'Weak clay'" in done.output
    assert f"Override recorded: {reason}" in done.output
    best = data["best"]
    with workspace.open_store() as store:
        section, version_id = current_section(workspace, store, "WC-080")
        history = section_history(store, "WC-080")
        rows = store.calibration_rows("WC-080")
    clay = section.materials[section.material_index("Weak clay")]
    np.testing.assert_allclose([clay.cohesion, clay.friction_angle],
                               [best["cohesion_kpa"], best["friction_angle_deg"]], rtol=1e-12)
    assert [v.version for v in history] == [1, 2] and history[-1].id == version_id
    assert "back-analysis TEST-1" in history[-1].provenance
    assert "calibrated by T. Tester" in history[-1].provenance
    assert rows[0]["section_version_id"] == version_id and rows[0]["back_analysis_id"] == 1
    assert rows[0]["override_reason"] == reason
    assert f"checks overridden: {reason}" in history[-1].provenance

    wrong = runner.invoke(main, ["calibrate", str(saved), "--sections", "FE-210",
                                 "-w", str(workspace.root)])
    assert wrong.exit_code == 1
    assert "section 'FE-210' has no material 'Weak clay'" in wrong.output


def test_calibrate_is_all_or_nothing(workspace, tmp_path):
    outcome = run_case(workspace, write_case(tmp_path, "residual", 1), ManualClock(NOW),
                       record=False)
    with workspace.open_store() as store:
        with pytest.raises(ConfigError, match="'FE-210' has no material"):
            calibrate(workspace, store, outcome, ["WC-040", "FE-210"], "T. Tester", NOW,
                      override="test")
        assert store.calibration_rows() == []
        assert [v.version for v in section_history(store, "WC-040")] == [1]  # the file
        done = calibrate(workspace, store, outcome, ["WC-040"], "T. Tester", NOW,
                         override="no record in this test workspace")
    assert done[0].after["cohesion_kpa"] == 0.0
    np.testing.assert_allclose(done[0].after["friction_angle_deg"],
                               outcome.result.best.friction_angle, rtol=1e-12)


@pytest.mark.parametrize("command", ["backcalc", "calibrate"])
def test_commands_have_help_with_an_example(command):
    result = CliRunner().invoke(main, [command, "--help"])
    assert result.exit_code == 0 and "Example" in result.output


#: A second section of the slip whose surveyed surface runs under the weak clay, in the
#: stronger mudstone: no one strength makes both surfaces fail together.
DISAGREEING_SECTION = """
[[cross_section]]
section = "WC-040"
points = [[13.0, 74.0], [16.0, 70.0], [20.0, 66.2], [26.0, 65.6], [34.0, 65.2], [36.0, 64.5]]
"""


def test_calibrate_refuses_a_result_that_fails_its_own_consistency_checks(workspace, tmp_path):
    case = write_case(tmp_path)
    case.write_text(case.read_text(encoding="utf-8") + DISAGREEING_SECTION, encoding="utf-8")
    runner = CliRunner()
    saved = tmp_path / "result.json"
    run = runner.invoke(main, ["backcalc", str(case), "-w", str(workspace.root), "--json",
                               "--save", str(saved)])
    assert run.exit_code == 0, run.output
    consistency = json.loads(run.output)["consistency"]
    assert consistency["consistent"] is False
    checks = {c["name"]: c for c in consistency["checks"]}
    # With the joint strength F on WC-040's observed surface is far from 1, and on WC-060 a
    # searched surface has F well below 1 at failure: that slope would have failed first on
    # another surface (Duncan and Stark 1992: the back-calculated strength must make the
    # observed surface the critical one).
    assert not checks["observed surface at failure"]["passed"]
    assert checks["observed surface at failure"]["value"] > 0.05
    assert not checks["critical surface at failure"]["passed"]
    assert checks["critical surface at failure"]["value"] < 0.95

    refused = runner.invoke(main, ["calibrate", str(saved), "--sections", "WC-060",
                                   "--by", "T. Tester", "-w", str(workspace.root)])
    assert refused.exit_code == 1
    assert len(refused.output.strip().splitlines()) == 1
    # (equal weights and two sections: the two depart from 1 by the same amount)
    assert re.search(r"refused: F on the observed surface at failure is \d\.\d+ on "
                     r"'WC-0[46]0'", refused.output)
    assert "; the critical surface searched at failure has F = 0." in refused.output
    assert "--override REASON" in refused.output
    with workspace.open_store() as store:
        assert store.calibration_rows() == []

    empty = runner.invoke(main, ["calibrate", str(saved), "--sections", "WC-060", "--by",
                                 "T. Tester", "-w", str(workspace.root), "--override", " "])
    assert empty.exit_code == 1 and "give the reason for the override" in empty.output
    reason = "trial only: the WC-040 survey is being redone"
    done = runner.invoke(main, ["calibrate", str(saved), "--sections", "WC-060", "--by",
                                "T. Tester", "-w", str(workspace.root), "--override", reason,
                                "--json"])
    assert done.exit_code == 0, done.output
    item = json.loads(done.output)[0]
    assert item["override_reason"] == reason
    assert {c["name"]: c["passed"] for c in item["checks"]}["critical surface at failure"] is False
    with workspace.open_store() as store:
        row = store.calibration_rows("WC-060")[0]
    assert row["override_reason"] == reason
    assert json.loads(row["checks_json"]) == item["checks"]


def _store_assessment(store, section_id, version_id, time_utc, fos, lines):
    """One stored assessment of the watch cycle with its water lines (what a cycle writes)."""
    with store.atomic():
        assessment_id = store.insert_assessment({
            "section_id": section_id, "section_version_id": version_id, "time_utc": time_utc,
            "method": "spencer", "fos": fos, "converged": 1, "status": "ok",
            "created_utc": time_utc,
        })
        for name, points in lines.items():
            store.insert_water_line({
                "assessment_id": assessment_id, "section_id": section_id, "line_name": name,
                "time_utc": time_utc, "points_json": json.dumps(np.asarray(points).tolist()),
                "source": "instruments", "fallback": "none", "readings_json": "[]",
                "created_utc": time_utc,
            })


def _raised_lines(section, lift):
    """The section's water lines raised by ``lift`` [m], no higher than the ground."""
    ground = section.ground
    return {line.name: np.column_stack([line.points[:, 0], np.minimum(
        line.points[:, 1] + lift, np.interp(line.points[:, 0], *ground.T))])
        for line in section.water_lines}


def test_calibrate_checks_each_target_section_against_its_own_record(workspace, tmp_path):
    from solver.backcalc import with_strength
    from solver.search import SearchSettings, search_critical_surface

    outcome = run_case(workspace, write_case(tmp_path), ManualClock(NOW), record=False)
    assert outcome.result.consistent
    best = outcome.result.best
    strength = {"cohesion": best.cohesion, "friction_angle": best.friction_angle}
    with workspace.open_store() as store:
        section, version_id = current_section(workspace, store, "WC-040", now=NOW)
        ordinary, storm = _raised_lines(section, 0.0), _raised_lines(section, 3.0)
        # The record of WC-040: it stood through an ordinary day and a storm.
        _store_assessment(store, "WC-040", version_id, "2026-01-05T12:00:00Z", 1.33, ordinary)
        _store_assessment(store, "WC-040", version_id, "2026-01-15T18:00:00Z", 1.02, storm)
    # An independent search (solver.search, outside the calibration) with the new strength:
    # WC-040 stands on the ordinary day and would fail in the storm it stood through. The
    # lines are drawn through measured heads, so no cos^2 correction (Skempton and DeLory
    # 1957: it belongs to a phreatic line with seepage parallel to the slope).
    settings = SearchSettings(method="spencer", min_depth=1.0)
    fos = {name: search_critical_surface(
        with_strength(section.with_water_lines(lines, {n: False for n in lines}), "Weak clay",
                      **strength), settings,
        screen_with="bishop_simplified").fos for name, lines in (("ordinary", ordinary),
                                                                 ("storm", storm))}
    assert fos["ordinary"] > 1.0 > fos["storm"]
    with workspace.open_store() as store:
        with pytest.raises(CalibrationRefused, match=r"section WC-040: at 2026-01-15T18:00:00Z "
                           r"\(stored FoS 1.020\) the new strength gives FoS 0\.\d+ \(spencer\): "
                           "it would have failed, but it stood"):
            calibrate(workspace, store, outcome, ["WC-040"], "T. Tester", NOW)
        assert store.calibration_rows() == []
        # The checks by themselves: the storm fails with the FoS of the independent search
        # (same search settings; the check runs the watch cycle's search), the ordinary day
        # passes.
        checks = {c.time_utc: c for c in check_record(workspace, store, "WC-040", "Weak clay",
                                                      strength, NOW)}
        np.testing.assert_allclose(checks["2026-01-15T18:00:00Z"].fos, fos["storm"], rtol=1e-6)
        assert not checks["2026-01-15T18:00:00Z"].passed
        assert checks["2026-01-05T12:00:00Z"].passed
        # A section of the slip itself (WC-060) is checked against the case's stood times by
        # the back-analysis, not against a stored record: it calibrates.
        done = calibrate(workspace, store, outcome, ["WC-060"], "T. Tester", NOW)
        assert done[0].override_reason is None
        # A record that stood up to the new strength passes: only the ordinary day counts
        # before the storm.
        passed = calibrate(workspace, store, outcome, ["WC-040"], "T. Tester",
                           datetime(2026, 1, 10, tzinfo=timezone.utc))
    record = [c for c in passed[0].checks if c["name"].startswith("record")]
    assert [(c["time_utc"], c["passed"]) for c in record] == [("2026-01-05T12:00:00Z", True)]


def test_case_file_lengths_weigh_the_sections(workspace, tmp_path):
    case = write_case(tmp_path)
    text = case.read_text(encoding="utf-8").replace('failed_at = "2026-01-16T06:00:00Z"',
                                                    'failed_at = "2026-01-16T06:00:00Z"\n'
                                                    'length_m = 24.0')
    case.write_text(text + DISAGREEING_SECTION, encoding="utf-8")
    with pytest.raises(ConfigError, match=r"length_m is given for \[slip\] but not for "
                                          r"\[\[cross_section\]\] 1"):
        load_case(case)
    case.write_text(text + DISAGREEING_SECTION.replace('section = "WC-040"',
                                                       'section = "WC-040"\nlength_m = 8.0'),
                    encoding="utf-8")
    assert load_case(case).lengths == (24.0, 8.0)
    case.write_text(text.replace("length_m = 24.0", "length_m = 0"), encoding="utf-8")
    with pytest.raises(ConfigError, match=r"\[slip\] length_m = 0 must be > 0"):
        load_case(case)


def test_an_override_is_shown_where_calibrations_are_listed(workspace, tmp_path):
    from watch.board import build_board, section_page_name

    outcome = run_case(workspace, write_case(tmp_path, "residual", 1), ManualClock(NOW),
                       record=False)
    reason = "neighbour record not yet ingested"
    with workspace.open_store() as store:
        calibrate(workspace, store, outcome, ["WC-040"], "T. Tester", NOW, override=reason)
    board = build_board(workspace, NOW)
    page = (board.out / section_page_name("WC-040")).read_text(encoding="utf-8")
    assert "Checks overridden" in page and reason in page
