"""Water lines of a section from the stored readings, as the site file configures them
(watch.waterlines), end to end from a feed file to the factor of safety.

References: the line between and beyond the instruments is checked against numpy.interp
through the hand-drawn vertices (linear interpolation is the closed form of the line); the
factor of safety against the solver given the hand-drawn line directly. The workspace and its
readings are invented (tests/watch/groundwater_site.py); heads come from a known exponential
response model, so a rainfall-model estimate has an exact answer.
"""

from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from solver.methods import bishop_simplified
from solver.slicing import slice_surface
from watch.analysis import analyse, surface_of
from watch.config import parse_site_config
from watch.errors import ConfigError
from watch.forecast import calibrate_response_models
from watch.groundwater import (
    FALLBACK_DESIGN_LINE,
    FALLBACK_NONE,
    FALLBACK_RAINFALL_MODEL,
    SOURCE_RAINFALL_MODEL,
    STALE,
)
from watch.sections import load_section
from watch.waterlines import (
    load_readings,
    store_water_lines,
    stored_water_lines,
    water_lines_for,
    water_lines_from_store,
    water_lines_through,
)
from tests.watch.groundwater_site import SECTION, SITE, hour, make_site

GROUND = np.array([[0.0, 20.0], [10.0, 20.0], [30.0, 10.0], [50.0, 10.0]])
XS = np.linspace(0.0, 50.0, 1001)


def _expected_line(head: float) -> np.ndarray:
    # Site file: hold level to the left of P1 (x = 15), fixed level 9.5 m from x = 32 to the
    # right. Heads of about 12-12.5 m stay below the ground everywhere, so no clipping.
    return np.array([[0.0, head], [15.0, head], [32.0, 9.5], [50.0, 9.5]])


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    return make_site(tmp_path_factory.mktemp("waterlines"))


@pytest.fixture(scope="module")
def stopped(tmp_path_factory):
    """P1 stops reporting after hour 600; the gauge goes on."""
    return make_site(tmp_path_factory.mktemp("stopped"), head_until=hour(600))


def test_line_from_ingested_readings_and_the_same_fos_as_the_solver_given_the_line(site):
    at = hour(500)
    config = site.workspace.config()
    section = load_section(site.workspace.sections / "s1.toml")
    with site.workspace.open_store() as store:
        lines = water_lines_from_store(store, section, config, at)
    line = lines["main"]
    head = site.true_head(at)
    assert line.fallback == FALLBACK_NONE
    assert line.heads_used["P1"] == pytest.approx(head, abs=5e-7)  # 6 decimals in the feed
    # numpy.interp through the hand-drawn vertices is the closed form of the line
    np.testing.assert_allclose(np.interp(XS, *line.points.T),
                               np.interp(XS, *_expected_line(head).T), atol=1e-6)

    built = analyse(section.with_water_lines({"main": line.points}))
    by_hand = section.with_water_lines({"main": _expected_line(head)})
    slices = slice_surface(by_hand, surface_of(built.critical), 30)
    direct = bishop_simplified(slices)
    assert built.method == "bishop_simplified"
    np.testing.assert_allclose(direct.fos[0], built.fos, rtol=1e-6)
    np.testing.assert_allclose(analyse(by_hand).fos, built.fos, rtol=1e-6)


