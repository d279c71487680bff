"""Tests of the bounded form of the observed slip: only its scarp and toe on the ground and a
bound on its depth (solver.backcalc.BoundedSlip), and its case-file form ([surface] scarp, toe,
max_depth; watch.backcalc).

The slope is a synthetic homogeneous test slope (not a published case). The checks rest on
exact properties: FoS is a strength reduction factor, so scaling c' and tan(phi') by 1/F0
scales F of every surface by 1/F0 and keeps the critical surface (Duncan, Wright and Brandon
2014, ch. 2 definition of F); and a minimum over a subset of surfaces is never below the
minimum over the whole set.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone

import numpy as np
import pytest

from solver.backcalc import (
    BackAnalysisError,
    BackAnalysisSettings,
    BoundedSlip,
    MatchSettings,
    ObservedSurfaceError,
    back_analyse,
    bounded_surfaces,
    circles_through_ends,
    fos_unity_locus,
    match_locus,
)
from solver.search import SearchSettings, search_critical_surface
from solver.section import section_from_dict
from watch.backcalc import format_report, load_case
from watch.errors import ConfigError

GROUND = [[0.0, 20.0], [10.0, 20.0], [30.0, 10.0], [50.0, 10.0]]
COHESION, FRICTION = 10.0, 25.0


def homogeneous(cohesion=COHESION, friction_angle=FRICTION):
    """A 10 m high 1V:2H slope in one dry c'-phi' soil (synthetic)."""
    return section_from_dict({
        "section": {"id": "H"},
        "ground": {"points": GROUND},
        "material": [{"name": "Clay", "unit_weight": 19.0, "cohesion": cohesion,
                      "friction_angle": friction_angle, "water": "none"}],
        "stratum": [{"material": "Clay"}],
    })


def circle_depth(ground, entry_x, exit_x, centre_x, centre_y, radius):
    x = np.linspace(entry_x, exit_x, 2001)
    arc = centre_y - np.sqrt(np.maximum(radius**2 - (x - centre_x) ** 2, 0.0))
    return float((np.interp(x, *np.asarray(ground).T) - arc).max())


@pytest.fixture(scope="module")
def known():
    """The critical circle of the slope and the pair (c', phi') that puts its F at exactly 1."""
    section = homogeneous()
    critical = search_critical_surface(
        section, SearchSettings(method="spencer", n_slices=30), screen_with="bishop_simplified"
    ).critical
    f0 = critical.fos
    # F is a strength reduction factor: c'/F0 and tan(phi')/F0 give F = 1 on the same
    # critical circle (Duncan, Wright and Brandon 2014, definition of F).
    cohesion = COHESION / f0
    friction = math.degrees(math.atan(math.tan(math.radians(FRICTION)) / f0))
    scarp = (critical.scarp_x, float(np.interp(critical.scarp_x, *np.array(GROUND).T)))
    toe = (critical.toe_x, float(np.interp(critical.toe_x, *np.array(GROUND).T)))
    depth = circle_depth(GROUND, critical.scarp_x, critical.toe_x, critical.centre_x,
                         critical.centre_y, critical.radius)
    return dict(section=section, cohesion=cohesion, friction=friction, scarp=scarp, toe=toe,
                depth=depth)


def test_locus_passes_through_the_known_pair(known):
    slip = BoundedSlip(known["section"], known["scarp"], known["toe"],
                       max_depth=known["depth"] + 0.3)
    locus = fos_unity_locus(slip, "Clay", friction_angles=[known["friction"]])
    # Rounding allowance: the family holds circles within (depth range)/24 of the critical one,
    # and F is stationary there, so the root moves by far less than 1 %.
    np.testing.assert_allclose(locus.cohesion[0], known["cohesion"], rtol=0.01)
    (surface,) = bounded_surfaces(slip, locus)
    assert surface.at_bound == ""
    assert surface.depth <= known["depth"] + 0.3
    np.testing.assert_allclose(surface.depth, known["depth"], atol=0.3)
    np.testing.assert_allclose(surface.fos, 1.0, rtol=1e-6)


def test_a_bound_that_excludes_the_critical_circle_lowers_the_locus(known):
    # Expected direction: c' goes DOWN. The bounded F is the minimum over the circles the bound
    # allows; excluding the critical circle leaves only less critical ones, so at the known
    # pair F > 1 on all of them, and since F rises with c' the root F = 1 lies at a lower c'.
    # (A surface forced shallower than the critical one fails only if the soil was weaker.)
    tight = BoundedSlip(known["section"], known["scarp"], known["toe"],
                        max_depth=0.85 * known["depth"])
    loose = BoundedSlip(known["section"], known["scarp"], known["toe"],
                        max_depth=known["depth"] + 0.3)
    phis = [known["friction"], 15.0, 20.0]
    low = fos_unity_locus(tight, "Clay", friction_angles=phis)
    high = fos_unity_locus(loose, "Clay", friction_angles=phis)
    assert low.found.all() and high.found.all()
    at_known = int(np.flatnonzero(np.isclose(low.friction_angle, known["friction"]))[0])
    # F is stationary at the critical circle, so a 15 % shallower bound moves c' by a few %.
    assert low.cohesion[at_known] < 0.99 * known["cohesion"]
    # Never higher at any phi' (up to the spacing of the two families of circles).
    assert (low.cohesion <= high.cohesion * (1 + 1e-3)).all()
    surfaces = bounded_surfaces(tight, low)
    assert all(s.depth <= 0.85 * known["depth"] + 1e-9 for s in surfaces)
    # At phi' up to the known one the deeper critical circle is cut off: the bound holds the
    # surface. At a higher phi' (lower c') the critical circle is shallower and may lie within.
    held = [s.at_bound for s in surfaces if s.friction_angle <= known["friction"] + 1e-9]
    assert held == ["max_depth", "max_depth"]


@pytest.mark.parametrize("max_depth, min_depth", [(6.0, 0.0), (5.0, 4.0), (30.0, 2.0)])
def test_circles_through_ends_pass_through_both_ends_within_the_bounds(max_depth, min_depth):
    circles, depth = circles_through_ends(GROUND, 8.0, 32.0, max_depth=max_depth,
                                          min_depth=min_depth, n_circles=9)
    for x, y in ((8.0, 20.0), (32.0, 10.0)):
        np.testing.assert_allclose(np.hypot(x - circles.centre_x, y - circles.centre_y),
                                   circles.radius, rtol=1e-9)
    assert (np.diff(depth) < 0).all()  # deepest first, nested family
    assert depth.max() <= max_depth + 1e-9 and depth.min() >= min_depth - 1e-9
    independent = [circle_depth(GROUND, 8.0, 32.0, *c) for c in
                   zip(circles.centre_x, circles.centre_y, circles.radius)]
    np.testing.assert_allclose(depth, independent, atol=0.02)


def test_bad_ends_and_bounds_give_clear_errors():
    section = homogeneous()
    with pytest.raises(ObservedSurfaceError, match=r"scarp \[8, 22\] is not on the ground"):
        BoundedSlip(section, (8.0, 22.0), (32.0, 10.0), max_depth=5.0)
    with pytest.raises(ObservedSurfaceError, match=r"toe \[8, 20\] is upslope of"):
        BoundedSlip(section, (32.0, 10.0), (8.0, 20.0), max_depth=5.0)
    with pytest.raises(ObservedSurfaceError, match="is upslope of \\(or level with\\)"):
        BoundedSlip(section, (2.0, 20.0), (8.0, 20.0), max_depth=5.0)
    for bad in (0.0, -1.0, float("nan")):
        with pytest.raises(ObservedSurfaceError, match="max_depth = .* must be a number > 0"):
            BoundedSlip(section, (8.0, 20.0), (32.0, 10.0), max_depth=bad)
    with pytest.raises(ObservedSurfaceError, match="min_depth = 5 m must be .* below max_depth"):
        BoundedSlip(section, (8.0, 20.0), (32.0, 10.0), max_depth=4.0, min_depth=5)
    with pytest.raises(ObservedSurfaceError, match=r"scarp \[60, 10\] lies off section 'H'"):
        BoundedSlip(section, (60.0, 10.0), (32.0, 10.0), max_depth=4.0)
    with pytest.raises(ObservedSurfaceError, match="has a depth between min_depth = 20"):
        circles_through_ends(GROUND, 8.0, 32.0, max_depth=30.0, min_depth=20.0)


def test_back_analysis_reports_depths_and_skips_the_surface_match(known):
    slip = BoundedSlip(known["section"], known["scarp"], known["toe"],
                       max_depth=0.85 * known["depth"])
    with pytest.raises(BackAnalysisError, match="surface match needs an observed surface"):
        match_locus(slip, fos_unity_locus(slip, "Clay", friction_angles=[20.0]))
    result = back_analyse(slip, "Clay", friction_angles=[15.0, 20.0], match=MatchSettings(),
                          water_change=None, unit_weight_change=1.0,
                          settings=BackAnalysisSettings())
    assert result.best is None and len(result.bounded) == 2
    assert any("surface match not run" in n for n in result.notes)
    assert any("lies at the max_depth bound" in n for n in result.notes)
    # Heavier soil drives the same surfaces harder: more c' is needed for F = 1 (sensitivity
    # runs through the bounded family too).
    heavier = next(c for c in result.sensitivity if c.change > 0)
    assert heavier.shift > 0


CASE = """
[slip]
id = "TEST-B"
section = "WC-060"
failed_at = "2026-01-16T06:00:00Z"

