"""Back-analysis of an observed slip: the strength that the slip implies.

When a slope has failed, the factor of safety on the observed slip surface, under the water
conditions at the time of failure, was 1.00. For a drained material that single condition does
not fix c' and phi' but a curve of pairs, the FoS = 1 locus: for each phi' the c' that gives
F = 1. What narrows it down (Duncan and Stark 1992; Duncan, Wright and Brandon 2014, ch. 11):

* the *position* of the slip: along the locus, low-c' pairs make shallow surfaces critical and
  high-c' pairs deep ones, so the pair whose critical surface lies closest to the observed one
  is the best fit (:func:`match_locus`, scored by the area between the two sliding masses);
* the *history*: at times when the slope stood under known water levels F was >= 1, which
  removes the pairs that would have failed then (:func:`history_constraints`).

The forms of strength solved for (``form``):

``"cohesion_friction"``
    Drained c'-phi': the locus c'(phi') over a range of phi'.
``"friction"``
    Drained with c' fixed (0 by default) and phi' solved: the residual strength of a
    reactivated slip on a pre-existing shear surface, or the fully softened strength of a
    first-time slide in stiff fissured clay, both normally taken with c' = 0 (Skempton 1970,
    1977, 1985; Stark and Eid 1997). The two differ in meaning, not in the computation; the
    curvature of the fully softened envelope at low stress is not modelled (linear
    Mohr-Coulomb only).
``"undrained"``
    Total stress: Su (at the material's strength datum; a stated strength gradient is kept).

Several sections through the same slip are solved jointly for one parameter set: the joint
locus is the c' (or phi', Su) at which the mean factor of safety of the observed surfaces,
weighted by the length of slope each section represents (:func:`section_weights`), is 1 (each
section's own locus is reported beside it, so a poor agreement between sections shows), the
stood-date checks require F >= 1 on every section, and the surface-match score is the
length-weighted mean of the sections' relative misfits.

The record check (:func:`history_constraints`) searches the critical surface at every stood
time: F >= 1 must hold on every surface, not only on the observed one, since a strength under
which any other surface fails at a time when the slope stood is contradicted by the record.
:func:`back_analyse` states, as data (:class:`ConsistencyCheck`), whether the best fit passes
its own checks: F close to 1 on each observed surface at failure, no searched surface at
failure well below it, and F >= 1 on every searched surface at every stood time.

When only the ends of the slip are known (back scarp and toe surveyed on the ground) with a
bound on its depth (an inclinometer shear zone, a trial pit), the observed slip is a
:class:`BoundedSlip`: F on it is the lowest F among the circles through the two ends whose
depth lies within the bounds (:func:`circles_through_ends`), so the locus is the strength at
which the most critical of those admissible surfaces has F = 1, and the depth of that surface
is reported against the bound (:class:`BoundedSurface`).

Everything here is pure: sections and points in, result dataclasses out. The observed surface
is sliced once; trial strengths replace the strength of the slices whose base lies in the
chosen material, so many trial strengths are solved together as one batch of surfaces.

References
----------
Cruden, D.M. and Varnes, D.J. (1996). Landslide types and processes. In Landslides:
    Investigation and Mitigation, Transportation Research Board Special Report 247, 36-75
    (the names of the parts of a landslide: main scarp, surface of rupture, toe).
Duncan, J.M. and Stark, T.D. (1992). Soil strengths from back analysis of slope failures. In
    Stability and Performance of Slopes and Embankments II, ASCE Geotechnical Special
    Publication 31, 890-904.
Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability, 2nd ed.
    Wiley, ch. 11 (analyses of slope failures; back analysis).
Skempton, A.W. (1970). First-time slides in over-consolidated clays. Geotechnique 20(3),
    320-324.
Skempton, A.W. (1977). Slope stability of cuttings in brown London Clay. Proc. 9th ICSMFE,
    Tokyo, 3, 261-270.
Skempton, A.W. (1985). Residual strength of clays in landslides, folded strata and the
    laboratory. Geotechnique 35(1), 3-18.
Stark, T.D. and Eid, H.T. (1997). Slope stability analyses in stiff fissured clays. Journal of
    Geotechnical and Geoenvironmental Engineering, ASCE, 123(4), 335-343.
"""

from __future__ import annotations

import inspect
import math
from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np
import shapely
from scipy import optimize

from solver import methods
from solver.errors import MethodError, SearchError, SectionError, SolverError, SurfaceError
from solver.methods import factor_of_safety
from solver.search import (
    RankedSurface,
    SearchSettings,
    optimise_polyline,
    search_critical_surface,
)
from solver.section import DRAINED, DRY, UNDRAINED, Section, section_from_dict, section_to_dict
from solver.slices import Slices
from solver.slicing import slice_circles, slice_polyline
from solver.surfaces import circle_from_scarp_toe

__all__ = [
    "FORMS",
    "BackAnalysisError",
    "ObservedSurfaceError",
    "NoSolutionError",
    "BackAnalysisSettings",
    "MatchSettings",
    "ObservedSlip",
    "BoundedSlip",
    "StoodCondition",
    "Locus",
    "SurfaceFit",
    "BoundedSurface",
    "LocusMatch",
    "HistoryCheck",
    "HistoryResult",
    "SensitivityCase",
    "BackAnalysisResult",
    "ConsistencyCheck",
    "consistency_checks",
    "section_weights",
    "with_strength",
    "fos_with_strength",
    "circles_through_ends",
    "bounded_surfaces",
    "fos_unity_locus",
    "surface_misfit",
    "match_locus",
    "history_constraints",
    "sensitivity",
    "back_analyse",
]

#: Forms of strength that a back-analysis solves for (see the module docstring).
FORMS = ("cohesion_friction", "friction", "undrained")

# Numerical settings of the back-analysis (not published values). A root of F(c') = 1 is only
# as sharp as F itself, so the iterative methods are run to a tighter tolerance than in a
# search, where only the ranking of surfaces matters.
#: Tolerance on F of the iterative methods during back-analysis [-].
BACKCALC_FOS_TOLERANCE = 1e-7
#: Iteration limit of the iterative methods during back-analysis.
BACKCALC_MAX_ITERATIONS = 200
#: Absolute tolerance of the solved strength (brentq ``xtol``) [kPa for c' and Su, deg for phi'].
BACKCALC_STRENGTH_TOLERANCE = 1e-6
#: Bracket of c' searched for F = 1 [kPa].
BACKCALC_COHESION_RANGE = (0.0, 200.0)
#: Bracket of phi' searched for F = 1 in the friction form [deg].
BACKCALC_FRICTION_RANGE = (0.0, 60.0)
#: Bracket of Su searched for F = 1 [kPa].
BACKCALC_UNDRAINED_RANGE = (0.0, 1000.0)
#: Locus points whose critical surface is searched (evenly spread over the locus).
BACKCALC_MATCH_POINTS = 6
#: Further locus points tried by the bounded refinement of the best match (0: none).
BACKCALC_REFINE_POINTS = 4
#: Limit of FoS evaluations of the non-circular optimisation of one match (when asked for).
BACKCALC_POLYLINE_EVALUATIONS = 400
#: How far [m] a surveyed scarp or toe point may lie from the section's ground line (survey and
#: drawing tolerance; common practice, not a published value).
BACKCALC_GROUND_TOLERANCE = 0.25
#: How far [m] an end of a surveyed slip surface (a polyline) may lie from the section's ground
#: line and still be taken onto it. A surveyed level is good to about a centimetre (total
#: station or RTK GNSS; common practice, from memory), and the ground line is itself straight
#: between surveyed points, so a smaller difference says nothing about the slip: the end is moved
#: onto the ground. A larger one below the ground is an error to be looked at, not moved.
BACKCALC_SURVEY_SNAP = 0.01
#: Trial circles through the scarp and toe of a bounded slip, spread evenly over the
#: admissible depths (both bounds included).
BACKCALC_BOUNDED_CIRCLES = 25
#: Allowance [-] of F on each observed surface at failure about 1, with the best-fit strength.
#: With one section F = 1 there by construction; with several only their length-weighted mean
#: is 1, and a section far from 1 did not fail with that strength. Our choice (the accuracy of
#: a surveyed surface and of the water at failure), not a published value.
BACKCALC_OBSERVED_ALLOWANCE = 0.05
#: Allowance [-] below 1 of F on the critical surface searched at failure with the best-fit
#: strength: the searched (optimised) surface lies a little below the surveyed one, which is
#: drawn through a few points. Our choice, not a published value; a critical F further below
#: 1 means the slope would have failed on another surface before the observed one.
BACKCALC_CRITICAL_ALLOWANCE = 0.05

# The flattest trial circle through two ends has its centre this many chord lengths above the
# chord (its sagitta is then chord / 400): flatter arcs add nothing a section can resolve.
_FLATTEST_CENTRE = 50.0
# Bisection steps that place a trial circle at a target depth (halves the offset range each).
_DEPTH_BISECTIONS = 60
# Points along the chord at which the depth of a trial circle below the ground is measured
# (the ground's own vertices between the ends are added).
_DEPTH_SAMPLES = 241
# A circle this close to a depth bound [m] is held by it.
_AT_BOUND = 1e-6

_MAX_FRICTION = 89.0


# --------------------------------------------------------------------------------------------
# Errors


class BackAnalysisError(SolverError, ValueError):
    """A back-analysis cannot be set up or has no answer; the message says which input."""


class ObservedSurfaceError(BackAnalysisError, SurfaceError):
    """The observed slip surface is not admissible for the section (does not cut the ground,
    crosses the base, misses the material whose strength is sought)."""


class NoSolutionError(BackAnalysisError):
    """No strength in the searched range gives F = 1; the message gives F at both ends."""


# --------------------------------------------------------------------------------------------
# Inputs and settings


