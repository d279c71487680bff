"""The engineering report of one section for a period: a multi-page PDF for the file.

Pages, in order (A4 portrait, the caution and "page i of n" at the foot of every page):

1. Inputs: site, section, period, the store it was made from, instruments and their readings in
   the period, rain at the section's gauge, feed files and rejected rows, assessments.
2. Parameters and provenance: the parameter version of the reported assessment, every version
   used in the period, back-analyses that calibrated them.
3. Water lines used by the reported assessment, with the readings behind them, and the
   section drawing with its critical slip surface.
4. Factor of safety of the critical surface by every method, re-run on the stored section
   version, water lines and surface, beside the stored value.
5. Slice table of the governing method (more pages when the surface has many slices).
6. Plots: factor of safety through the period with trigger levels and rain; piezometric heads.
7. Alerts and inspection requests of the period (more pages when there are many).

The reported assessment is the one with the lowest factor of safety in the period: the moment
the file needs to show. The text is real PDF text (TrueType fonts), so it can be searched and
extracted.
"""

from __future__ import annotations

import json
import math
import tempfile
from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from watch.board import (
    AssessmentRecord,
    SectionStatus,
    _fell_back,
    _Reader,
    _when,
    collect_status,
    compact,
    critical_and_alternatives,
    draw_fos_figure,
    draw_heads_figure,
    draw_section_figure,
    section_of,
    water_lines_of,
)
from watch import assessment_status
from watch.alert_history import alert_history, alerts_as_at
from watch.caution import CAUTION
from watch.formatting import number_text, short_time
from watch.errors import UserError
from watch.lifecycle import state_history
from watch.store import utc_text
from watch.waterlines import section_with_stored_lines

__all__ = ["ReportResult", "build_report", "default_report_path", "LINES_PER_PAGE"]

#: Lines of monospaced text per A4 page at the report's type size.
LINES_PER_PAGE = 62
_PAGE_SIZE_IN = (8.27, 11.69)  # A4
_TEXT_SIZE = 7.6
_LINE_STEP = 0.0138  # figure fraction per line of text on A4
#: Type size of the wide slice table [pt].
_SMALL_TEXT_SIZE = 6.4
#: Width of the text block [pt] and the advance of a monospaced character [em].
_TEXT_WIDTH_PT = 0.88 * _PAGE_SIZE_IN[0] * 72
_MONO_ADVANCE_EM = 0.602


def _characters(size: float) -> int:
    """Characters of monospaced text of ``size`` [pt] that fit across the text block."""
    return int(_TEXT_WIDTH_PT / (_MONO_ADVANCE_EM * size))


def _wrap(lines: list[str], width: int) -> list[str]:
    """Lines longer than ``width`` broken into indented continuation lines (tables are already
    made to fit by :func:`_columns`)."""
    import textwrap

    out = []
    for line in lines:
        if len(line) <= width:
            out.append(line)
            continue
        lead = line[: len(line) - len(line.lstrip())]
        out += textwrap.wrap(line, width, subsequent_indent=lead + "    ", break_on_hyphens=False)
    return out


@dataclass(frozen=True)
class ReportResult:
    path: Path
    section_id: str
    start: datetime
    end: datetime
    page_titles: list[str]
    assessment_id: int | None
    stored_fos: float | None
    fos_by_method: dict[str, float | None]
    governing_method: str | None

    @property
    def pages(self) -> int:
        return len(self.page_titles)

    def to_dict(self) -> dict:
        return {
            "pdf": str(self.path),
            "section_id": self.section_id,
            "from_utc": utc_text(self.start),
            "to_utc": utc_text(self.end),
            "pages": self.pages,
            "page_titles": self.page_titles,
            "assessment_id": self.assessment_id,
            "stored_fos": self.stored_fos,
            "governing_method": self.governing_method,
            "fos_by_method": self.fos_by_method,
            "caution": CAUTION,
        }


def default_report_path(workspace, section_id: str, start: datetime, end: datetime) -> Path:
    from watch.board import section_page_name

    stem = section_page_name(section_id)[len("section-"):-len(".html")]
    return Path(workspace.root) / "reports" / (
        f"report_{stem}_{start:%Y%m%dT%H%M}_{end:%Y%m%dT%H%M}.pdf"
    )


