"""Critical-surface search and warm re-evaluation (solver/search.py).

Reference values: Taylor's (1937) stability numbers for undrained (phi = 0) homogeneous slopes,
m = c / (F gamma H). The values 0.261 (vertical cut), 0.191 (60 deg) and 0.181 (flat slopes on
a deep firm base, the mid-point circle limit) are from memory of Taylor's chart, as widely
reproduced (e.g. Craig's Soil Mechanics, ch. 9; Duncan, Wright and Brandon 2014, app. A). For
phi = 0 on circles the ordinary method and Bishop's simplified method are identical, and exact
for the circle (moment of Su along the arc against the moment of the weight).
"""

from collections import Counter

import numpy as np
import pytest
from hypothesis import given, settings as hypothesis_settings, strategies as st

from solver.errors import MethodError, SearchError
from solver.methods import factor_of_safety
from solver.search import (
    SearchSettings,
    default_centre_lattice,
    scarp_toe_band,
    centre_lattice,
    lattice_circles,
    optimise_polyline,
    placement_from_section,
    polyline_from_circle,
    refine_circle,
    rerank,
    search_critical_surface,
    face_name,
    slope_faces,
    slope_geometry,
    warm_reevaluate,
)
from solver.section import FACES, section_from_dict, section_to_dict
from solver.slicing import slice_circles

H = 10.0  # slope height [m]
GAMMA = 20.0  # [kN/m3]
SU = 10.0  # [kPa]
EXACT = SearchSettings(method="ordinary", min_depth=0.0)


def _undrained(ground, *, base=None, strata=None, materials=None):
    data = {
        "section": {"id": "TAYLOR"},
        "ground": {"points": ground},
        "material": materials
        or [{"name": "Clay", "model": "undrained", "unit_weight": GAMMA,
             "undrained_strength": SU}],
        "stratum": strata or [{"material": "Clay"}],
    }
    if base is not None:
        data["base"] = {"points": base}
    return section_from_dict(data)


def _stability_number(fos):
    return SU / (fos * GAMMA * H)


def _drained_slope(water_y=15.0, cohesion=5.0, phi=28.0):
    """A 1 in 2 slope of till over a thin weak layer over rock, with a water line (invented)."""
    return section_from_dict(
        {
            "section": {"id": "DEMO-1"},
            "ground": {"points": [[0, 20], [30, 20], [50, 10], [80, 10]]},
            "material": [
                {"name": "Till", "model": "drained", "unit_weight": 19.0,
                 "unit_weight_saturated": 20.0, "cohesion": cohesion, "friction_angle": phi,
                 "water": "main"},
                {"name": "Weak", "model": "drained", "unit_weight": 18.0, "cohesion": 0.0,
                 "friction_angle": 15.0, "water": "main"},
                {"name": "Rock", "model": "drained", "unit_weight": 22.0, "cohesion": 50.0,
                 "friction_angle": 40.0, "water": "main"},
            ],
            "stratum": [
                {"material": "Till", "bottom": [[0, 9], [80, 7]]},
                {"material": "Weak", "bottom": [[0, 8], [80, 6]]},
                {"material": "Rock"},
            ],
            "water_line": [{"name": "main", "points": [[0, water_y], [50, 10.5], [80, 10.5]]}],
        }
    )


# ------------------------------------------------------------------------------------------
# Taylor (1937): the search finds the critical circle


def test_taylor_sixty_degree_slope_toe_circle():
    section = _undrained([[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]])
    result = refine_circle(section, centre_lattice(section, EXACT))
    # Taylor (1937), chart of stability numbers: m = 0.191 for beta = 60 deg (from memory).
    assert _stability_number(result.fos) == pytest.approx(0.191, rel=0.03)
    assert result.critical.kind == "circle"