@dataclass(frozen=True)
class BackAnalysisSettings:
    """Numerical settings of a back-analysis.

    Parameters
    ----------
    method : str
        Method of slices (default Spencer: force and moment equilibrium, suited to the
        non-circular surfaces that real slips follow).
    n_slices : int
        Slices of the observed surface (its vertices add more).
    tolerance : float
        [-] Tolerance on F of the iterative methods.
    max_iterations : int
        Iteration limit of the iterative methods.
    strength_tolerance : float
        [kPa or deg] Absolute tolerance of the solved strength.
    cohesion_range, friction_range, undrained_range : (float, float)
        [kPa], [deg], [kPa] Brackets searched for F = 1.
    """

    method: str = "spencer"
    n_slices: int = 30
    tolerance: float = BACKCALC_FOS_TOLERANCE
    max_iterations: int = BACKCALC_MAX_ITERATIONS
    strength_tolerance: float = BACKCALC_STRENGTH_TOLERANCE
    cohesion_range: tuple[float, float] = BACKCALC_COHESION_RANGE
    friction_range: tuple[float, float] = BACKCALC_FRICTION_RANGE
    undrained_range: tuple[float, float] = BACKCALC_UNDRAINED_RANGE

    def __post_init__(self) -> None:
        if self.method not in methods.METHOD_NAMES:
            raise MethodError(
                f"unknown method {self.method!r}; valid methods: {', '.join(methods.METHOD_NAMES)}"
            )
        _positive_int("n_slices", self.n_slices)
        _positive_int("max_iterations", self.max_iterations)
        for name in ("tolerance", "strength_tolerance"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise MethodError(f"{name} must be a positive number, got {value!r}")
        for name, upper in (("cohesion_range", math.inf), ("friction_range", _MAX_FRICTION),
                            ("undrained_range", math.inf)):
            low, high = _pair(name, getattr(self, name))
            if not (0 <= low < high <= upper) or not math.isfinite(high):
                raise MethodError(
                    f"{name} = {getattr(self, name)!r} must be (low, high) with "
                    f"0 <= low < high{f' <= {upper:g}' if math.isfinite(upper) else ''}"
                )


@dataclass(frozen=True)
class MatchSettings:
    """How the critical surface of a locus point is searched (see :func:`match_locus`).

    Parameters
    ----------
    points : int
        Locus points searched, evenly spread over the solved part of the locus.
    refine : int
        Further points tried by a bounded scalar minimisation of the misfit along phi'
        between the neighbours of the best point (0 switches it off).
    circles : str
        "centre lattice" or "scarp-to-toe band" (:func:`solver.search.search_critical_surface`).
    screen_with : str or None
        Faster method that screens the many trial circles (default Bishop's simplified
        method); None screens with the back-analysis method itself.
    non_circular : bool
        Also optimise a polyline from the best circle (default; slower, but real slips are
        rarely circles, and a circle cannot follow a slip along a weak layer).
    polyline_evaluations : int
        Limit of FoS evaluations of that optimisation.
    min_depth : float or None
        [m] Smallest depth of a competing surface; None takes the section's [search] min_depth.
    """

    points: int = BACKCALC_MATCH_POINTS
    refine: int = BACKCALC_REFINE_POINTS
    circles: str = "centre lattice"
    screen_with: str | None = "bishop_simplified"
    non_circular: bool = True
    polyline_evaluations: int = BACKCALC_POLYLINE_EVALUATIONS
    min_depth: float | None = None

    def __post_init__(self) -> None:
        _positive_int("points", self.points)
        _positive_int("polyline_evaluations", self.polyline_evaluations)
        if isinstance(self.refine, bool) or not isinstance(self.refine, int) or self.refine < 0:
            raise MethodError(f"refine must be an integer >= 0, got {self.refine!r}")
        if self.screen_with is not None and self.screen_with not in methods.METHOD_NAMES:
            raise MethodError(
                f"unknown screening method {self.screen_with!r}; valid methods: "
                f"{', '.join(methods.METHOD_NAMES)}"
            )
        if self.min_depth is not None and not (math.isfinite(self.min_depth) and self.min_depth >= 0):
            raise MethodError(f"min_depth must be a number >= 0 m, got {self.min_depth!r}")


@dataclass(frozen=True, eq=False)
class ObservedSlip:
    """One section through the slip: the section under the water conditions at failure and
    the observed slip surface in its frame.

    Attributes
    ----------
    section : Section
        The section before the slip, its water lines those at the time of failure.
    surface : ndarray (k, 2)
        [m] Observed slip surface, x strictly increasing, both ends on or above the ground; an
        end within ``snap`` of the ground is moved onto it.
    name : str
        Label in reports (default: the section id).
    snap : float
        [m] Tolerance of the ends on the ground (:data:`BACKCALC_SURVEY_SNAP`).
    length : float or None
        [m] Length of slope, along the slope's strike, that this section represents: its
        weight when several sections are solved jointly (:func:`section_weights`). None on
        every section weighs them equally.

    Raises
    ------
    ObservedSurfaceError
        Too few or non-finite points, x not increasing, or an end off the section or below
        the ground by more than ``snap`` (the message names the end and its x).
    """

    section: Section
    surface: np.ndarray
    name: str = ""
    snap: float = BACKCALC_SURVEY_SNAP
    length: float | None = None

    def __post_init__(self) -> None:
        _check_length(self.length)
        points = np.array(self.surface, dtype=float)
        if points.ndim != 2 or points.shape[1] != 2 or len(points) < 2:
            raise ObservedSurfaceError(
                f"observed surface must be at least two [x, y] points, got {self.surface!r}"
            )
        if not np.isfinite(points).all():
            raise ObservedSurfaceError(f"observed surface points must be finite, got {points.tolist()}")
        if (np.diff(points[:, 0]) <= 0).any():
            i = int(np.argmax(np.diff(points[:, 0]) <= 0))
            raise ObservedSurfaceError(
                f"observed surface: x must increase strictly, but x = {points[i, 0]:g} is "
                f"followed by x = {points[i + 1, 0]:g} m"
            )
        if not self.name:
            object.__setattr__(self, "name", self.section.id)
        if not (_is_number(self.snap) and self.snap >= 0):
            raise MethodError(f"snap must be a number >= 0 m, got {self.snap!r}")
        _ends_onto_ground(points, self.section, self.name, self.snap)
        points.setflags(write=False)
        object.__setattr__(self, "surface", points)


def _ends_onto_ground(points: np.ndarray, section: Section, name: str, snap: float) -> None:
    """Move the ends of a surveyed surface (k, 2) that lie within ``snap`` [m] of the ground
    onto it, in place; refuse an end off the section or deeper below the ground, naming it."""
    ground = section.ground
    levels = np.interp(points[[0, -1], 0], *ground.T)
    if levels[0] == levels[1]:
        labels = ("left end", "right end")
    else:
        upper = 0 if levels[0] > levels[1] else 1
        labels = tuple("upper end (scarp)" if i == upper else "lower end (toe)" for i in (0, 1))
    for row, label, level in zip((0, -1), labels, levels):
        x, y = points[row]
        where = f"observed surface of {name!r}: its {label} [{x:g}, {y:g}]"
        if not ground[0, 0] <= x <= ground[-1, 0]:
            raise ObservedSurfaceError(f"{where} lies off section {section.id!r} (x = "
                                       f"{ground[0, 0]:g} to {ground[-1, 0]:g} m)")
        if abs(y - level) <= snap:
            points[row, 1] = level
        elif y < level:
            raise ObservedSurfaceError(
                f"{where} is {level - y:.3f} m below the ground at x = {x:g} m (ground at "
                f"y = {level:.3f} m); the ends of a surveyed slip surface must lie on or above "
                f"the ground (ends within {snap:g} m of it are taken onto it): give the point "
                "where the slip meets the ground"
            )


@dataclass(frozen=True, eq=False)
class StoodCondition:
    """A time when the slope stood: the sections (same order as the observed slips) with their
    water lines at that time. F >= 1 must hold on every observed surface then."""

    label: str
    sections: tuple[Section, ...]


@dataclass(frozen=True, eq=False)
class BoundedSlip:
    """One section through the slip where only its ends and a bound on its depth are known.

    The slip surface is taken as the most critical of the circles through the scarp and the
    toe whose deepest vertical depth below the ground lies between ``min_depth`` and
    ``max_depth`` (:func:`circles_through_ends`); which circle that is depends on the trial
    strength.

    Attributes
    ----------
    section : Section
        The section before the slip, its water lines those at the time of failure.
    scarp : (float, float)
        [m] Surveyed upper end of the slip on the ground (foot of the main scarp, where the
        surface of rupture meets the original ground; Cruden and Varnes 1996), section frame.
    toe : (float, float)
        [m] Surveyed lower end on the ground (toe of the surface of rupture, or the bulge),
        lower than the scarp.
    max_depth : float
        [m] > 0. Deepest vertical depth of the slip below the ground that the evidence allows
        (e.g. the shear zone of an inclinometer, or the bottom of a trial pit that found it).
    min_depth : float
        [m] >= 0 and < max_depth. Depth the slip is known to reach at least.
    name : str
        Label in reports (default: the section id).
    n_circles : int
        Trial circles spread over the admissible depths.
    ground_tolerance : float
        [m] How far the surveyed scarp and toe may lie from the ground line.
    length : float or None
        [m] Length of slope this section represents (as :class:`ObservedSlip`).

    Raises
    ------
    ObservedSurfaceError
        An end off the section or not on its ground line, a toe upslope of (or level with)
        the scarp, or depth bounds that are not 0 <= min_depth < max_depth.
    """

    section: Section
    scarp: tuple[float, float]
    toe: tuple[float, float]
    max_depth: float
    min_depth: float = 0.0
    name: str = ""
    n_circles: int = BACKCALC_BOUNDED_CIRCLES
    ground_tolerance: float = BACKCALC_GROUND_TOLERANCE
    length: float | None = None

    def __post_init__(self) -> None:
        _check_length(self.length)
        _positive_int("n_circles", self.n_circles)
        if not (_is_number(self.max_depth) and self.max_depth > 0):
            raise ObservedSurfaceError(f"max_depth = {self.max_depth!r} m must be a number > 0 "
                                       "(the deepest the slip can lie below the ground)")
        if not (_is_number(self.min_depth) and 0 <= self.min_depth < self.max_depth):
            raise ObservedSurfaceError(f"min_depth = {self.min_depth!r} m must be a number >= 0 "
                                       f"and below max_depth = {self.max_depth:g} m")
        if not (_is_number(self.ground_tolerance) and self.ground_tolerance >= 0):
            raise MethodError(f"ground_tolerance must be a number >= 0 m, got "
                              f"{self.ground_tolerance!r}")
        ground = self.section.ground
        ends = {}
        for label in ("scarp", "toe"):
            x, y = _surveyed_point(label, getattr(self, label))
            if not ground[0, 0] <= x <= ground[-1, 0]:
                raise ObservedSurfaceError(
                    f"{label} [{x:g}, {y:g}] lies off section {self.section.id!r} (x = "
                    f"{ground[0, 0]:g} to {ground[-1, 0]:g} m)"
                )
            level = float(np.interp(x, *ground.T))
            if abs(y - level) > self.ground_tolerance:
                raise ObservedSurfaceError(
                    f"{label} [{x:g}, {y:g}] is not on the ground of section "
                    f"{self.section.id!r}: the ground is at y = {level:.2f} m there (tolerance "
                    f"{self.ground_tolerance:g} m); give the surveyed point where the slip "
                    "meets the ground"
                )
            ends[label] = (x, y, level)
            object.__setattr__(self, label, (x, y))
        if ends["toe"][2] >= ends["scarp"][2]:
            raise ObservedSurfaceError(
                f"toe [{ends['toe'][0]:g}, {ends['toe'][1]:g}] is upslope of (or level with) "
                f"scarp [{ends['scarp'][0]:g}, {ends['scarp'][1]:g}] (ground at "
                f"{ends['toe'][2]:.2f} m against {ends['scarp'][2]:.2f} m): the scarp is the "
                "upper end of the slip, the toe the lower end"
            )
        object.__setattr__(self, "max_depth", float(self.max_depth))
        object.__setattr__(self, "min_depth", float(self.min_depth))
        if not self.name:
            object.__setattr__(self, "name", self.section.id)


# --------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class Locus:
    """Strengths that give F = 1 on the observed surface(s).

    One row per point; the "cohesion_friction" form has one point per phi' asked for, the
    other forms one point.

    Attributes
    ----------
    form, material, method : str
    friction_angle : ndarray (n,)
        [deg] phi' (solved in the friction form, given otherwise; NaN for undrained).
    cohesion : ndarray (n,)
        [kPa] c' (solved in the cohesion_friction form, given otherwise; NaN for undrained).
    undrained_strength : ndarray (n,)
        [kPa] Su (solved in the undrained form; NaN otherwise).
    found : ndarray of bool (n,)
        Whether F = 1 was reached within the bracket.
    fos_at_low, fos_at_high : ndarray (n,)
        [-] F (mean over sections) at the two ends of the bracket of the solved strength.
    bracket : (float, float)
        The bracket of the solved strength [kPa or deg].
    iterations : ndarray of int (n,)
        Root-finder iterations.
    message : tuple of str (n,)
        Why a point has no solution, or the method's warning at the root ("" when all is well).
    by_section : dict
        {slip name: ndarray (n,)} the solved strength of each section's own locus (only when
        several sections are solved jointly).
    solved : str
        Name of the solved quantity: "cohesion", "friction_angle" or "undrained_strength".
    """

    form: str
    material: str
    method: str
    friction_angle: np.ndarray
    cohesion: np.ndarray
    undrained_strength: np.ndarray
    found: np.ndarray
    fos_at_low: np.ndarray
    fos_at_high: np.ndarray
    bracket: tuple[float, float]
    iterations: np.ndarray
    message: tuple[str, ...]
    by_section: dict = field(default_factory=dict)
    solved: str = "cohesion"

    @property
    def n_points(self) -> int:
        return int(self.found.size)

    def values(self) -> np.ndarray:
        """The solved quantity at every point [kPa or deg]."""
        return getattr(self, self.solved)

    def point(self, i: int) -> dict:
        """Strength of point ``i``: {"cohesion", "friction_angle", "undrained_strength"}."""
        return {
            "cohesion": float(self.cohesion[i]),
            "friction_angle": float(self.friction_angle[i]),
            "undrained_strength": float(self.undrained_strength[i]),
        }


@dataclass(frozen=True)
class SurfaceFit:
    """How close a critical surface lies to the observed one, on one section.

    Attributes
    ----------
    slip : str
        Name of the observed slip (section).
    critical_fos : float
        [-] F of the critical surface found with the point's strength (<= 1 up to search
        accuracy, since the observed surface has F = 1).
    critical_kind : str
        "circle" or "polyline".
    critical_points : ndarray (k, 2)
        [m] The critical surface between its ends on the ground, section frame.
    misfit_area : float
        [m2] Area between the two surfaces: the symmetric difference of the two sliding
        masses.
    observed_area : float
        [m2] Area of the observed sliding mass.
    misfit_ratio : float
        [-] misfit_area / observed_area (0: the same mass).
    hausdorff : float
        [m] Hausdorff distance between the two surface lines.
    """

    slip: str
    critical_fos: float
    critical_kind: str
    critical_points: np.ndarray
    misfit_area: float
    observed_area: float
    misfit_ratio: float
    hausdorff: float


@dataclass(frozen=True)
class BoundedSurface:
    """The critical circle through the scarp and toe of a bounded slip at one locus point.

    Attributes
    ----------
    slip : str
        Name of the bounded slip (section).
    friction_angle, cohesion, undrained_strength : float
        [deg], [kPa], [kPa] The locus point's strength.
    fos : float
        [-] F of that circle (1 up to the root tolerance for a single section).
    centre_x, centre_y, radius : float
        [m] The circle, section frame.
    depth : float
        [m] Its deepest vertical depth below the ground.
    min_depth, max_depth : float
        [m] The bounds given.
    at_bound : str
        "max_depth" when the circle is the deepest one the bound allows (a deeper surface
        would be more critical: the locus there rests on the bound), "min_depth" likewise for
        the shallowest, "" when the critical circle lies strictly within the bounds.
    points : ndarray (k, 2)
        [m] The circle between the scarp and the toe.
    """

    slip: str
    friction_angle: float
    cohesion: float
    undrained_strength: float
    fos: float
    centre_x: float
    centre_y: float
    radius: float
    depth: float
    min_depth: float
    max_depth: float
    at_bound: str
    points: np.ndarray


@dataclass(frozen=True)
class LocusMatch:
    """A locus point with the critical surfaces its strength gives.

    ``score`` is the mean ``misfit_ratio`` over the sections, weighted by the length of slope
    each represents (:func:`section_weights`); the best fit has the lowest.
    ``refined`` is True for points added by the refinement between locus points.
    """

    friction_angle: float
    cohesion: float
    undrained_strength: float
    fits: tuple[SurfaceFit, ...]
    score: float
    refined: bool = False


@dataclass(frozen=True)
class HistoryCheck:
    """F at one stood time, for every locus point (see :func:`history_constraints`).

    Attributes
    ----------
    label : str
    fos : ndarray (n,)
        [-] Lowest F over the sections and over every surface checked: the observed one and
        the critical surfaces searched at that time (NaN: undecided).
    stood : ndarray of bool (n,)
        Where ``fos`` >= 1.
    observed_fos : ndarray (n,)
        [-] Lowest F over the observed surfaces alone (a necessary condition only).
    searches : int
        Critical-surface searches run at that time (strengths times sections).
    surfaces : int
        Distinct searched surfaces re-evaluated at every point.
    best_fos : float
        [-] ``fos`` at the best fit's own strength (NaN without a best fit).
    """

    label: str
    fos: np.ndarray
    stood: np.ndarray
    observed_fos: np.ndarray
    searches: int = 0
    surfaces: int = 0
    best_fos: float = math.nan


@dataclass(frozen=True)
class ConsistencyCheck:
    """One check of a back-analysis result against its own premises (see
    :func:`consistency_checks`).

    Attributes
    ----------
    name : str
        What is checked: "observed surface at failure", "critical surface at failure" or
        the label of a stood time.
    passed : bool
    value : float
        [-] The factor of safety checked (for the observed surface: the largest departure of
        a section's F from 1).
    limit : float
        [-] The limit it is held to.
    detail : str
        The check in words, with the section or time that governs.
    """

    name: str
    passed: bool
    value: float
    limit: float
    detail: str


@dataclass(frozen=True)
class HistoryResult:
    """The locus cut down by the stood times.

    Attributes
    ----------
    checks : tuple of HistoryCheck
    surviving : ndarray of bool (n,)
        Locus points with a solution that gave F >= 1 at every stood time.
    friction_range, cohesion_range, undrained_range : (float, float) or None
        Extent of the surviving points [deg], [kPa], [kPa] (None when none survive, or for a
        quantity the form does not vary).
    limits : tuple of dict
        Where the stood constraint crosses F = 1 between two locus points, found by root
        finding along the locus: {"label", "friction_angle", "cohesion"} (cohesion_friction
        form only).
    """

    checks: tuple[HistoryCheck, ...]
    surviving: np.ndarray
    friction_range: tuple[float, float] | None
    cohesion_range: tuple[float, float] | None
    undrained_range: tuple[float, float] | None
    limits: tuple[dict, ...] = ()


@dataclass(frozen=True)
class SensitivityCase:
    """The locus recomputed with one input changed.

    Attributes
    ----------
    label : str
        E.g. "water lines +0.50 m".
    quantity : str
        "water level" [m] or "unit weight" [kN/m3].
    change : float
        The change applied (every water line raised by it; every unit weight increased by it).
    values : ndarray (n,)
        The solved strength at each locus point under the change [kPa or deg].
    best_value : float
        The solved strength at the best fit's fixed parameter (its phi' in the
        cohesion_friction form) under the change; NaN when not found.
    shift : float
        best_value minus the best fit's own value.
    """

    label: str
    quantity: str
    change: float
    values: np.ndarray
    best_value: float
    shift: float


@dataclass(frozen=True)
class BackAnalysisResult:
    """Everything a back-analysis found (see :func:`back_analyse`).

    ``best`` is the best-fitting locus match (None when no surface match was run); its strength
    gives F = 1 on the observed surface(s) and a critical surface closest to the observed one.
    ``bounded`` gives, for every solved locus point and every :class:`BoundedSlip`, the
    critical circle through its ends with its depth against the bounds.
    ``consistency`` holds the checks of the best fit against the record
    (:func:`consistency_checks`; empty without a best fit) and ``consistent`` says whether it
    passes them all. ``weights`` are the sections' weights (:func:`section_weights`).
    ``notes`` carries warnings in plain words.
    """

    form: str
    material: str
    method: str
    locus: Locus
    matches: tuple[LocusMatch, ...]
    best: LocusMatch | None
    history: HistoryResult | None
    sensitivity: tuple[SensitivityCase, ...]
    slips: tuple[str, ...]
    notes: tuple[str, ...] = ()
    bounded: tuple[BoundedSurface, ...] = ()
    consistency: tuple[ConsistencyCheck, ...] = ()
    weights: tuple[float, ...] = ()

    @property
    def consistent(self) -> bool:
        """True when there is a best fit and it passes every consistency check."""
        return bool(self.consistency) and all(c.passed for c in self.consistency)


# --------------------------------------------------------------------------------------------
# Strength of one material


def with_strength(
    section: Section,
    material: str,
    *,
    cohesion: float | None = None,
    friction_angle: float | None = None,
    undrained_strength: float | None = None,
) -> Section:
    """A copy of ``section`` in which ``material`` has the given strength.

    Parameters
    ----------
    section : Section
    material : str
        Name of a material of the section.
    cohesion : float, optional
        [kPa] c' (drained).
    friction_angle : float, optional
        [deg] phi' (drained).
    undrained_strength : float, optional
        [kPa] Su at the strength datum (undrained). Giving it for a drained material makes
        that material undrained (total stress, no pore pressure, no water line), as an
        undrained back-analysis of it requires; its unit weights are kept.

    Raises
    ------
    SectionError
        Unknown material, invalid strength, or a drained strength for an undrained material
        (which has no water line to give its pore pressure).
    """
    data = section_to_dict(section)
    item = next((m for m in data["material"] if m["name"] == material), None)
    if item is None:
        known = ", ".join(m["name"] for m in data["material"])
        raise SectionError(f"material {material!r} is not defined in section {section.id!r} "
                           f"(known: {known})")
    drained_given = cohesion is not None or friction_angle is not None
    if drained_given and undrained_strength is not None:
        raise SectionError("give a drained strength (cohesion, friction_angle) or an undrained "
                           "one (undrained_strength), not both")
    if drained_given:
        if item["model"] != DRAINED:
            raise SectionError(
                f"material {material!r} of section {section.id!r} is undrained; a drained "
                "strength needs a drained material with a water line (edit the section file)"
            )
        if cohesion is not None:
            item["cohesion"] = float(cohesion)
        if friction_angle is not None:
            item["friction_angle"] = float(friction_angle)
    elif undrained_strength is not None:
        if item["model"] == DRAINED:
            for key in ("cohesion", "friction_angle", "ru", "water"):
                item.pop(key, None)
            item.update(model=UNDRAINED, strength_gradient=0.0, water=DRY)
        item["undrained_strength"] = float(undrained_strength)
    return section_from_dict(data)


class _SlipModel:
    """One observed surface sliced once, with the strength of the chosen material's base
    slices replaceable by arrays of trial strengths (one trial per row)."""

    def __init__(self, slip: ObservedSlip, material: str, form: str, settings: BackAnalysisSettings,
                 require_material: bool = True, direction: int | None = None):
        section, index = _prepared_section(slip.section, material, form)
        self.name = slip.name
        self.length = slip.length
        self.material = material
        self.section = section
        self.surface = slip.surface
        self.form = form
        self.settings = settings
        batch = slice_polyline(section, slip.surface, settings.n_slices, direction=direction)
        if not batch.valid[0]:
            raise ObservedSurfaceError(
                f"observed surface of {slip.name!r} (x = {slip.surface[0, 0]:g} to "
                f"{slip.surface[-1, 0]:g} m) is not admissible for section {section.id!r}: "
                f"{batch.reason[0]} (both ends must lie on or above the ground line and the "
                "surface must run below it in between)"
            )
        self.slices: Slices = batch.slices
        self.mask = (self.slices.base_material == index) & self.slices.active
        if require_material and not self.mask.any():
            found = sorted({section.materials[i].name for i in np.unique(
                self.slices.base_material[self.slices.active]) if i >= 0})
            raise ObservedSurfaceError(
                f"observed surface of {slip.name!r} does not pass through material "
                f"{material!r} (its base lies in {', '.join(found)}); the slip says nothing "
                "about that material's strength"
            )
        self.su_reference = float(section.materials[index].undrained_strength)
        self.options = _method_options(settings)

    def fos(self, cohesion, friction_angle, undrained_strength) -> methods.SafetyResult:
        """F for trial strengths (arrays (m,), broadcast together)."""
        c, phi, su = _trial_arrays(cohesion, friction_angle, undrained_strength)
        rows = self.slices.select(np.zeros(c.size, dtype=int))
        return factor_of_safety(_with_trials(rows, self.mask, self.form, c, phi, su,
                                             self.su_reference),
                                self.settings.method, **self.options)


def _prepared_section(section: Section, material: str, form: str) -> tuple[Section, int]:
    """The section ready for trial strengths of ``material`` in ``form``, and its index."""
    index = section.material_index(material)
    target = section.materials[index]
    if form == "undrained" and target.model == DRAINED:
        section = with_strength(section, material, undrained_strength=0.0)
    if form != "undrained" and target.model != DRAINED:
        raise BackAnalysisError(
            f"material {material!r} of section {section.id!r} is undrained; a {form} "
            "back-analysis needs a drained material (or use the undrained form)"
        )
    return section, index


def _trial_arrays(cohesion, friction_angle, undrained_strength):
    return np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, dtype=float))
                                 for v in (cohesion, friction_angle, undrained_strength)))


