"""Parsing, validating and writing cross-sections (solver.section)."""

from __future__ import annotations

import copy
import json
import math
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.errors import SectionError
from solver.section import (
    Material,
    Section,
    Stratum,
    section_from_dict,
    section_to_dict,
)

FORMATS = Path(__file__).resolve().parents[2] / "docs" / "formats.md"


def documented_example() -> dict:
    """The section file shown in docs/formats.md, section 1 (the format contract)."""
    text = FORMATS.read_text(encoding="utf-8")
    part = text[text.index("## 1. Section file"):text.index("## 2.")]
    block = re.search(r"```toml\n(.*?)```", part, re.S).group(1)
    return tomllib.loads(block)


def layered() -> dict:
    return {
        "section": {"id": "S-1", "name": "test cutting"},
        "ground": {"points": [[0, 20.0], [10, 20.0], [30, 10.0], [50, 10.0]]},
        "base": {"points": [[0, 0.0], [50, 0.0]]},
        "material": [
            {"name": "Fill", "unit_weight": 18.0, "unit_weight_saturated": 19.0,
             "cohesion": 2.0, "friction_angle": 30.0, "water": "main"},
            {"name": "Clay", "model": "undrained", "unit_weight": 17.0,
             "undrained_strength": 30.0, "strength_gradient": 1.2, "strength_datum": 12.0},
        ],
        "stratum": [
            {"material": "Fill", "bottom": [[0, 15.0], [50, 6.0]]},
            {"material": "Clay"},
        ],
        "water_line": [{"name": "main", "points": [[0, 16.0], [50, 9.0]]}],
        "surcharge": [{"x_from": 2.0, "x_to": 6.0, "pressure": 10.0}],
        "seismic": {"kh": 0.05},
        "tension_crack": {"depth": 1.5, "water_depth": 0.5},
    }


def polygons() -> dict:
    data = layered()
    data["stratum"] = [
        {"material": "Fill",
         "polygon": [[0, 20.0], [10, 20.0], [30, 10.0], [50, 10.0], [50, 6.0], [0, 15.0]]},
        {"material": "Clay", "polygon": [[0, 15.0], [50, 6.0], [50, 0.0], [0, 0.0]]},
    ]
    return data


# ---------------------------------------------------------------------------------------------
# Parsing
# ---------------------------------------------------------------------------------------------


def test_documented_example_parses():
    section = section_from_dict(documented_example())
    assert section.id == "WC-040"
    assert [m.name for m in section.materials] == ["Till", "Soft clay"]
    till = section.materials[0]
    assert (till.unit_weight, till.unit_weight_saturated) == (19.0, 20.0)
    assert till.tan_phi == pytest.approx(math.tan(math.radians(30.0)), rel=1e-15)
    assert section.materials[1].unit_weight_saturated == 17.0  # defaults to unit_weight
    assert section.water_line("main").points.shape == (3, 2)
    assert section.search == {"method": "spencer", "min_depth": 1.0, "slices": 30}
    assert section.crack.depth == 0.0


def test_layered_strata_compile_to_running_minima_of_the_bottoms():
    data = layered()
    # Second bottom rises above the first near x = 0 (pinch-out of the middle stratum there).
    data["material"].append({"name": "Sand", "unit_weight": 19.0, "cohesion": 0.0,
                             "friction_angle": 35.0, "water": "none"})
    data["stratum"].insert(1, {"material": "Sand", "bottom": [[0, 16.2], [50, 1.2]]})
    columns = section_from_dict(data).columns
    # The crossing of the two bottoms (15 - 0.18 x = 16.2 - 0.3 x at x = 10) is a cell edge.
    assert 10.0 in columns.x
    x = columns.x
    sand_top = np.append(columns.top_left[:, 1], columns.top_right[-1, 1])
    sand_bottom = np.append(columns.bottom_left[:, 1], columns.bottom_right[-1, 1])
    first = np.interp(x, [0, 50], [15.0, 6.0])
    second = np.interp(x, [0, 50], [16.2, 1.2])
    np.testing.assert_allclose(sand_top, first, rtol=1e-12)
    np.testing.assert_allclose(sand_bottom, np.minimum(first, second), rtol=1e-12)
    assert not columns.bounded_below


def test_polygon_strata_compile_like_the_equivalent_layers():
    by_layers = section_from_dict(layered()).columns
    by_polygons = section_from_dict(polygons()).columns
    np.testing.assert_allclose(by_polygons.x, by_layers.x)
    np.testing.assert_allclose(by_polygons.top_left, by_layers.top_left)
    np.testing.assert_allclose(by_polygons.bottom_right[:, 0], by_layers.bottom_right[:, 0])
    np.testing.assert_array_equal(by_polygons.material, by_layers.material)
    assert by_polygons.bounded_below