def test_stored_line_traces_back_to_the_feed_row(site):
    at = hour(300) + pd.Timedelta(minutes=30)  # between readings: the one at hour 300 counts
    config = site.workspace.config()
    section = load_section(site.workspace.sections / "s1.toml")
    with site.workspace.open_store() as store:
        lines = water_lines_from_store(store, section, config, at)
        with store.atomic():
            ids = store_water_lines(store, None, "S1", at, lines)
        rows = stored_water_lines(store, section_id="S1")
    assert [r["id"] for r in rows] == ids
    row = rows[0]
    assert row["time_utc"] == "2026-01-13T12:30:00Z"
    np.testing.assert_allclose(row["points"], lines["main"].points, rtol=1e-12)
    (reading,) = row["readings"]
    assert reading["instrument_id"] == "P1"
    assert reading["time_utc"] == "2026-01-13T12:00:00Z"
    assert reading["source_file"] == site.feed.name
    feed_line = site.feed.read_text().splitlines()[reading["source_line"] - 1]
    time_text, head_text, _ = feed_line.split(",")
    assert time_text == "2026-01-13T12:00:00Z"
    assert float(head_text) == pytest.approx(reading["head_m"], rel=1e-12)
    assert row["details"]["right_rule"] == "fixed level (9.5 m from x = 32 m)"


def test_reading_exactly_at_the_time_is_used(site):
    config = site.workspace.config()
    section = load_section(site.workspace.sections / "s1.toml")
    with site.workspace.open_store(read_only=True) as store:
        frame = load_readings(store, ["P1"], hour(100), hour(200))
    line = water_lines_for(section, config, frame, hour(150))["main"]
    assert line.readings[0]["time_utc"] == "2026-01-07T06:00:00Z"
    assert line.heads_used["P1"] == pytest.approx(site.true_head(hour(150)), abs=5e-7)


def test_silent_instrument_falls_back_to_the_rainfall_model_estimate(stopped):
    config = stopped.workspace.config()
    section = load_section(stopped.workspace.sections / "s1.toml")
    at = hour(630)  # 30 h after P1's last reading: stale (max age 6 h)
    with stopped.workspace.open_store() as store:
        before = water_lines_from_store(store, section, config, at)["main"]
        calibrations = calibrate_response_models(store, config, hour(600), days=24)
        after = water_lines_from_store(store, section, config, at)["main"]
    # Without a model: the design line, and the record says why.
    assert before.fallback == FALLBACK_DESIGN_LINE
    assert before.excluded == {"P1": STALE}
    assert "no calibrated rainfall-response model" in before.fallback_reason
    # With a model calibrated on P1's history: the model carries P1's last reading forward
    # through the 30 h of rain since; the heads were generated by a model of the same form,
    # so the estimate must meet the generated head.
    assert calibrations[0].usable
    assert after.source == SOURCE_RAINFALL_MODEL
    assert after.fallback == FALLBACK_RAINFALL_MODEL
    assert "P1" in after.fallback_reason and "stale" in after.fallback_reason
    assert after.heads_used["P1"] == pytest.approx(stopped.true_head(at), abs=2e-3)
    (record,) = after.readings
    assert record["estimated_by"] == "rainfall model"
    assert record["from_reading"]["time_utc"] == "2026-01-26T00:00:00Z"
    assert record["model_id"] == calibrations[0].model_id


def test_per_line_max_age_is_the_default_for_its_instruments(stopped):
    # P1 has max_age_hours = 6 of its own; without it the line's 48 h applies.
    site_text = SITE.replace("max_age_hours = 6.0\n", "").replace(
        'right = { rule = "fixed level", level = 9.5, from = 32.0 }',
        'right = { rule = "fixed level", level = 9.5, from = 32.0 }\nmax_age_hours = 48.0')
    config = parse_site_config(__import__("tomllib").loads(site_text))
    section = load_section(stopped.workspace.sections / "s1.toml")
    with stopped.workspace.open_store(read_only=True) as store:
        frame = load_readings(store, ["P1"], hour(500), hour(700))
    assert water_lines_for(section, config, frame, hour(640))["main"].fallback == FALLBACK_NONE
    assert water_lines_for(section, config, frame, hour(649))["main"].excluded == {"P1": STALE}