def _with_trials(rows: Slices, mask, form, c, phi, su, su_reference) -> Slices:
    """``rows`` (one trial per row) with the strength of the masked bases replaced."""
    mask = np.broadcast_to(mask, rows.cohesion.shape)
    if form == "undrained":
        # Su(y) = Su0 + gradient * depth below the datum: shifting Su0 shifts every base.
        new_c = np.where(mask, rows.cohesion + (su - su_reference)[:, None], rows.cohesion)
        new_tan = rows.tan_phi
    else:
        new_c = np.where(mask, c[:, None], rows.cohesion)
        new_tan = np.where(mask, np.tan(np.radians(phi))[:, None], rows.tan_phi)
    return replace(rows, cohesion=new_c, tan_phi=new_tan)


# --------------------------------------------------------------------------------------------
# Slips known by their ends and a depth bound


def circles_through_ends(ground, scarp_x, toe_x, *, max_depth, min_depth=0.0,
                         n_circles: int = BACKCALC_BOUNDED_CIRCLES):
    r"""Circles through two ground points with their depth below the ground within bounds.

    The circles through the ends A and B with the centre above the chord form a nested family
    (two circles meet in at most two points, so their arcs between A and B do not cross): the
    arc rises everywhere as the centre moves away from the chord, and its deepest vertical
    depth below the ground, :math:`d = \max_x (y_{ground}(x) - y_{arc}(x))`, falls
    monotonically from the semicircle (centre on the chord) to the flattest arc tried. The
    circles returned are spread evenly in depth over
    :math:`[\max(d_{min}, d_{flattest}), \min(d_{max}, d_{semicircle})]`, both ends
    included, each placed at its depth by bisection of the centre's offset from the chord
    (:func:`solver.surfaces.circle_from_scarp_toe` with the radius
    :math:`R = \sqrt{s^2 + (|AB|/2)^2}`). Arcs through A and B deeper than the semicircle
    double back in x and are not slip surfaces.

    Parameters
    ----------
    ground : array (n, 2) or Section
        [m] Ground line (x strictly increasing), or a section.
    scarp_x, toe_x : float
        [m] Offsets of the two ends on the ground (either order).
    max_depth : float
        [m] Largest depth allowed.
    min_depth : float
        [m] Smallest depth allowed.
    n_circles : int
        Circles returned (1 when the admissible depths reduce to one).

    Returns
    -------
    (CircularSurface, ndarray)
        The circles (array fields, deepest first) and their depths [m].

    Raises
    ------
    ObservedSurfaceError
        No circle through the ends has a depth within the bounds.
    """
    points = np.asarray(getattr(ground, "ground", ground), dtype=float)
    xa, xb = sorted((float(scarp_x), float(toe_x)))
    ya, yb = np.interp([xa, xb], *points.T)
    half = float(np.hypot(xb - xa, yb - ya)) / 2
    inner = points[(points[:, 0] > xa) & (points[:, 0] < xb), 0]
    x = np.union1d(np.linspace(xa, xb, _DEPTH_SAMPLES), inner)
    top = np.interp(x, *points.T)

    def family(offset):
        circle = circle_from_scarp_toe(points, xa, xb, radius=np.hypot(offset, half))
        xc, yc, r = (np.atleast_1d(np.asarray(v, dtype=float))
                     for v in (circle.centre_x, circle.centre_y, circle.radius))
        arc = yc[:, None] - np.sqrt(np.maximum(r[:, None] ** 2 - (x - xc[:, None]) ** 2, 0.0))
        return circle, (top - arc).max(axis=1)

    flattest_offset = _FLATTEST_CENTRE * 2 * half
    _, (deepest, flattest) = family(np.array([0.0, flattest_offset]))
    low, high = max(float(min_depth), flattest), min(float(max_depth), deepest)
    if low > high:
        raise ObservedSurfaceError(
            f"no circle through the ground at x = {xa:g} and {xb:g} m has a depth between "
            f"min_depth = {min_depth:g} and max_depth = {max_depth:g} m: such circles are "
            f"{flattest:.2f} to {deepest:.2f} m deep"
        )
    _positive_int("n_circles", n_circles)
    target = np.linspace(high, low, n_circles) if high > low else np.array([high])
    near = np.zeros(target.size)
    far = np.full(target.size, flattest_offset)
    for _ in range(_DEPTH_BISECTIONS):
        middle = (near + far) / 2
        too_deep = family(middle)[1] > target
        near = np.where(too_deep, middle, near)
        far = np.where(too_deep, far, middle)
    # The far side of the bracket is never deeper than its target, so max_depth holds exactly.
    far[target >= deepest] = 0.0
    return family(far)


