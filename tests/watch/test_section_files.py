"""Section versions follow the section files (issue 15, item 1): an edited file is a new version
assessed in the next cycle, with its provenance; a missing, unreadable or invalid file keeps the
last valid version running and raises a notified data alert naming the file and the error; a
file edited after a calibration wins over the calibrated version.

The section is the invented demo section WC-040 without feeds (water on its design lines), so
each check compares the stored factor of safety with ``watch.analysis.analyse`` of the same file
(the reference implementation of one section file; same search, so rtol 1e-9)."""

import json
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from watch.analysis import analyse
from watch.clock import ManualClock
from watch.cycle import run_cycle
from watch.parameters import calibrate, section_history
from watch.sections import load_section
from watch.triggers import SECTION_FILE_RULE
from tests.watch.cycle_helpers import make_workspace

START = datetime(2026, 1, 10, 6, tzinfo=timezone.utc)
STEP = timedelta(hours=6)


def _weaken_clay(text: str) -> str:
    """WC-040 with the weak clay at c' = 0, phi' = 8 deg (the issue's edit)."""
    old = 'name = "Weak clay"\nmodel = "drained"\nunit_weight = 18.5\nunit_weight_saturated = 19.0\ncohesion = 3.0\nfriction_angle = 22.0'
    assert old in text
    return text.replace(old, old.replace("cohesion = 3.0", "cohesion = 0.0").replace("friction_angle = 22.0",
                                                                                   "friction_angle = 8.0"))


def _latest(workspace):
    with workspace.open_store(read_only=True) as store:
        row = store.last_assessment("WC-040")
        version = store.section_version_row(row["section_version_id"])
        alert = next((a for a in store.alert_rows("WC-040") if a["rule"] == SECTION_FILE_RULE), None)
        outbox = [r for r in store.outbox() if r["alert_id"] == (alert or {}).get("id")]
    return row, version, alert, outbox


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """WC-040 assessed, its file edited, removed, corrupted and fixed, one cycle each."""
    workspace = make_workspace(tmp_path_factory.mktemp("files") / "ws")
    path = workspace.sections / "wc_040.toml"
    original = path.read_text(encoding="utf-8")
    clock = ManualClock(START)
    seen = {}

    def cycle(label):
        clock.advance(STEP)
        report = run_cycle(workspace, clock, sections=["WC-040"])
        seen[label] = (clock.now(), report.sections[0], *_latest(workspace))

    cycle("first")
    path.write_text(_weaken_clay(original), encoding="utf-8")
    cycle("edited")
    path.unlink()
    cycle("removed")
    path.write_text(original.replace("[search]", "[search\n"), encoding="utf-8")  # TOML syntax error
    cycle("corrupted")
    path.write_text(_weaken_clay(original), encoding="utf-8")
    cycle("fixed")
    return workspace, seen, original


def test_an_edited_section_file_is_a_new_version_assessed_next_cycle(season, tmp_path):
    workspace, seen, original = season
    _, _, first, version1, _, _ = seen["first"]
    when, outcome, edited, version2, _, _ = seen["edited"]
    assert version1["version"] == 1 and version2["version"] == 2
    assert outcome.status != "unchanged"
    # provenance: the file, its digest and when it was seen (the cycle's clock)
    assert version2["provenance"].startswith("section file sections/wc_040.toml (sha256 ")
    assert version2["created_utc"] == when.strftime("%Y-%m-%dT%H:%M:%SZ")
    assert version2["file_sha256"] != version1["file_sha256"]
    reference = tmp_path / "edited.toml"
    reference.write_text(_weaken_clay(original), encoding="utf-8")
    np.testing.assert_allclose(edited["fos"], analyse(load_section(reference)).fos, rtol=1e-9)
    assert edited["fos"] < first["fos"]


def test_a_missing_or_corrupt_file_keeps_the_last_version_and_raises_a_data_alert(season):
    _, seen, _ = season
    for label, words in (("removed", "section file not found"), ("corrupted", "not valid TOML")):
        _, outcome, row, version, alert, outbox = seen[label]
        assert version["version"] == 2, label  # the last valid version runs on
        assert row["status"] != "failed", label
        assert alert["state"] == "firing", label
        assert "wc_040.toml" in alert["message"] and words in alert["message"], label
        assert any(w.startswith("section file problem") for w in outcome.warnings), label
    _, _, _, _, alert, outbox = seen["corrupted"]
    data_rows = [r for r in outbox if r["kind"] == "data"]
    assert len(data_rows) == 1  # notified once for the episode
    assert "wc_040.toml" in data_rows[0]["body"] and "not found" in data_rows[0]["body"]


def test_a_fixed_file_clears_the_alert(season):
    _, seen, _ = season
    _, _, row, version, alert, _ = seen["fixed"]
    assert alert["state"] == "resolved"
    assert version["version"] == 2  # the file is back to the bytes of version 2: no new version
    np.testing.assert_allclose(row["fos"], seen["edited"][2]["fos"], rtol=1e-9)


def test_a_file_edited_after_a_calibration_wins(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)
    run_cycle(workspace, clock, sections=["WC-040"])
    result = {
        "case": {"id": "test-slip", "material": "Weak clay", "form": "drained c'-phi'", "method": "spencer",
                 "failed_utc": "2026-01-09T00:00:00Z", "section_id": "WC-040"},
        "best": {"cohesion_kpa": 1.0, "friction_angle_deg": 20.0},
        "ran_utc": "2026-01-10T07:00:00Z",
    }
    clock.advance(STEP)
    with workspace.open_store() as store:
        # The stand-in result carries no consistency checks (it is not a back-analysis): the
        # test is about which version is in force, so the refusal is overridden, with a reason.
        calibrate(workspace, store, result, ["WC-040"], "T. Tester", clock.now(),
                  override="stand-in result for a test of version precedence")
    # An unchanged file leaves the calibrated version in force.
    clock.advance(STEP)
    run_cycle(workspace, clock, sections=["WC-040"])
    with workspace.open_store(read_only=True) as store:
        history = section_history(store, "WC-040")
        used = store.last_assessment("WC-040")["section_version_id"]
    assert [v.version for v in history] == [1, 2] and used == history[-1].id
    # An edit of the file after the calibration: the file wins, and says what it replaced.
    path = workspace.sections / "wc_040.toml"
    path.write_text(_weaken_clay(path.read_text(encoding="utf-8")), encoding="utf-8")
    clock.advance(STEP)
    run_cycle(workspace, clock, sections=["WC-040"])
    with workspace.open_store(read_only=True) as store:
        history = section_history(store, "WC-040")
        row = store.section_version_row(store.last_assessment("WC-040")["section_version_id"])
    assert [v.version for v in history] == [1, 2, 3] and row["version"] == 3
    assert "edited after calibrated version 2" in row["provenance"]
    clay = next(m for m in json.loads(row["parameters_json"])["material"] if m["name"] == "Weak clay")
    assert (clay["cohesion"], clay["friction_angle"]) == (0.0, 8.0)  # from the file, not the calibration