def test_without_configured_rules_lines_run_parallel_to_the_design_line(site):
    config = site.workspace.config()
    section = load_section(site.workspace.sections / "s1.toml")
    with site.workspace.open_store(read_only=True) as store:
        frame = load_readings(store, ["P1"])
    lines = water_lines_through(section, config.piezometers, frame, hour(500),
                                default_max_age=timedelta(hours=6))
    head = site.true_head(hour(500))
    # Default: parallel to the design line on both sides (design line [0, 14] [30, 9.8]).
    design = np.array([[0.0, 14.0], [30.0, 9.8], [50.0, 9.8]])
    shift = head - np.interp(15.0, *design.T)
    np.testing.assert_allclose(np.interp(XS, *lines["main"].points.T),
                               np.minimum(np.interp(XS, *design.T) + shift,
                                          np.interp(XS, *GROUND.T)), atol=1e-9)


def _confined_section(tmp_path, confined: bool):
    text = SECTION.replace('points = [[0.0, 14.0], [30.0, 9.8], [50.0, 9.8]]',
                           'points = [[0.0, 14.0], [30.0, 9.8], [50.0, 9.8]]\n'
                           f'confined = {"true" if confined else "false"}')
    path = tmp_path / f"confined_{confined}.toml"
    path.write_text(text, encoding="utf-8")
    return load_section(path)


@pytest.mark.parametrize("confined", [False, True])
def test_confined_line_is_not_clipped_to_the_ground(tmp_path, confined):
    # An artesian head of 21 m at x = 15 (ground 17.5 m): clipped unless the line is confined.
    config = parse_site_config(__import__("tomllib").loads(SITE))
    section = _confined_section(tmp_path, confined)
    frame = pd.DataFrame({"instrument_id": ["P1"], "time_utc": [hour(1)], "head_m": [21.0],
                          "quality": ["ok"]})
    line = water_lines_for(section, config, frame, hour(1))["main"]
    drawn = np.interp(XS, *line.points.T)
    unclipped = np.interp(XS, *np.array([[0, 21.0], [15, 21.0], [32, 9.5], [50, 9.5]]).T)
    if confined:
        np.testing.assert_allclose(drawn, unclipped, atol=1e-9)
        assert not line.warnings
    else:
        np.testing.assert_allclose(drawn, np.minimum(unclipped, np.interp(XS, *GROUND.T)),
                                   atol=1e-9)
        assert "above the ground" in line.warnings[0]


# --------------------------------------------------------------------------------------------
# Configuration errors name the key
# --------------------------------------------------------------------------------------------


def _parse(text):
    return parse_site_config(__import__("tomllib").loads(text))


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ('left = { rule = "hold level" }', 'left = { rule = "hold level", depth = 2.0 }',
         r"water_line 'main' left key 'depth' is unknown \(rule 'hold level' takes no other key"),
        ('left = { rule = "hold level" }', 'left = { rule = "level hold" }',
         r"water_line 'main' left key 'rule' must be one of hold level, below ground"),
        ('left = { rule = "hold level" }', 'left = { rule = "below ground" }',
         r"water_line 'main' left key 'depth' is missing"),
        ('left = { rule = "hold level" }', 'left = { rule = "below ground", depth = -1.0 }',
         r"water_line 'main' left key 'depth' must be >= 0 m"),
        ('level = 9.5, from = 32.0', 'from = 32.0',
         r"water_line 'main' right key 'level' is missing"),
        ('level = 9.5, from = 32.0', 'level = 9.5, start = 32.0',
         r"right key 'start' is unknown \(valid with rule 'fixed level': from, level\)"),
        ('left = { rule = "hold level" }', 'left = "hold level"',
         r"water_line 'main' left must be a table"),
        ('name = "main"\nleft', 'name = "main"\nmax_age = 3.0\nleft',
         r"\[\[section\]\] 'S1' water_line #1 key 'max_age' is unknown"),
        ('name = "main"\nleft', 'name = "main"\nmax_age_hours = 0.0\nleft',
         r"water_line 'main' key 'max_age_hours' must be > 0"),
    ],
)
def test_config_errors_name_the_key(old, new, match):
    assert old in SITE
    with pytest.raises(ConfigError, match=match):
        _parse(SITE.replace(old, new, 1))


