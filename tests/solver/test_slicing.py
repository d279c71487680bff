"""Slicing of circular and polyline slip surfaces (solver.slicing).

Geometry is checked against shapely (an independent polygon library): the slice areas of every
stratum must add up to the area of the intersection of the sliding mass with that stratum. The
sliding mass is the region below the ground and above the polyline through the slip surface at
the slice boundaries (the chord polyline of a circle), which slicing claims to integrate
exactly. Loads and pore pressures are checked against hand calculations.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
import shapely
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from solver.constants import GAMMA_W
from solver.errors import MethodError, SectionError, SurfaceError
from solver.section import section_from_dict
from solver.slicing import (
    BELOW_STRATA,
    BURIED_CIRCLE,
    BURIED_POLYLINE,
    CROSSES_BASE,
    DOUBLES_BACK,
    LEAVES,
    MULTI_CUT,
    NO_CUT,
    NOT_A_CIRCLE,
    SHALLOWER_THAN_CRACK,
    TOO_SMALL,
    slice_circles,
    slice_polyline,
    slice_surface,
)
from solver.surfaces import CircularSurface, PolylineSurface, circle_from_scarp_toe

LOW = -100.0  # [m] far below every test section, to close "region below a line" polygons

# ---------------------------------------------------------------------------------------------
# Invented test sections
# ---------------------------------------------------------------------------------------------

GROUND = [[0, 30.0], [20, 30.0], [45, 15.0], [70, 12.0], [90, 12.0]]
# Non-horizontal boundaries; the first bottom rises above the ground near x = 40 (pinch-out).
BOTTOM_1 = [[0, 26.0], [30, 20.0], [90, 8.0]]
BOTTOM_2 = [[0, 18.0], [50, 6.0], [90, 2.0]]
MAIN_LINE = [[0, 27.0], [40, 18.0], [60, 13.0], [90, 11.5]]
DEEP_LINE = [[0, 20.0], [90, 9.0]]


def layered_dict(**changes) -> dict:
    """Three layered strata with sloping boundaries and two water lines."""
    data = {
        "section": {"id": "T-3L", "name": "three layers"},
        "ground": {"points": GROUND},
        "material": [
            {"name": "Topsoil", "unit_weight": 18.0, "unit_weight_saturated": 20.0,
             "cohesion": 3.0, "friction_angle": 28.0, "water": "main"},
            {"name": "Sand", "unit_weight": 19.0, "unit_weight_saturated": 21.0,
             "cohesion": 0.0, "friction_angle": 34.0, "water": "main"},
            {"name": "Marl", "unit_weight": 20.0, "unit_weight_saturated": 22.0,
             "cohesion": 12.0, "friction_angle": 24.0, "water": "deep"},
        ],
        "stratum": [
            {"material": "Topsoil", "bottom": BOTTOM_1},
            {"material": "Sand", "bottom": BOTTOM_2},
            {"material": "Marl"},
        ],
        "water_line": [
            {"name": "main", "points": MAIN_LINE},
            {"name": "deep", "points": DEEP_LINE},
        ],
    }
    data.update(changes)
    return data


# Polygon strata: a cover over two blocks separated by an inclined fault.
P_GROUND = [[0, 30.0], [20, 30.0], [45, 15.0], [90, 15.0]]
FAULT_TOP_Y = 13.0 - 2.0 * 15.0 / 45.0  # cover bottom at x = 60
COVER = [[0, 30.0], [20, 30.0], [45, 15.0], [90, 15.0], [90, 11.0], [60, FAULT_TOP_Y],
         [45, 13.0], [0, 26.0]]
LEFT_BLOCK = [[0, 26.0], [45, 13.0], [60, FAULT_TOP_Y], [40, 0.0], [0, 0.0]]
RIGHT_BLOCK = [[60, FAULT_TOP_Y], [90, 11.0], [90, 0.0], [40, 0.0]]


def polygon_dict(**changes) -> dict:
    data = {
        "section": {"id": "T-PG", "name": "faulted blocks"},
        "ground": {"points": P_GROUND},
        "material": [
            {"name": "Cover", "unit_weight": 18.0, "unit_weight_saturated": 19.5,
             "cohesion": 2.0, "friction_angle": 30.0, "water": "main"},
            {"name": "Left", "unit_weight": 20.0, "unit_weight_saturated": 21.0,
             "cohesion": 8.0, "friction_angle": 26.0, "water": "main"},
            {"name": "Right", "unit_weight": 21.0, "unit_weight_saturated": 22.5,
             "cohesion": 15.0, "friction_angle": 22.0, "water": "main"},
        ],
        "stratum": [
            {"material": "Cover", "polygon": COVER},
            {"material": "Left", "polygon": LEFT_BLOCK},
            {"material": "Right", "polygon": RIGHT_BLOCK},
        ],
        "water_line": [{"name": "main", "points": [[0, 25.0], [50, 13.5], [90, 12.0]]}],
        "base": {"points": [[0, 0.5], [90, 0.5]]},
    }
    data.update(changes)
    return data


def homogeneous_dict(**changes) -> dict:
    """One dry material under a simple slope; the base of many hand checks."""
    data = {
        "section": {"id": "T-H", "name": "homogeneous"},
        "ground": {"points": [[0, 20.0], [10, 20.0], [30, 10.0], [50, 10.0]]},
        "material": [{"name": "Clay", "unit_weight": 18.0, "cohesion": 10.0,
                      "friction_angle": 25.0}],
        "stratum": [{"material": "Clay"}],
    }
    data.update(changes)
    return data


# ---------------------------------------------------------------------------------------------
# shapely reference geometry
# ---------------------------------------------------------------------------------------------


def below(points) -> shapely.Polygon:
    """The region below a polyline, down to LOW."""
    points = np.asarray(points, dtype=float)
    return shapely.Polygon([*points, (points[-1, 0], LOW), (points[0, 0], LOW)])


def layered_strata_polygons(data) -> list:
    """Stratum regions of a layered section built with shapely from the definition in
    docs/formats.md: below the ground and every bottom above, and not below its own bottom."""
    region = below(data["ground"]["points"])
    polygons = []
    for stratum in data["stratum"]:
        if "bottom" in stratum:
            own = region.difference(below(stratum["bottom"]))
            region = region.intersection(below(stratum["bottom"]))
        else:
            own = region
        polygons.append(own)
    return polygons


def mass_polygon(data, slices, row, surface_y) -> shapely.Polygon:
    """The sliding mass: below the ground, above the polyline through the surface points at the
    slice boundaries, between the first and last boundary (movement frame = section frame)."""
    active = slices.active[row]
    x = np.append(slices.x_left[row][active], slices.x_right[row][active][-1])
    y = surface_y(x)
    top = 1000.0
    above_chord = shapely.Polygon([*zip(x, y), (x[-1], top), (x[0], top)])
    return above_chord.intersection(below(data["ground"]["points"]))


def circle_y(xc, yc, r):
    return lambda x: yc - np.sqrt(r * r - (x - xc) ** 2)


def polyline_y(points):
    points = np.asarray(points, dtype=float)
    return lambda x: np.interp(x, points[:, 0], points[:, 1])


def weights(data, trials, kind="circle", **kw):
    section = section_from_dict(data)
    if kind == "circle":
        batch = slice_circles(section, *trials, **kw)
    else:
        batch = slice_polyline(section, trials, **kw)
    return batch


def with_material(data, index, **values):
    data = copy.deepcopy(data)
    data["material"][index].update(values)
    return data


# ---------------------------------------------------------------------------------------------
# Areas against shapely (issue requirement)
# ---------------------------------------------------------------------------------------------

CIRCLES = (
    np.array([30.0, 40.0, 35.0, 50.0]),
    np.array([45.0, 40.0, 60.0, 30.0]),
    np.array([28.0, 27.0, 45.0, 19.0]),
)
POLYLINES = np.array([
    [[5, 32.0], [18, 22.0], [35, 11.0], [55, 9.0], [75, 11.0], [85, 14.0]],
    [[10, 31.0], [22, 24.0], [40, 17.0], [52, 5.0], [66, 8.0], [72, 13.0]],
])


def _per_stratum_check(data, reference_polygons, batch_of, surface_ys, water_of):
    base = batch_of(data)
    assert base.valid.all(), base.reason
    for k, material in enumerate(data["material"]):
        # Raising one unit weight by 1 kN/m3 raises the slice weights by the area it applies to.
        heavier = batch_of(with_material(data, k, unit_weight=material["unit_weight"] + 1.0,
                                         unit_weight_saturated=material["unit_weight_saturated"]))
        wetter = batch_of(with_material(
            data, k, unit_weight_saturated=material["unit_weight_saturated"] + 1.0))
        for row, surface_y in enumerate(surface_ys):
            mass = mass_polygon(data, base.slices, row, surface_y)
            stratum = reference_polygons[k]
            water = below(water_of(material))
            moist_area = mass.intersection(stratum).difference(water).area
            saturated_area = mass.intersection(stratum).intersection(water).area
            moist = (heavier.slices.weight[row] - base.slices.weight[row]).sum()
            saturated = (wetter.slices.weight[row] - base.slices.weight[row]).sum()
            # Reference: shapely polygon intersection (exact for these straight-edged regions).
            assert moist == pytest.approx(moist_area, rel=1e-6, abs=1e-9), (k, row)
            assert saturated == pytest.approx(saturated_area, rel=1e-6, abs=1e-9), (k, row)


def _lines(data):
    lines = {w["name"]: w["points"] for w in data["water_line"]}
    return lambda material: lines[material["water"]]


def test_layered_strata_areas_match_shapely_for_circles():
    data = layered_dict()
    ys = [circle_y(*(c[i] for c in CIRCLES)) for i in range(len(CIRCLES[0]))]
    _per_stratum_check(data, layered_strata_polygons(data),
                       lambda d: weights(d, CIRCLES), ys, _lines(data))


def test_layered_strata_areas_match_shapely_for_polylines():
    data = layered_dict()
    ys = [polyline_y(p) for p in POLYLINES]
    _per_stratum_check(data, layered_strata_polygons(data),
                       lambda d: weights(d, POLYLINES, kind="polyline"), ys, _lines(data))


def test_polygon_strata_areas_match_shapely_for_circles_and_polylines():
    data = polygon_dict()
    polygons = [shapely.Polygon(s["polygon"]) for s in data["stratum"]]
    circles = (np.array([40.0, 50.0, 55.0]), np.array([40.0, 35.0, 26.0]),
               np.array([30.0, 33.0, 25.0]))
    ys = [circle_y(*(c[i] for c in circles)) for i in range(3)]
    _per_stratum_check(data, polygons, lambda d: weights(d, circles), ys, _lines(data))
    lines = np.array([[[5, 32.0], [25, 18.0], [50, 5.0], [70, 8.0], [85, 16.0]]])
    _per_stratum_check(data, polygons, lambda d: weights(d, lines, kind="polyline"),
                       [polyline_y(lines[0])], _lines(data))


def test_every_geometry_break_is_a_slice_boundary():
    data = layered_dict(surcharge=[{"x_from": 31.5, "x_to": 33.25, "pressure": 10.0}])
    batch = weights(data, CIRCLES)
    slices = batch.slices
    row = 0
    bounds = set(np.round(slices.x_left[row][slices.active[row]], 9)) | {
        round(float(slices.x_right[row][slices.active[row]][-1]), 9)}
    entry, exit_ = batch.scarp_x[row], batch.toe_x[row]
    expected = [20.0, 45.0, 30.0, 40.0, 31.5, 33.25]  # ground, bottom, water vertices; strip
    for x in expected:
        if entry < x < exit_:
            assert round(x, 9) in bounds, x
    # The circle meets the bottom of the first stratum: find that crossing with shapely.
    arc = shapely.Point(CIRCLES[0][0], CIRCLES[1][0]).buffer(CIRCLES[2][0], 4096).exterior
    crossing = arc.intersection(shapely.LineString(BOTTOM_1))
    xs = [p.x for p in getattr(crossing, "geoms", [crossing]) if p.y < CIRCLES[1][0]]
    assert xs
    for x in xs:
        assert min(abs(b - x) for b in bounds) < 1e-3  # shapely's arc is a 4096-gon


def test_circle_chord_area_converges_to_circular_segment():
    # Closed form: a circle of radius R whose centre lies h above a level ground cuts off a
    # circular segment of area R^2 (theta - sin theta) / 2, theta = 2 acos(h / R)
    # (standard geometry).
    data = homogeneous_dict(ground={"points": [[0, 10.0], [100, 10.0]]})
    section = section_from_dict(data)
    xc, yc, r = 50.0, 14.0, 10.0
    batch = slice_circles(section, xc, yc, r, n_slices=4000, direction=1)
    theta = 2 * math.acos((yc - 10.0) / r)
    exact = r * r * (theta - math.sin(theta)) / 2
    assert batch.slices.weight.sum() / 18.0 == pytest.approx(exact, rel=1e-6)
    assert batch.scarp_x[0] == pytest.approx(xc - math.sqrt(r * r - 16.0), rel=1e-12)


@settings(max_examples=40, deadline=None)
@given(
    circles=st.lists(
        st.tuples(st.floats(10.0, 40.0), st.floats(2.0, 19.0), st.floats(3.0, 25.0)),
        min_size=10, max_size=10),
    n_slices=st.integers(1, 40),
)
def test_dry_homogeneous_weight_is_unit_weight_times_shapely_area(circles, n_slices):
    data = homogeneous_dict()
    xc, lowest, radius = (np.array(v) for v in zip(*circles))
    yc = lowest + radius
    batch = slice_circles(section_from_dict(data), xc, yc, radius, n_slices=n_slices)
    assume(batch.valid.any())
    for row, trial in enumerate(batch.index):
        y = circle_y(xc[trial], yc[trial], radius[trial])
        area = mass_polygon(data, batch.slices, row, y).area
        # Reference: shapely area of the mass; W = gamma * A for a dry homogeneous mass.
        assert batch.slices.weight[row].sum() == pytest.approx(18.0 * area, rel=1e-6)
    assert np.all(batch.slices.weight >= 0)


# ---------------------------------------------------------------------------------------------
# Mirroring
# ---------------------------------------------------------------------------------------------


def _mirror(data):
    data = copy.deepcopy(data)

    def flip(points):
        return [[-x, y] for x, y in reversed(points)]

    data["ground"]["points"] = flip(data["ground"]["points"])
    for stratum in data["stratum"]:
        if "bottom" in stratum:
            stratum["bottom"] = flip(stratum["bottom"])
        if "polygon" in stratum:
            stratum["polygon"] = [[-x, y] for x, y in stratum["polygon"]]
    for line in data.get("water_line", []):
        line["points"] = flip(line["points"])
    if "base" in data:
        data["base"]["points"] = flip(data["base"]["points"])
    for strip in data.get("surcharge", []):
        strip["x_from"], strip["x_to"] = -strip["x_to"], -strip["x_from"]
    return data


@pytest.mark.parametrize("make", [layered_dict, polygon_dict])
def test_mirrored_section_gives_the_same_slices(make):
    data = make(surcharge=[{"x_from": 25.0, "x_to": 32.0, "pressure": 15.0}])
    xc, yc, r = np.array([40.0, 50.0]), np.array([40.0, 35.0]), np.array([30.0, 33.0])
    plain = weights(data, (xc, yc, r))
    mirrored = weights(_mirror(data), (-xc, yc, r))
    assert plain.valid.all() and mirrored.valid.all()
    assert not plain.slices.mirrored and mirrored.slices.mirrored
    a, b = plain.slices, mirrored.slices
    # Same mass seen from the other side (symmetry): equal totals.
    for total in (lambda s: s.weight.sum(axis=1), lambda s: (s.pore_pressure * s.width).sum(axis=1),
                  lambda s: np.abs(s.alpha).sum(axis=1), lambda s: s.surcharge.sum(axis=1)):
        np.testing.assert_allclose(total(b), total(a), rtol=1e-9)
    np.testing.assert_allclose(mirrored.scarp_x, -plain.scarp_x, rtol=1e-12)
    np.testing.assert_allclose(b.centre_x, a.centre_x, rtol=1e-12)


def test_direction_must_be_given_when_the_ground_ends_are_level():
    data = homogeneous_dict(ground={"points": [[0, 10.0], [20, 15.0], [40, 10.0]]})
    with pytest.raises(SectionError, match="direction of movement is ambiguous"):
        slice_circles(section_from_dict(data), 10.0, 20.0, 10.0)
    assert slice_circles(section_from_dict(data), 30.0, 20.0, 9.0, direction=-1).valid[0]


# ---------------------------------------------------------------------------------------------
# Pore pressure, strength and loads: hand checks
# ---------------------------------------------------------------------------------------------


def _wet(line_points, **line):
    data = homogeneous_dict(water_line=[{"name": "w", "points": line_points, **line}])
    data["material"][0]["water"] = "w"
    return data


def test_pore_pressure_below_a_horizontal_water_line():
    section = section_from_dict(_wet([[0, 9.5], [50, 9.5]]))
    s = slice_circles(section, 22.0, 28.0, 21.0).slices
    expected = np.maximum(GAMMA_W * (9.5 - s.y_base), 0.0)
    # Hand check: u = gamma_w (h_w - y) below a still water table, 0 above (no suction).
    np.testing.assert_allclose(s.pore_pressure[s.active], expected[s.active], rtol=1e-12)
    assert (s.pore_pressure[s.active] == 0).any() and (s.pore_pressure > 0).any()


def test_suction_is_kept_only_when_allowed():
    section = section_from_dict(_wet([[0, 9.5], [50, 9.5]], allow_suction=True))
    s = slice_circles(section, 22.0, 28.0, 21.0).slices
    np.testing.assert_allclose(s.pore_pressure[s.active],
                               GAMMA_W * (9.5 - s.y_base[s.active]), rtol=1e-12)
    assert (s.pore_pressure[s.active] < 0).any()


def test_inclined_water_line_with_cos2_correction():
    # Skempton and DeLory (1957): seepage parallel to a phreatic surface inclined at theta
    # gives u = gamma_w * h * cos^2(theta), h measured vertically below the surface.
    line = [[0, 19.0], [50, 9.0]]
    slope = -10.0 / 50.0
    plain = slice_circles(section_from_dict(_wet(line)), 22.0, 28.0, 19.0).slices
    corrected = slice_circles(
        section_from_dict(_wet(line, inclination_correction=True)), 22.0, 28.0, 19.0).slices
    h = np.minimum(np.interp(plain.x_mid, *np.array(line).T), plain.y_top) - plain.y_base
    on = plain.active
    np.testing.assert_allclose(plain.pore_pressure[on], np.maximum(GAMMA_W * h, 0)[on], rtol=1e-12)
    np.testing.assert_allclose(corrected.pore_pressure[on],
                               np.maximum(GAMMA_W * h * math.cos(math.atan(slope)) ** 2, 0)[on],
                               rtol=1e-12)


def test_water_line_above_ground_is_taken_at_ground_level_without_ponding():
    section = section_from_dict(_wet([[0, 22.0], [50, 22.0]]))
    s = slice_circles(section, 22.0, 28.0, 19.0).slices
    on = s.active
    # Documented rule: h = min(h_line, ground) when ponding is not allowed.
    np.testing.assert_allclose(s.pore_pressure[on], GAMMA_W * (s.y_top - s.y_base)[on],
                               rtol=1e-12)


def test_ponded_water_adds_its_weight():
    line = [[0, 13.0], [50, 13.0]]
    dry_top = section_from_dict(_wet(line))
    ponded = section_from_dict(_wet(line, ) | {"ground": {"points": homogeneous_dict()[
        "ground"]["points"], "pond": True}})
    a = slice_circles(dry_top, 25.0, 30.0, 21.0)
    b = slice_circles(ponded, 25.0, 30.0, 21.0)
    entry, exit_ = a.scarp_x[0], a.toe_x[0]
    pond = shapely.box(entry, 10.0, exit_, 13.0).difference(
        below(homogeneous_dict()["ground"]["points"]))
    # Hand check: ponded water weighs gamma_w times its area (shapely) over the mass.
    assert (b.slices.weight - a.slices.weight).sum() == pytest.approx(GAMMA_W * pond.area,
                                                                      rel=1e-9)
    assert pond.area > 1.0
    # With ponding the full head acts at the base under the pond.
    on = b.slices.active & (b.slices.y_top < 13.0)
    np.testing.assert_allclose(b.slices.pore_pressure[on],
                               GAMMA_W * (13.0 - b.slices.y_base[on]), rtol=1e-12)


def test_ru_pore_pressure_is_ru_times_vertical_stress():
    data = homogeneous_dict()
    data["material"][0]["ru"] = 0.3
    s = slice_circles(section_from_dict(data), 22.0, 28.0, 19.0).slices
    on = s.active
    # Bishop and Morgenstern (1960): u = ru * gamma * h, h the height of soil above the base.
    np.testing.assert_allclose(s.pore_pressure[on], (0.3 * 18.0 * (s.y_top - s.y_base))[on],
                               rtol=1e-12)


def test_undrained_strength_grows_linearly_below_the_datum():
    data = homogeneous_dict(material=[{
        "name": "Clay", "model": "undrained", "unit_weight": 17.0, "undrained_strength": 20.0,
        "strength_gradient": 2.0, "strength_datum": 15.0}])
    s = slice_circles(section_from_dict(data), 22.0, 28.0, 19.0).slices
    on = s.active
    # Su = Su0 + k * max(0, datum - y) (linear increase with depth; common practice).
    expected = 20.0 + 2.0 * np.maximum(15.0 - s.y_base, 0.0)
    np.testing.assert_allclose(s.cohesion[on], expected[on], rtol=1e-12)
    assert np.all(s.tan_phi == 0) and np.all(s.pore_pressure == 0)
    assert s.cohesion[on].max() > 25.0


def test_drained_strength_at_the_base_is_that_of_the_base_stratum():
    deeper = tuple(np.append(c, v) for c, v in zip(CIRCLES, (40.0, 40.0, 34.0)))
    s = weights(layered_dict(), deeper).slices
    on = s.active
    expected_tan = np.tan(np.radians([28.0, 34.0, 24.0]))[s.base_material[on]]
    np.testing.assert_allclose(s.tan_phi[on], expected_tan, rtol=1e-12)
    np.testing.assert_allclose(s.cohesion[on], np.array([3.0, 0.0, 12.0])[s.base_material[on]])
    assert set(np.unique(s.base_material[on])) == {0, 1, 2}


def test_surcharge_total_is_pressure_times_loaded_width_inside_the_mass():
    data = homogeneous_dict(surcharge=[{"x_from": 2.0, "x_to": 8.0, "pressure": 20.0},
                                       {"x_from": 12.0, "x_to": 14.5, "pressure": 7.5}])
    batch = slice_circles(section_from_dict(data), 22.0, 28.0, 19.0)
    entry = batch.scarp_x[0]
    assert 2.0 < entry < 8.0
    # Hand check: strip load p over the part of the strip that lies on the mass.
    expected = 20.0 * (8.0 - entry) + 7.5 * 2.5
    assert batch.slices.surcharge.sum() == pytest.approx(expected, rel=1e-12)


def test_tension_crack_cuts_off_the_top_of_the_mass():
    data = homogeneous_dict(tension_crack={"depth": 2.0, "water_depth": 1.5})
    batch = slice_circles(section_from_dict(data), 22.0, 28.0, 19.0)
    s = batch.slices
    # The crack bottom is where the circle lies 2 m below the level crest (y = 20 m):
    # 28 - sqrt(19^2 - (x - 22)^2) = 18.
    x_crack = 22.0 - math.sqrt(19.0**2 - 10.0**2)
    assert batch.scarp_x[0] == pytest.approx(x_crack, rel=1e-12)
    assert s.x_left[0, 0] == pytest.approx(x_crack, rel=1e-12)
    # Hydrostatic thrust 0.5 gamma_w z_w^2 at z_w / 3 above the crack bottom.
    assert s.crack_water_force[0] == pytest.approx(0.5 * GAMMA_W * 1.5**2, rel=1e-12)
    assert s.crack_water_y[0] == pytest.approx(18.0 + 0.5, rel=1e-12)
    assert s.y_top[0, 0] - s.y_base[0, 0] > 2.0 - 0.2  # the first slice starts crack-deep


def test_seismic_coefficient_and_centre_are_passed_on():
    data = homogeneous_dict(seismic={"kh": 0.1})
    s = slice_circles(section_from_dict(data), 22.0, 28.0, 19.0).slices
    assert s.kh == 0.1
    assert (s.centre_x[0], s.centre_y[0], s.radius[0]) == (22.0, 28.0, 19.0)
    assert (s.moment_x[0], s.moment_y[0]) == (22.0, 28.0)


def test_weight_centroid_lies_within_the_column():
    s = weights(layered_dict(), CIRCLES).slices
    on = s.active
    assert np.all(s.y_weight[on] >= s.y_base[on] - 1e-9)
    assert np.all(s.y_weight[on] <= s.y_top[on] + 1e-9)


def test_alpha_is_positive_under_the_crest_and_negative_at_the_toe():
    s = slice_circles(section_from_dict(homogeneous_dict()), 22.0, 28.0, 19.0).slices
    on = s.active[0]
    assert s.alpha[0][on][0] > 0 > s.alpha[0][on][-1]
    # alpha is the inclination of the chord between the slice corners (movement frame).
    y = circle_y(22.0, 28.0, 19.0)
    np.testing.assert_allclose(
        np.tan(s.alpha[0][on]),
        (y(s.x_left[0][on]) - y(s.x_right[0][on])) / s.width[0][on], rtol=1e-9)


def test_padding_slices_are_inactive_and_empty():
    batch = weights(layered_dict(), CIRCLES)
    s = batch.slices
    pad = ~s.active
    assert pad.any()
    for name in ("weight", "cohesion", "tan_phi", "pore_pressure", "surcharge", "alpha"):
        assert np.all(getattr(s, name)[pad] == 0), name
    assert np.all(s.width[pad] == 0) and np.all(s.base_material[pad] == -1)
    # Real slices come first and in order of x.
    for row in range(s.n_surfaces):
        n = s.active[row].sum()
        assert s.active[row][:n].all()
        assert np.all(np.diff(s.x_left[row][:n]) > 0)


def test_polyline_moment_centre_is_the_circle_through_ends_and_deepest_vertex():
    section = section_from_dict(homogeneous_dict())
    # Vertices on a circle through two ground points: the polyline ends on the ground, so the
    # circle through its ends and any other vertex is that circle (three points fix a circle).
    circle = circle_from_scarp_toe(section, 5.0, 40.0, radius=25.0)
    x = np.array([5.0, 8.0, 15.0, 22.0, 30.0, 36.0, 40.0])
    y = circle.centre_y - np.sqrt(circle.radius**2 - (x - circle.centre_x) ** 2)
    batch = slice_polyline(section, np.column_stack([x, y]))
    assert batch.valid[0]
    s = batch.slices
    assert s.moment_x[0] == pytest.approx(circle.centre_x, rel=1e-9)
    assert s.moment_y[0] == pytest.approx(circle.centre_y, rel=1e-9)
    assert np.isnan(s.radius[0])
    # A planar surface has no finite circle: a point one chord length above the chord.
    planar = slice_polyline(section, np.array([[5.0, 20.0], [30.0, 10.0]])).slices
    # Chord (25, -10) from its mid-point (17.5, 15); upward normal times chord = (10, 25).
    assert planar.moment_x[0] == pytest.approx(17.5 + 10.0, rel=1e-9)
    assert planar.moment_y[0] == pytest.approx(15.0 + 25.0, rel=1e-9)


# ---------------------------------------------------------------------------------------------
# Rejections
# ---------------------------------------------------------------------------------------------


def test_rejection_reasons_are_counted():
    data = homogeneous_dict(base={"points": [[0, 4.0], [50, 4.0]]})
    section = section_from_dict(data)
    trials = [
        (22.0, 28.0, 19.0, ""),              # valid
        (22.0, 40.0, 5.0, NO_CUT),           # wholly above the ground
        (25.0, 12.0, 5.0, BURIED_CIRCLE),    # centre below the ground: arc ends in the soil
        (25.0, 30.0, 26.5, CROSSES_BASE),    # lowest point at y = 3.5 < base 4
        (25.0, 60.0, 52.0, LEAVES),          # still below ground at the section's ends
        # Grazes the slope 0.5 x + y = 25: centre at distance R - 1e-4 from it.
        (20.0, 15.0 + math.sqrt(1.25) * (5.0 - 1e-4), 5.0, TOO_SMALL),
        (22.0, 28.0, -1.0, NOT_A_CIRCLE),
        (np.nan, 28.0, 10.0, NOT_A_CIRCLE),
    ]
    xc, yc, r, expected = zip(*trials)
    batch = slice_circles(section, np.array(xc), np.array(yc), np.array(r))
    assert list(batch.reason) == list(expected)
    assert batch.valid.tolist() == [e == "" for e in expected]
    assert batch.index.tolist() == [0]
    assert batch.rejected()[NOT_A_CIRCLE] == 2
    assert batch.slices.n_surfaces == 1


def test_circle_cutting_the_ground_four_times_is_rejected():
    data = homogeneous_dict(ground={"points": [[0, 20.0], [15, 14.0], [20, 6.0], [25, 14.0],
                                               [40, 12.0], [50, 12.0]]})
    batch = slice_circles(section_from_dict(data), 20.0, 18.0, 10.0)
    assert batch.reason[0] == MULTI_CUT


def test_surface_below_a_bounded_lowest_stratum_is_rejected():
    data = homogeneous_dict()
    data["stratum"] = [{"material": "Clay", "bottom": [[0, 5.0], [50, 5.0]]}]
    batch = slice_circles(section_from_dict(data), np.array([22.0, 25.0]),
                          np.array([28.0, 30.0]), np.array([19.0, 26.5]))
    assert list(batch.reason) == ["", BELOW_STRATA]


def test_shallow_surface_does_not_reach_the_crack_depth():
    data = homogeneous_dict(tension_crack={"depth": 6.0, "water_depth": 0.0})
    batch = slice_circles(section_from_dict(data), 20.0, 25.0, 10.5)
    assert batch.reason[0] == SHALLOWER_THAN_CRACK


def test_polyline_rejections():
    section = section_from_dict(homogeneous_dict())
    good = [[2, 21.0], [15, 12.0], [35, 9.0], [45, 11.0]]
    back = [[2, 21.0], [15, 12.0], [14, 9.0], [45, 11.0]]
    buried = [[2, 21.0], [15, 12.0], [35, 9.0], [45, 9.5]]
    above = [[2, 21.0], [15, 22.0], [35, 21.0], [45, 21.0]]
    batch = slice_polyline(section, np.array([good, back, buried, above]))
    assert list(batch.reason) == ["", DOUBLES_BACK, BURIED_POLYLINE, NO_CUT]


def test_polyline_end_on_the_ground_is_accepted():
    section = section_from_dict(homogeneous_dict())
    points = np.array([[5, 20.0], [15, 12.0], [35, 9.0], [40, 10.0]])  # both ends on the ground
    batch = slice_polyline(section, points)
    assert batch.valid[0]
    assert (batch.scarp_x[0], batch.toe_x[0]) == (5.0, 40.0)


def test_slice_surface_raises_with_the_reason():
    section = section_from_dict(homogeneous_dict())
    with pytest.raises(SurfaceError, match="does not cut the ground surface twice"):
        slice_surface(section, CircularSurface(22.0, 40.0, 5.0))
    # Ground at x = 45 m is at y = 10 m: the right end is 0.5 m below it, and the message says
    # which end and where (issue 16, item 7).
    with pytest.raises(SurfaceError, match="polyline ends below the ground surface of section "
                       "'.*': its right end at x = 45 m is 0.500 m below the ground$"):
        slice_surface(section, PolylineSurface([[2, 21.0], [15, 12.0], [35, 9.0], [45, 9.5]]))
    slices = slice_surface(section, CircularSurface(22.0, 28.0, 19.0))
    assert slices.n_surfaces == 1


def test_bad_settings_are_refused():
    section = section_from_dict(homogeneous_dict())
    with pytest.raises(MethodError, match="n_slices must be a positive integer, got 0"):
        slice_circles(section, 22.0, 28.0, 19.0, n_slices=0)
    with pytest.raises(MethodError, match="min_area"):
        slice_circles(section, 22.0, 28.0, 19.0, min_area=-1.0)
    with pytest.raises(SurfaceError, match=r"\(n, k, 2\)"):
        slice_polyline(section, np.zeros((2, 3, 3)))
    with pytest.raises(SurfaceError, match="doubles back"):
        PolylineSurface([[0, 1.0], [0, 2.0]])


# ---------------------------------------------------------------------------------------------
# Circles from scarp and toe points
# ---------------------------------------------------------------------------------------------


def test_circle_through_entry_and_exit_with_a_radius():
    section = section_from_dict(homogeneous_dict())
    circle = circle_from_scarp_toe(section, 5.0, 40.0, radius=25.0)
    for x in (5.0, 40.0):
        y = float(section.ground_elevation(x))
        # The circle passes through both ground points (distance to the centre = R).
        assert math.hypot(x - circle.centre_x, y - circle.centre_y) == pytest.approx(25.0,
                                                                                     rel=1e-12)
    batch = slice_circles(section, circle.centre_x, circle.centre_y, circle.radius)
    assert batch.valid[0]
    assert (batch.scarp_x[0], batch.toe_x[0]) == pytest.approx((5.0, 40.0), rel=1e-9)


def test_circle_through_entry_and_exit_with_a_tangent_elevation():
    section = section_from_dict(homogeneous_dict())
    circle = circle_from_scarp_toe(section.ground, 5.0, 40.0, tangent_elevation=6.0)
    assert circle.centre_y - circle.radius == pytest.approx(6.0, rel=1e-12)
    for x in (5.0, 40.0):
        y = float(section.ground_elevation(x))
        assert math.hypot(x - circle.centre_x, y - circle.centre_y) == pytest.approx(
            circle.radius, rel=1e-12)
    assert 5.0 < circle.centre_x < 40.0
    # Vectorised: arrays in, arrays out; impossible combinations become NaN.
    family = circle_from_scarp_toe(section, [5.0, 5.0], [40.0, 40.0],
                                     tangent_elevation=[6.0, 25.0])
    assert np.isfinite(family.centre_x[0]) and np.isnan(family.centre_x[1])


def test_impossible_circles_are_refused():
    section = section_from_dict(homogeneous_dict())
    with pytest.raises(SurfaceError, match="radius = 1.0 m is shorter than half the chord"):
        circle_from_scarp_toe(section, 5.0, 40.0, radius=1.0)
    with pytest.raises(SurfaceError, match="tangent_elevation = 25.0 m must lie below"):
        circle_from_scarp_toe(section, 5.0, 40.0, tangent_elevation=25.0)
    with pytest.raises(SurfaceError, match="exactly one of radius and tangent_elevation"):
        circle_from_scarp_toe(section, 5.0, 40.0)
    with pytest.raises(SurfaceError, match="scarp_x = 5.0 and toe_x = 60.0 m must be"):
        circle_from_scarp_toe(section, 5.0, 60.0, radius=40.0)


def test_circle_drawing_points_lie_on_the_circle():
    circle = CircularSurface(3.0, 4.0, 5.0)
    points = circle.as_polyline(50)
    assert points.shape == (50, 2)
    np.testing.assert_allclose(np.hypot(points[:, 0] - 3.0, points[:, 1] - 4.0), 5.0, rtol=1e-12)
    assert np.all(points[:, 1] <= 4.0 + 1e-12)
    polyline = PolylineSurface([[0, 5.0], [2, 1.0], [10, 3.0]])
    drawn = polyline.as_polyline(20)
    assert {0.0, 2.0, 10.0} <= set(drawn[:, 0])