class _LowestFos:
    """F of the most critical admissible circle of a bounded slip, per trial strength (the
    fields that the locus and history code read from a SafetyResult)."""

    def __init__(self, fos, converged, message, critical):
        self.fos, self.converged, self.message, self.critical = fos, converged, message, critical


class _BoundedSlipModel:
    """The admissible circles of a bounded slip sliced once; F of a trial strength is the
    lowest over them."""

    def __init__(self, slip: BoundedSlip, material: str, form: str, settings: BackAnalysisSettings):
        section, index = _prepared_section(slip.section, material, form)
        self.name, self.material, self.section, self.form = slip.name, material, section, form
        self.settings, self.slip, self.length = settings, slip, slip.length
        circles, depth = circles_through_ends(
            section, slip.scarp[0], slip.toe[0], max_depth=slip.max_depth,
            min_depth=slip.min_depth, n_circles=slip.n_circles)
        batch = slice_circles(section, circles.centre_x, circles.centre_y, circles.radius,
                              settings.n_slices)
        where = (f"circles through scarp x = {slip.scarp[0]:g} m and toe x = {slip.toe[0]:g} m "
                 f"of {slip.name!r} ({depth.min():.2f} to {depth.max():.2f} m deep)")
        if not batch.valid.any():
            reasons = ", ".join(f"{n} {r}" for r, n in batch.rejected().items())
            raise ObservedSurfaceError(f"none of the {where} is admissible for section "
                                       f"{section.id!r}: {reasons}")
        keep = np.asarray(batch.index, dtype=int)
        self.family_index = keep
        self.n_family = depth.size
        self.centre_x, self.centre_y, self.radius = (np.asarray(v, dtype=float)[keep] for v in
                                                     (circles.centre_x, circles.centre_y,
                                                      circles.radius))
        self.depth = depth[keep]
        # Which bound holds the deepest and the shallowest circle of the family (the bisection
        # places a circle held by a bound within far less than a micrometre of it).
        self.held = (slip.max_depth <= depth[0] + _AT_BOUND,
                     slip.min_depth > 0 and slip.min_depth >= depth[-1] - _AT_BOUND)
        self.slices: Slices = batch.slices
        self.mask = (self.slices.base_material == index) & self.slices.active
        if not self.mask.any():
            raise ObservedSurfaceError(f"none of the {where} passes through material "
                                       f"{material!r}; the slip says nothing about its strength")
        self.su_reference = float(section.materials[index].undrained_strength)
        self.options = _method_options(settings)

    def fos(self, cohesion, friction_angle, undrained_strength) -> _LowestFos:
        """Lowest F over the circles for trial strengths (arrays (m,), broadcast together)."""
        c, phi, su = _trial_arrays(cohesion, friction_angle, undrained_strength)
        k = self.depth.size
        rows = self.slices.select(np.tile(np.arange(k), c.size))
        trials = _with_trials(rows, np.tile(self.mask, (c.size, 1)), self.form,
                              np.repeat(c, k), np.repeat(phi, k), np.repeat(su, k),
                              self.su_reference)
        solved = factor_of_safety(trials, self.settings.method, **self.options)
        fos = np.where(_usable(solved), np.asarray(solved.fos, dtype=float),
                       np.inf).reshape(c.size, k)
        critical = np.argmin(fos, axis=1)
        lowest = fos[np.arange(c.size), critical]
        found = np.isfinite(lowest)
        messages = np.asarray(solved.message, dtype=object).reshape(c.size, k)
        message = tuple(str(messages[i, critical[i]]) if found[i] else
                        f"no circle of the family gave a converged F ({self.settings.method})"
                        for i in range(c.size))
        return _LowestFos(np.where(found, lowest, np.nan), found, message,
                          np.where(found, critical, -1))

    def surface(self, row: int, strength: dict, fos: float) -> BoundedSurface:
        xc, yc, r = self.centre_x[row], self.centre_y[row], self.radius[row]
        x = np.linspace(*sorted((self.slip.scarp[0], self.slip.toe[0])), 120)
        y = yc - np.sqrt(np.maximum(r**2 - (x - xc) ** 2, 0.0))
        member = self.family_index[row]
        at_bound = ("max_depth" if member == 0 and self.held[0] else
                    "min_depth" if member == self.n_family - 1 and self.held[1] else "")
        return BoundedSurface(
            slip=self.name, friction_angle=strength["friction_angle"],
            cohesion=strength["cohesion"], undrained_strength=strength["undrained_strength"],
            fos=float(fos), centre_x=float(xc), centre_y=float(yc), radius=float(r),
            depth=float(self.depth[row]), min_depth=self.slip.min_depth,
            max_depth=self.slip.max_depth, at_bound=at_bound, points=np.column_stack([x, y]),
        )  # fmt: skip