def test_taylor_vertical_cut_toe_circle():
    # Taylor's toe circle ends at the toe and ignores the rest of the circle. A whole circle
    # through the toe of a vertical cut would continue below the lower ground (and be rejected
    # for cutting the ground four times), so the ground drops away at the toe into a much
    # stronger stratum: the arc must end at the toe, as Taylor assumed.
    section = _undrained(
        [[0, H], [40, H], [40.01, 0], [40.02, -20], [100, -20]],
        materials=[
            {"name": "Clay", "model": "undrained", "unit_weight": GAMMA, "undrained_strength": SU},
            {"name": "Firm", "model": "undrained", "unit_weight": GAMMA,
             "undrained_strength": 1000 * SU},
        ],
        strata=[
            {"material": "Clay", "bottom": [[0, 0], [40.01, 0], [40.02, -20], [100, -20]]},
            {"material": "Firm"},
        ],
    )
    grid = centre_lattice(section, EXACT, x_range=(40, 70), y_range=(10, 40), nx=30, ny=30,
                           tangent_elevations=np.linspace(-10, 0, 20))
    result = refine_circle(section, grid)
    # Taylor (1937): m = 0.261 for a vertical slope (toe circle), from memory of the chart.
    assert _stability_number(result.fos) == pytest.approx(0.261, rel=0.03)
    assert result.critical.toe_x == pytest.approx(40.01, abs=0.05)


def test_taylor_flat_slope_on_deep_base_midpoint_circle():
    run = H / np.tan(np.radians(15))
    depth_factor = 11  # D = (H + depth of the base below the toe) / H
    base = -(depth_factor - 1) * H
    section = _undrained([[-1000, H], [0, H], [run, 0], [run + 1000, 0]],
                         base=[[-1000, base], [run + 1000, base]])
    result = refine_circle(section, centre_lattice(section, EXACT))
    # Taylor (1937): m -> 0.181 for beta < 53 deg as D grows (mid-point circle), from memory.
    assert _stability_number(result.fos) == pytest.approx(0.181, rel=0.03)
    # The mid-point circle: centre above the middle of the slope, tangent to the base.
    assert result.critical.centre_x == pytest.approx(run / 2, abs=0.15 * run)
    assert result.critical.centre_y - result.critical.radius == pytest.approx(base, abs=0.5)


def test_ordinary_and_bishop_agree_for_phi_zero():
    section = _undrained([[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]])
    grid = dict(nx=12, ny=12, n_radii=8)
    ordinary = centre_lattice(section, EXACT, **grid)
    bishop = centre_lattice(section, SearchSettings(method="bishop_simplified", min_depth=0),
                             **grid)
    # Bishop (1955): with tan(phi') = 0, m_alpha = cos(alpha) and Bishop's equation reduces to
    # the ordinary method's.
    assert bishop.fos == pytest.approx(ordinary.fos, rel=1e-6)


def test_scarp_toe_band_search_finds_the_same_critical_circle():
    section = _undrained([[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]])
    result = refine_circle(section, scarp_toe_band(section, EXACT, n_scarp=25, n_toe=25))
    # Taylor (1937): m = 0.191 for beta = 60 deg (from memory).
    assert _stability_number(result.fos) == pytest.approx(0.191, rel=0.03)
    assert result.stages[0].startswith("scarp-to-toe band")


# ------------------------------------------------------------------------------------------
# What the search returns


def test_grid_search_returns_the_lowest_circle_of_its_grid():
    section = _drained_slope()
    settings = SearchSettings(min_depth=0.0, admissible_only=False)
    grid = dict(x_range=(30, 60), y_range=(22, 40), nx=8, ny=7,
                tangent_elevations=np.linspace(12, 6.5, 6))
    result = centre_lattice(section, settings, **grid)
    circles = lattice_circles(**grid)
    batch = slice_circles(section, *circles, n_slices=settings.n_slices)
    solved = factor_of_safety(batch.slices, "bishop_simplified")
    fos = np.where(solved.converged, solved.fos, np.inf)
    assert result.fos == pytest.approx(fos.min(), rel=1e-9)
    assert all(s.fos >= result.fos for s in result.surfaces)
    assert [s.fos for s in result.surfaces] == sorted(s.fos for s in result.surfaces)