def build_report(
    workspace,
    section_id: str,
    start: datetime,
    end: datetime,
    now: datetime,
    path: Path | None = None,
    *,
    store=None,
) -> ReportResult:
    """Write the PDF report of ``section_id`` for the period [start, end] (UTC) as at ``now``.

    Raises UserError for an unknown section or a period that ends before it starts.
    """
    for label, moment in (("start", start), ("end", end), ("now", now)):
        if moment.tzinfo is None:
            raise UserError(f"report {label} time {moment!r} has no time zone")
    start, end = start.astimezone(timezone.utc), end.astimezone(timezone.utc)
    if end <= start:
        raise UserError(f"report period ends ({utc_text(end)}) before it starts ({utc_text(start)})")
    if store is None:
        with workspace.open_store(read_only=True) as opened:
            return build_report(workspace, section_id, start, end, now, path, store=opened)
    status = collect_status(workspace, store, now)
    section = next((s for s in status.sections if s.id == section_id), None)
    if section is None:
        known = ", ".join(s.id for s in status.sections) or "none"
        raise UserError(f"section {section_id!r} is not in site.toml or the store (known: {known})")
    path = Path(path) if path is not None else default_report_path(workspace, section_id, start, end)
    if not path.parent.is_dir():
        raise UserError(f"folder {path.parent} does not exist; create it or choose another --pdf")
    content = _Content.gather(workspace, store, status, section, start, end)
    return _write_pdf(content, path)


# --------------------------------------------------------------------------------------------
# What goes in


@dataclass
class _Content:
    workspace: object
    store: object
    site: object
    section: SectionStatus
    start: datetime
    end: datetime
    history: list[AssessmentRecord]
    reported: AssessmentRecord | None
    drawing: object
    drawing_source: str
    water_lines: list[dict]
    water_points: dict
    water_source: str
    methods: list[dict]
    governing: dict | None
    slice_rows: list[list[str]]
    method_note: str
    alerts: list[dict]  # alert events of the period (watch.alert_history)
    inspections: list[dict]
    open_at_end: list[dict] = field(default_factory=list)  # alerts still open at the end of the period
    service: list = field(default_factory=list)  # service states set up to the end (watch.lifecycle)

    @classmethod
    def gather(cls, workspace, store, site, section, start, end) -> _Content:
        reader = _Reader(store)
        history = reader.assessments(section.id, start, end)
        # The lowest factor of safety on live readings: one on the design water lines is not
        # the slope's state and is reported only when the period holds nothing else.
        assessed = [a for a in history if a.usable]
        reported = min(assessed, key=lambda a: a.fos) if assessed else (history[-1] if history else None)
        drawing, drawing_source = section_of(workspace, store, section, reported)
        water_points, water_source = water_lines_of(store, drawing, reported)
        stored_lines = reader.water_lines(reported.id) if reported else []
        sources = {row["line_name"]: row.get("source") for row in stored_lines}
        methods, governing, slice_rows, note = _every_method(
            rerun_section(drawing, water_points, sources), reported)
        return cls(
            workspace=workspace, store=store, site=site, section=section, start=start, end=end,
            history=history, reported=reported, drawing=drawing, drawing_source=drawing_source,
            water_lines=stored_lines,
            water_points=water_points, water_source=water_source, methods=methods,
            governing=governing, slice_rows=slice_rows, method_note=note,
            alerts=alert_history(store, start, end, section.id),
            open_at_end=[a for a in alerts_as_at(store, end, section.id) if a["state"] in ("pending", "firing")],
            service=state_history(store, section.id, end),
            inspections=reader.inspections_between(section.id, start, end),
        )


def rerun_section(section, water_points: dict, sources: dict):
    """The section with the assessment's water lines, drawn as the cycle drew them: a line
    through piezometer heads (measured or model-estimated) without the inclination correction
    (watch.waterlines.section_with_stored_lines), a design line with the section's own setting.
    ``sources``: {line name: stored source}; None for the section itself without lines."""
    if section is None or not water_points:
        return section
    return section_with_stored_lines(section, [
        {"line_name": name, "points": points, "source": sources.get(name)}
        for name, points in water_points.items()])


