"""`slipwatch analyse` in-process (click's runner) on small section files in tmp_path."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from solver.methods import METHOD_NAMES, WARNING_FLAGS
from watch.analysis import analyse_section
from watch.cli import main

# An invented cutting: till over a thin weak layer over mudstone, a water line, a base.
SECTION = """
[section]
id = "DEMO-7"
name = "Invented cutting, ch. 70 m"

[ground]
points = [[0, 20.0], [30, 20.0], [50, 10.0], [80, 10.0]]

[base]
points = [[0, 2.0], [80, 2.0]]

[[material]]
name = "Till"
model = "drained"
unit_weight = 19.0
unit_weight_saturated = 20.0
cohesion = 5.0
friction_angle = 28.0
water = "main"

[[material]]
name = "Weak clay"
model = "drained"
unit_weight = 18.0
cohesion = 0.0
friction_angle = 15.0
water = "main"

[[material]]
name = "Mudstone"
model = "drained"
unit_weight = 22.0
cohesion = 50.0
friction_angle = 40.0
water = "main"

[[stratum]]
material = "Till"
bottom = [[0, 9.0], [80, 7.0]]

[[stratum]]
material = "Weak clay"
bottom = [[0, 8.0], [80, 6.0]]

[[stratum]]
material = "Mudstone"

[[water_line]]
name = "main"
points = [[0, 16.0], [50, 10.5], [80, 10.5]]

[search]
method = "bishop_simplified"
min_depth = 1.0
slices = 30
"""


@pytest.fixture
def section_file(tmp_path):
    path = tmp_path / "demo_7.toml"
    path.write_text(SECTION)
    return path


def test_analyse_prints_every_method_and_the_critical_surface(section_file):
    result = CliRunner().invoke(main, ["analyse", str(section_file)])
    assert result.exit_code == 0, result.output
    for name in METHOD_NAMES:
        assert name in result.output
    assert "(governing)" in result.output
    assert "Critical surface" in result.output and "circle centre" in result.output
    assert "scarp at x =" in result.output and "toe at x =" in result.output
    assert "Caution" in result.output


def test_analyse_json_parses_and_matches_the_library(section_file):
    result = CliRunner().invoke(main, ["analyse", str(section_file), "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["section_id"] == "DEMO-7"
    assert data["method"] == "bishop_simplified"
    assert {m["method"] for m in data["fos_by_method"]} == set(METHOD_NAMES)
    surface = data["critical_surface"]
    assert surface["kind"] == "circle"
    assert 0 <= surface["scarp_x_m"] < surface["toe_x_m"] <= 80
    assert surface["depth_m"] >= 1.0  # [search] min_depth
    library = analyse_section(section_file)
    assert data["fos"] == pytest.approx(library.fos, rel=1e-12)
    governing = next(m for m in data["fos_by_method"] if m["method"] == "bishop_simplified")
    # The critical surface re-solved on its own gives the search's value.
    assert governing["fos"] == pytest.approx(data["fos"], rel=1e-9)
    assert sum(data["search"]["rejected"].values()) > 0
    # Warnings travel as the names of the result's flags, the same as the library's.
    for method in data["fos_by_method"]:
        expected = next(m for m in library.by_method if m.method == method["method"]).warnings
        assert method["warnings"] == list(expected)
        assert set(method["warnings"]) <= set(WARNING_FLAGS)


def test_analyse_method_option_overrides_the_section(section_file):
    result = CliRunner().invoke(main, ["analyse", str(section_file), "--method", "spencer",
                                       "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["method"] == "spencer"
    assert any("spencer" in stage for stage in data["search"]["stages"])


# An invented embankment: 6 m of fill, a 1V:4H west (left) face and a 1V:2H east (right) face,
# the ground ends 0.3 m apart (the case of the review in issue 16).
EMBANKMENT = """
[section]
id = "DEMO-EMB"
name = "Invented embankment"

[ground]
points = [[0, 0.0], [30, 0.0], [54, 6.0], [74, 6.0], [86, 0.0], [116, 0.3]]

[[material]]
name = "Fill"
model = "drained"
unit_weight = 19.0
cohesion = 5.0
friction_angle = 25.0
water = "none"

[[stratum]]
material = "Fill"