def bounded_surfaces(
    slips: Sequence[ObservedSlip | BoundedSlip] | BoundedSlip,
    locus: Locus,
    *,
    settings: BackAnalysisSettings | None = None,
) -> tuple[BoundedSurface, ...]:
    """The critical circle of every bounded slip at every solved locus point.

    Parameters
    ----------
    slips : BoundedSlip or sequence
        As given to :func:`fos_unity_locus`; observed (polyline) slips are skipped.
    locus : Locus
    settings : BackAnalysisSettings, optional

    Returns
    -------
    tuple of BoundedSurface
        Point by point in locus order, slip by slip within a point.
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings(method=locus.method)
    solved = np.flatnonzero(locus.found)
    found = []
    for slip in slips:
        if not isinstance(slip, BoundedSlip):
            continue
        model = _BoundedSlipModel(slip, locus.material, locus.form, settings)
        lowest = model.fos(np.nan_to_num(locus.cohesion[solved]),
                           np.nan_to_num(locus.friction_angle[solved]),
                           np.nan_to_num(locus.undrained_strength[solved]))
        found.append({int(i): model.surface(int(lowest.critical[j]), locus.point(int(i)),
                                            lowest.fos[j])
                      for j, i in enumerate(solved) if lowest.critical[j] >= 0})
    return tuple(by_point[i] for i in solved for by_point in found if i in by_point)


def _model_of(slip, material: str, form: str, settings: BackAnalysisSettings):
    if isinstance(slip, BoundedSlip):
        return _BoundedSlipModel(slip, material, form, settings)
    return _SlipModel(slip, material, form, settings)


def _on_section(slip, section: Section):
    """The same observed slip on another state of its section (water, unit weights)."""
    return replace(slip, section=section)


def fos_with_strength(
    slip: ObservedSlip,
    material: str,
    *,
    cohesion=0.0,
    friction_angle=0.0,
    undrained_strength=None,
    settings: BackAnalysisSettings | None = None,
) -> methods.SafetyResult:
    """Factor of safety of the observed surface for trial strengths of one material.

    Parameters
    ----------
    slip : ObservedSlip
    material : str
    cohesion, friction_angle : float or array (m,)
        [kPa], [deg] Drained trial strengths (broadcast together).
    undrained_strength : float or array (m,), optional
        [kPa] Undrained trial strength Su; when given, the material is analysed undrained.
    settings : BackAnalysisSettings, optional

    Returns
    -------
    SafetyResult
        One row per trial strength. For a :class:`BoundedSlip` only ``fos``, ``converged``
        and ``message`` are given, of the most critical admissible circle (``critical``: its
        row among the admissible circles).
    """
    settings = settings or BackAnalysisSettings()
    form = "undrained" if undrained_strength is not None else "cohesion_friction"
    model = _model_of(slip, material, form, settings)
    su = 0.0 if undrained_strength is None else undrained_strength
    return model.fos(cohesion, friction_angle, su)


# --------------------------------------------------------------------------------------------
# The FoS = 1 locus


def fos_unity_locus(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    material: str,
    form: str = "cohesion_friction",
    *,
    friction_angles=None,
    cohesion: float = 0.0,
    settings: BackAnalysisSettings | None = None,
) -> Locus:
    r"""The strengths of ``material`` that give F = 1 on the observed surface(s).

    For the cohesion_friction form, for each phi' of ``friction_angles`` the c' with

    .. math:: \bar F(c', \phi') = \sum_{k=1}^{n_s} w_k F_k(c', \phi') = 1

    (n_s observed sections weighted by the length of slope each represents,
    :func:`section_weights`; one section: F = 1), found by Brent's method
    (:func:`scipy.optimize.brentq`) within ``settings.cohesion_range``. F increases with c' on
    a fixed surface, so a root exists exactly when F at the two ends of the bracket lies on
    either side of 1; both ends are solved for every phi' in one batch. The friction form
    solves phi' with c' = ``cohesion``; the undrained form solves Su.

    Parameters
    ----------
    slips : ObservedSlip or sequence of them
        The sections through the slip with the water at failure and the observed surfaces.
    material : str
        The material whose strength is sought.
    form : {"cohesion_friction", "friction", "undrained"}
    friction_angles : array_like
        [deg] phi' of the locus points (cohesion_friction form only; required there).
    cohesion : float
        [kPa] c' held fixed in the friction form (0 for residual and fully softened strength).
    settings : BackAnalysisSettings, optional

    Returns
    -------
    Locus

    Raises
    ------
    ObservedSurfaceError
        An observed surface does not cut the ground or misses the material.
    NoSolutionError
        No point of the locus reaches F = 1 in the bracket; the message gives F at both ends.

    References
    ----------
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
        2nd ed. Wiley, ch. 11.
    Brent, R.P. (1973). Algorithms for Minimization without Derivatives. Prentice-Hall, ch. 4.
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings()
    _check_form(form)
    models = [_model_of(s, material, form, settings) for s in slips]
    fixed = _fixed_parameters(form, friction_angles, cohesion)
    locus = _solve_locus(models, form, fixed, settings, material)
    if not locus.found.any():
        raise NoSolutionError(_no_solution_message(locus, material))
    if len(models) > 1:
        own = {m.name: _solve_locus([m], form, fixed, settings, material).values() for m in models}
        locus = replace(locus, by_section=own)
    return locus


def _fixed_parameters(form: str, friction_angles, cohesion: float) -> np.ndarray:
    """The parameter held fixed at each locus point: phi' [deg] (cohesion_friction), c' [kPa]
    (friction), nothing (undrained: one point)."""
    if form == "cohesion_friction":
        if friction_angles is None:
            raise BackAnalysisError("the c'-phi' locus needs friction_angles (phi' values [deg])")
        phi = np.atleast_1d(np.asarray(friction_angles, dtype=float)).ravel()
        if phi.size == 0 or not np.isfinite(phi).all() or (phi < 0).any() or (phi > _MAX_FRICTION).any():
            raise BackAnalysisError(
                f"friction_angles = {phi.tolist()} must be finite values in [0, {_MAX_FRICTION:g}] deg"
            )
        return np.unique(phi)
    if form == "friction":
        if not (math.isfinite(cohesion) and cohesion >= 0):
            raise BackAnalysisError(f"cohesion = {cohesion!r} kPa must be a number >= 0")
        return np.array([float(cohesion)])
    return np.array([np.nan])


def _trial(form: str, fixed, value):
    """(cohesion, friction_angle, undrained_strength) arrays for solved ``value`` at ``fixed``."""
    nan = np.full(np.shape(value), np.nan)
    if form == "cohesion_friction":
        return value, fixed, nan
    if form == "friction":
        return fixed, value, nan
    return nan, nan, value


def _bracket(form: str, settings: BackAnalysisSettings) -> tuple[float, float]:
    return {
        "cohesion_friction": settings.cohesion_range,
        "friction": settings.friction_range,
        "undrained": settings.undrained_range,
    }[form]


def section_weights(lengths: Sequence[float | None]) -> np.ndarray:
    r"""Weights of sections solved jointly, from the length of slope each represents.

    .. math:: w_k = \frac{L_k}{\sum_j L_j}

    so that the joint factor of safety :math:`\bar F = \sum_k w_k F_k` is the mean along the
    slip, each section standing for its stretch of slope. Common practice, not a published
    method: several 2D sections through one slide stand for the parts of it they cut, and an
    unweighted mean would count a short stretch as much as a long one. Without any length
    every section weighs the same.

    Parameters
    ----------
    lengths : sequence of float or None
        [m] Length of slope each section represents (> 0), or None on every one.

    Returns
    -------
    ndarray (n,)
        [-] Weights summing to 1.

    Raises
    ------
    BackAnalysisError
        Lengths given for some sections but not for others.
    """
    lengths = list(lengths)
    missing = [i for i, length in enumerate(lengths) if length is None]
    if len(missing) == len(lengths):
        return np.full(len(lengths), 1.0 / len(lengths))
    if missing:
        raise BackAnalysisError(
            f"the length of slope represented is given for {len(lengths) - len(missing)} of "
            f"{len(lengths)} sections: give it for every section (or for none, to weigh them "
            "equally)"
        )
    values = np.array(lengths, dtype=float)
    return values / values.sum()


def _check_length(length) -> None:
    if length is not None and not (_is_number(length) and length > 0):
        raise BackAnalysisError(f"length = {length!r} m of slope represented must be a number > 0 "
                                "(or None)")


def _mean_fos(models, form, fixed, value) -> tuple[np.ndarray, list[str]]:
    """Mean F over the sections, weighted by the length of slope each represents
    (:func:`section_weights`), for rows (fixed, value); NaN where a section's method did not
    converge or gave no F. Also the first non-empty message of each row."""
    c, phi, su = _trial(form, fixed, value)
    total = np.zeros(np.size(value))
    messages = [""] * np.size(value)
    weights = section_weights([m.length for m in models])
    for model, weight in zip(models, weights):
        solved = model.fos(c, phi, su)
        fos = np.where(solved.converged & np.isfinite(solved.fos) & (solved.fos > 0),
                       solved.fos, np.nan)
        total += weight * fos
        for i, message in enumerate(solved.message):
            if message and not messages[i]:
                messages[i] = f"{model.name}: {message}" if len(models) > 1 else message
    return total, messages


def _solve_locus(models, form, fixed, settings, material) -> Locus:
    low, high = _bracket(form, settings)
    n = fixed.size
    # F rises with the solved strength; a grid over the bracket, solved as one batch for every
    # point, gives each root a tight bracket and steps over trial strengths at which the
    # method does not converge (very low strength on a steep surface).
    grid = low + (high - low) * _BRACKET_FRACTIONS
    fos_grid, _ = _mean_fos(models, form, np.repeat(fixed, grid.size), np.tile(grid, n))
    fos_grid = fos_grid.reshape(n, grid.size)
    fos_low, fos_high = fos_grid[:, 0], fos_grid[:, -1]
    value = np.full(n, np.nan)
    iterations = np.zeros(n, dtype=int)
    messages = []
    name = _SOLVED_SYMBOL[form]
    for i in range(n):
        row = fos_grid[i]
        finite = np.isfinite(row)
        crossing = np.flatnonzero(finite[:-1] & finite[1:] & (row[:-1] <= 1.0) & (row[1:] >= 1.0))
        if crossing.size == 0:
            if not finite.any():
                messages.append(f"{settings.method} gave no converged F for {name} = {low:g} "
                                f"to {high:g}")
            elif (row[finite] > 1).all():
                first = int(np.argmax(finite))
                messages.append(f"F = {row[first]:.3f} > 1 already at {name} = {grid[first]:g}")
            elif (row[finite] < 1).all():
                last = int(finite.size - 1 - np.argmax(finite[::-1]))
                messages.append(f"F = {row[last]:.3f} < 1 even at {name} = {grid[last]:g}")
            else:
                messages.append(f"{settings.method} gave no converged F where F crosses 1")
            continue
        a, b = grid[crossing[0]], grid[crossing[0] + 1]

        def excess(v, i=i):
            fos, _ = _mean_fos(models, form, fixed[i : i + 1], np.array([v]))
            if not np.isfinite(fos[0]):
                raise _NoFos(v)
            return fos[0] - 1.0

        try:
            root, info = optimize.brentq(
                excess, a, b, xtol=settings.strength_tolerance, full_output=True,
                disp=False,
            )
        except _NoFos as error:
            messages.append(f"{settings.method} gave no converged F at {name} = {error.value:g}")
            continue
        value[i] = root
        iterations[i] = info.iterations
        _, warning = _mean_fos(models, form, fixed[i : i + 1], np.array([root]))
        messages.append(warning[0] if info.converged else f"root finder: {info.flag}")
        if not info.converged:
            value[i] = np.nan
    c, phi, su = (np.asarray(np.broadcast_to(a, (n,)), dtype=float).copy()
                  for a in _trial(form, fixed, value))
    return Locus(
        form=form, material=material, method=settings.method,
        friction_angle=phi, cohesion=c, undrained_strength=su,
        found=np.isfinite(value), fos_at_low=fos_low, fos_at_high=fos_high,
        bracket=(float(low), float(high)), iterations=iterations, message=tuple(messages),
        solved=_SOLVED[form],
    )  # fmt: skip


#: Points of the bracketing grid, as fractions of the bracket (denser near the low end, where
#: the roots of weak soils lie).
_BRACKET_FRACTIONS = np.array([0.0, 0.0025, 0.005, 0.01, 0.02, 0.035, 0.05, 0.075, 0.1, 0.15,
                               0.2, 0.3, 0.4, 0.55, 0.7, 0.85, 1.0])

_SOLVED = {"cohesion_friction": "cohesion", "friction": "friction_angle",
           "undrained": "undrained_strength"}
_SOLVED_SYMBOL = {"cohesion_friction": "c' [kPa]", "friction": "phi' [deg]",
                  "undrained": "Su [kPa]"}


class _NoFos(Exception):
    def __init__(self, value: float):
        super().__init__(value)
        self.value = value