def _every_method(current, assessment: AssessmentRecord | None):
    """Re-run every method on the stored critical surface: (rows, governing row, slice table
    rows, note)."""
    from solver.errors import SolverError
    from solver.search import SearchSettings, every_method
    from solver.slicing import slice_surface

    if assessment is None:
        return [], None, [], "No assessment in the period: nothing to re-run."
    if current is None:
        return [], None, [], "The section's parameters could not be read: nothing to re-run."
    surface, _ = critical_and_alternatives(assessment)
    if surface is None:
        return [], None, [], ("The assessment stored no slip surface, so the methods cannot be "
                              "re-run on it; only the stored factor of safety is reported.")
    options = current.search or {}
    governing = assessment.method or options.get("method", "bishop_simplified")
    try:
        settings = SearchSettings(method=governing, n_slices=int(options.get("slices", 30)))
        stored = assessment.surface if isinstance(assessment.surface, dict) else {}
        direction = stored.get("critical", stored).get("direction")
        slices = slice_surface(current, surface, settings.n_slices, direction=direction)
        results = every_method(slices, settings)
    except (SolverError, ValueError) as error:
        return [], None, [], f"Re-running the methods failed: {error}"
    rows = []
    for name, result in results.items():
        fos = float(result.fos[0])
        rows.append({
            "method": name, "fos": fos if math.isfinite(fos) else None,
            "converged": bool(result.converged[0]), "admissible": bool(result.admissible[0]),
            "iterations": int(result.iterations[0]), "message": result.message[0],
        })
    governing_row = next((r for r in rows if r["method"] == governing), None)
    table = []
    if governing in results:
        table = _slice_table(slices, results[governing], current)
    active = int(np.asarray(slices.active[0], dtype=bool).sum())
    note = ("Re-run on the stored parameter version, water lines and critical surface of the "
            f"assessment: {settings.n_slices} slices asked for, {active} after the splits where "
            "strata and water lines cross the base.")
    return rows, governing_row, table, note


def _slice_table(slices, result, section) -> list[list[str]]:
    one = result.surface(0)
    active = np.asarray(slices.active[0], dtype=bool)
    sign = -1.0 if slices.mirrored else 1.0
    x_mid = sign * 0.5 * (slices.x_left[0, active] + slices.x_right[0, active])
    names = [m.name for m in section.materials]
    rows = []
    for i in range(int(active.sum())):
        material = int(slices.base_material[0, active][i])
        rows.append([
            f"{i + 1}", f"{x_mid[i]:.2f}", f"{slices.width[0, active][i]:.2f}",
            f"{math.degrees(slices.alpha[0, active][i]):.1f}", f"{slices.y_base[0, active][i]:.2f}",
            f"{slices.weight[0, active][i]:.1f}", f"{slices.cohesion[0, active][i]:.1f}",
            f"{math.degrees(math.atan(slices.tan_phi[0, active][i])):.1f}",
            f"{slices.pore_pressure[0, active][i]:.1f}", f"{one.normal_force[i]:.1f}",
            f"{one.shear_force[i]:.1f}",
            "-" if not math.isfinite(one.m_alpha[i]) else f"{one.m_alpha[i]:.3f}",
            names[material] if 0 <= material < len(names) else "-",
        ])
    return rows


# --------------------------------------------------------------------------------------------
# Pages