def test_refinement_never_returns_a_higher_fos_than_the_grid():
    section = _drained_slope()
    for nx in (4, 7):
        grid = centre_lattice(section, nx=nx, ny=nx, n_radii=5)
        refined = refine_circle(section, grid)
        assert refined.fos <= grid.fos
        assert refined.n_trials > grid.n_trials
        assert refined.stages[-1] == "circle refinement (bishop_simplified)"


def test_rejections_are_counted_by_reason():
    section = _drained_slope()
    settings = SearchSettings(min_depth=0.0)
    # Centres from far below the ground to well above it: many circles cannot be slip surfaces.
    result = centre_lattice(section, settings, x_range=(20, 60), y_range=(0, 40), nx=9, ny=9,
                             radii=[2.0, 8.0, 20.0, 60.0])
    assert result.n_trials == 9 * 9 * 4
    assert result.n_valid + result.n_rejected == result.n_trials
    assert result.rejected["leaves the section"] > 0
    assert result.rejected["circle ends below the ground (centre too low)"] > 0
    assert result.n_valid >= len(result.surfaces)


def test_tangents_above_the_centre_are_counted_as_rejected():
    section = _drained_slope()
    result = centre_lattice(section, x_range=(35, 45), y_range=(10, 30), nx=3, ny=3,
                             tangent_elevations=[5.0, 20.0])
    # Centres at y = 10 and 20 cannot touch y = 20 from above with a positive radius.
    assert result.rejected["tangent above the centre"] == 6
    assert result.n_trials == 18


def test_grid_without_any_valid_circle_raises_search_error_with_counts():
    section = _drained_slope()
    with pytest.raises(SearchError, match=r"no valid slip surface among 12 trial surfaces; "
                                          r"rejected by the slicing: 12 "):
        centre_lattice(section, x_range=(200, 210), y_range=(50, 60), nx=2, ny=2,
                        radii=[1.0, 2.0, 3.0])


def test_min_depth_keeps_skin_slips_from_winning():
    # A cohesionless slope: the infinite-slope mechanism (skin slip) is the most critical
    # (Duncan, Wright and Brandon 2014, ch. 6: F = tan(phi') / tan(beta) for c' = 0, dry).
    section = _drained_slope(water_y=5.0, cohesion=0.0, phi=35.0)
    grid = dict(nx=12, ny=12, n_radii=12)
    shallow = centre_lattice(section, SearchSettings(min_depth=0.0), **grid)
    deep = centre_lattice(section, SearchSettings(min_depth=3.0), **grid)
    assert shallow.critical.depth < 3.0
    assert deep.critical.depth >= 3.0
    assert deep.fos >= shallow.fos
    assert deep.filtered["shallower than min_depth"] > 0


def test_kept_surfaces_are_distinct():
    section = _drained_slope()
    settings = SearchSettings(keep=5, min_separation=2.0)
    result = centre_lattice(section, settings, nx=10, ny=10, n_radii=8)
    assert len(result.surfaces) == 5
    for i, a in enumerate(result.surfaces):
        for b in result.surfaces[i + 1:]:
            assert max(abs(a.scarp_x - b.scarp_x), abs(a.toe_x - b.toe_x)) >= 2.0


def test_rerank_solves_kept_surfaces_by_another_method():
    section = _drained_slope()
    screened = centre_lattice(section, nx=8, ny=8, n_radii=6)
    ranked = rerank(section, screened, "spencer")
    assert ranked.method == "spencer"
    assert all(s.method == "spencer" for s in ranked.surfaces)
    # On circles Spencer and Bishop agree closely (Duncan, Wright and Brandon 2014, ch. 7;
    # "within a few per cent" is common practice, not a published bound).
    assert ranked.fos == pytest.approx(screened.fos, rel=0.05)


def test_search_in_either_direction_gives_the_same_fos():
    ground = [[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]]
    mirrored = [[-x, y] for x, y in reversed(ground)]
    right = centre_lattice(_undrained(ground), EXACT, nx=10, ny=10, n_radii=10)
    left = centre_lattice(_undrained(mirrored), EXACT, nx=10, ny=10, n_radii=10)
    assert left.fos == pytest.approx(right.fos, rel=1e-6)
    assert left.critical.scarp_x == pytest.approx(-right.critical.scarp_x, abs=1e-6)
    assert slope_geometry(_undrained(mirrored)).facing == -1