def _no_solution_message(locus: Locus, material: str) -> str:
    low, high = locus.bracket
    symbol = _SOLVED_SYMBOL[locus.form]
    ends = (
        f"F at {symbol} = {low:g}: {_span(locus.fos_at_low)}; "
        f"at {symbol} = {high:g}: {_span(locus.fos_at_high)}"
    )
    where = ""
    if locus.form == "cohesion_friction":
        where = (f" for phi' from {locus.friction_angle.min():g} to "
                 f"{locus.friction_angle.max():g} deg")
    elif locus.form == "friction":
        where = f" with c' = {locus.cohesion[0]:g} kPa"
    hint = ""
    if np.nanmin(locus.fos_at_low) > 1:
        hint = ("; the observed surface is stable even with the weakest strength in the range: "
                "check the water at failure, the surface and the other materials")
    elif np.nanmax(locus.fos_at_high) < 1:
        hint = ("; the observed surface fails even with the strongest strength in the range: "
                "check the water at failure and widen the range")
    return (f"no strength of {material!r} in {symbol} = {low:g} to {high:g}{where} gives F = 1 "
            f"on the observed surface ({locus.method}): {ends}{hint}")


def _span(values: np.ndarray) -> str:
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return "no converged F"
    if finite.size == 1 or np.isclose(finite.min(), finite.max()):
        return f"{finite[0]:.3f}"
    return f"{finite.min():.3f} to {finite.max():.3f}"


# --------------------------------------------------------------------------------------------
# Surface match


def surface_misfit(ground, observed, critical) -> tuple[float, float, float]:
    """Area between two slip surfaces and their Hausdorff distance.

    Parameters
    ----------
    ground : array (n, 2) or Section
        [m] Ground line (x strictly increasing).
    observed, critical : array (k, 2)
        [m] The two surfaces, x strictly increasing, between their ends on the ground.

    Returns
    -------
    (misfit_area, observed_area, hausdorff)
        [m2] Area of the symmetric difference of the two sliding masses (the region between
        each surface and the ground); [m2] area of the observed mass; [m] Hausdorff distance
        between the two lines (densified to 2 % of their length).
    """
    ground = np.asarray(getattr(ground, "ground", ground), dtype=float)
    observed = np.asarray(observed, dtype=float)
    critical = np.asarray(critical, dtype=float)
    mass_observed = _sliding_mass(ground, observed)
    mass_critical = _sliding_mass(ground, critical)
    misfit = float(shapely.symmetric_difference(mass_observed, mass_critical).area)
    distance = float(shapely.hausdorff_distance(
        shapely.LineString(observed), shapely.LineString(critical), densify=0.02))
    return misfit, float(mass_observed.area), distance


def _sliding_mass(ground: np.ndarray, surface: np.ndarray):
    """The region below the ground and above the surface, between the surface's ends."""
    top = max(ground[:, 1].max(), surface[:, 1].max()) + 10.0
    bottom = min(ground[:, 1].min(), surface[:, 1].min()) - 10.0
    below_ground = shapely.Polygon(np.vstack([
        [[ground[0, 0], bottom]], ground, [[ground[-1, 0], bottom]]]))
    above_surface = shapely.Polygon(np.vstack([
        [[surface[0, 0], top]], surface, [[surface[-1, 0], top]]]))
    return shapely.intersection(shapely.make_valid(below_ground), shapely.make_valid(above_surface))


def _critical_points(surface: RankedSurface, n: int = 120) -> np.ndarray:
    """The critical surface between its ends on the ground, as a polyline."""
    x0, x1 = sorted((surface.scarp_x, surface.toe_x))
    if surface.kind == "circle":
        x = np.linspace(x0, x1, n)
        y = surface.centre_y - np.sqrt(np.maximum(surface.radius**2 - (x - surface.centre_x) ** 2, 0))
        return np.column_stack([x, y])
    points = np.asarray(surface.points, dtype=float)
    inside = (points[:, 0] > x0) & (points[:, 0] < x1)
    x = np.concatenate([[x0], points[inside, 0], [x1]])
    return np.column_stack([x, np.interp(x, *points.T)])


def _search_settings(section: Section, settings: BackAnalysisSettings, match: MatchSettings,
                     direction: int | None = None):
    options = section.search or {}
    min_depth = match.min_depth
    if min_depth is None:
        min_depth = options.get("min_depth", SearchSettings.min_depth)
    return SearchSettings(method=settings.method, n_slices=options.get("slices", settings.n_slices),
                          min_depth=min_depth, direction=direction)


def _movement(surface: np.ndarray) -> int:
    """Direction of movement along x (+1, -1) of a slip surface: from its higher end on the
    ground towards its lower end (the face the slip came down)."""
    return 1 if surface[0, 1] >= surface[-1, 1] else -1


def _search(section: Section, settings: BackAnalysisSettings, match: MatchSettings,
            direction: int | None = None):
    """The critical-surface search of ``section``; on the face whose slides move in
    ``direction`` when given (a slip is compared with the critical surface of the face it
    came down, not with that of another face of the section), on every face when None."""
    search = _search_settings(section, settings, match, direction)
    screen = match.screen_with if match.screen_with != settings.method else None
    result = search_critical_surface(section, search, circles=match.circles, screen_with=screen)
    if match.non_circular:
        result = optimise_polyline(section, result, method=settings.method,
                                   max_evaluations=match.polyline_evaluations)
    return result


def _search_with(model, strength: dict, settings, match, when: str = "",
                 direction: int | None = None):
    """The critical-surface search on ``model``'s section with ``strength`` (on the face that
    moves in ``direction``, every face when None); BackAnalysisError naming the section, the
    time (``when``) and the strength when it finds nothing."""
    try:
        return _search(_section_with(model, strength), settings, match, direction)
    except SearchError as error:
        raise BackAnalysisError(
            f"no critical surface found on {model.name!r}{when} with "
            f"{_describe(strength, model.form)}: {error}"
        ) from None


def _fit(model: _SlipModel, strength: dict, settings, match) -> SurfaceFit:
    critical = _search_with(model, strength, settings, match,
                            direction=_movement(model.surface)).critical
    points = _critical_points(critical)
    misfit, observed_area, distance = surface_misfit(model.section.ground, model.surface, points)
    return SurfaceFit(
        slip=model.name, critical_fos=float(critical.fos), critical_kind=critical.kind,
        critical_points=points, misfit_area=misfit, observed_area=observed_area,
        misfit_ratio=misfit / observed_area if observed_area > 0 else math.inf,
        hausdorff=distance,
    )  # fmt: skip


def _section_with(model: _SlipModel, strength: dict) -> Section:
    if model.form == "undrained":
        return with_strength(model.section, model.material,
                             undrained_strength=strength["undrained_strength"])
    return with_strength(model.section, model.material, cohesion=strength["cohesion"],
                         friction_angle=strength["friction_angle"])


def _describe(strength: dict, form: str) -> str:
    if form == "undrained":
        return f"Su = {strength['undrained_strength']:.2f} kPa"
    return f"c' = {strength['cohesion']:.2f} kPa, phi' = {strength['friction_angle']:.2f} deg"