def _columns(headers: list[str], rows: list[list], width: int | None = None) -> list[str]:
    """Monospaced table lines that fit the page without cutting a value: when the natural
    widths do not fit, the widest columns are narrowed (never below their longest word) and
    their cells wrap onto continuation lines. Stored UTC times are shown as
    "YYYY-MM-DD HH:MM" (the headings say UTC)."""
    import textwrap

    width = width or _characters(_TEXT_SIZE) - 2  # tables are indented by two spaces
    cells = [[_cell_text(c) for c in row] for row in rows]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    floors = [max([len(w) for h in [headers[i]] for w in h.split()]
                  + [len(w) for r in cells for w in r[i].split()] + [1])
              for i in range(len(headers))]
    while sum(widths) + 2 * (len(widths) - 1) > width:
        narrowable = [i for i in range(len(widths)) if widths[i] > floors[i]]
        if not narrowable:
            break  # even the longest words do not fit: the page's wrap takes over
        widest = max(narrowable, key=lambda i: widths[i])
        widths[widest] -= 1

    def lines(values):
        wrapped = [textwrap.wrap(v, w, break_long_words=False, break_on_hyphens=False) or [""]
                   for v, w in zip(values, widths)]
        return ["  ".join((parts[k] if k < len(parts) else "").ljust(w)
                          for parts, w in zip(wrapped, widths)).rstrip()
                for k in range(max(len(parts) for parts in wrapped))]

    return lines(headers) + ["  ".join("-" * w for w in widths)] + [l for r in cells for l in lines(r)]


def _cell_text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return number_text(value)
    return short_time(str(value))


def _inputs_lines(c: _Content) -> list[str]:
    s, site = c.section, c.site
    lines = [
        f"Site: {site.site_name} ({site.site_id}), owner {site.owner}",
        f"Section: {s.id}" + (f" - {s.name}" if s.name else "") + (f", file {s.file}" if s.file else ""),
        f"Period: {_when(c.start)} to {_when(c.end)}",
        f"Generated: {_when(site.now, site.time_zone)} from store {site.store_path.resolve()} "
        f"(schema version {site.schema_version})",
        f"State at {_when(site.now, site.time_zone)}: {s.level.word.upper()}"
        + (f" ({s.level.detail})" if s.level.detail else ""),
    ]
    if c.service:
        lines += ["", "Service state of the section (set by engineers)"]
        lines += [f"  {item.time_utc}  {item.words} (set by {item.by}: {item.note})" for item in c.service]
    lines += ["", "Assessments in the period"]
    assessed = [a for a in c.history if a.usable]
    if not c.history:
        lines.append("  none stored")
    else:
        design = [a for a in c.history if a.on_design_lines]
        others = Counter(assessment_status.status_words(a.status) for a in c.history
                         if not a.usable and not a.on_design_lines)
        lines += [
            f"  {len(c.history)} assessments: {len(assessed)} on live readings, {len(design)} on the "
            "design water lines (no live readings; left out of the figures below)"
            + "".join(f", {n} {words}" for words, n in others.items()),
            f"  first {_when(c.history[0].time)}, last {_when(c.history[-1].time)}",
        ]
        if assessed:
            fos = [a.fos for a in assessed]
            lines.append(f"  factor of safety on live readings: lowest {min(fos):.2f}, highest "
                         f"{max(fos):.2f}, last {assessed[-1].fos:.2f} ({assessed[-1].method})")
        for a in design:
            lines.append(f"  on the design water lines at {_when(a.time)}: {_fos2(a.fos)} "
                         "(not a result of the readings)")
    if c.reported is not None:
        r = c.reported
        lines += ["", "Reported assessment (lowest factor of safety on live readings in the period)",
                  f"  id {r.id} at {_when(r.time)}: factor of safety {_fos2(r.fos)} by {r.method}, "
                  + _result_words(r)]
    reader = _Reader(c.store)
    rows = []
    for item in s.instruments:
        counts = reader.all(
            f"SELECT COUNT(*) AS n, COALESCE(SUM(quality = 'ok'), 0) AS ok, MIN(time_utc) AS first, "
            f"MAX(time_utc) AS last FROM {item['table']} WHERE {item['column']} = ? "
            "AND time_utc >= ? AND time_utc <= ?",
            (item["id"], utc_text(c.start), utc_text(c.end)),
        )[0]
        rows.append([item["id"], item["kind"].replace("_", " "), counts["n"], counts["ok"],
                     counts["n"] - counts["ok"], counts["first"] or "-", counts["last"] or "-"])
    lines += ["", "Instruments and their readings in the period"]
    lines += (["  " + l for l in _columns(
        ["Instrument", "Kind", "Readings", "Quality ok", "Flagged", "First (UTC)", "Last (UTC)"], rows)]
        if rows else ["  no instruments configured for this section"])
    if s.gauge_id:
        total = reader.rain_total(s.gauge_id, c.start, c.end)
        lines += ["", f"Rain at gauge {s.gauge_id} in the period: "
                  + ("no usable readings" if total is None else f"{total:.1f} mm")]
    files = c.store.files_with_readings([i["id"] for i in s.instruments], utc_text(c.start), utc_text(c.end))
    lines += ["", f"Feed files with readings of this section in the period: {len(files)}, with "
              f"{sum(f['rows_rejected'] for f in files)} rows rejected and "
              f"{sum(f['rows_flagged'] for f in files)} readings flagged (each rejected row is kept "
              "in the store with its file, line and reason)."]
    if files:
        lines += ["  " + l for l in _columns(
            ["File", "Ingested (UTC)", "Readings", "Rejected", "Flagged"],
            [[f["name"], f["ingested_utc"][:16].replace("T", " "), f["readings_in_period"],
              f["rows_rejected"], f["rows_flagged"]] for f in files])]
    if s.data_problems:
        lines += ["", "Data-quality problems now"] + [f"  - {p}" for p in s.data_problems]
    if site.notes:
        lines += ["", "Not in the store yet"] + [f"  - {n}" for n in site.notes]
    return lines