@hypothesis_settings(max_examples=5, deadline=None)
@given(k=st.floats(0.5, 3.0))
def test_scaling_the_strength_scales_the_critical_fos(k):
    # FoS is a strength reduction factor: multiplying Su by k multiplies the FoS of every
    # circle by k (exactly, for phi = 0), so the grid minimum scales by k and the same circle
    # wins.
    ground = [[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]]
    base = centre_lattice(_undrained(ground), EXACT, nx=6, ny=6, n_radii=5)
    scaled_section = _undrained(ground, materials=[
        {"name": "Clay", "model": "undrained", "unit_weight": GAMMA,
         "undrained_strength": k * SU}])
    scaled = centre_lattice(scaled_section, EXACT, nx=6, ny=6, n_radii=5)
    assert scaled.fos == pytest.approx(k * base.fos, rel=1e-9)
    assert scaled.critical.radius == base.critical.radius


# ------------------------------------------------------------------------------------------
# Geometry helpers


def test_grid_circles_radii_from_tangent_elevations():
    cx, cy, r = lattice_circles((0, 10), (20, 30), 3, 2, tangent_elevations=[0.0, 5.0])
    assert cx.size == 3 * 2 * 2
    np.testing.assert_allclose(r, cy - np.tile([0.0, 5.0], 6), rtol=1e-12)


def test_grid_circles_needs_radii_or_tangents():
    with pytest.raises(MethodError, match="either tangent_elevations or radii"):
        lattice_circles((0, 1), (0, 1), 2, 2)
    with pytest.raises(MethodError, match=r"nx must be an integer >= 1, got 0"):
        lattice_circles((0, 1), (0, 1), 0, 2, radii=[1.0])
    with pytest.raises(MethodError, match=r"x_range must be two finite numbers"):
        lattice_circles((5, 1), (0, 1), 2, 2, radii=[1.0])


@given(
    centre_x=st.floats(-50, 50), centre_y=st.floats(0, 50), radius=st.floats(5, 40),
    a=st.floats(-0.8, -0.1), b=st.floats(0.1, 0.8), n=st.integers(3, 20),
)
def test_polyline_from_circle_lies_on_the_arc(centre_x, centre_y, radius, a, b, n):
    x1, x2 = centre_x + a * radius, centre_x + b * radius
    y1 = centre_y - np.sqrt(radius**2 - (x1 - centre_x) ** 2)
    y2 = centre_y - np.sqrt(radius**2 - (x2 - centre_x) ** 2)
    points = polyline_from_circle(centre_x, centre_y, radius, x1, x2, y1, y2, n)
    assert points.shape == (n, 2)
    assert np.all(np.diff(points[:, 0]) > 0)
    distance = np.hypot(points[:, 0] - centre_x, points[:, 1] - centre_y)
    np.testing.assert_allclose(distance, radius, rtol=1e-9)


def test_default_grid_lies_above_the_slope():
    section = _drained_slope()
    grid = default_centre_lattice(section)
    assert grid["x_range"][0] < 30 < 50 < grid["x_range"][1]
    assert grid["y_range"][0] >= 20
    assert min(grid["tangent_elevations"]) < 10


def test_bad_settings_raise_method_error():
    with pytest.raises(MethodError, match=r"unknown method 'fellenius'; valid methods: ordinary"):
        SearchSettings(method="fellenius")
    with pytest.raises(MethodError, match=r"min_depth must be a number >= 0, got -1"):
        SearchSettings(min_depth=-1.0)
    with pytest.raises(MethodError, match=r"keep must be an integer >= 1, got 0"):
        SearchSettings(keep=0)


# ------------------------------------------------------------------------------------------
# Non-circular optimisation