def match_locus(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    locus: Locus,
    *,
    settings: BackAnalysisSettings | None = None,
    match: MatchSettings | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> tuple[tuple[LocusMatch, ...], LocusMatch]:
    """Critical surfaces along the locus and the best-fitting point (Duncan and Stark 1992).

    For ``match.points`` locus points spread evenly over its solved part, the critical surface
    is searched on every section with that point's strength, and its misfit with the observed
    surface measured (:func:`surface_misfit`); the score of a point is the mean over the
    sections (weighted by length, :func:`section_weights`) of misfit area / observed area.
    Then (cohesion_friction form, ``match.refine`` > 0) a bounded scalar minimisation of the
    score along phi', between the neighbours of the best point, tries up to ``match.refine``
    further points, each first solved for F = 1.

    Parameters
    ----------
    slips : ObservedSlip or sequence
        As given to :func:`fos_unity_locus` (same order).
    locus : Locus
    settings : BackAnalysisSettings, optional
    match : MatchSettings, optional
    progress : callable(done, total, label), optional
        Called after each point is searched (the total may shrink when refinement ends early).

    Returns
    -------
    (matches, best)
        Every point searched, in order of phi' (or the single point), and the best one.

    References
    ----------
    Duncan, J.M. and Stark, T.D. (1992). Soil strengths from back analysis of slope failures.
        ASCE Geotechnical Special Publication 31, 890-904.
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
        2nd ed. Wiley, ch. 11.
    """
    slips = _as_slips(slips)
    bounded = [s.name for s in slips if isinstance(s, BoundedSlip)]
    if bounded:
        raise BackAnalysisError(
            f"the surface match needs an observed surface (polyline) on every section; "
            f"{', '.join(repr(b) for b in bounded)} give only scarp, toe and a depth bound "
            "(see bounded_surfaces for the depth of their critical surface)"
        )
    settings = settings or BackAnalysisSettings(method=locus.method)
    match = match or MatchSettings()
    models = [_SlipModel(s, locus.material, locus.form, settings) for s in slips]
    if not locus.found.any():
        raise NoSolutionError(_no_solution_message(locus, locus.material))
    chosen = _spread_points(locus, match.points)
    refine = match.refine if locus.form == "cohesion_friction" and chosen.size > 1 else 0
    total = chosen.size + refine
    weights = section_weights([m.length for m in models])
    done = 0

    def evaluate(strength: dict, refined: bool) -> LocusMatch:
        nonlocal done
        fits = tuple(_fit(m, strength, settings, match) for m in models)
        done += 1
        if progress is not None:
            progress(done, total, _describe(strength, locus.form))
        return LocusMatch(
            friction_angle=strength["friction_angle"], cohesion=strength["cohesion"],
            undrained_strength=strength["undrained_strength"], fits=fits,
            score=float(np.dot(weights, [f.misfit_ratio for f in fits])), refined=refined,
        )  # fmt: skip

    matches = [evaluate(locus.point(int(i)), False) for i in chosen]
    if refine:
        matches += _refine(models, locus, matches, refine, settings, evaluate)
    if locus.form == "cohesion_friction":
        matches.sort(key=lambda m: m.friction_angle)
    best = min(matches, key=lambda m: m.score)
    return tuple(matches), best


#: Score of a phi' without a locus point, for the bounded minimisation (finite, far above any
#: misfit ratio, so that the minimiser's arithmetic stays finite).
_NO_SCORE = 1.0e6


def _refine(models, locus, matches, budget, settings, evaluate) -> list[LocusMatch]:
    """Bounded minimisation of the score along phi' around the best coarse point."""
    phis = np.array([m.friction_angle for m in matches])
    i = int(np.argmin([m.score for m in matches]))
    lo, hi = phis[max(i - 1, 0)], phis[min(i + 1, len(phis) - 1)]
    added: list[LocusMatch] = []
    seen = {round(float(p), 9): m.score for p, m in zip(phis, matches)}

    def score(phi: float) -> float:
        key = round(float(phi), 9)
        if key in seen:
            return seen[key]
        if len(added) >= budget:
            return _NO_SCORE
        point = _solve_locus(models, "cohesion_friction", np.array([phi]), settings, locus.material)
        if not point.found[0]:
            seen[key] = _NO_SCORE
            return _NO_SCORE
        result = evaluate(point.point(0), True)
        added.append(result)
        seen[key] = result.score
        return result.score

    optimize.minimize_scalar(score, bounds=(lo, hi), method="bounded",
                             options={"maxiter": budget, "xatol": 0.1})
    return added


# --------------------------------------------------------------------------------------------
# History: times when the slope stood


def history_constraints(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    locus: Locus,
    stood: Sequence[StoodCondition],
    *,
    settings: BackAnalysisSettings | None = None,
    search: MatchSettings | None = None,
    best: LocusMatch | None = None,
) -> HistoryResult:
    """Cut the locus down to the strengths that let the slope stand at the stood times.

    At a stood time the slope stood, so with the true strength F >= 1 held on *every* slip
    surface then, not only on the one that later failed (which is a necessary condition
    only). At each stood time, with the sections' water lines of that time:

    1. the critical surface is searched on every section (the full search of
       :func:`match_locus`: circles screened, re-ranked and refined, and a polyline when
       ``search.non_circular``) with the strength of ``search.points`` locus points spread
       evenly over the solved locus, and with the strength of ``best`` when given;
    2. every distinct surface kept by those searches (the few best of each), and the
       observed surface, is then solved with the strength of every locus point (warm
       re-evaluation of the searched surfaces under the same water, only the strength
       changing), and F at the point is the lowest over them and over the sections.

    The searches run under the stood time's own water, at strengths spread over the whole
    locus, so they find the mechanisms that water makes critical from the shallow surfaces
    of low-c' pairs to the deep ones of high-c' pairs; re-evaluating their union at every
    point carries them to the points between (a full search at every point costs a search
    per point and time for little gain, since the critical surface moves gradually along the
    locus). A locus point survives when it has a solution and F >= 1 at every stood time.
    Between two neighbouring points on either side of a stood limit, the limit itself (F = 1
    at the stood time, along the F = 1 locus at failure) is found by root finding on phi'
    (cohesion_friction form).

    Parameters
    ----------
    slips : ObservedSlip or sequence
        The observed slips at failure (same order as each condition's sections).
    locus : Locus
    stood : sequence of StoodCondition
    settings : BackAnalysisSettings, optional
    search : MatchSettings, optional
        How the critical surface is searched (``points``: locus points searched at each stood
        time); default :class:`MatchSettings`.
    best : LocusMatch, optional
        The best fit; also searched at every stood time, and F at its own strength is given
        in each check's ``best_fos``.

    Returns
    -------
    HistoryResult

    References
    ----------
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
        2nd ed. Wiley, ch. 11 (a back-calculated strength must also explain why the slope
        stood before it failed).
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings(method=locus.method)
    search = search or MatchSettings()
    strengths = [locus.point(int(i)) for i in _spread_points(locus, search.points)]
    if best is not None:
        strengths.append(_strength_of(best))
    checks, surface_sets = [], []
    for condition in stood:
        observed = _stood_models(slips, condition, locus, settings)
        sets = [_SurfaceSet(m, _searched_surfaces(m, strengths, settings, search, condition.label))
                for m in observed]
        surface_sets.append(sets)
        fos = _lowest_fos(sets, locus.cohesion, locus.friction_angle, locus.undrained_strength)
        fos = np.where(locus.found, fos, np.nan)
        on_observed = _lowest_fos(observed, locus.cohesion, locus.friction_angle,
                                  locus.undrained_strength)
        best_fos = math.nan
        if best is not None:
            best_fos = float(_lowest_fos(sets, [best.cohesion], [best.friction_angle],
                                         [best.undrained_strength])[0])
        checks.append(HistoryCheck(
            condition.label, fos, np.asarray(fos >= 1.0),
            observed_fos=np.where(locus.found, on_observed, np.nan),
            searches=len(strengths) * len(sets),
            surfaces=sum(len(s.searched) for s in sets), best_fos=best_fos,
        ))  # fmt: skip
    surviving = locus.found.copy()
    for check in checks:
        surviving &= check.stood
    limits = ()
    if locus.form == "cohesion_friction" and stood:
        failure_models = [_model_of(s, locus.material, locus.form, settings) for s in slips]
        limits = _stood_limits(failure_models, locus, stood, checks, surface_sets, settings)
    return HistoryResult(
        checks=tuple(checks),
        surviving=surviving,
        friction_range=_extent(locus.friction_angle, surviving, locus.form != "undrained"),
        cohesion_range=_extent(locus.cohesion, surviving, locus.form != "undrained"),
        undrained_range=_extent(locus.undrained_strength, surviving, locus.form == "undrained"),
        limits=limits,
    )


def _spread_points(locus: Locus, points: int) -> np.ndarray:
    """Indices of up to ``points`` solved locus points spread evenly over the solved part."""
    solved = np.flatnonzero(locus.found)
    if solved.size == 0:
        return solved
    return np.unique(solved[np.round(np.linspace(0, solved.size - 1,
                                                 min(points, solved.size))).astype(int)])


def _strength_of(match: LocusMatch) -> dict:
    return {"cohesion": match.cohesion, "friction_angle": match.friction_angle,
            "undrained_strength": match.undrained_strength}


def _searched_surfaces(model, strengths, settings, search, label) -> list[_SlipModel]:
    """The distinct surfaces kept by critical-surface searches on ``model``'s section (its
    water of one time) with each strength, as models whose strength can be replaced."""
    found, seen = [], set()
    for strength in strengths:
        for surface in _search_with(model, strength, settings, search, f" at {label}").surfaces:
            key = (surface.kind, round(surface.scarp_x, 2), round(surface.toe_x, 2),
                   round(surface.depth, 2))
            if key in seen:
                continue
            seen.add(key)
            points = _critical_points(surface, _RECHECK_VERTICES)
            # The ends lie on the ground up to rounding; lift them onto it so that slicing
            # takes them as ends on the ground.
            ground = model.section.ground
            ends = np.interp(points[[0, -1], 0], *ground.T)
            points[[0, -1], 1] = np.maximum(points[[0, -1], 1], ends)
            try:
                found.append(_SlipModel(ObservedSlip(model.section, points, model.name),
                                        model.material, model.form, settings,
                                        require_material=False, direction=surface.direction))
            except ObservedSurfaceError:
                continue  # a polyline of the arc that slicing does not take: the arc ranked it
    return found


#: Vertices of the polyline that stands for a searched circle when it is solved again with
#: other strengths (the chords then cut off less than 0.1 % of the arc's depth).
_RECHECK_VERTICES = 61


class _SurfaceSet:
    """An observed slip at one time with the critical surfaces searched then: F of a trial
    strength is the lowest over them (the observed surface must converge; a searched one that
    does not is left out, as a search leaves it out)."""

    def __init__(self, observed, searched: list[_SlipModel]):
        self.observed, self.searched = observed, searched
        self.name, self.length = observed.name, observed.length

    def fos(self, cohesion, friction_angle, undrained_strength) -> _LowestFos:
        own = self.observed.fos(cohesion, friction_angle, undrained_strength)
        lowest = np.where(own.converged, own.fos, np.nan)
        governing = np.zeros(lowest.size, dtype=int)
        for k, model in enumerate(self.searched, start=1):
            solved = model.fos(cohesion, friction_angle, undrained_strength)
            fos = np.where(_usable(solved), np.asarray(solved.fos, dtype=float), np.inf)
            lower = fos < lowest
            lowest = np.where(lower, fos, lowest)
            governing = np.where(lower, k, governing)
        return _LowestFos(lowest, np.isfinite(lowest), tuple(own.message), governing)


def _usable(solved) -> np.ndarray:
    """Rows of a SafetyResult that compete in a search: converged to a positive F that does not
    rest on m_alpha at or below its limit (as in solver.search)."""
    fos = np.asarray(solved.fos, dtype=float)
    doubtful = np.asarray(solved.low_m_alpha, bool) & ~np.asarray(solved.admissible, bool)
    return np.asarray(solved.converged, bool) & np.isfinite(fos) & (fos > 0) & ~doubtful


def _stood_models(slips, condition: StoodCondition, locus: Locus, settings) -> list[_SlipModel]:
    if len(condition.sections) != len(slips):
        raise BackAnalysisError(
            f"stood time {condition.label!r} gives {len(condition.sections)} section(s) for "
            f"{len(slips)} observed slip(s); give one per slip, in the same order"
        )
    return [
        _model_of(_on_section(s, section), locus.material, locus.form, settings)
        for s, section in zip(slips, condition.sections)
    ]


def _lowest_fos(models, cohesion, friction_angle, undrained_strength) -> np.ndarray:
    c = np.nan_to_num(np.asarray(cohesion, dtype=float))
    phi = np.nan_to_num(np.asarray(friction_angle, dtype=float))
    su = np.nan_to_num(np.asarray(undrained_strength, dtype=float))
    lowest = np.full(np.size(c), np.inf)
    for model in models:
        solved = model.fos(c, phi, su)
        # A section without a converged F leaves the point undecided (NaN), never "stood".
        lowest = np.minimum(lowest, np.where(solved.converged, solved.fos, np.nan))
    return lowest


def _stood_limits(failure_models, locus, stood, checks, surface_sets, settings) -> tuple[dict, ...]:
    limits = []
    phi = locus.friction_angle
    for condition, check, models in zip(stood, checks, surface_sets):
        for i in range(locus.n_points - 1):
            a, b = check.stood[i], check.stood[i + 1]
            if not (locus.found[i] and locus.found[i + 1]) or a == b:
                continue

            def excess(p):
                point = _solve_locus(failure_models, "cohesion_friction", np.array([p]),
                                     settings, locus.material)
                if not point.found[0]:
                    raise _NoFos(p)
                fos = _lowest_fos(models, point.cohesion, point.friction_angle,
                                  point.undrained_strength)[0]
                if not np.isfinite(fos):
                    raise _NoFos(p)
                return fos - 1.0

            try:
                p = optimize.brentq(excess, phi[i], phi[i + 1], xtol=1e-3)
            except (_NoFos, ValueError):
                continue
            point = _solve_locus(failure_models, "cohesion_friction", np.array([p]), settings,
                                 locus.material)
            limits.append({"label": condition.label, "friction_angle": float(p),
                           "cohesion": float(point.cohesion[0]),
                           "surviving_side": "above" if b else "below"})
    return tuple(limits)


def _extent(values: np.ndarray, keep: np.ndarray, applies: bool):
    if not applies or not keep.any():
        return None
    chosen = values[keep]
    return (float(np.min(chosen)), float(np.max(chosen)))


# --------------------------------------------------------------------------------------------
# Sensitivity


def sensitivity(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    locus: Locus,
    *,
    water_change: float | None = 0.5,
    unit_weight_change: float | None = 1.0,
    best: LocusMatch | None = None,
    settings: BackAnalysisSettings | None = None,
) -> tuple[SensitivityCase, ...]:
    """How the locus moves with the water level and the unit weight.

    The locus is solved again (same fixed parameters, same observed surfaces) with every water
    line of every section raised and lowered by ``water_change`` [m], then with the unit
    weights (above and below the water line) of every material raised and lowered by
    ``unit_weight_change`` [kN/m3]. Materials with ru are not affected by the water change
    (their pore pressure follows the overburden). The surface match is not repeated: the
    change is read at the best fit's fixed parameter.

    Parameters
    ----------
    slips : ObservedSlip or sequence
    locus : Locus
    water_change : float or None
        [m] > 0; None skips the water cases.
    unit_weight_change : float or None
        [kN/m3] > 0; None skips the unit-weight cases.
    best : LocusMatch, optional
        The best fit (its phi' for the cohesion_friction form); default the middle of the
        solved locus.
    settings : BackAnalysisSettings, optional

    Returns
    -------
    tuple of SensitivityCase
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings(method=locus.method)
    for name, value in (("water_change", water_change), ("unit_weight_change", unit_weight_change)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise BackAnalysisError(f"{name} = {value!r} must be a positive number (or omitted)")
    fixed = _fixed_of(locus)
    best_fixed, best_value = _best_point(locus, best)
    cases = []
    variants = []
    if water_change is not None:
        for sign in (+1, -1):
            change = sign * water_change
            variants.append((f"water lines {change:+.2f} m", "water level", change,
                             lambda s, d=change: _shift_water(s, d)))
    if unit_weight_change is not None:
        for sign in (+1, -1):
            change = sign * unit_weight_change
            variants.append((f"unit weights {change:+.2f} kN/m3", "unit weight", change,
                             lambda s, d=change: _shift_unit_weight(s, d)))
    for label, quantity, change, transform in variants:
        changed = [_on_section(s, transform(s.section)) for s in slips]
        models = [_model_of(s, locus.material, locus.form, settings) for s in changed]
        moved = _solve_locus(models, locus.form, fixed, settings, locus.material).values()
        at_best = _solve_locus(models, locus.form, np.array([best_fixed]), settings,
                               locus.material).values()[0]
        cases.append(SensitivityCase(label, quantity, change, moved, float(at_best),
                                     float(at_best - best_value)))
    return tuple(cases)


def _fixed_of(locus: Locus) -> np.ndarray:
    if locus.form == "cohesion_friction":
        return locus.friction_angle
    if locus.form == "friction":
        return locus.cohesion
    return np.full(locus.n_points, np.nan)


def _best_point(locus: Locus, best: LocusMatch | None) -> tuple[float, float]:
    """(fixed parameter, solved value) of the best fit, or of the middle solved point."""
    if best is not None:
        strength = _strength_of(best)
    else:
        solved = np.flatnonzero(locus.found)
        strength = locus.point(int(solved[solved.size // 2]))
    fixed = {"cohesion_friction": "friction_angle", "friction": "cohesion",
             "undrained": "undrained_strength"}[locus.form]
    return strength[fixed], strength[locus.solved]


def _shift_water(section: Section, change: float) -> Section:
    return section.with_water_lines(
        {line.name: line.points + np.array([0.0, change]) for line in section.water_lines}
    )


def _shift_unit_weight(section: Section, change: float) -> Section:
    data = section_to_dict(section)
    for item in data["material"]:
        for key in ("unit_weight", "unit_weight_saturated"):
            if item[key] + change <= 0:
                raise BackAnalysisError(
                    f"unit_weight_change = {change:+g} kN/m3 would make {key} of material "
                    f"{item['name']!r} ({item[key]:g} kN/m3) non-positive"
                )
            item[key] += change
    return section_from_dict(data)


# --------------------------------------------------------------------------------------------
# The whole back-analysis


def back_analyse(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    material: str,
    form: str = "cohesion_friction",
    *,
    friction_angles=None,
    cohesion: float = 0.0,
    stood: Sequence[StoodCondition] = (),
    settings: BackAnalysisSettings | None = None,
    match: MatchSettings | None = None,
    water_change: float | None = 0.5,
    unit_weight_change: float | None = 1.0,
    progress: Callable[[int, int, str], None] | None = None,
) -> BackAnalysisResult:
    """Back-analyse a slip: locus, surface match and best fit, history, sensitivity.

    Parameters
    ----------
    slips : ObservedSlip, BoundedSlip or sequence
        Sections through the slip (water at failure) with the observed surfaces, or their
        ends and depth bounds. With any BoundedSlip the surface match is not run; the
        critical circles through the ends are reported in ``bounded``.
    material : str
        Material whose strength is sought.
    form : {"cohesion_friction", "friction", "undrained"}
    friction_angles : array_like
        [deg] phi' of the locus points (cohesion_friction form).
    cohesion : float
        [kPa] c' held fixed in the friction form.
    stood : sequence of StoodCondition
        Times when the slope stood (F >= 1 then).
    settings : BackAnalysisSettings, optional
    match : MatchSettings or None
        Surface-match settings; None skips the surface match (no best fit then).
    water_change : float or None
        [m] Sensitivity to the water level (None: skip).
    unit_weight_change : float or None
        [kN/m3] Sensitivity to the unit weights (None: skip).
    progress : callable(done, total, label), optional
        Progress of the surface match.

    Returns
    -------
    BackAnalysisResult
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings()
    locus = fos_unity_locus(slips, material, form, friction_angles=friction_angles,
                            cohesion=cohesion, settings=settings)
    matches, best = ((), None)
    has_bounds = any(isinstance(s, BoundedSlip) for s in slips)
    if match is not None and not has_bounds:
        matches, best = match_locus(slips, locus, settings=settings, match=match,
                                    progress=progress)
    bounded = bounded_surfaces(slips, locus, settings=settings) if has_bounds else ()
    history = None
    if stood:
        history = history_constraints(slips, locus, stood, settings=settings,
                                      search=match or MatchSettings(), best=best)
    cases = sensitivity(slips, locus, water_change=water_change,
                        unit_weight_change=unit_weight_change, best=best, settings=settings)
    checks = consistency_checks(slips, locus, best, history, settings=settings) if best else ()
    return BackAnalysisResult(
        form=form, material=material, method=settings.method, locus=locus, matches=matches,
        best=best, history=history, sensitivity=cases, slips=tuple(s.name for s in slips),
        notes=_notes(locus, best, history, stood, slips, settings)
        + _bounded_notes(bounded, has_bounds and match is not None),
        bounded=bounded, consistency=checks,
        weights=tuple(float(w) for w in section_weights([s.length for s in slips])),
    )  # fmt: skip


def consistency_checks(
    slips: Sequence[ObservedSlip] | ObservedSlip,
    locus: Locus,
    best: LocusMatch,
    history: HistoryResult | None,
    *,
    settings: BackAnalysisSettings | None = None,
) -> tuple[ConsistencyCheck, ...]:
    """Check a best fit against the premises of the back-analysis.

    With the true strength (Duncan and Stark 1992; Duncan, Wright and Brandon 2014, ch. 11):

    1. F = 1 on the observed surface of every section at failure (within
       :data:`BACKCALC_OBSERVED_ALLOWANCE`; exact for one section, by the locus);
    2. no surface fails before the observed one at failure: F of the critical surface
       searched at failure is not below 1 by more than :data:`BACKCALC_CRITICAL_ALLOWANCE`;
    3. the slope stood at every stood time: F >= 1 on every surface searched then
       (``history.checks[i].best_fos``, from :func:`history_constraints` run with ``best``).

    Parameters
    ----------
    slips : ObservedSlip or sequence
    locus : Locus
    best : LocusMatch
        The best fit, with its critical surfaces at failure (``fits``).
    history : HistoryResult or None
        The record check run with ``best`` (None: no stood time was given).
    settings : BackAnalysisSettings, optional

    Returns
    -------
    tuple of ConsistencyCheck
    """
    slips = _as_slips(slips)
    settings = settings or BackAnalysisSettings(method=locus.method)
    strength = _strength_of(best)
    observed = []
    for slip in slips:
        model = _model_of(slip, locus.material, locus.form, settings)
        observed.append(_lowest_fos([model], [strength["cohesion"]], [strength["friction_angle"]],
                                    [strength["undrained_strength"]])[0])
    observed = np.array(observed)
    departure = np.abs(observed - 1.0)
    worst = int(np.nanargmax(departure)) if np.isfinite(departure).any() else 0
    checks = [ConsistencyCheck(
        "observed surface at failure",
        bool(np.isfinite(departure).all() and departure.max() <= BACKCALC_OBSERVED_ALLOWANCE),
        float(departure[worst]), BACKCALC_OBSERVED_ALLOWANCE,
        f"F on the observed surface at failure is {observed[worst]:.3f} on "
        f"{slips[worst].name!r} (1 +/- {BACKCALC_OBSERVED_ALLOWANCE:g} needed)",
    )]
    fits = list(best.fits)
    if fits:
        lowest = min(fits, key=lambda f: f.critical_fos)
        limit = 1.0 - BACKCALC_CRITICAL_ALLOWANCE
        checks.append(ConsistencyCheck(
            "critical surface at failure", bool(lowest.critical_fos >= limit),
            float(lowest.critical_fos), limit,
            f"the critical surface searched at failure has F = {lowest.critical_fos:.3f} on "
            f"{lowest.slip!r} (>= {limit:g} needed: otherwise another surface fails first)",
        ))
    for check in (history.checks if history is not None else ()):
        checks.append(ConsistencyCheck(
            check.label, bool(np.isfinite(check.best_fos) and check.best_fos >= 1.0),
            float(check.best_fos), 1.0,
            f"the lowest F over the observed and the searched surfaces at {check.label} is "
            f"{check.best_fos:.3f} (>= 1 needed: the slope stood then)",
        ))
    return tuple(checks)


def _bounded_notes(bounded, match_skipped: bool) -> tuple[str, ...]:
    notes = []
    if match_skipped:
        notes.append("surface match not run: the slip is known only by its scarp, toe and a "
                     "depth bound; the critical circle through them is reported with its depth")
    for bound in ("max_depth", "min_depth"):
        held = [b for b in bounded if b.at_bound == bound]
        if held:
            phis = sorted({round(b.friction_angle, 2) for b in held})
            notes.append(
                f"at {len(held)} locus point(s) (phi' {phis[0]:g} to {phis[-1]:g} deg) the "
                f"critical circle through the scarp and toe lies at the {bound} bound: a "
                f"{'deeper' if bound == 'max_depth' else 'shallower'} surface would be more "
                "critical, so the locus there rests on the bound"
            )
    return tuple(notes)


def _notes(locus, best, history, stood, slips, settings) -> tuple[str, ...]:
    notes = []
    if not locus.found.all():
        missing = int((~locus.found).sum())
        notes.append(f"{missing} of {locus.n_points} locus points have no strength in the "
                     "range that gives F = 1 (see their messages)")
    if best is not None:
        worst_fos = min(f.critical_fos for f in best.fits)
        if worst_fos < 1.0 - BACKCALC_CRITICAL_ALLOWANCE:
            notes.append(
                f"with the best-fit strength the critical surface has F = {worst_fos:.2f}, well "
                "below 1: the observed surface is not the critical one for any point searched; "
                "check the observed surface and the water at failure"
            )
        if history is not None and not all(c.best_fos >= 1.0 for c in history.checks):
            notes.append("the best-fit strength does not satisfy every stood time: the "
                         "history and the surface position disagree")
    if history is not None and not history.surviving.any():
        notes.append("no locus point satisfies every stood time: the record is inconsistent "
                     "with the water lines used, or the slip surface was not the one that "
                     "would have failed then")
    if len(slips) > 1 and locus.by_section:
        spread = np.nanmax(np.abs(np.array(list(locus.by_section.values()))
                                  - locus.values()[None, :]))
        if np.isfinite(spread):
            notes.append(f"the sections' own loci differ from the joint locus by up to "
                         f"{spread:.2f} ({_SOLVED_SYMBOL[locus.form]})")
    return tuple(notes)


# --------------------------------------------------------------------------------------------
# Helpers


def _as_slips(slips) -> list[ObservedSlip]:
    if isinstance(slips, (ObservedSlip, BoundedSlip)):
        return [slips]
    slips = list(slips)
    if not slips:
        raise BackAnalysisError("give at least one observed slip")
    names = [s.name for s in slips]
    if len(set(names)) != len(names):
        raise BackAnalysisError(f"observed slips need distinct names, got {names}")
    return slips


def _check_form(form: str) -> None:
    if form not in FORMS:
        raise BackAnalysisError(f"unknown form {form!r}; valid forms: {', '.join(FORMS)}")


def _method_options(settings: BackAnalysisSettings) -> dict:
    parameters = inspect.signature(getattr(methods, settings.method)).parameters
    options = {"tolerance": settings.tolerance, "max_iterations": settings.max_iterations}
    return {name: value for name, value in options.items() if name in parameters}


def _positive_int(name: str, value) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise MethodError(f"{name} must be a positive integer, got {value!r}")


def _is_number(value) -> bool:
    return (isinstance(value, (int, float)) and not isinstance(value, bool)
            and math.isfinite(value))


def _surveyed_point(label: str, value) -> tuple[float, float]:
    try:
        x, y = (float(v) for v in value)
    except (TypeError, ValueError):
        raise ObservedSurfaceError(f"{label} must be one [x, y] point [m], got {value!r}") from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise ObservedSurfaceError(f"{label} = {value!r} must be finite")
    return x, y


def _pair(name: str, value) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in value)
    except (TypeError, ValueError):
        raise MethodError(f"{name} must be a pair (low, high), got {value!r}") from None
    return low, high
