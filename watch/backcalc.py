"""Back-analysis of a slip that has happened, from a case file (docs/formats.md, section 4).

``run_case`` reads the case file, takes the section(s) with their parameter version in force,
rebuilds the water lines at the time of failure (and at every "stood" time) from the stored
readings, or takes lines given in the case file, runs :func:`solver.backcalc.back_analyse`
with a progress bar, and records the run in the store (``back_analyses``, migration 5).
``result_to_dict`` is the JSON written by ``slipwatch backcalc --save`` and read back by
``slipwatch calibrate`` (:func:`watch.parameters.calibrate`).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from solver.backcalc import (
    BACKCALC_COHESION_RANGE,
    BACKCALC_FRICTION_RANGE,
    BACKCALC_MATCH_POINTS,
    BACKCALC_REFINE_POINTS,
    BACKCALC_UNDRAINED_RANGE,
    BackAnalysisResult,
    BackAnalysisSettings,
    BoundedSlip,
    MatchSettings,
    ObservedSlip,
    StoodCondition,
    back_analyse,
)
from solver.errors import SectionError
from solver.methods import METHOD_NAMES
from solver.section import Section
from watch.caution import CAUTION, CAUTION_SHORT
from watch.clock import Clock
from watch.errors import ConfigError, ModelError
from watch.parameters import current_section
from watch.sections import load_section
from watch.store import Store, utc_text
from watch.tomlfiles import read_toml
from watch.waterlines import water_lines_from_store
from watch.workspace import Workspace

__all__ = [
    "FORMS",
    "SlipCase",
    "CaseResult",
    "load_case",
    "run_case",
    "result_to_dict",
    "save_result",
    "load_result",
    "format_report",
    "plot_back_analysis",
]

#: Forms of strength a case file may ask for: name in the file -> (solver form, meaning).
FORMS = {
    "drained c'-phi'": ("cohesion_friction", "drained c'-phi': the FoS = 1 locus c'(phi')"),
    "drained phi' (c' = 0)": ("friction", "drained phi' with c' fixed (0 unless given)"),
    "residual": ("friction", "residual strength of a reactivated slip: c' fixed (0), phi' "
                             "solved"),
    "fully softened": ("friction", "fully softened strength of a first-time slide: c' fixed "
                                   "(0), phi' solved (linear envelope)"),
    "undrained Su": ("undrained", "undrained strength Su (total stress)"),
}
#: Water at failure: rebuilt from the stored readings, or the section's design lines.
WATER_SOURCES = ("readings", "design lines")

_TABLES = {
    "slip": {"id", "section", "failed_at", "description", "section_file", "length_m"},
    "surface": {"points", "scarp", "toe", "max_depth", "min_depth"},
    "water": {"at_failure", "line"},
    "back_analysis": {
        "material", "form", "stood", "cohesion", "friction_angles", "method", "cohesion_range",
        "friction_range", "undrained_range", "water_change_m", "unit_weight_change_kn_m3",
        "match_points", "refine_points", "non_circular",
    },
}  # fmt: skip
#: Keys of earlier versions of the case file, refused with the name that replaced them (the
#: slip ends are named after the parts of a landslide, Cruden and Varnes 1996).
_RENAMED = {"surface": {"entry": "scarp", "exit": "toe"}}
_ARRAYS = {
    "observation": {"kind", "offset", "elevation", "note"},
    "cross_section": {"section", "points", "length_m"},
}


# --------------------------------------------------------------------------------------------
# The case file


@dataclass(frozen=True, eq=False)
class SlipCase:
    """A back-analysis case file, checked (docs/formats.md, section 4)."""

    path: Path
    sha256: str
    id: str
    section_id: str
    failed_at: datetime
    description: str
    surface: np.ndarray | None  # None when the slip is known by its ends and a depth bound
    observations: tuple[dict, ...]
    cross_sections: tuple[tuple[str, np.ndarray], ...]  # further sections: (id, surface)
    material: str
    form_name: str
    cohesion: float
    friction_angles: np.ndarray
    method: str
    stood: tuple[datetime, ...]
    water_source: str
    given_lines: tuple[tuple[str, str, np.ndarray], ...]  # (section id, line name, points)
    section_file: Path | None = None
    water_change_m: float | None = 0.5
    unit_weight_change_kn_m3: float | None = 1.0
    match_points: int = BACKCALC_MATCH_POINTS
    refine_points: int = BACKCALC_REFINE_POINTS
    non_circular: bool = True
    cohesion_range: tuple[float, float] = BACKCALC_COHESION_RANGE
    friction_range: tuple[float, float] = BACKCALC_FRICTION_RANGE
    undrained_range: tuple[float, float] = BACKCALC_UNDRAINED_RANGE
    # [surface] scarp/toe/max_depth/min_depth: {"scarp": (x, y), "toe": (x, y),
    # "max_depth_m": float, "min_depth_m": float}, or None when [surface] points is given.
    bounds: dict | None = None
    # [m] length of slope each section represents, in the order of section_ids ([slip]
    # length_m, then each [[cross_section]] length_m); all None when none is given.
    lengths: tuple[float | None, ...] = ()

    @property
    def form(self) -> str:
        return FORMS[self.form_name][0]

    @property
    def section_ids(self) -> tuple[str, ...]:
        return (self.section_id, *(s for s, _ in self.cross_sections))


def load_case(path: Path | str) -> SlipCase:
    """Read and check a case file; ConfigError naming the file and key on any fault."""
    path = Path(path)
    data, raw = read_toml(path, "case file")
    where = str(path)
    for key in data:
        if key not in _TABLES and key not in _ARRAYS:
            raise ConfigError(f"{where}: unknown table [{key}] (known: "
                              f"{', '.join(sorted({*_TABLES, *_ARRAYS}))})")
    tables = {k: _table(data, k, where) for k in _TABLES}
    arrays = {k: _array(data, k, where) for k in _ARRAYS}
    slip, back, water = tables["slip"], tables["back_analysis"], tables["water"]
    for table, key in (("slip", "id"), ("slip", "section"), ("slip", "failed_at"),
                       ("back_analysis", "material"), ("back_analysis", "form")):
        if key not in tables[table]:
            raise ConfigError(f"{where}: [{table}] needs {key}")
    surface, bounds = _surface(tables["surface"], f"{where}: [surface]")
    form_name = back["form"]
    if form_name not in FORMS:
        raise ConfigError(f"{where}: [back_analysis] form = {form_name!r} is not one of "
                          f"{', '.join(repr(f) for f in FORMS)}")
    method = back.get("method", "spencer")
    if method not in METHOD_NAMES:
        raise ConfigError(f"{where}: [back_analysis] method = {method!r} is not one of "
                          f"{', '.join(METHOD_NAMES)}")
    source = water.get("at_failure", "readings")
    if source not in WATER_SOURCES:
        raise ConfigError(f"{where}: [water] at_failure = {source!r} is not one of "
                          f"{', '.join(repr(s) for s in WATER_SOURCES)}")
    given = []
    lines = water.get("line", [])
    if not isinstance(lines, list):
        raise ConfigError(f"{where}: [water] line must be an array of tables ([[water.line]])")
    for i, line in enumerate(lines):
        item = f"{where}: [[water.line]] {i + 1}"
        if not isinstance(line, dict) or not {"name", "points"} <= set(line):
            raise ConfigError(f"{item} needs name and points")
        unknown = set(line) - {"name", "points", "section"}
        if unknown:
            raise ConfigError(f"{item}: unknown key(s) {', '.join(sorted(unknown))}")
        given.append((str(line.get("section", slip["section"])), str(line["name"]),
                      _points(line["points"], f"{item} points")))
    friction_angles = _friction_angles(back.get("friction_angles", [0.0, 40.0, 2.0]), where)
    section_file = None
    if "section_file" in slip:
        section_file = (path.parent / slip["section_file"]).resolve()
    lengths = _lengths(slip, arrays["cross_section"], where)
    return SlipCase(
        path=path,
        sha256=hashlib.sha256(raw).hexdigest(),
        id=str(slip["id"]),
        section_id=str(slip["section"]),
        failed_at=_utc(slip["failed_at"], f"{where}: [slip] failed_at"),
        description=str(slip.get("description", "")),
        surface=surface,
        bounds=bounds,
        observations=tuple(arrays["observation"]),
        cross_sections=tuple(
            (str(_need(c, "section", f"{where}: [[cross_section]] {i + 1}")),
             _points(_need(c, "points", f"{where}: [[cross_section]] {i + 1}"),
                     f"{where}: [[cross_section]] {i + 1} points"))
            for i, c in enumerate(arrays["cross_section"])
        ),
        material=str(back["material"]),
        form_name=form_name,
        cohesion=_number(back.get("cohesion", 0.0), f"{where}: [back_analysis] cohesion", 0.0),
        friction_angles=friction_angles,
        method=method,
        stood=tuple(_utc(t, f"{where}: [back_analysis] stood") for t in back.get("stood", [])),
        water_source=source,
        given_lines=tuple(given),
        section_file=section_file,
        water_change_m=_optional(back, "water_change_m", 0.5, where),
        unit_weight_change_kn_m3=_optional(back, "unit_weight_change_kn_m3", 1.0, where),
        match_points=_count(back.get("match_points", BACKCALC_MATCH_POINTS),
                            f"{where}: [back_analysis] match_points", 1),
        refine_points=_count(back.get("refine_points", BACKCALC_REFINE_POINTS),
                             f"{where}: [back_analysis] refine_points", 0),
        non_circular=_flag(back.get("non_circular", True), f"{where}: [back_analysis] non_circular"),
        cohesion_range=_range(back.get("cohesion_range", BACKCALC_COHESION_RANGE),
                              f"{where}: cohesion_range"),
        friction_range=_range(back.get("friction_range", BACKCALC_FRICTION_RANGE),
                              f"{where}: friction_range"),
        undrained_range=_range(back.get("undrained_range", BACKCALC_UNDRAINED_RANGE),
                               f"{where}: undrained_range"),
        lengths=lengths,
    )  # fmt: skip


def _lengths(slip: dict, cross_sections: list, where: str) -> tuple[float | None, ...]:
    """[slip] length_m and each [[cross_section]] length_m [m]: all given, or none."""
    items = [("[slip]", slip)] + [(f"[[cross_section]] {i + 1}", c)
                                  for i, c in enumerate(cross_sections)]
    given = [label for label, item in items if "length_m" in item]
    if given and len(given) < len(items):
        missing = ", ".join(label for label, item in items if "length_m" not in item)
        raise ConfigError(f"{where}: length_m is given for {', '.join(given)} but not for "
                          f"{missing}; give the length of slope every section represents, or "
                          "none (the sections then weigh the same)")
    return tuple(None if not given else
                 _positive(item["length_m"], f"{where}: {label} length_m")
                 for label, item in items)


# --------------------------------------------------------------------------------------------
# Running a case


@dataclass(frozen=True, eq=False)
class CaseResult:
    """A back-analysis run: the case, what it rested on, and the solver's result.

    ``sections`` maps each section id to (the section as stored, the parameter version row id
    in force, or None for a section file given in the case); ``at_failure`` to the section
    with its water lines at failure; ``water`` maps "<section> at <time>" to {line name: how
    the line was obtained}.
    """

    case: SlipCase
    result: BackAnalysisResult
    sections: dict[str, tuple[Section, int | None]]
    at_failure: dict[str, Section]
    water: dict[str, dict[str, str]]
    ran_at: datetime
    back_analysis_id: int | None = None
    plot: str = ""
    notes: tuple[str, ...] = field(default_factory=tuple)


def run_case(
    workspace: Workspace,
    case_path: Path | str,
    clock: Clock,
    *,
    progress: bool = False,
    store: Store | None = None,
    record: bool = True,
) -> CaseResult:
    """Back-analyse the slip of a case file against the workspace's sections and readings.

    Parameters
    ----------
    workspace : Workspace
    case_path : path
        The case file (docs/formats.md, section 4).
    clock : Clock
        Gives the time of the run (recorded with the result).
    progress : bool
        Show a progress bar (tqdm) while the critical surfaces are searched.
    store : Store, optional
        An open writable store; default: the workspace's, opened and closed here.
    record : bool
        Record the run in ``back_analyses`` (its id is in the result).

    Raises
    ------
    ConfigError
        The case file is invalid, or names a section or material the workspace lacks.
    ModelError
        Readings are missing at the time of failure or at a stood time (the message names the
        line, the time and what to do).
    solver.errors.SolverError
        The observed surface does not cut the ground, no strength in the range gives F = 1, ...
    """
    case = load_case(case_path)
    if store is None:
        with workspace.open_store() as own:
            return run_case(workspace, case_path, clock, progress=progress, store=own,
                            record=record)
    config = workspace.config()
    sections = {}
    for section_id in case.section_ids:
        if section_id == case.section_id and case.section_file is not None:
            sections[section_id] = (load_section(case.section_file), None)
        else:
            sections[section_id] = current_section(workspace, store, section_id, now=clock.now())
        section = sections[section_id][0]
        if case.material not in {m.name for m in section.materials}:
            raise ConfigError(
                f"{case.path}: [back_analysis] material = {case.material!r} is not a material of "
                f"section {section_id!r} (known: {', '.join(m.name for m in section.materials)})"
            )
    water: dict[str, dict[str, str]] = {}
    surfaces = {case.section_id: case.surface, **dict(case.cross_sections)}
    slips = []
    lengths = dict(zip(case.section_ids, case.lengths or [None] * len(case.section_ids)))
    for section_id, (section, _) in sections.items():
        at_failure, described = _water_at(store, config, case, section, case.failed_at, True)
        water[f"{section_id} at failure {utc_text(case.failed_at)}"] = described
        if surfaces[section_id] is None:
            b = case.bounds
            slips.append(BoundedSlip(at_failure, b["scarp"], b["toe"], b["max_depth_m"],
                                     b["min_depth_m"], section_id, length=lengths[section_id]))
        else:
            slips.append(ObservedSlip(at_failure, surfaces[section_id], section_id,
                                      length=lengths[section_id]))
    stood = []
    for moment in case.stood:
        stood_sections = []
        for section_id, (section, _) in sections.items():
            at_time, described = _water_at(store, config, case, section, moment, False)
            water[f"{section_id} stood {utc_text(moment)}"] = described
            stood_sections.append(at_time)
        stood.append(StoodCondition(f"stood {utc_text(moment)}", tuple(stood_sections)))

    settings = BackAnalysisSettings(
        method=case.method, cohesion_range=case.cohesion_range,
        friction_range=case.friction_range, undrained_range=case.undrained_range,
    )  # fmt: skip
    match = MatchSettings(points=case.match_points, refine=case.refine_points,
                          non_circular=case.non_circular)
    bar = tqdm(total=case.match_points + case.refine_points, desc=f"back-analysis {case.id}",
               unit="search", disable=not progress, leave=False)
    with bar:
        def advance(done: int, total: int, label: str) -> None:
            bar.total = max(total, done)
            bar.set_postfix_str(label, refresh=False)
            bar.update(done - bar.n)

        result = back_analyse(
            slips, case.material, case.form, friction_angles=case.friction_angles,
            cohesion=case.cohesion, stood=stood, settings=settings, match=match,
            water_change=case.water_change_m, unit_weight_change=case.unit_weight_change_kn_m3,
            progress=advance,
        )  # fmt: skip
    notes = ()
    if len(slips) > 1 and case.lengths[0] is None:
        notes = (f"the {len(slips)} sections weigh the same: the case file gives no length_m "
                 "(the length of slope each section represents)",)
    outcome = CaseResult(case=case, result=result, sections=sections,
                         at_failure={s.name: s.section for s in slips}, water=water,
                         ran_at=clock.now(), notes=notes)
    if record:
        if store.read_only:
            raise ConfigError(f"store {store.path} is open read-only; cannot record the run")
        data = result_to_dict(outcome)
        with store.atomic():
            back_analysis_id = store.add_back_analysis({
                "case_id": case.id, "case_file": str(case.path), "case_sha256": case.sha256,
                "section_id": case.section_id, "failed_utc": utc_text(case.failed_at),
                "material": case.material, "form": case.form_name, "method": case.method,
                "best_json": json.dumps(data["best"]) if data["best"] else None,
                "result_json": json.dumps(data), "ran_utc": utc_text(outcome.ran_at),
            })  # fmt: skip
        outcome = replace(outcome, back_analysis_id=back_analysis_id)
    return outcome


def _water_at(store: Store, config, case: SlipCase, section: Section, at: datetime,
              failure: bool) -> tuple[Section, dict[str, str]]:
    """The section with its water lines at ``at`` and how each line was obtained."""
    given = {name: points for sid, name, points in case.given_lines if sid == section.id}
    unknown = set(given) - {line.name for line in section.water_lines}
    if unknown:
        raise ConfigError(
            f"{case.path}: [[water.line]] {', '.join(sorted(unknown))} is not a water line of "
            f"section {section.id!r} (known: {', '.join(w.name for w in section.water_lines)})"
        )
    described = {name: "given in the case file" for name in given}
    points: dict[str, np.ndarray] = dict(given) if failure else {}
    if case.water_source == "readings" or not failure:
        # Stood times always come from readings: a line given for the failure says nothing
        # about another time.
        estimates = _lines_from_readings(store, config, section, at)
        informed = {p.water_line for p in config.piezometers_of(section.id)}
        for name, estimate in estimates.items():
            if name in points:
                continue
            if name not in informed:
                described[name] = "design line (no piezometer informs it)"
                continue
            if estimate.source != "instruments":
                when = "the time of failure" if failure else "the stood time"
                raise ModelError(
                    f"no usable readings for water line {name!r} of section {section.id!r} at "
                    f"{utc_text(at)} ({when}): {estimate.fallback_reason or estimate.fallback}; "
                    "ingest the readings, or give the line in the case file ([[water.line]] "
                    "with name and points)" + ("" if failure else " for the failure and remove "
                                                "this stood time")
                )
            points[name] = estimate.points
            used = ", ".join(estimate.instruments_used)
            described[name] = f"readings of {used}" + (
                f" ({estimate.fallback}: {estimate.fallback_reason})"
                if estimate.fallback not in ("none", "") else "")
    else:
        for line in section.water_lines:
            described.setdefault(line.name, "design line (case file: at_failure = design lines)")
    # Lines through readings are piezometric lines: no cos^2 inclination correction on them
    # (watch.waterlines.section_with_lines gives the reason and the sources).
    measured = {name: False for name in points if name not in given or not failure}
    try:
        return section.with_water_lines(points, measured), described
    except SectionError as error:
        raise ConfigError(f"{case.path}: water line for section {section.id!r}: {error}") from None


def _lines_from_readings(store: Store, config, section: Section, at: datetime) -> dict:
    """The water lines at ``at`` from the stored readings (no rainfall-model stand-ins: a
    back-analysis rests on measured water or on lines the engineer gives)."""
    return water_lines_from_store(store, section, config, pd.Timestamp(at),
                                  use_rainfall_models=False)


# --------------------------------------------------------------------------------------------
# Output


def result_to_dict(outcome: CaseResult) -> dict:
    """The run as plain JSON-friendly data (canonical names with units)."""
    case, result = outcome.case, outcome.result
    locus = result.locus
    rows = []
    for i in range(locus.n_points):
        row = {
            "friction_angle_deg": _num(locus.friction_angle[i]),
            "cohesion_kpa": _num(locus.cohesion[i]),
            "undrained_strength_kpa": _num(locus.undrained_strength[i]),
            "found": bool(locus.found[i]),
            "message": locus.message[i],
        }
        if result.history is not None:
            row["stood"] = bool(result.history.surviving[i])
            row["fos_at_stood"] = {c.label: _num(c.fos[i]) for c in result.history.checks}
            row["fos_at_stood_observed"] = {c.label: _num(c.observed_fos[i])
                                            for c in result.history.checks}
        for name, values in locus.by_section.items():
            row.setdefault("by_section", {})[name] = _num(values[i])
        rows.append(row)
    history = None
    if result.history is not None:
        h = result.history
        history = {
            "stood_times": [c.label for c in h.checks],
            "checks": [{"label": c.label, "searches": c.searches, "surfaces": c.surfaces,
                        "best_fit_fos": _num(c.best_fos)} for c in h.checks],
            "surviving_points": int(h.surviving.sum()),
            "friction_angle_range_deg": h.friction_range,
            "cohesion_range_kpa": h.cohesion_range,
            "undrained_strength_range_kpa": h.undrained_range,
            "limits": [dict(label=l["label"], friction_angle_deg=l["friction_angle"],
                            cohesion_kpa=l["cohesion"], surviving_side=l["surviving_side"])
                       for l in h.limits],
        }  # fmt: skip
    return {
        "case": {
            "id": case.id, "file": str(case.path), "sha256": case.sha256,
            "section_id": case.section_id, "sections": list(case.section_ids),
            "failed_utc": utc_text(case.failed_at), "description": case.description,
            "material": case.material, "form": case.form_name,
            "form_meaning": FORMS[case.form_name][1], "method": result.method,
        },  # fmt: skip
        "section_versions": {sid: vid for sid, (_, vid) in outcome.sections.items()},
        "water": outcome.water,
        "locus": rows,
        "best": _match_dict(result.best) if result.best is not None else None,
        "matches": [_match_dict(m, points=False) for m in result.matches],
        "history": history,
        "sensitivity": [
            {"label": c.label, "quantity": c.quantity, "change": c.change,
             "best_value": _num(c.best_value), "shift": _num(c.shift),
             "solved": locus.solved}
            for c in result.sensitivity
        ],  # fmt: skip
        "observed_surface_m": {sid: np.asarray(s).tolist() for sid, s in
                               {case.section_id: case.surface, **dict(case.cross_sections)}.items()
                               if s is not None},
        "observed_bounds": None if case.bounds is None else {
            "section_id": case.section_id, "scarp_m": list(case.bounds["scarp"]),
            "toe_m": list(case.bounds["toe"]), "max_depth_m": case.bounds["max_depth_m"],
            "min_depth_m": case.bounds["min_depth_m"]},
        "bounded_surfaces": [
            {"section_id": b.slip, "friction_angle_deg": _num(b.friction_angle),
             "cohesion_kpa": _num(b.cohesion), "undrained_strength_kpa": _num(b.undrained_strength),
             "fos": _num(b.fos), "centre_m": [b.centre_x, b.centre_y], "radius_m": b.radius,
             "depth_m": b.depth, "min_depth_m": b.min_depth, "max_depth_m": b.max_depth,
             "at_bound": b.at_bound or None}
            for b in result.bounded
        ],
        "consistency": {
            "consistent": result.consistent,
            "checks": [{"name": c.name, "passed": c.passed, "value": _num(c.value),
                        "limit": c.limit, "detail": c.detail} for c in result.consistency],
        },
        "weights": dict(zip(result.slips, result.weights)),
        "notes": list(result.notes) + list(outcome.notes),
        "back_analysis_id": outcome.back_analysis_id,
        "ran_utc": utc_text(outcome.ran_at),
        "plot": outcome.plot or None,
        "caution": CAUTION,
    }


def _match_dict(match, points: bool = True) -> dict:
    return {
        "friction_angle_deg": _num(match.friction_angle),
        "cohesion_kpa": _num(match.cohesion),
        "undrained_strength_kpa": _num(match.undrained_strength),
        "score": _num(match.score),
        "refined": match.refined,
        "fits": [
            {"section_id": f.slip, "critical_fos": _num(f.critical_fos),
             "critical_kind": f.critical_kind, "misfit_area_m2": _num(f.misfit_area),
             "observed_area_m2": _num(f.observed_area), "misfit_ratio": _num(f.misfit_ratio),
             "hausdorff_m": _num(f.hausdorff),
             **({"critical_surface_m": np.asarray(f.critical_points).round(4).tolist()}
                if points else {})}
            for f in match.fits
        ],
    }  # fmt: skip


def _num(value) -> float | None:
    value = float(value)
    return value if np.isfinite(value) else None


def save_result(outcome: CaseResult, path: Path | str) -> Path:
    """Write :func:`result_to_dict` to ``path`` as JSON (what ``slipwatch calibrate`` reads)."""
    path = Path(path)
    path.write_text(json.dumps(result_to_dict(outcome), indent=2) + "\n", encoding="utf-8")
    return path


def load_result(path: Path | str) -> dict:
    """A result written by :func:`save_result`; ConfigError when it is not one."""
    path = Path(path)
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: back-analysis result not found") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as error:
        raise ConfigError(f"{path}: not a back-analysis result (JSON): {error}") from None
    if not isinstance(data, dict) or not {"case", "best", "locus"} <= set(data):
        raise ConfigError(f"{path}: not a back-analysis result written by "
                          "`slipwatch backcalc --save`")
    return data


def format_report(outcome: CaseResult) -> str:
    """The text report of `slipwatch backcalc`."""
    case, result = outcome.case, outcome.result
    locus = result.locus
    lines = [
        f"Back-analysis of slip {case.id} on section(s) {', '.join(case.section_ids)}, failed "
        f"{utc_text(case.failed_at)}",
        f"Material {case.material!r}, form {case.form_name} ({FORMS[case.form_name][1]}); "
        f"method {result.method}",
    ]
    for sid, (_, version_id) in outcome.sections.items():
        source = f"parameter version id {version_id}" if version_id else f"file {case.section_file}"
        lines.append(f"Section {sid}: {source}")
    for when, described in outcome.water.items():
        lines.append(f"Water, {when}: " + "; ".join(f"{k}: {v}" for k, v in described.items()))
    lines.append("")
    lines.append("FoS = 1 locus on the observed surface" + (
        " (F at a stood time: the lowest over the observed surface and the critical surfaces "
        "searched then):" if result.history is not None else ":"))
    header = "  phi' [deg]  c' [kPa]" if locus.form != "undrained" else "  Su [kPa]"
    stood = result.history is not None
    if stood:
        header += "  " + "  ".join(f"F {c.label}" for c in result.history.checks) + "  stands"
    lines.append(header)
    for i in range(locus.n_points):
        if locus.form == "undrained":
            text = f"  {_fmt(locus.undrained_strength[i], 9)}"
        else:
            text = f"  {locus.friction_angle[i]:10.2f}  {_fmt(locus.cohesion[i], 8)}"
        if stood:
            text += "  " + "  ".join(f"{_fmt(c.fos[i], len('F ' + c.label))}"
                                     for c in result.history.checks)
            text += "  " + ("yes" if result.history.surviving[i] else "no ")
        if locus.message[i]:
            text += f"   [{locus.message[i]}]"
        lines.append(text)
    if result.matches:
        lines.append("")
        lines.append("Critical surfaces along the locus (misfit = area between the masses / "
                     "observed mass area):")
        for m in result.matches:
            fits = "; ".join(f"{f.slip}: F {f.critical_fos:.3f} ({f.critical_kind}), misfit "
                             f"{f.misfit_ratio:.3f}, Hausdorff {f.hausdorff:.2f} m" for f in m.fits)
            mark = " *best*" if m is result.best else ""
            lines.append(f"  {_strength(m, locus.form)}: {fits}{mark}"
                         + (" (refined)" if m.refined else ""))
    if result.bounded:
        lines.append("")
        lines.append("Critical circle through the scarp and toe at each locus point (depth "
                     "below the ground against the bounds):")
        for b in result.bounded:
            held = f", at the {b.at_bound} bound" if b.at_bound else ""
            lines.append(f"  {_strength(b, locus.form)}: {b.slip}: F {b.fos:.3f}, depth "
                         f"{b.depth:.2f} m (bounds {b.min_depth:g} to {b.max_depth:g} m){held}")
    if result.best is not None:
        lines.append("")
        lines.append(f"Best fit: {_strength(result.best, locus.form)} "
                     f"(mean misfit {result.best.score:.3f})")
    if result.consistency:
        lines.append("")
        lines.append("Consistency of the best fit with the record: "
                     + ("consistent" if result.consistent else "NOT consistent"))
        for c in result.consistency:
            lines.append(f"  [{'pass' if c.passed else 'FAIL'}] {c.name}: {c.detail}")
    if len(result.weights) > 1:
        lines.append("Section weights (length of slope represented): " + ", ".join(
            f"{name} {weight:.3f}" for name, weight in zip(result.slips, result.weights)))
    if result.history is not None:
        h = result.history
        for c in h.checks:
            lines.append(f"Record check {c.label}: {c.searches} critical-surface search(es), "
                         f"{c.surfaces} distinct surface(s) re-evaluated at every locus point "
                         "with the observed one")
        if h.surviving.any():
            text = "Surviving range (stood at every stood time): "
            if locus.form == "undrained":
                text += f"Su {h.undrained_range[0]:.2f} to {h.undrained_range[1]:.2f} kPa"
            else:
                text += (f"phi' {h.friction_range[0]:.2f} to {h.friction_range[1]:.2f} deg, "
                         f"c' {h.cohesion_range[0]:.2f} to {h.cohesion_range[1]:.2f} kPa")
            lines.append(text + f" ({int(h.surviving.sum())} of {locus.n_points} points)")
        else:
            lines.append("Surviving range: none (no locus point stood at every stood time)")
        for limit in h.limits:
            lines.append(f"  limit ({limit['label']}): phi' = {limit['friction_angle']:.2f} deg, "
                         f"c' = {limit['cohesion']:.2f} kPa; points {limit['surviving_side']} "
                         "this phi' stood")
    if result.sensitivity:
        unit = {"cohesion": "kPa (c')", "friction_angle": "deg (phi')",
                "undrained_strength": "kPa (Su)"}[locus.solved]
        lines.append("")
        lines.append(f"Sensitivity of the best fit [{unit}]:")
        for c in result.sensitivity:
            lines.append(f"  {c.label:<28} {_fmt(c.best_value, 8)}  shift {_fmt(c.shift, 7, sign=True)}")
    for note in (*result.notes, *outcome.notes):
        lines.append(f"Note: {note}")
    if outcome.back_analysis_id is not None:
        lines.append(f"Recorded as back-analysis {outcome.back_analysis_id} in the store.")
    if outcome.plot:
        lines.append(f"Plot written to {outcome.plot}")
    lines.append(CAUTION)
    return "\n".join(lines)


def _strength(m, form: str) -> str:
    if form == "undrained":
        return f"Su = {m.undrained_strength:.2f} kPa"
    return f"c' = {m.cohesion:.2f} kPa, phi' = {m.friction_angle:.2f} deg"


def _fmt(value, width: int, sign: bool = False) -> str:
    if value is None or not np.isfinite(value):
        return "n/a".rjust(width)
    return f"{value:+{width}.2f}" if sign else f"{value:{width}.2f}"


# --------------------------------------------------------------------------------------------
# Plot

#: Colours of the back-analysis plot (Okabe and Ito 2008 palette, as watch.plots).
_LOCUS_COLOUR = "#000000"
_STOOD_COLOUR = "#009E73"
_BEST_COLOUR = "#D55E00"
_OBSERVED_COLOUR = "#CC79A7"


def plot_back_analysis(outcome: CaseResult, path: Path | str, dpi: int = 150) -> Path:
    """Draw the locus with the history band (top) and the section with the observed and the
    best-fit critical surfaces (bottom) to the PNG ``path``."""
    from watch.plots import WATER_COLOUR, draw_strata, plt

    path = Path(path)
    result, case = outcome.result, outcome.case
    locus = result.locus
    section = outcome.sections[case.section_id][0]
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(10, 9), layout="constrained",
                                      height_ratios=(1, 1))
    if locus.form == "cohesion_friction":
        found = locus.found
        top.plot(locus.friction_angle[found], locus.cohesion[found], color=_LOCUS_COLOUR,
                 marker="o", markersize=3, label=f"FoS = 1 locus ({result.method})")
        if result.history is not None and result.history.surviving.any():
            keep = result.history.surviving
            top.plot(locus.friction_angle[keep], locus.cohesion[keep], color=_STOOD_COLOUR,
                     linewidth=7, alpha=0.35, solid_capstyle="round",
                     label="Stood at every stood time")
        for m in result.matches:
            top.plot(m.friction_angle, m.cohesion, marker="s", markersize=5, color="#777777",
                     linestyle="none")
        if result.best is not None:
            top.plot(result.best.friction_angle, result.best.cohesion, marker="*",
                     markersize=14, color=_BEST_COLOUR, linestyle="none",
                     label=f"Best fit (misfit {result.best.score:.3f})")
        top.set_xlabel("Friction angle phi' [deg]")
        top.set_ylabel("Cohesion c' [kPa]")
        top.set_xlim(left=0)
        top.set_ylim(bottom=0)
    else:
        values = [m.friction_angle if locus.form == "friction" else m.undrained_strength
                  for m in result.matches]
        scores = [m.score for m in result.matches]
        top.plot(values, scores, marker="o", color=_LOCUS_COLOUR, linestyle="none",
                 label="Solved strength")
        top.set_xlabel("Friction angle phi' [deg]" if locus.form == "friction"
                       else "Undrained strength Su [kPa]")
        top.set_ylabel("Misfit of the critical surface [-]")
    top.set_title(f"Strength of {case.material!r} from slip {case.id}")
    top.grid(True, color="#DDDDDD", linewidth=0.5)
    top.legend(fontsize=8)

    if case.surface is not None:
        observed = np.asarray(case.surface)
    else:
        # Known by its ends only: draw the critical circle through them at the middle locus
        # point as the "observed" surface, with the ends marked.
        own = [b for b in result.bounded if b.slip == case.section_id]
        observed = (own[len(own) // 2].points if own else
                    np.array([case.bounds["scarp"], case.bounds["toe"]], dtype=float))
    ground = section.ground
    y_floor = min(ground[:, 1].min(), observed[:, 1].min()) - 2.0
    handles = draw_strata(bottom, section, y_floor)
    bottom.plot(*ground.T, color="black", linewidth=1.2)
    for i, line in enumerate(outcome.at_failure[case.section_id].water_lines):
        (drawn,) = bottom.plot(*line.points.T, color=WATER_COLOUR, linewidth=1.3,
                               linestyle=("--", ":", "-.")[i % 3],
                               label=f"Water line '{line.name}' at failure")
        handles.append(drawn)
    label = ("Observed slip surface" if case.surface is not None else
             "Critical circle through the observed ends (middle locus point)")
    (drawn,) = bottom.plot(*observed.T, color=_OBSERVED_COLOUR, linewidth=3.0, label=label)
    handles.append(drawn)
    if case.bounds is not None:
        (drawn,) = bottom.plot(*np.array([case.bounds["scarp"], case.bounds["toe"]]).T,
                               color=_OBSERVED_COLOUR, marker="v", markersize=9,
                               linestyle="none", label="Observed scarp and toe")
        handles.append(drawn)
    if result.best is not None:
        fit = next(f for f in result.best.fits if f.slip == case.section_id)
        (drawn,) = bottom.plot(*fit.critical_points.T, color=_BEST_COLOUR, linewidth=1.8,
                               linestyle="--",
                               label=f"Critical surface, best fit (FoS {fit.critical_fos:.2f})")
        handles.append(drawn)
    bottom.set_xlim(ground[0, 0], ground[-1, 0])
    bottom.set_ylim(y_floor, ground[:, 1].max() + 2.0)
    bottom.set_aspect("equal", adjustable="box")
    bottom.set_xlabel("Offset along section [m]")
    bottom.set_ylabel("Elevation [m]")
    bottom.set_title(f"Section {case.section_id} at failure, {utc_text(case.failed_at)}")
    bottom.grid(True, color="#DDDDDD", linewidth=0.5)
    bottom.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.15),
                  ncols=3, fontsize=8, frameon=False)
    fig.supxlabel(CAUTION_SHORT, fontsize=7, color="#444444")
    fig.savefig(path, dpi=dpi)
    plt.close(fig)
    return path


# --------------------------------------------------------------------------------------------
# Case-file helpers


def _table(data: dict, key: str, where: str) -> dict:
    table = data.get(key, {})
    if not isinstance(table, dict):
        raise ConfigError(f"{where}: [{key}] must be a table")
    renamed = {old: new for old, new in _RENAMED.get(key, {}).items() if old in table}
    if renamed:
        raise ConfigError(f"{where}: [{key}] " + ", ".join(
            f"{old} is now called {new}" for old, new in sorted(renamed.items()))
            + " (the upper and lower ends of the slip on the ground); rename the key(s)")
    unknown = set(table) - _TABLES[key]
    if unknown:
        raise ConfigError(f"{where}: [{key}] unknown key(s) {', '.join(sorted(unknown))} "
                          f"(known: {', '.join(sorted(_TABLES[key]))})")
    return table


def _array(data: dict, key: str, where: str) -> list:
    items = data.get(key, [])
    if not isinstance(items, list):
        raise ConfigError(f"{where}: [[{key}]] must be an array of tables (write [[{key}]])")
    for i, item in enumerate(items):
        if not isinstance(item, dict):
            raise ConfigError(f"{where}: [[{key}]] {i + 1} must be a table")
        unknown = set(item) - _ARRAYS[key]
        if unknown:
            raise ConfigError(f"{where}: [[{key}]] {i + 1}: unknown key(s) "
                              f"{', '.join(sorted(unknown))} (known: {', '.join(sorted(_ARRAYS[key]))})")
    return items


def _need(item: dict, key: str, where: str):
    if key not in item:
        raise ConfigError(f"{where} needs {key}")
    return item[key]


def _surface(table: dict, where: str) -> tuple[np.ndarray | None, dict | None]:
    """[surface]: points, or scarp + toe + max_depth (+ min_depth); never both."""
    ends = {"scarp", "toe", "max_depth", "min_depth"} & set(table)
    if "points" in table:
        if ends:
            raise ConfigError(f"{where}: give either points or scarp, toe and max_depth, not "
                              f"both (found points and {', '.join(sorted(ends))})")
        return _points(table["points"], f"{where} points"), None
    if not ends:
        raise ConfigError(f"{where} needs points, or scarp, toe and max_depth")
    for key in ("scarp", "toe", "max_depth"):
        if key not in table:
            raise ConfigError(f"{where} needs {key} with {', '.join(sorted(ends))} (or give "
                              "points instead)")
    scarp, toe = (_point(table[k], f"{where} {k}") for k in ("scarp", "toe"))
    max_depth = _number(table["max_depth"], f"{where} max_depth")
    if max_depth <= 0:
        raise ConfigError(f"{where} max_depth = {max_depth:g} m must be > 0 (the deepest the slip "
                          "can lie below the ground)")
    min_depth = _number(table.get("min_depth", 0.0), f"{where} min_depth", 0.0)
    if min_depth >= max_depth:
        raise ConfigError(f"{where} min_depth = {min_depth:g} m must be below max_depth = "
                          f"{max_depth:g} m")
    return None, {"scarp": scarp, "toe": toe, "max_depth_m": max_depth,
                  "min_depth_m": min_depth}


def _point(value, where: str) -> tuple[float, float]:
    try:
        x, y = (float(v) for v in value)
    except (TypeError, ValueError):
        raise ConfigError(f"{where} must be one [x, y] pair [m], got {value!r}") from None
    if not (np.isfinite(x) and np.isfinite(y)):
        raise ConfigError(f"{where}: coordinates must be finite, got {value!r}")
    return x, y


def _points(value, where: str) -> np.ndarray:
    try:
        points = np.array(value, dtype=float)
    except (TypeError, ValueError):
        raise ConfigError(f"{where} must be a list of [x, y] pairs, got {value!r}") from None
    if points.ndim != 2 or points.shape[1] != 2 or len(points) < 2:
        raise ConfigError(f"{where}: need at least two [x, y] pairs, got {value!r}")
    if not np.isfinite(points).all():
        raise ConfigError(f"{where}: coordinates must be finite")
    if (np.diff(points[:, 0]) <= 0).any():
        i = int(np.argmax(np.diff(points[:, 0]) <= 0))
        raise ConfigError(f"{where}: x must increase strictly, but x = {points[i, 0]:g} is "
                          f"followed by x = {points[i + 1, 0]:g}")
    return points


def _utc(value, where: str) -> datetime:
    if isinstance(value, datetime):
        moment = value
    elif isinstance(value, str):
        try:
            moment = datetime.fromisoformat(value.replace("Z", "+00:00"))
        except ValueError:
            raise ConfigError(f"{where} = {value!r} is not an ISO-8601 time "
                              "(e.g. \"2026-01-16T06:00:00Z\")") from None
    else:
        raise ConfigError(f"{where} = {value!r} must be a time such as \"2026-01-16T06:00:00Z\"")
    if moment.tzinfo is None:
        raise ConfigError(f"{where} = {value!r} has no time zone; write it in UTC with Z")
    return moment.astimezone(timezone.utc)


def _number(value, where: str, minimum: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise ConfigError(f"{where} = {value!r} must be a number")
    if minimum is not None and value < minimum:
        raise ConfigError(f"{where} = {value!r} must be >= {minimum:g}")
    return float(value)


def _positive(value, where: str) -> float:
    value = _number(value, where)
    if value <= 0:
        raise ConfigError(f"{where} = {value:g} must be > 0 [m]")
    return value


def _optional(table: dict, key: str, default: float, where: str) -> float | None:
    """A positive number, or None when the key is set to 0 (the sensitivity case skipped)."""
    value = _number(table.get(key, default), f"{where}: [back_analysis] {key}", 0.0)
    return value or None


def _count(value, where: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ConfigError(f"{where} = {value!r} must be an integer >= {minimum}")
    return value


def _flag(value, where: str) -> bool:
    if not isinstance(value, bool):
        raise ConfigError(f"{where} = {value!r} must be true or false")
    return value


def _range(value, where: str) -> tuple[float, float]:
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise ConfigError(f"{where} = {value!r} must be [low, high]")
    low, high = (_number(v, where, 0.0) for v in value)
    if not low < high:
        raise ConfigError(f"{where} = {value!r}: low must be below high")
    return low, high


def _friction_angles(value, where: str) -> np.ndarray:
    """[from, to, step] [deg] -> the phi' of the locus points."""
    item = f"{where}: [back_analysis] friction_angles"
    if not isinstance(value, list) or len(value) != 3:
        raise ConfigError(f"{item} = {value!r} must be [from, to, step] in degrees")
    start, stop, step = (_number(v, item) for v in value)
    if not (0 <= start < stop <= 89 and step > 0):
        raise ConfigError(f"{item} = {value!r}: need 0 <= from < to <= 89 and step > 0")
    count = int(np.floor((stop - start) / step + 1e-9)) + 1
    if count > 200:
        raise ConfigError(f"{item} = {value!r} gives {count} points; use at most 200")
    return start + step * np.arange(count)