[search]
method = "bishop_simplified"
min_depth = 1.0
"""


def test_analyse_reports_the_critical_surface_of_each_face(tmp_path):
    path = tmp_path / "emb.toml"
    path.write_text(EMBANKMENT)
    runner = CliRunner()
    data = json.loads(runner.invoke(main, ["analyse", str(path), "--json"]).output)
    faces = {f["face"]: f for f in data["faces"]}
    assert set(faces) == {"left", "right"}
    # The steep right (east) face governs; the flat left face is reported beside it.
    assert faces["right"]["governing"] and not faces["left"]["governing"]
    assert data["fos"] == faces["right"]["fos"] < faces["left"]["fos"]
    assert faces["right"]["critical_surface"]["toe_x_m"] > 74
    text = runner.invoke(main, ["analyse", str(path)]).output
    assert "Critical surface of each face:" in text
    assert "right face (slides towards +x): F = " in text and "(governs)" in text
    # [search] face restricts the search to one face; the result is that face's own.
    left_only = tmp_path / "left.toml"
    left_only.write_text(EMBANKMENT + 'face = "left"\n')
    left = json.loads(runner.invoke(main, ["analyse", str(left_only), "--json"]).output)
    assert [f["face"] for f in left["faces"]] == ["left"]
    assert left["fos"] == pytest.approx(faces["left"]["fos"], rel=5e-3)


def test_the_centre_lattice_is_set_in_the_section_file_and_its_warning_names_the_keys(
        section_file):
    narrow = section_file.read_text() + ("centre_x_range = [30.0, 36.0]\n"
                                         "centre_y_range = [20.0, 26.0]\ncentres = [4, 4]\n"
                                         "tangent_levels = 6\n")
    section_file.write_text(narrow)
    result = CliRunner().invoke(main, ["analyse", str(section_file), "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["search"]["trials"] >= 4 * 4 * 6
    assert data["search"]["best_centre_on_lattice_edge"] == ["right"]
    edge = [n for n in data["search"]["notes"] if "edge of the centre lattice" in n]
    assert len(edge) == 1
    assert "(x 30.00 to 36.00 m, y 20.00 to 26.00 m)" in edge[0]
    assert "[search] centre_x_range and centre_y_range" in edge[0]


def test_analyse_plot_writes_a_png(section_file, tmp_path):
    plot = tmp_path / "demo_7.png"
    result = CliRunner().invoke(main, ["analyse", str(section_file), "--plot", str(plot)])
    assert result.exit_code == 0, result.output
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert f"Plot written to {plot}" in result.output
    json_run = CliRunner().invoke(main, ["analyse", str(section_file), "--plot", str(plot),
                                         "--json"])
    assert json.loads(json_run.output)["plot"] == str(plot)


def test_missing_file_is_one_line_and_exit_1(tmp_path):
    missing = tmp_path / "nothing.toml"
    result = CliRunner().invoke(main, ["analyse", str(missing)])
    assert result.exit_code == 1
    assert result.output.strip().splitlines() == [
        f"slipwatch: error: {missing}: section file not found"
    ]
    assert "Traceback" not in result.output


def test_bad_section_is_one_line_and_exit_1(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(SECTION.replace("friction_angle = 28.0", "friction_angle = 95.0"))
    result = CliRunner().invoke(main, ["analyse", str(bad)])
    assert result.exit_code == 1
    lines = result.output.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("slipwatch: error: ")
    assert "95" in lines[0]
    assert "Traceback" not in result.output


def test_section_without_any_valid_surface_is_one_line_and_exit_1(tmp_path):
    # No slide in a 10 m high slope is 50 m deep: every admissible circle is filtered out,
    # and the search says how many and why.
    deep = tmp_path / "deep.toml"
    deep.write_text(SECTION.replace("min_depth = 1.0", "min_depth = 50.0"))
    result = CliRunner().invoke(main, ["analyse", str(deep)])
    assert result.exit_code == 1
    lines = result.output.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("slipwatch: error: no valid slip surface among")
    assert "shallower than min_depth" in lines[0]


def test_analyse_help_has_an_example():
    result = CliRunner().invoke(main, ["analyse", "--help"])
    assert result.exit_code == 0
    assert "Example" in result.output
    assert np.all([name in result.output for name in ("--method", "--json", "--plot")])