def test_polyline_optimisation_does_not_raise_the_fos_and_stays_admissible():
    section = _drained_slope()
    circles = refine_circle(section, centre_lattice(section, nx=10, ny=10, n_radii=8))
    spencer_circles = rerank(section, circles, "spencer")
    result = optimise_polyline(section, circles, method="spencer", n_vertices=8,
                               max_evaluations=400)
    assert result.method == "spencer"
    assert result.fos <= spencer_circles.fos
    polylines = [s for s in result.surfaces if s.kind == "polyline"]
    assert polylines, "the optimisation should keep its polyline"
    points = polylines[0].points
    assert np.all(np.diff(points[:, 0]) > 0)
    slope = np.diff(points[:, 1]) / np.diff(points[:, 0])
    assert np.all(np.diff(np.arctan(slope)) >= -1e-12)  # concave upwards
    assert np.all(np.abs(np.degrees(np.arctan(slope))) <= 80 + 1e-9)


def test_polyline_optimisation_rejects_bad_limits():
    section = _drained_slope()
    circles = centre_lattice(section, nx=5, ny=5, n_radii=4)
    with pytest.raises(MethodError, match=r"max_inclination must be between 0 and 90 deg, got 95"):
        optimise_polyline(section, circles, max_inclination=95)
    with pytest.raises(MethodError, match=r"optimiser must be 'Nelder-Mead' or 'Powell'"):
        optimise_polyline(section, circles, optimiser="BFGS")


# ------------------------------------------------------------------------------------------
# Warm re-evaluation


@pytest.fixture(scope="module")
def searched():
    section = _drained_slope(water_y=15.0)
    return section, search_critical_surface(section, SearchSettings(keep=6))


def test_warm_with_unchanged_water_reproduces_the_previous_fos_exactly(searched):
    section, previous = searched
    warm = warm_reevaluate(section, previous)
    assert warm.fos == previous.fos
    assert [s.fos for s in warm.surfaces] == [s.fos for s in previous.surfaces]
    assert not warm.ranking_changed
    assert not warm.full_search_advised
    assert warm.reasons == ()
    assert "no full search was run" in warm.evaluation


def test_warm_with_higher_water_gives_lower_fos(searched):
    section, previous = searched
    wetter = section.with_water_lines({"main": [[0, 17.0], [50, 10.5], [80, 10.5]]})
    warm = warm_reevaluate(wetter, previous)
    assert warm.fos < previous.fos
    assert warm.relative_change < 0


def test_warm_with_big_change_advises_full_search(searched):
    section, previous = searched
    flooded = section.with_water_lines({"main": [[0, 19.9], [50, 10.5], [80, 10.5]]})
    warm = warm_reevaluate(flooded, previous, full_search_tolerance=0.05)
    assert warm.relative_change < -0.05
    assert warm.full_search_advised
    assert any("critical FoS changed by" in reason for reason in warm.reasons)
    # The caller decides: nothing but the cached surfaces was evaluated.
    assert len(warm.surfaces) + sum(warm.dropped.values()) == len(previous.surfaces)


def test_warm_rejects_bad_tolerance(searched):
    section, previous = searched
    with pytest.raises(MethodError, match=r"full_search_tolerance must be a number >= 0, got -0.1"):
        warm_reevaluate(section, previous, full_search_tolerance=-0.1)


def test_search_result_counts_add_up(searched):
    _, previous = searched
    assert isinstance(previous.rejected, Counter)
    assert previous.n_trials >= previous.n_valid + previous.n_rejected - 0
    assert previous.stages[0].startswith("centre lattice")


def test_best_centre_on_the_grid_edge_is_noted():
    section = _undrained([[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]])
    # The critical centre of this slope is near (45.6, 14.7) m (Taylor's toe circle); a grid
    # to its left must end up with its best centre on its right-hand edge.
    narrow = centre_lattice(section, EXACT, x_range=(30, 38), y_range=(12, 20), nx=5, ny=5,
                             tangent_elevations=np.linspace(-2, 0, 3))
    assert any("lies on the edge of the centre lattice" in note for note in narrow.notes)
    assert refine_circle(section, narrow).notes == narrow.notes


def test_scarp_toe_band_on_a_slope_facing_the_other_way():
    ground = [[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]]
    mirrored = [[-x, y] for x, y in reversed(ground)]
    right = scarp_toe_band(_undrained(ground), EXACT, n_scarp=10, n_toe=10)
    left = scarp_toe_band(_undrained(mirrored), EXACT, n_scarp=10, n_toe=10)
    assert left.fos == pytest.approx(right.fos, rel=1e-6)