# ---------------------------------------------------------------------------------------------
# Round trip
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("make", [layered, polygons, documented_example])
def test_round_trip_through_json(make):
    section = section_from_dict(make())
    data = section_to_dict(section)
    again = section_from_dict(json.loads(json.dumps(data)))
    assert section_to_dict(again) == data
    np.testing.assert_array_equal(again.ground, section.ground)
    assert again.materials[1].strength_datum == section.materials[1].strength_datum


@settings(max_examples=50, deadline=None)
@given(
    phi=st.floats(0.0, 89.0),
    cohesion=st.floats(0.0, 500.0),
    gamma=st.floats(1.0, 30.0),
    extra=st.floats(0.0, 5.0),
    ru=st.one_of(st.none(), st.floats(0.0, 0.99)),
)
def test_round_trip_of_any_valid_material(phi, cohesion, gamma, extra, ru):
    data = layered()
    fill = data["material"][0]
    fill.update(friction_angle=phi, cohesion=cohesion, unit_weight=gamma,
                unit_weight_saturated=gamma + extra)
    if ru is not None:
        del fill["water"]
        fill["ru"] = ru
    section = section_from_dict(data)
    assert section_to_dict(section_from_dict(section_to_dict(section))) == section_to_dict(section)
    assert section.materials[0].friction_angle == phi


# ---------------------------------------------------------------------------------------------
# Water lines updated from readings
# ---------------------------------------------------------------------------------------------


def test_with_water_lines_replaces_only_the_named_line():
    section = section_from_dict(layered())
    updated = section.with_water_lines({"main": [[0, 18.0], [30, 12.0], [50, 9.5]]})
    assert updated.water_line("main").points.tolist() == [[0, 18.0], [30, 12.0], [50, 9.5]]
    assert section.water_line("main").points.tolist() == [[0, 16.0], [50, 9.0]]
    # Geometry, materials and the compiled strata are shared, not copied.
    assert updated.ground is section.ground and updated.columns is section.columns
    assert updated.materials is section.materials
    assert updated.water_line("main").inclination_correction is False


def test_with_water_lines_sets_the_inclination_correction_of_named_lines():
    data = layered()
    data["water_line"][0]["inclination_correction"] = True
    section = section_from_dict(data)
    points = {"main": [[0, 18.0], [30, 12.0], [50, 9.5]]}
    assert section.with_water_lines(points).water_line("main").inclination_correction is True
    off = section.with_water_lines(points, {"main": False})
    assert off.water_line("main").inclination_correction is False
    with pytest.raises(SectionError, match="water_line 'perched' is not defined"):
        section.with_water_lines(points, {"perched": False})


def test_with_water_lines_refuses_unknown_names_and_bad_points():
    section = section_from_dict(layered())
    with pytest.raises(SectionError, match="water_line 'perched' is not defined"):
        section.with_water_lines({"perched": [[0, 1.0], [50, 1.0]]})
    with pytest.raises(SectionError, match="water_line 'main': points: x must increase"):
        section.with_water_lines({"main": [[0, 18.0], [30, 12.0], [20, 9.5], [50, 9.0]]})
    with pytest.raises(SectionError, match="water_line 'main': spans x = 5 to 50 m"):
        section.with_water_lines({"main": [[5, 18.0], [50, 9.5]]})


# ---------------------------------------------------------------------------------------------
# Validation: each bad input names the item and the value
# ---------------------------------------------------------------------------------------------


def _set(path, value):
    def change(data):
        target = data
        for key in path[:-1]:
            target = target.setdefault(key, {}) if isinstance(target, dict) else target[key]
        if value is _DELETE:
            del target[path[-1]]
        else:
            target[path[-1]] = value
        return data
    return change


_DELETE = object()