def _parameters_lines(c: _Content) -> list[str]:
    reader = _Reader(c.store)
    lines = []
    used = sorted({a.section_version_id for a in c.history if a.section_version_id is not None})
    version = None
    if c.reported is not None and c.reported.section_version_id is not None:
        version = reader.section_version(c.reported.section_version_id)
    lines.append(f"Section drawn and re-analysed from: {c.drawing_source}")
    if version is not None:
        lines += [f"Parameter version {version['version']} (id {version['id']}), recorded "
                  f"{short_time(version['created_utc'])} UTC", f"  provenance: {version['provenance']}",
                  f"  checksum: {version['checksum']}"]
    lines += ["", "Parameter versions used by the assessments of the period: "
              + (", ".join(str(v) for v in used) if used else "none recorded")]
    for version_id in used:
        v = reader.section_version(version_id)
        if v is not None:
            lines.append(f"  id {v['id']}: version {v['version']}, {short_time(v['created_utc'])} UTC, "
                         f"{v['provenance']}")
    if c.drawing is not None:
        rows = []
        for m in c.drawing.materials:
            drained = m.model == "drained"
            rows.append([m.name, m.model, number_text(m.unit_weight, "unit_weight"),
                         number_text(m.unit_weight_saturated, "unit_weight"),
                         number_text(m.cohesion, "cohesion") if drained else "-",
                         number_text(m.friction_angle, "friction_angle") if drained else "-",
                         "-" if drained else number_text(m.undrained_strength, "undrained_strength"),
                         m.water if m.ru is None else f"ru = {number_text(m.ru, 'ru')}"])
        lines += ["", "Materials"] + ["  " + l for l in _columns(
            ["Material", "Model", "gamma [kN/m3]", "gamma_sat [kN/m3]", "c' [kPa]", "phi' [deg]",
             "Su [kPa]", "Water"], rows)]
        lines += ["", f"Seismic coefficient kh = {c.drawing.kh:g}; surcharges: "
                  f"{len(c.drawing.surcharges)}; tension crack: "
                  + ("none" if c.drawing.crack is None else
                     f"depth {c.drawing.crack.depth:g} m")]
    lines += ["", "Calibrations of this section's parameters by back-analysis"]
    lines += ["  " + l for l in _columns(
        ["Version id", "Material", "Strength", "Case", "Failed (UTC)", "By", "Recorded (UTC)",
         "Checks overridden"],
        [[k.get("section_version_id"), k.get("material"), compact(k.get("strength")),
          k.get("case_id"), k.get("failed_utc"), k.get("calibrated_by"), k.get("created_utc"),
          k.get("override_reason") or "no"]
         for k in c.section.calibrations])] if c.section.calibrations else ["  none stored"]
    lines += [f"  Version id {k.get('section_version_id')} was stored although a check failed; "
              f"reason given: {k['override_reason']}"
              for k in c.section.calibrations if k.get("override_reason")]
    lines += ["", "Back-analyses of slips of this section"]
    lines += ["  " + l for l in _columns(
        ["Case", "Failed (UTC)", "Material", "Form", "Method", "Best fit", "Run (UTC)"],
        [[b.get("case_id"), b.get("failed_utc"), b.get("material"), b.get("form"),
          b.get("method"), compact(b.get("best")) or "none found", b.get("ran_utc")]
         for b in c.section.back_analyses])] if c.section.back_analyses else ["  none stored"]
    return lines


