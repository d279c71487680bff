"""The PDF report: written, the expected pages, text extractable (pdftotext of poppler-utils)
and holding the factors of safety stored in the store, the caution on every page."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from datetime import timedelta

import numpy as np
import pytest
from click.testing import CliRunner

from tests.watch.board_fixtures import CIRCLE, NOW, make_workspace
from solver.slicing import slice_surface
from watch.sections import load_section
from watch.caution import CAUTION
from watch.cli import main
from watch.errors import UserError
from watch.report import build_report

PDFTOTEXT = shutil.which("pdftotext")
PDFINFO = shutil.which("pdfinfo")
needs_poppler = pytest.mark.skipif(
    PDFTOTEXT is None or PDFINFO is None,
    reason="pdftotext/pdfinfo (Debian package poppler-utils) not installed: "
    "apt-get install -y poppler-utils",
)

#: Inputs, parameters, water lines, methods, slice table, plots, alerts: one page each for the
#: fixture (30 slices and two alerts fit on their pages).
EXPECTED_PAGES = [
    "1. Inputs",
    "2. Parameters and provenance",
    "3. Water lines used",
    "4. Factor of safety of the critical surface by every method",
    "5. Slice table of the governing method",
    "6. Plots",
    "7. Alerts and inspections in the period",
]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    root = tmp_path_factory.mktemp("report") / "ws"
    workspace = make_workspace(root)
    result = build_report(workspace, "S-1", NOW - timedelta(days=30), NOW, NOW,
                          root / "reports" / "s1.pdf")
    return workspace, result


def _text_pages(path) -> list[str]:
    text = subprocess.run([PDFTOTEXT, "-layout", str(path), "-"], check=True,
                          capture_output=True, text=True).stdout
    return text.split("\f")[:-1]  # pdftotext ends every page with a form feed


def _stored(workspace, assessment_id) -> tuple[float, list[dict]]:
    with workspace.open_store(read_only=True) as store:
        row = store.conn.execute("SELECT fos, fos_by_method_json FROM assessments WHERE id = ?",
                                 (assessment_id,)).fetchone()
    return row[0], json.loads(row[1])


def test_report_reports_the_lowest_factor_of_safety_of_the_period(report):
    workspace, result = report
    with workspace.open_store(read_only=True) as store:
        lowest = store.conn.execute(
            "SELECT id, fos FROM assessments WHERE section_id = 'S-1' ORDER BY fos LIMIT 1"
        ).fetchone()
    assert result.assessment_id == lowest[0]
    assert result.stored_fos == pytest.approx(lowest[1], rel=1e-12)
    assert result.page_titles == EXPECTED_PAGES


@needs_poppler
def test_pdf_has_the_expected_pages_with_the_caution_on_each(report):
    _, result = report
    info = subprocess.run([PDFINFO, str(result.path)], check=True, capture_output=True, text=True).stdout
    assert int(re.search(r"^Pages:\s+(\d+)", info, re.M).group(1)) == len(EXPECTED_PAGES)
    pages = _text_pages(result.path)
    assert len(pages) == len(EXPECTED_PAGES)
    for number, (page, title) in enumerate(zip(pages, EXPECTED_PAGES), start=1):
        flat = " ".join(page.split())
        assert title in flat, number
        assert f"page {number} of {len(EXPECTED_PAGES)}" in flat
        assert " ".join(CAUTION.split()) in flat, number


@needs_poppler
def test_pdf_text_holds_the_stored_factors_of_safety_of_every_method(report):
    workspace, result = report
    stored_fos, by_method = _stored(workspace, result.assessment_id)
    methods_page = " ".join(_text_pages(result.path)[3].split())
    # The factor of safety is printed to 0.01 (watch.formatting.DIGITS).
    assert f"Stored factor of safety: {stored_fos:.2f}" in methods_page
    assert len(by_method) == 5
    for entry in by_method:
        # The stored value, and the re-run on the stored inputs, which must agree.
        assert re.search(rf"{entry['method']}\S* .*?{entry['fos']:.2f}", methods_page), entry
        assert result.fos_by_method[entry["method"]] == pytest.approx(entry["fos"], rel=1e-9)
    assert "Re-run governing method minus stored value: +0.000" in methods_page


@needs_poppler
def test_pdf_slice_table_has_one_row_per_active_slice(report):
    workspace, result = report
    section = load_section(workspace.root / "sections" / "first.toml")
    with workspace.open_store(read_only=True) as store:
        points = json.loads(store.conn.execute(
            "SELECT points_json FROM water_lines WHERE assessment_id = ?", (result.assessment_id,)
        ).fetchone()[0])
    slices = slice_surface(section.with_water_lines({"clay": points}), CIRCLE, 30)
    page = _text_pages(result.path)[4]
    rows = [line for line in page.splitlines() if re.match(r"\s*\d+\s+-?\d+\.\d\d\s", line)]
    assert len(rows) == int(slices.active[0].sum())
    # First row: the weight of the first active slice as the solver computed it [kN/m].
    first = float(slices.weight[0, slices.active[0]][0])
    assert rows[0].split()[5] == f"{first:.1f}"


def test_report_period_must_not_end_before_it_starts(report):
    workspace, _ = report
    with pytest.raises(UserError, match="report period ends .* before it starts"):
        build_report(workspace, "S-1", NOW, NOW - timedelta(days=1), NOW)


def test_report_of_an_unknown_section_names_the_known_ones(report):
    workspace, _ = report
    with pytest.raises(UserError, match=r"section 'X-9' is not in site.toml or the store \(known: S-1, S-2\)"):
        build_report(workspace, "X-9", NOW - timedelta(days=1), NOW, NOW)


def test_report_of_a_section_without_assessments_still_writes_every_page(report):
    workspace, _ = report
    result = build_report(workspace, "S-2", NOW - timedelta(days=30), NOW, NOW,
                          workspace.root / "reports" / "s2.pdf")
    assert result.path.is_file()
    assert result.assessment_id is None
    assert result.page_titles == EXPECTED_PAGES


def test_report_command_json(report):
    workspace, _ = report
    pdf = workspace.root / "reports" / "cli.pdf"
    outcome = CliRunner().invoke(main, ["report", "S-1", "-w", str(workspace.root), "--from",
                                        "2025-12-21T06:00", "--to", "2026-01-20T06:00", "--pdf",
                                        str(pdf), "--json"])
    assert outcome.exit_code == 0, outcome.output
    data = json.loads(outcome.output)
    assert data["pages"] == len(EXPECTED_PAGES)
    assert pdf.read_bytes()[:5] == b"%PDF-"


def test_the_rerun_draws_lines_through_heads_without_the_inclination_correction(tmp_path):
    # The methods page re-runs the stored inputs as the cycle used them: a line through
    # piezometer heads holds pressure heads at the tips, so no cos^2 (Skempton and DeLory
    # 1957); a design line keeps the section's own setting.
    from solver.constants import GAMMA_W
    from watch.report import rerun_section
    from watch.groundwater import SOURCE_DESIGN_LINE, SOURCE_INSTRUMENTS

    workspace = make_workspace(tmp_path / "ws")
    section = load_section(workspace.root / "sections" / "first.toml")
    clay = next(w for w in section.water_lines if w.name == "clay").points.copy()
    clay[:, 1] += 0.5 * (clay[:, 0] - clay[0, 0]) / (clay[-1, 0] - clay[0, 0])  # sloping
    corrected = section.with_water_lines({"clay": clay}, {"clay": True})
    measured = rerun_section(corrected, {"clay": clay}, {"clay": SOURCE_INSTRUMENTS})
    design = rerun_section(corrected, {"clay": clay}, {"clay": SOURCE_DESIGN_LINE})
    assert not next(w for w in measured.water_lines if w.name == "clay").inclination_correction
    assert next(w for w in design.water_lines if w.name == "clay").inclination_correction
    slices = slice_surface(measured, CIRCLE, 30)
    active = slices.active[0]
    clay_index = [m.water for m in measured.materials].index("clay")
    active &= slices.base_material[0] == clay_index  # bases in a material on the clay line
    assert active.any()
    x, y = slices.x_mid[0, active], slices.y_base[0, active]
    head = np.interp(x, clay[:, 0], clay[:, 1])
    u = slices.pore_pressure[0, active]
    below = head > y
    assert below.any()
    # u = gamma_w (h - y) at the base of every slice under the line (Skempton and DeLory 1957).
    np.testing.assert_allclose(u[below], GAMMA_W * (head - y)[below], rtol=1e-9)