BAD = [
    (_set(("ground", "points"), [[0, 20.0], [10, 20.0], [8, 10.0], [50, 10.0]]),
     r"ground points: x must increase strictly .* x = 10 is followed by x = 8"),
    (_set(("material", 0, "friction_angle"), 95.0),
     r"material 'Fill': friction_angle = 95.0 deg is outside \[0, 89\]"),
    (_set(("material", 0, "friction_angle"), -1.0),
     r"material 'Fill': friction_angle = -1.0 deg is outside"),
    (_set(("material", 0, "unit_weight"), 0.0),
     r"material 'Fill': unit_weight = 0.0 kN/m3 must be positive"),
    (_set(("material", 0, "unit_weight_saturated"), -19.0),
     r"material 'Fill': unit_weight_saturated = -19.0 kN/m3 must be positive"),
    (_set(("material", 0, "cohesion"), -2.0), r"material 'Fill': cohesion = -2.0 kPa"),
    (_set(("material", 0, "cohesion"), "soft"),
     r"material 'Fill': cohesion = 'soft' must be a number"),
    (_set(("material", 0, "water"), "perched"),
     r"material 'Fill': water = 'perched' is not a water_line"),
    (_set(("material", 0, "model"), "plastic"), r"material 'Fill': model = 'plastic'"),
    (_set(("material", 0, "undrained_strength"), 20.0),
     r"material 'Fill': undrained_strength does not apply to a drained material"),
    (_set(("material", 1, "friction_angle"), 20.0),
     r"material 'Clay': friction_angle does not apply to an undrained material"),
    (_set(("material", 1, "undrained_strength"), -3.0),
     r"material 'Clay': undrained_strength = -3.0 kPa must be >= 0"),
    (_set(("material", 1, "strength_datum"), _DELETE),
     r"material 'Clay': strength_gradient = 1.2 needs a strength_datum"),
    (_set(("material", 0, "water"), _DELETE), r"material 'Fill': say which water line"),
    (_set(("material", 0, "cohesion_prime"), 1.0),
     r"\[\[material\]\] item 1: unknown key 'cohesion_prime'"),
    (_set(("stratum", 0, "material"), "Peat"),
     r"stratum material = 'Peat' is not a defined material \(known: Fill, Clay\)"),
    (_set(("stratum", 0, "bottom"), [[5, 15.0], [50, 8.0]]),
     r"stratum 1 \('Fill'\) bottom: spans x = 5 to 50 m but must cover the ground"),
    (_set(("stratum", 0, "bottom"), _DELETE), r"stratum 1 \('Fill'\) has no bottom"),
    (_set(("water_line", 0, "points"), [[0, 16.0], [20, 12.0], [20, 11.0], [50, 9.0]]),
     r"water_line 'main': points: x must increase strictly"),
    (_set(("water_line", 0, "allow_suction"), "yes"),
     r"water_line 'main': allow_suction = 'yes' must be true or false"),
    (_set(("tension_crack", "water_depth"), 2.0),
     r"tension_crack: water_depth = 2.0 m must be between 0 and the crack depth = 1.5 m"),
    (_set(("tension_crack", "depth"), -1.0), r"tension_crack: depth = -1.0 m must be >= 0"),
    (_set(("base", "points"), [[0, 0.0], [40, 12.0], [50, 0.0]]),
     r"base: at x = 40 m the base \(y = 12 m\) is not below the ground \(y = 10 m\)"),
    (_set(("surcharge", 0, "x_to"), 1.0),
     r"surcharge: x_to = 1.0 must be greater than x_from = 2.0"),
    (_set(("surcharge", 0, "pressure"), -5.0), r"surcharge: pressure = -5.0 kPa must be >= 0"),
    (_set(("seismic", "kh"), 1.5), r"seismic: kh = 1.5 is outside \[0, 1\)"),
    (_set(("section", "id"), ""), r"section id = '' must be a non-empty string"),
    (_set(("ground", "points"), [[0, 20.0]]), r"ground points: need at least 2 \[x, y\] pairs"),
    (_set(("ground", "points"), [[0, 20.0], [50, float("nan")]]),
     r"ground points: coordinates must be finite"),
    (_set(("ground", "pond"), 1), r"ground: pond = 1 must be true or false"),
    (_set(("search", "slices"), 0), r"search: slices = 0 must be a positive integer"),
    (_set(("search", "face"), "north"),
     r"search: face = 'north' must be one of 'right', 'left' \(leave it out"),
    (_set(("search", "centre_x_range"), [60.0, 20.0]),
     r"search: centre_x_range = \[60.0, 20.0\] m must be low then high"),
    (_set(("search", "tangent_range"), [1.0]), r"search: tangent_range = \[1.0\] must be two"),
    (_set(("search", "centres"), [30, 0]), r"search: centres = 0 must be a positive integer"),
    (_set(("search", "tangent_levels"), 2.5),
     r"search: tangent_levels = 2.5 must be a positive integer"),
    (_set(("geology",), {}), r"unknown table \[geology\]"),
    (_set(("ground", "points"), _DELETE), r"\[ground\] needs points"),
]