def _water_lines(c: _Content) -> list[str]:
    lines = [f"Source: {c.water_source}."]
    if not c.water_lines and c.water_points:
        lines += [f"  {name}: " + ", ".join(f"({x:.2f}, {y:.2f})" for x, y in points)
                  for name, points in c.water_points.items()]
    for row in c.water_lines:
        fallback = (f" - FALLBACK to {row.get('fallback')}: "
                    + (row.get("fallback_reason") or "no reason stored")) if _fell_back(row) else ""
        lines.append(f"Line '{row['line_name']}' at {short_time(row.get('time_utc'))} UTC, source "
                     f"{row.get('source', '')}{fallback}")
        points = row.get("points") or []
        lines.append("  points (x, y) [m]: " + ", ".join(
            f"({p[0]:.2f}, {p[1]:.2f})" for p in points[:14]) + (" ..." if len(points) > 14 else ""))
        readings = row.get("readings") or []
        if readings:
            lines += ["  " + l for l in _columns(
                ["Instrument", "Time (UTC)", "Head [m]", "Source file id", "Line"],
                [[r.get("instrument_id", r.get("instrument")), r.get("time_utc"),
                  number_text(r.get("head_m"), "head_m"),
                  r.get("source_file_id"), r.get("source_line")] for r in readings])]
    if c.reported is None:
        lines = ["No assessment in the period."]
    return lines


def _methods_lines(c: _Content) -> list[str]:
    r = c.reported
    if r is None:
        return ["No assessment in the period."]
    surface, _ = critical_and_alternatives(r)
    lines = [f"Assessment id {r.id} at {_when(r.time)}; governing method {r.method}.",
             f"Stored factor of safety: {_fos2(r.fos)}, {_result_words(r)}", ""]
    if surface is not None:
        if hasattr(surface, "radius"):
            lines.append(f"Critical surface: circle, centre ({surface.centre_x:.2f}, "
                         f"{surface.centre_y:.2f}) m, radius {surface.radius:.2f} m")
        else:
            lines.append(f"Critical surface: polyline of {len(surface.points)} vertices")
    lines += [c.method_note, ""]
    stored = {m.get("method"): m for m in _json_list(r.extra.get("fos_by_method_json"))}
    rerun = {m["method"]: m for m in c.methods}
    names = list(dict.fromkeys([*stored, *rerun]))
    if names:
        rows, notes = [], []
        for name in names:
            kept, again = stored.get(name, {}), rerun.get(name, {})
            message = again.get("message", kept.get("message", ""))
            if message:
                notes.append(f"[{len(notes) + 1}] {name}: {message}")
            rows.append([
                name + (" (governing)" if name == r.method else ""),
                _fos2(kept.get("fos")) if kept else "not stored",
                _fos2(again.get("fos")) if again else "not re-run",
                _yes(again.get("converged", kept.get("converged"))),
                _yes(again.get("admissible", kept.get("admissible"))),
                again.get("iterations", kept.get("iterations", "")),
                f"[{len(notes)}]" if message else "",
            ])
        lines += _columns(["Method", "Stored FoS [-]", "Re-run FoS [-]", "Converged",
                           "Admissible", "Iterations", "Note"], rows)
        if notes:
            lines += ["", "Notes of the methods:"] + notes
        if c.governing is not None and c.governing["fos"] is not None and r.fos is not None:
            difference = c.governing["fos"] - r.fos
            lines += ["", f"Re-run governing method minus stored value: {difference:+.3f}"
                      + ("" if abs(difference) <= 0.005 else
                         "  - DIFFERS: the stored inputs do not reproduce the stored result; "
                         "check the parameter version and water lines")]
    else:
        lines.append("No factor of safety by method is stored or could be re-run.")
    return lines


