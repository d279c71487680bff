"""slipwatch's interface uses names of its own (issue 17): the two circle-search stages are the
"centre lattice" and the "scarp-to-toe band", and the ends of a slip are its scarp and toe
(Cruden and Varnes 1996). The labels these replaced read as the option names of an existing
slope-stability program; this test fails if they come back anywhere a user reads them: the
README and docs, the CLI help of every command, `slipwatch analyse` (text and JSON), and the
docstrings and labels of the search API."""

import inspect
import json
import re
from pathlib import Path

from click.testing import CliRunner

import solver
import solver.search
import solver.surfaces
from solver.search import SearchSettings, search_critical_surface

from tests.test_cli import all_commands
from tests.watch.test_analyse_cli import SECTION
from watch.cli import main
from watch.sections import load_section

ROOT = Path(__file__).resolve().parents[1]

#: The replaced labels, in any spelling (spaces, hyphens or underscores; any case).
OLD_LABELS = re.compile(r"grid[\s_-]+and[\s_-]+radius|entry[\s_-]+(and[\s_-]+)?exit",
                        re.IGNORECASE)


def _old_labels(text: str) -> list[str]:
    return [m.group(0) for m in OLD_LABELS.finditer(text)]


def test_the_pattern_catches_the_old_labels():
    # The check must be able to fail: each old spelling is caught, the new names are not.
    for old in ("grid and radius", "Grid-and-radius", "grid_and_radius", "entry and exit",
                "Entry-and-exit", "entry_exit"):
        assert _old_labels(old) == [old]
    assert _old_labels("centre lattice; scarp-to-toe band; scarp and toe") == []


def test_docs_do_not_use_the_old_stage_labels():
    files = [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted((ROOT / "docs").rglob("*.md")),
             *sorted((ROOT / "config").rglob("*.toml"))]
    found = {str(p.relative_to(ROOT)): _old_labels(p.read_text(encoding="utf-8")) for p in files}
    assert {k: v for k, v in found.items() if v} == {}


def test_cli_help_does_not_use_the_old_stage_labels():
    runner = CliRunner()
    for path, _ in [((), main), *all_commands(main)]:
        result = runner.invoke(main, [*path, "--help"])
        assert result.exit_code == 0, (path, result.output)
        assert _old_labels(result.output) == [], path


def test_analyse_output_and_json_do_not_use_the_old_labels(tmp_path):
    path = tmp_path / "demo_7.toml"
    path.write_text(SECTION, encoding="utf-8")
    runner = CliRunner()
    text = runner.invoke(main, ["analyse", str(path)])
    data = runner.invoke(main, ["analyse", str(path), "--json"])
    assert text.exit_code == 0 and data.exit_code == 0, text.output + data.output
    assert "Search: centre lattice" in text.output
    assert _old_labels(text.output) == []
    assert _old_labels(data.output) == []
    assert json.loads(data.output)["search"]["stages"][0].startswith("centre lattice")


def test_both_search_stages_and_the_api_docstrings_use_the_new_names(tmp_path):
    path = tmp_path / "demo_7.toml"
    path.write_text(SECTION, encoding="utf-8")
    section = load_section(path)
    band = search_critical_surface(section, SearchSettings(), circles="scarp-to-toe band",
                                   refine=False)
    assert band.stages[0].startswith("scarp-to-toe band")
    record = json.dumps({"stages": band.stages, "rejected": band.rejected,
                         "filtered": band.filtered, "notes": band.notes})
    assert _old_labels(record) == []
    for module in (solver, solver.search, solver.surfaces):
        names = [n for n in getattr(module, "__all__", [])]
        assert [n for n in names if _old_labels(n)] == []
        docs = [inspect.getdoc(module) or ""] + [inspect.getdoc(getattr(module, n)) or ""
                                                 for n in names]
        assert _old_labels("\n".join(docs)) == [], module.__name__