def test_a_negative_normal_force_at_the_crest_does_not_remove_the_critical_circle():
    # A cohesive 45 deg slope with a steep crest entry: the critical circle has a slightly
    # negative N' in its top slice. Duncan, Wright and Brandon (2014) treat that as a reason for
    # a tension crack, not for discarding the mechanism, so the search must still find it:
    # its result may not exceed Bishop's F of that circle (found by an independent review
    # calculation; behaviour check, no published value).
    section = section_from_dict({
        "section": {"id": "STEEP"},
        "ground": {"points": [[0, 15.0], [15, 15.0], [30, 0.0], [60, 0.0]]},
        "material": [{"name": "Clay", "model": "drained", "unit_weight": 20.0,
                      "cohesion": 25.0, "friction_angle": 20.0}],
        "stratum": [{"material": "Clay"}],
    })
    circle = slice_circles(section, np.array([18.97]), np.array([32.24]), np.array([21.85]))
    known = factor_of_safety(circle.slices, method="bishop_simplified")
    assert "negative effective normal force" in known.message[0]
    result = search_critical_surface(section, SearchSettings(method="bishop_simplified"))
    assert result.critical.fos <= known.fos[0] * (1 + 1e-3)


# ------------------------------------------------------------------------------------------
# Sections whose ground does not say which way the mass moves


def _embankment():
    """A symmetric embankment (invented): 6 m high, 10 m crest, side slopes 10:6, on level
    ground; the two ends of the ground are at the same elevation."""
    return section_from_dict({
        "section": {"id": "EMBANKMENT"},
        "ground": {"points": [[-40, 0], [-15, 0], [-5, 6], [5, 6], [15, 0], [40, 0]]},
        "material": [{"name": "fill", "unit_weight": 19.0, "cohesion": 4.0,
                      "friction_angle": 30.0, "water": "none"}],
        "stratum": [{"material": "fill"}],
    })


def test_search_of_a_symmetric_embankment_finds_the_same_fos_on_both_faces():
    # Closed-form check by mirror symmetry about x = 0: the two faces are mirror images and so
    # are their default lattices, so the best circle of each face has the same F (to
    # round-off), and the search reports both.
    result = centre_lattice(_embankment(), SearchSettings(), nx=12, ny=12, n_radii=8)
    assert set(result.faces) == {1, -1}
    faces = result.by_face
    assert faces[1].fos == pytest.approx(faces[-1].fos, rel=1e-9)
    assert faces[1].scarp_x == pytest.approx(-faces[-1].scarp_x, abs=1e-6)
    assert faces[1].toe_x == pytest.approx(-faces[-1].toe_x, abs=1e-6)
    assert result.fos == pytest.approx(min(f.fos for f in faces.values()), rel=1e-12)
    assert list(faces)[0] == result.critical.direction
    # The critical circle of each face lies over that face.
    for direction, surface in faces.items():
        assert direction * surface.toe_x > 0


def test_one_face_of_an_embankment_can_be_chosen():
    result = centre_lattice(_embankment(), SearchSettings(direction=-1), nx=8, ny=8,
                             n_radii=6)
    assert {s.direction for s in result.surfaces} == {-1}
    assert result.faces == (-1,) and list(result.by_face) == [-1]
    with pytest.raises(MethodError, match="direction must be \\+1, -1 or None, got 0"):
        SearchSettings(direction=0)


def test_full_search_and_warm_reevaluation_of_an_embankment_keep_the_direction():
    section = _embankment()
    result = search_critical_surface(section, SearchSettings(), refine=True)
    assert result.critical.direction in (1, -1)
    assert set(result.by_face) == {1, -1}
    warm = warm_reevaluate(section, result)
    # Same section: every cached surface gives its own F again.
    assert warm.fos == pytest.approx(result.fos, rel=1e-9)
    assert not warm.ranking_changed