def _json_list(text) -> list[dict]:
    import json

    try:
        value = json.loads(text) if isinstance(text, str) else (text or [])
    except json.JSONDecodeError:
        return []
    return [v for v in value if isinstance(v, dict)] if isinstance(value, list) else []


def _fos2(value) -> str:
    return "n/a" if value is None or not math.isfinite(float(value)) else number_text(float(value), "fos")


def _result_words(assessment: AssessmentRecord) -> str:
    """How the stored factor of safety was obtained, in words (never "not converged" for a
    result on the design water lines)."""
    words = assessment_status.status_words(assessment.status)
    return words + ("." if assessment.usable or assessment.on_design_lines or not assessment.message
                    else f": {assessment.message}.")


def _yes(value) -> str:
    return "" if value is None else ("yes" if value else "no")


def _slice_lines(c: _Content) -> list[str]:
    if not c.slice_rows:
        return [c.method_note or "No slice table."]
    method = c.reported.method if c.reported else ""
    return [f"Governing method: {method}. x: mid-point along the section; alpha: base inclination "
            "in the direction of movement; W: weight; c, phi, u: strength and pore pressure at the "
            "base; N', S: effective normal and mobilised shear force on the base.", ""] + _columns(
        ["#", "x [m]", "b [m]", "alpha [deg]", "y_base [m]", "W [kN/m]", "c [kPa]",
         "phi [deg]", "u [kPa]", "N' [kN/m]", "S [kN/m]", "m_alpha", "Base material"],
        c.slice_rows, width=_characters(_SMALL_TEXT_SIZE))


def _alerts_lines(c: _Content) -> list[str]:
    lines = ["Alert events in the period (state changes, acknowledgements, shelving, closing)"]
    if c.alerts:
        lines += _columns(["Time (UTC)", "Level", "Rule", "Change", "Value", "By", "Note"],
                          [[e["time_utc"], e["level"] or "-", e["rule"], e["what"],
                            "-" if e["value"] is None else f"{e['value']:.3g}", e["by"] or "-",
                            e["note"] or ""] for e in c.alerts])
    else:
        lines.append("  none")
    lines += ["", f"Alerts still open at the end of the period ({_when(c.end)})"]
    if c.open_at_end:
        lines += _columns(["Level", "Rule", "State", "Since (UTC)", "Message"],
                          [[a["level"] or "-", a["rule"], a["state"],
                            json.loads(a["state_json"]).get("since") or "-", a["message"] or ""]
                           for a in c.open_at_end])
    else:
        lines.append("  none")
    lines += ["", "Inspection requests in the period"]
    if c.inspections:
        lines += _columns(["Status", "Requested (UTC)", "Completed (UTC)", "Reason", "Notes"],
                          [[i.get("status"), i.get("requested_utc"), i.get("completed_utc") or "-",
                            i.get("reason"), i.get("notes") or ""] for i in c.inspections])
    else:
        lines.append("  none")
    return lines


def _chunks(lines: list[str], size: int) -> list[list[str]]:
    return [lines[i:i + size] for i in range(0, len(lines), size)] or [[]]