@pytest.mark.parametrize("change, message", BAD)
def test_invalid_sections_are_refused_with_the_item_named(change, message):
    data = change(layered())
    with pytest.raises(SectionError, match=message):
        section_from_dict(data)


@pytest.mark.parametrize("ru, message", [
    (1.0, r"material 'Fill': ru = 1.0 is outside \[0, 1\)"),
    (-0.1, r"material 'Fill': ru = -0.1 is outside \[0, 1\)"),
])
def test_ru_outside_its_range_is_refused(ru, message):
    data = layered()
    del data["material"][0]["water"]
    data["material"][0]["ru"] = ru
    with pytest.raises(SectionError, match=message):
        section_from_dict(data)


def test_ru_and_water_line_together_are_refused():
    data = layered()
    data["material"][0]["ru"] = 0.2
    with pytest.raises(SectionError, match=r"give either water = 'main' or ru = 0.2, not both"):
        section_from_dict(data)


def test_ru_on_an_undrained_material_is_refused():
    data = layered()
    data["material"][1]["ru"] = 0.2
    with pytest.raises(SectionError, match="ru = 0.2 has no meaning for an undrained"):
        section_from_dict(data)


def test_duplicate_names_are_refused():
    data = layered()
    data["material"].append(copy.deepcopy(data["material"][0]))
    with pytest.raises(SectionError, match="material 'Fill' is defined twice"):
        section_from_dict(data)
    data = layered()
    data["water_line"].append(copy.deepcopy(data["water_line"][0]))
    with pytest.raises(SectionError, match="water_line 'main' is defined twice"):
        section_from_dict(data)


def test_overlapping_polygons_are_refused():
    data = polygons()
    data["stratum"][1]["polygon"] = [[0, 16.0], [50, 7.0], [50, 0.0], [0, 0.0]]
    with pytest.raises(SectionError, match=r"strata 1 \('Fill'\) and 2 \('Clay'\) overlap by"):
        section_from_dict(data)


def test_polygons_leaving_a_gap_are_refused():
    data = polygons()
    data["stratum"][1]["polygon"] = [[0, 14.0], [50, 6.0], [50, 0.0], [0, 0.0]]
    with pytest.raises(SectionError, match=r"gap between stratum 1 \('Fill'\) and stratum 2"):
        section_from_dict(data)


def test_polygons_leaving_a_gap_under_the_ground_are_refused():
    data = polygons()
    data["stratum"][0]["polygon"] = [[0, 19.0], [10, 19.0], [30, 10.0], [50, 10.0], [50, 6.0],
                                     [0, 15.0]]
    with pytest.raises(SectionError, match=r"gap between the ground and stratum 1 \('Fill'\)"):
        section_from_dict(data)


def test_polygon_above_the_ground_is_refused():
    data = polygons()
    data["stratum"][0]["polygon"] = [[0, 21.0], [10, 21.0], [30, 10.0], [50, 10.0], [50, 6.0],
                                     [0, 15.0]]
    with pytest.raises(SectionError, match=r"stratum 1 \('Fill'\): polygon rises above the ground"):
        section_from_dict(data)


def test_self_intersecting_polygon_is_refused():
    data = polygons()
    data["stratum"][1]["polygon"] = [[0, 15.0], [50, 0.0], [50, 6.0], [0, 0.0]]
    with pytest.raises(SectionError, match=r"stratum 2 \('Clay'\): polygon is not a simple"):
        section_from_dict(data)


def test_mixed_strata_forms_are_refused():
    data = polygons()
    data["stratum"][1] = {"material": "Clay"}
    with pytest.raises(SectionError, match="strata mix `bottom` and `polygon` forms"):
        section_from_dict(data)


def test_direct_construction_is_validated_too():
    with pytest.raises(SectionError, match=r"material 'Sand': friction_angle = 90.0 deg"):
        Material("Sand", unit_weight=19.0, friction_angle=90.0)
    with pytest.raises(SectionError, match="give either bottom or polygon, not both"):
        Stratum("Sand", bottom=[[0, 1.0], [1, 1.0]], polygon=[[0, 0.0], [1, 0.0], [1, 1.0]])
    with pytest.raises(SectionError, match=r"no \[\[stratum\]\] given"):
        Section("X", "x", [[0, 1.0], [1, 0.0]], (Material("Sand", 19.0, friction_angle=30.0),),
                ())


def test_arrays_of_a_section_are_read_only():
    section = section_from_dict(layered())
    with pytest.raises(ValueError, match="read-only"):
        section.ground[0, 1] = 99.0