def test_duplicate_line_settings_are_refused():
    block = SITE[SITE.index("[[section.water_line]]"):SITE.index("[[piezometer]]")]
    with pytest.raises(ConfigError, match=r"water_line 'main' key 'name' is used more than once"):
        _parse(SITE.replace(block, block + block, 1))


def test_settings_for_a_line_the_section_lacks_name_it(site):
    config = _parse(SITE.replace('name = "main"\nleft', 'name = "clay"\nleft', 1))
    section = load_section(site.workspace.sections / "s1.toml")
    frame = pd.DataFrame(columns=["instrument_id", "time_utc", "head_m", "quality"])
    with pytest.raises(ConfigError, match=r"\[\[section\]\] 'S1' water_line 'clay': the section "
                                          r"file has no \[\[water_line\]\] of that name"):
        water_lines_for(section, config, frame, hour(1))


def test_piezometer_on_an_unknown_line_names_it(site):
    config = _parse(SITE.replace('water_line = "main"', 'water_line = "mian"', 1))
    section = load_section(site.workspace.sections / "s1.toml")
    frame = pd.DataFrame(columns=["instrument_id", "time_utc", "head_m", "quality"])
    with pytest.raises(ConfigError, match=r"\[\[piezometer\]\] 'P1' key 'water_line' 'mian' is "
                                          r"not a \[\[water_line\]\] of section 'S1'"):
        water_lines_for(section, config, frame, hour(1))


def test_the_demo_site_file_configures_its_toe_ditches():
    from watch.config import load_site_config
    from watch.demo import DEMO_ROOT

    config = load_site_config(DEMO_ROOT / "config" / "site.toml")
    rules = {s.id: {w.name: w for w in s.water_lines} for s in config.sections}
    assert rules["WC-040"]["clay"].right.describe() == "fixed level (63.35 m from x = 37.6 m)"
    assert rules["FE-210"]["main"].max_age_hours == 12.0
    assert sorted(rules) == ["FE-210", "WC-040", "WC-060", "WC-080"]


def test_no_inclination_correction_on_lines_through_measured_heads(site):
    # A head read at a piezometer tip is a pressure head: u = gamma_w (h_line - y_base) at a
    # slice base, without the cos^2(theta) of a phreatic surface with seepage parallel to it
    # (Skempton and DeLory 1957). The design-line fallback keeps the section file's setting.
    from solver.constants import GAMMA_W
    from watch.waterlines import section_with_lines

    at = hour(500)
    config = site.workspace.config()
    corrected = SECTION.replace('name = "main"\npoints = [[0.0, 14.0]',
                                'name = "main"\ninclination_correction = true\npoints = [[0.0, 14.0]')
    assert corrected != SECTION
    path = site.workspace.sections / "s1_corrected.toml"
    path.write_text(corrected, encoding="utf-8")
    section = load_section(path)
    assert section.water_lines[0].inclination_correction
    with site.workspace.open_store() as store:
        lines = water_lines_from_store(store, section, config, at)
    current = section_with_lines(section, lines)
    assert not current.water_lines[0].inclination_correction
    surface = surface_of(analyse(current).critical)
    slices = slice_surface(current, surface, 30)
    x_mid = 0.5 * (slices.x_left + slices.x_right)
    head = np.interp(x_mid, *lines["main"].points.T)
    wet = slices.active & (head > slices.y_base)
    assert wet.any()
    np.testing.assert_allclose(slices.pore_pressure[wet],
                               GAMMA_W * (head - slices.y_base)[wet], rtol=1e-9)
    # A design-line fallback is the engineer's phreatic line: the correction stays.
    design = replace(lines["main"], source="design line")
    assert section_with_lines(section, {"main": design}).water_lines[0].inclination_correction