def _two_faced(west_run, east_run, *, crest=20.0, height=6.0, left=0.0, right=0.0,
               faces=("west", "east")):
    """An embankment of fill on level ground (invented): ``height`` m high, a crest
    ``crest`` m wide, west face 1V:``west_run``H, east face 1V:``east_run``H; the ground
    ends 30 m beyond each toe at elevations ``left`` and ``right``. ``faces`` keeps one face
    only: the other side is then level ground at crest height (a one-face section whose face,
    crest and soil near the face are those of the embankment's face)."""
    x_west_crest = 30.0 + west_run * height
    x_east_crest = x_west_crest + crest
    x_east_toe = x_east_crest + east_run * height
    west = [[0.0, left], [30.0, 0.0], [x_west_crest, height]]
    east = [[x_east_crest, height], [x_east_toe, 0.0], [x_east_toe + 30.0, right]]
    if "west" not in faces:
        west = [[0.0, height]]
    if "east" not in faces:
        east = [[x_east_crest, height], [x_east_toe + 30.0, height]]
    return section_from_dict({
        "section": {"id": "TWO-FACED"},
        "ground": {"points": west + east},
        "material": [{"name": "fill", "unit_weight": 19.0, "cohesion": 5.0,
                      "friction_angle": 25.0, "water": "none"}],
        "stratum": [{"material": "fill"}],
    })


@pytest.mark.parametrize("west_run, east_run, left, right", [
    (4.0, 2.0, 0.0, 0.3),    # the review's case: flat west face, steep east face, uneven ends
    (4.0, 2.0, -0.3, 0.0),
    (2.0, 2.0, 0.0, 0.3),    # both faces 1V:2H, ends not level
    (2.0, 4.0, 0.2, 0.0),    # the steep face on the west
])
def test_every_face_of_an_asymmetric_embankment_is_searched(west_run, east_run, left, right):
    # Issue 16, item 1: each face's critical surface must equal that of a section with only
    # that face (same face, crest and soil; the crest is wide enough that the critical circle
    # of one face does not reach the other). Behaviour check against the one-face search
    # itself, tolerance 0.5 % (the refinement stops at 0.01 m steps).
    settings = SearchSettings()
    both = search_critical_surface(_two_faced(west_run, east_run, left=left, right=right),
                                   settings)
    faces = both.by_face
    assert set(faces) == {1, -1}
    for direction, name in ((1, "east"), (-1, "west")):
        alone = search_critical_surface(
            _two_faced(west_run, east_run, left=left, right=right, faces=(name,)), settings)
        assert alone.faces == (direction,)
        assert faces[direction].fos == pytest.approx(alone.fos, rel=5e-3), name
    # The governing face is the steeper one, and the result's FoS is its FoS.
    steeper = 1 if east_run < west_run else -1 if west_run < east_run else None
    if steeper is not None:
        assert both.critical.direction == steeper
    assert both.fos == pytest.approx(min(s.fos for s in faces.values()), rel=1e-12)


def test_a_face_can_be_named_and_small_falls_are_not_faces():
    section = _two_faced(4.0, 2.0, right=0.3)
    assert slope_faces(section) == (1, -1) or slope_faces(section) == (-1, 1)
    east = search_critical_surface(section, SearchSettings(direction=FACES["right"]))
    assert east.faces == (1,) and east.critical.direction == 1
    # One face with a 0.3 m rise of the ground beyond its toe (5 % of the 6 m relief): the
    # rise is not a face (SEARCH_FACE_MIN_HEIGHT_FRACTION = 0.1).
    assert slope_faces(_two_faced(4.0, 2.0, right=0.3, faces=("east",))) == (1,)
    assert slope_faces(_two_faced(4.0, 2.0, left=-0.3, faces=("west",))) == (-1,)
    assert face_name(1) == "right" and face_name(-1) == "left"


