"""One-off analysis of a section file: critical-surface search, then every method on it.

This is what `slipwatch analyse` runs. The search ranks trial surfaces by the governing method
(``--method``, else the section's ``[search] method``, else Bishop's simplified method); the
critical surface is then solved by every method so that the owner sees how much the answer
depends on the method.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from solver.search import (
    RankedSurface,
    SearchResult,
    SearchSettings,
    every_method,
    face_name,
    placement_from_section,
    search_critical_surface,
)
from solver.methods import WARNING_FLAGS
from solver.section import FACES
from solver.slicing import slice_surface
from solver.surfaces import CircularSurface, PolylineSurface
from watch.caution import CAUTION
from watch.plots import plot_section
from watch.sections import load_section

#: Governing method when neither the command line nor the section file names one.
DEFAULT_METHOD = "bishop_simplified"

#: Methods fast enough to rank every trial circle of a grid themselves.
_FAST_METHODS = ("ordinary", "bishop_simplified")


@dataclass(frozen=True)
class MethodResult:
    """Factor of safety of the critical surface by one method."""

    method: str
    fos: float
    converged: bool
    admissible: bool
    iterations: int
    message: str
    #: Names of the method's warning flags raised on this surface (``low_m_alpha``,
    #: ``negative_normal``, ``thrust_outside``, ``beyond_correction_chart``).
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class AnalysisResult:
    """Outcome of :func:`analyse_section`.

    Attributes
    ----------
    section_id, section_name : str
    source : str
        The section file analysed ("" when a Section was given directly).
    method : str
        Governing method: the one that ranked the trial surfaces.
    fos : float
        Factor of safety of the critical surface by the governing method [-].
    critical : RankedSurface
        The critical surface (section frame).
    by_method : tuple of MethodResult
        Every method on the critical surface.
    search : SearchResult
        The search itself (ranked surfaces, trials, rejections), kept for warm re-evaluation.
    section : solver.section.Section
        The section analysed (for drawing).
    plot : str
        The PNG file drawn, "" when none.
    caution : str
    """

    section_id: str
    section_name: str
    source: str
    method: str
    fos: float
    critical: RankedSurface
    by_method: tuple[MethodResult, ...]
    search: SearchResult
    section: object
    plot: str = ""
    caution: str = CAUTION

    def to_dict(self) -> dict:
        """Plain JSON-friendly dictionary (canonical names with units)."""
        return {
            "section_id": self.section_id,
            "section_name": self.section_name,
            "source": self.source,
            "method": self.method,
            "fos": self.fos,
            "critical_surface": _surface_dict(self.critical),
            "faces": [
                {"face": face_name(direction), "governing": surface is self.critical,
                 "fos": None if surface is None else surface.fos,
                 "critical_surface": None if surface is None else _surface_dict(surface)}
                for direction, surface in self.search.by_face.items()
            ],
            "fos_by_method": [
                {
                    "method": m.method,
                    "fos": None if not np.isfinite(m.fos) else m.fos,
                    "converged": m.converged,
                    "admissible": m.admissible,
                    "iterations": m.iterations,
                    "message": m.message,
                    "warnings": list(m.warnings),
                }
                for m in self.by_method
            ],
            "search": {
                "stages": list(self.search.stages),
                "trials": self.search.n_trials,
                "valid": self.search.n_valid,
                "rejected": dict(self.search.rejected),
                "filtered": dict(self.search.filtered),
                "kept_fos": [s.fos for s in self.search.surfaces],
                "notes": list(self.search.notes),
                "best_centre_on_lattice_edge": [face_name(d) for d in self.search.lattice_edge],
                "best_circle_on_lowest_tangent": [face_name(d)
                                                  for d in self.search.lowest_tangent],
            },
            "plot": self.plot or None,
            "caution": self.caution,
        }


def _surface_dict(c: RankedSurface) -> dict:
    surface = {
        "kind": c.kind,
        "scarp_x_m": c.scarp_x,
        "toe_x_m": c.toe_x,
        "depth_m": c.depth,
        "area_m2": c.area,
    }
    if c.kind == "circle":
        surface.update(centre_x_m=c.centre_x, centre_y_m=c.centre_y, radius_m=c.radius)
    else:
        surface["points_m"] = np.asarray(c.points).tolist()
    return surface


def analyse_section(
    path: Path, method: str | None = None, *, non_circular: bool = False, plot: Path | None = None
) -> AnalysisResult:
    """Load a section file (docs/formats.md, section 1), analyse it (:func:`analyse`) and,
    when ``plot`` is given, draw the section and its critical surface to that PNG file."""
    section = load_section(path)
    result = analyse(section, method, non_circular=non_circular, source=str(path))
    if plot is not None:
        plot_analysis(result, plot)
        result = replace(result, plot=str(plot))
    return result


def analyse(section, method: str | None = None, *, non_circular: bool = False, source: str = ""):
    """Search the critical surface of ``section`` and solve it by every method.

    Parameters
    ----------
    section : solver.section.Section
    method : str, optional
        Governing method; default the section's ``[search] method``, else
        :data:`DEFAULT_METHOD`.
    non_circular : bool
        Also optimise a polyline from the best circle (ranked by the governing method).
    source : str
        Where the section came from, for the report.

    Returns
    -------
    AnalysisResult
    """
    options = section.search or {}
    governing = method or options.get("method", DEFAULT_METHOD)
    settings = SearchSettings(method=governing,
                              n_slices=options.get("slices", SearchSettings.n_slices),
                              min_depth=options.get("min_depth", SearchSettings.min_depth),
                              direction=FACES.get(options.get("face")))
    # Screening the thousands of grid circles with Bishop's simplified method keeps the
    # complete methods (much slower per surface) for the kept circles and the refinement.
    screen = None if governing in _FAST_METHODS else "bishop_simplified"
    result = search_critical_surface(
        section, settings, screen_with=screen, non_circular=non_circular,
        non_circular_method=governing, placement=placement_from_section(options),
    )
    critical = result.critical
    slices = slice_surface(section, surface_of(critical), settings.n_slices,
                           direction=critical.direction)
    by_method = [
        MethodResult(
            method=name,
            fos=float(solved.fos[0]),
            converged=bool(solved.converged[0]),
            admissible=bool(solved.admissible[0]),
            iterations=int(solved.iterations[0]),
            message=solved.message[0],
            warnings=tuple(flag for flag in WARNING_FLAGS if getattr(solved, flag)[0]),
        )
        for name, solved in every_method(slices, settings).items()
    ]
    return AnalysisResult(
        section_id=section.id,
        section_name=section.name,
        source=source,
        method=governing,
        fos=critical.fos,
        critical=critical,
        by_method=tuple(by_method),
        search=result,
        section=section,
    )


def plot_analysis(result: AnalysisResult, path: Path) -> Path:
    """Draw the section, its critical surface and slices to the PNG ``path``, with the
    critical surface of each other face searched."""
    surface = surface_of(result.critical)
    slices = slice_surface(result.section, surface, result.search.settings.n_slices,
                           direction=result.critical.direction)
    others = [(surface_of(s), s.fos) for s in result.search.by_face.values()
              if s is not None and s is not result.critical]
    return plot_section(result.section, path, surface=surface, fos=result.fos,
                        method=result.method, slices=slices, alternatives=others)


def surface_of(surface: RankedSurface):
    """The :mod:`solver.surfaces` object of a ranked surface (for slicing and drawing)."""
    if surface.kind == "circle":
        return CircularSurface(surface.centre_x, surface.centre_y, surface.radius)
    return PolylineSurface(surface.points)


def format_report(result: AnalysisResult) -> str:
    """The text report of `slipwatch analyse`."""
    s = result.search
    lines = [
        f"Section {result.section_id} ({result.section_name})"
        + (f", file {result.source}" if result.source else ""),
        f"Search: {' -> '.join(s.stages)}",
        f"Critical surface: {result.critical.describe()}",
        f"Trial surfaces: {s.n_trials} generated, {s.n_valid} admissible, "
        f"{s.n_rejected} rejected, {s.n_filtered} not competing",
    ]
    lines += [f"  rejected: {n} {reason}" for reason, n in s.rejected.most_common()]
    lines += [f"  not competing: {n} {reason}" for reason, n in s.filtered.most_common()]
    faces = s.by_face
    if len(faces) > 1:
        lines.append("Critical surface of each face:")
        for direction, surface in faces.items():
            towards = "+x" if direction > 0 else "-x"
            found = ("no admissible surface" if surface is None else
                     f"F = {surface.fos:.3f} ({s.method}), {surface.describe()}")
            mark = "  (governs)" if surface is result.critical else ""
            lines.append(f"  {face_name(direction)} face (slides towards {towards}): {found}"
                         f"{mark}")
    lines += [f"Note: {note}" for note in s.notes]
    lines.append("Factor of safety of the critical surface by method:")
    for m in result.by_method:
        value = f"{m.fos:6.3f}" if np.isfinite(m.fos) else "   n/a"
        mark = "  (governing)" if m.method == result.method else ""
        note = f"  [{m.message}]" if m.message else ""
        lines.append(f"  {m.method:<18} {value}{mark}{note}")
    lines.append(result.caution)
    if result.plot:
        lines.append(f"Plot written to {result.plot}")
    return "\n".join(lines)