def _write_pdf(c: _Content, path: Path) -> ReportResult:
    import matplotlib
    import matplotlib.pyplot as plt
    from matplotlib.backends.backend_pdf import PdfPages

    pages: list[tuple[str, object]] = []

    def text_pages(title: str, lines: list[str], size: float = _TEXT_SIZE):
        chunks = _chunks(_wrap(lines, _characters(size)), LINES_PER_PAGE)
        for i, chunk in enumerate(chunks):
            suffix = f" (continued, {i + 1} of {len(chunks)})" if i else ""
            pages.append((title + suffix, ("text", chunk, size)))

    with tempfile.TemporaryDirectory(prefix="slipwatch-report-") as folder, matplotlib.rc_context(
        {"pdf.fonttype": 42, "text.parse_math": False}
    ):
        images = _report_images(c, Path(folder))
        text_pages("1. Inputs", _inputs_lines(c))
        text_pages("2. Parameters and provenance", _parameters_lines(c))
        water = _wrap(_water_lines(c), _characters(_TEXT_SIZE))
        pages.append(("3. Water lines used", ("text+image", water[:30], images.get("section"))))
        if len(water) > 30:
            text_pages("3. Water lines used (continued)", water[30:])
        text_pages("4. Factor of safety of the critical surface by every method", _methods_lines(c))
        text_pages("5. Slice table of the governing method", _slice_lines(c), _SMALL_TEXT_SIZE)
        pages.append(("6. Plots", ("images", images.get("fos"), images.get("heads"))))
        text_pages("7. Alerts and inspections in the period", _alerts_lines(c))

        metadata = {"Title": f"slipwatch report, section {c.section.id}", "Author": "slipwatch",
                    "Subject": CAUTION, "CreationDate": c.site.now}
        with PdfPages(path, metadata=metadata) as pdf:
            for number, (title, spec) in enumerate(pages, start=1):
                figure = plt.figure(figsize=_PAGE_SIZE_IN)
                _draw_page(figure, c, title, spec, number, len(pages))
                pdf.savefig(figure)
                plt.close(figure)
    return ReportResult(
        path=path, section_id=c.section.id, start=c.start, end=c.end,
        page_titles=[t for t, _ in pages],
        assessment_id=c.reported.id if c.reported else None,
        stored_fos=c.reported.fos if c.reported else None,
        fos_by_method={m["method"]: m["fos"] for m in c.methods},
        governing_method=c.reported.method if c.reported else None,
    )


def _draw_page(figure, c: _Content, title: str, spec, number: int, total: int) -> None:
    import matplotlib.image as mpimg

    figure.text(0.06, 0.965, f"slipwatch report - section {c.section.id}", fontsize=9,
                color="#444444")
    figure.text(0.06, 0.94, title, fontsize=13, weight="bold")
    figure.text(0.06, 0.035, CAUTION, fontsize=6.8, wrap=True, color="#222222")
    figure.text(0.94, 0.015, f"page {number} of {total}", fontsize=7, ha="right")
    figure.text(0.06, 0.015, f"generated {_when(c.site.now)}", fontsize=7)
    kind = spec[0]
    if kind in ("text", "text+image"):
        size = spec[2] if kind == "text" else _TEXT_SIZE
        for i, line in enumerate(spec[1]):
            figure.text(0.06, 0.91 - i * _LINE_STEP, line, fontsize=size, family="monospace")
    if kind == "text+image":
        image = spec[2]
        top = 0.91 - len(spec[1]) * _LINE_STEP - 0.01
        _place_image(figure, mpimg, image, (0.04, 0.07, 0.92, max(0.2, top - 0.07)),
                     "No section drawing: " + c.drawing_source)
    if kind == "images":
        _place_image(figure, mpimg, spec[1], (0.04, 0.50, 0.92, 0.42),
                     "No factor of safety stored in the period.")
        _place_image(figure, mpimg, spec[2], (0.04, 0.08, 0.92, 0.40),
                     "No piezometer readings of the section in the period.")


def _place_image(figure, mpimg, image, box, missing: str) -> None:
    if image is None:
        figure.text(box[0] + 0.02, box[1] + box[3] / 2, missing, fontsize=9)
        return
    ax = figure.add_axes(box)
    ax.imshow(mpimg.imread(image))
    ax.set_axis_off()


def _report_images(c: _Content, folder: Path) -> dict[str, Path]:
    s = c.section
    events = {"reported": c.reported.time} if c.reported is not None else None
    figures = {
        "section": draw_section_figure(c.workspace, c.store, s, c.reported,
                                       folder / "section.png", line_word="used"),
        "fos": draw_fos_figure(c.store, s, c.history, c.start, c.end, folder / "fos.png",
                               events=events),
        "heads": draw_heads_figure(c.store, s, c.start, c.end, folder / "heads.png"),
    }
    return {key: path for key, (path, _) in figures.items() if path is not None}