def test_each_face_of_a_wide_embankment_matches_taylor():
    # Two 60 deg faces 10 m high with a 40 m crest, undrained clay (phi = 0) to depth: each
    # face is a simple slope and its critical circle is Taylor's toe circle, stability number
    # m = 0.191 for beta = 60 deg (Taylor 1937, chart of stability numbers; from memory, as in
    # test_taylor_sixty_degree_slope_toe_circle). Tolerance 3 %.
    run = H / np.tan(np.radians(60))
    section = _undrained([[0, 0], [40, 0], [40 + run, H], [80 + run, H], [80 + 2 * run, 0],
                          [120 + 2 * run, 0]])
    result = search_critical_surface(section, EXACT)
    faces = result.by_face
    assert set(faces) == {1, -1}
    for surface in faces.values():
        assert _stability_number(surface.fos) == pytest.approx(0.191, rel=0.03)
    assert faces[1].fos == pytest.approx(faces[-1].fos, rel=1e-6)  # mirror symmetry


def test_warm_reevaluation_sees_water_rising_on_the_other_face():
    # The cached surfaces hold every face, so a change on the face that was not critical is
    # seen without a full search: raise the water under the (stronger) west face of a
    # drained embankment until that face governs.
    dry = _two_faced(2.5, 2.0, crest=10.0)
    searched = search_critical_surface(dry, SearchSettings())
    assert searched.critical.direction == 1
    assert {s.direction for s in searched.surfaces} == {1, -1}
    ground = dry.ground
    water = [[ground[0, 0], 0.0], [30.0, 0.0], [40.0, 4.5], [45.0, 4.5], [60.0, 0.0],
             [ground[-1, 0], 0.0]]
    data = section_to_dict(dry)
    data["water_line"] = [{"name": "west", "points": water}]
    for material in data["material"]:
        material["water"] = "west"
    wet = section_from_dict(data)
    warm = warm_reevaluate(wet, searched)
    west_before = searched.by_face[-1].fos
    west_now = min(s.fos for s in warm.surfaces if s.direction == -1)
    assert west_now < west_before
    assert warm.critical.direction == -1
    assert warm.ranking_changed and warm.full_search_advised


# ------------------------------------------------------------------------------------------
# ACADS example 1(a)


def test_acads_example_1a():
    # ACADS slope stability test problem 1(a) (Giam and Donald 1989): homogeneous 2:1 slope
    # 10 m high, c' = 3 kPa, phi' = 19.6 deg, gamma = 20 kN/m3, dry; referee F = 1.00.
    # Geometry and referee value from memory; tolerance 3%.
    section = section_from_dict({
        "section": {"id": "ACADS-1A"},
        "ground": {"points": [[20, 25], [30, 25], [50, 35], [70, 35]]},
        "material": [{"name": "soil", "unit_weight": 20.0, "cohesion": 3.0,
                      "friction_angle": 19.6, "water": "none"}],
        "stratum": [{"material": "soil"}],
    })
    settings = SearchSettings(method="bishop_simplified", min_depth=0.0)
    result = refine_circle(section, centre_lattice(section, settings))
    assert result.fos == pytest.approx(1.00, rel=0.03)


def test_placement_from_section_maps_the_search_keys():
    placement = placement_from_section({
        "method": "spencer", "centre_x_range": [20, 60], "centre_y_range": [62, 100],
        "centres": [12, 8], "tangent_range": [38.0, 61.0], "tangent_levels": 5})
    assert placement["x_range"] == (20.0, 60.0) and placement["y_range"] == (62.0, 100.0)
    assert (placement["nx"], placement["ny"]) == (12, 8)
    np.testing.assert_allclose(placement["tangent_elevations"], [61.0, 55.25, 49.5, 43.75, 38.0],
                               rtol=1e-12)
    assert placement_from_section({"tangent_levels": 7}) == {"n_radii": 7}
    assert placement_from_section({"method": "spencer"}) == {}
    # The lattice given is the lattice searched: every trial circle has its centre in it.
    section = _undrained([[0, H], [40, H], [40 + H / np.tan(np.radians(60)), 0], [100, 0]])
    result = search_critical_surface(section, EXACT, refine=False, placement=placement_from_section(
        {"centre_x_range": [40, 50], "centre_y_range": [12, 18], "centres": [3, 3],
         "tangent_levels": 4}))
    assert result.n_trials == 3 * 3 * 4
    assert 40 <= result.critical.centre_x <= 50 and 12 <= result.critical.centre_y <= 18