[surface]
{surface}

[back_analysis]
material = "Weak clay"
form = "drained c'-phi'"
"""


def write(tmp_path, surface):
    path = tmp_path / "case.toml"
    path.write_text(CASE.format(surface=surface), encoding="utf-8")
    return path


def test_case_file_takes_scarp_toe_and_depth_bounds(tmp_path):
    case = load_case(write(tmp_path, "scarp = [12.0, 74.0]\ntoe = [33.4, 64.3]\n"
                                     "max_depth = 4.0\nmin_depth = 2.5"))
    assert case.surface is None
    assert case.bounds == {"scarp": (12.0, 74.0), "toe": (33.4, 64.3), "max_depth_m": 4.0,
                           "min_depth_m": 2.5}
    assert load_case(write(tmp_path, "scarp = [12, 74]\ntoe = [33.4, 64.3]\nmax_depth = 4"))\
        .bounds["min_depth_m"] == 0.0


@pytest.mark.parametrize("surface, message", [
    ("points = [[12.0, 74.0], [33.4, 64.3]]\nmax_depth = 4.0", "either points or scarp"),
    ("scarp = [12.0, 74.0]\nmax_depth = 4.0", "needs toe"),
    ("scarp = [12.0, 74.0]\ntoe = [33.4, 64.3]\nmax_depth = 0", "max_depth = 0 m must be > 0"),
    ("scarp = [12.0, 74.0]\ntoe = [33.4, 64.3]\nmax_depth = 3\nmin_depth = 3",
     "min_depth = 3 m must be below max_depth"),
    ("scarp = [12.0]\ntoe = [33.4, 64.3]\nmax_depth = 3", "scarp must be one \\[x, y\\] pair"),
    ("", "needs points, or scarp, toe and max_depth"),
])
def test_case_file_errors_for_the_bounded_surface(tmp_path, surface, message):
    with pytest.raises(ConfigError, match=message):
        load_case(write(tmp_path, surface))


def test_case_file_refuses_the_old_end_keys_and_names_the_new_ones(tmp_path):
    # The ends are named after the parts of a landslide (Cruden and Varnes 1996): an old case
    # file must not be read silently with its ends dropped.
    with pytest.raises(ConfigError, match="entry is now called scarp, exit is now called toe"):
        load_case(write(tmp_path, "entry = [12.0, 74.0]\nexit = [33.4, 64.3]\nmax_depth = 4.0"))


def test_bounded_case_runs_on_the_demo_section(tmp_path):
    import shutil
    from pathlib import Path

    from watch.backcalc import result_to_dict, run_case
    from watch.clock import ManualClock
    from watch.workspace import init_workspace

    repo = Path(__file__).resolve().parents[2]
    workspace = init_workspace(tmp_path / "ws", repo / "config" / "site.toml")
    for section in (repo / "config" / "sections").glob("*.toml"):
        shutil.copy(section, workspace.sections / section.name)
    path = write(tmp_path, "scarp = [12.0, 74.0]\ntoe = [33.4, 64.3]\nmax_depth = 4.0")
    path.write_text(path.read_text().replace(
        "[back_analysis]", '[water]\nat_failure = "design lines"\n\n[back_analysis]')
        + "friction_angles = [10.0, 15.0, 5.0]\nwater_change_m = 0\nunit_weight_change_kn_m3 = 0\n",
        encoding="utf-8")
    outcome = run_case(workspace, path, ManualClock(datetime(2026, 4, 2, 9, tzinfo=timezone.utc)),
                       record=False)
    assert outcome.result.locus.found.all() and outcome.result.best is None
    data = result_to_dict(outcome)
    assert data["observed_bounds"]["max_depth_m"] == 4.0
    assert [b["at_bound"] for b in data["bounded_surfaces"]] == ["max_depth", "max_depth"]
    assert all(b["depth_m"] <= 4.0 + 1e-9 for b in data["bounded_surfaces"])
    assert "depth 4.00 m (bounds 0 to 4 m), at the max_depth bound" in format_report(outcome)
