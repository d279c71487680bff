"""slipwatch's limit-equilibrium engine: pure numerical code, no files, database or clock.

Sections and materials in, slice tables, factors of safety and search results out; SI units,
degrees at the interface, radians inside.
"""

from solver.errors import MethodError, SearchError, SectionError, SolverError, SurfaceError
from solver.infinite_slope import infinite_slope
from solver.methods import (
    METHOD_NAMES,
    SafetyResult,
    bishop_simplified,
    factor_of_safety,
    janbu_correction_factor,
    janbu_simplified,
    morgenstern_price,
    ordinary,
    spencer,
)
from solver.search import (
    SearchResult,
    SearchSettings,
    search_critical_surface,
    warm_reevaluate,
)
from solver.section import Material, Section, section_from_dict, section_to_dict
from solver.slices import Slices
from solver.slicing import SliceBatch, slice_circles, slice_polyline, slice_surface
from solver.surfaces import CircularSurface, PolylineSurface, circle_from_scarp_toe

__all__ = [
    "SolverError", "SectionError", "SurfaceError", "MethodError", "SearchError",
    "Material", "Section", "section_from_dict", "section_to_dict",
    "CircularSurface", "PolylineSurface", "circle_from_scarp_toe",
    "Slices", "SliceBatch", "slice_circles", "slice_polyline", "slice_surface",
    "METHOD_NAMES", "SafetyResult", "factor_of_safety", "ordinary", "bishop_simplified",
    "janbu_simplified", "janbu_correction_factor", "spencer", "morgenstern_price",
    "infinite_slope",
    "SearchSettings", "SearchResult", "search_critical_surface", "warm_reevaluate",
]
