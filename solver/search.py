"""Search for the critical slip surface, and warm re-evaluation of a previous search.

Circular searches generate many trial circles at once (a centre lattice, or a scarp-to-toe
band) on every face of the section, slice them all with :func:`solver.slicing.slice_circles` and solve them all with
:func:`solver.methods.factor_of_safety`, in batches. The best circle is then refined by a
shrinking pattern search whose trial moves are also solved as one batch, and may be turned into a
polyline whose vertices are moved with :func:`scipy.optimize.minimize` (non-circular search).

Every search returns a :class:`SearchResult` that keeps the best few *distinct* surfaces. During
the wet season only the water lines change, so :func:`warm_reevaluate` re-slices just those cached
surfaces with the new water lines (cheap) instead of searching again, and says whether the change
is large enough that a full search is advised. It never runs the full search itself.

Coordinates are in the section's own frame (x along the section [m], y elevation [m]), whichever
way the slope faces; slicing handles the mirroring into the movement frame.

References
----------
Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability, 2nd ed.
    Wiley. Ch. 8 (searching for the critical slip surface: grids of centres, tangent lines,
    non-circular surfaces and local minima).
Greco, V.R. (1996). Efficient Monte Carlo technique for locating critical slip surface. Journal of
    Geotechnical Engineering, ASCE, 122(7), 517-525 (kinematic admissibility of polylines).
Hooke, R. and Jeeves, T.A. (1961). "Direct search" solution of numerical and statistical problems.
    Journal of the ACM, 8(2), 212-229 (pattern search with shrinking steps).
Nelder, J.A. and Mead, R. (1965). A simplex method for function minimization. The Computer
    Journal, 7(4), 308-313.
"""

from __future__ import annotations

import inspect
from collections import Counter
from dataclasses import dataclass, field, replace
from itertools import product

import numpy as np
from scipy import optimize

from solver.constants import (
    FOS_TOLERANCE,
    MAX_ITERATIONS,
    SEARCH_BATCH_SIZE,
    SEARCH_FACE_MIN_HEIGHT_FRACTION,
    SEARCH_FULL_SEARCH_TOLERANCE,
    SEARCH_KEEP,
    SEARCH_MAX_ANGLE_CHANGE_DEG,
    SEARCH_MAX_INCLINATION_DEG,
    SEARCH_MIN_DEPTH,
    SEARCH_MIN_SEPARATION,
    SEARCH_POLYLINE_MAX_EVALUATIONS,
    SEARCH_POLYLINE_VERTICES,
    SEARCH_REFINE_MAX_STEPS,
    SEARCH_REFINE_STEP_TOLERANCE,
    SEARCH_SLICES,
)
from solver import methods
from solver.errors import MethodError, SearchError
from solver.methods import factor_of_safety
from solver.section import FACES
from solver.slicing import slice_circles, slice_polyline
from solver.surfaces import circle_from_scarp_toe

__all__ = [
    "FACES",
    "RankedSurface",
    "SearchResult",
    "SearchSettings",
    "SlopeGeometry",
    "WarmResult",
    "default_scarp_toe_band",
    "default_centre_lattice",
    "scarp_toe_band",
    "every_method",
    "face_name",
    "centre_lattice",
    "lattice_circles",
    "optimise_polyline",
    "placement_from_section",
    "polyline_from_circle",
    "refine_circle",
    "rerank",
    "search_critical_surface",
    "slope_faces",
    "slope_geometry",
    "warm_reevaluate",
]

#: Reasons recorded for trial surfaces without a usable factor of safety (they never win).
NOT_CONVERGED = "method did not converge"
NO_FOS = "no positive factor of safety (driving load not positive or iteration broke down)"
#: Reasons recorded for admissible surfaces removed by the size filters.
TOO_SHALLOW = "shallower than min_depth"
TOO_SMALL = "sliding mass smaller than min_area"

#: Default centre lattice: centres along x and along y, and tangent levels (section file
#: [search] centres and tangent_levels).
_DEFAULT_CENTRES = 30
_DEFAULT_TANGENT_LEVELS = 20

#: Penalty added to the objective of the polyline optimisation for an inadmissible polyline; far
#: above any factor of safety, so the optimiser retreats from it.
_PENALTY = 1.0e3


# ----------------------------------------------------------------------------------------------
# Settings and results
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SearchSettings:
    """Settings shared by every search.

    Parameters
    ----------
    method : str
        Method of slices used to rank the trial surfaces (a name accepted by
        :func:`solver.methods.factor_of_safety`).
    n_slices : int
        Slices per trial surface.
    min_depth : float
        [m] Smallest admissible vertical depth of the slip surface below the ground; shallower
        slides (skin slips) do not win. 0 lets every surface compete.
    min_area : float
        [m2] Smallest admissible area of the sliding mass. 0 lets every surface compete.
    keep : int
        Number of distinct best surfaces kept in the result on each face searched (and
        re-evaluated by :func:`warm_reevaluate`, so that a change on any face is seen).
    min_separation : float
        [m] Two kept surfaces of a face differ by at least this much in scarp or toe offset, so
        the kept surfaces describe different mechanisms rather than neighbours of one circle.
    tolerance : float
        Tolerance on the factor of safety passed to an iterative method [-].
    max_iterations : int
        Iteration limit passed to an iterative method.
    admissible_only : bool
        When True (default), surfaces with m_alpha at or below M_ALPHA_MIN at a slice base do
        not compete (the normal force of Bishop's and related methods is unreliable there;
        Whitman and Bailey 1967); they are counted in ``filtered``. Other flags (negative
        effective normal force near the crest, line of thrust outside the mass) never remove
        a surface: excluding them can hide the critical mechanism, and a negative normal force
        at the crest calls for a tension crack rather than another surface (Duncan, Wright and
        Brandon 2014). They stay in the result's messages as warnings.
    batch_size : int
        Trial surfaces sliced and solved together; bounds the memory of big searches.
    direction : {None, +1, -1}
        Direction of movement along x of the surfaces searched. None (default) searches every
        face of the section (:func:`slope_faces`: an embankment, a ridge or a spoil heap has
        two); +1 or -1 searches only the face whose mass moves that way (:data:`FACES`).
    """

    method: str = "bishop_simplified"
    n_slices: int = SEARCH_SLICES
    min_depth: float = SEARCH_MIN_DEPTH
    min_area: float = 0.0
    keep: int = SEARCH_KEEP
    min_separation: float = SEARCH_MIN_SEPARATION
    tolerance: float = FOS_TOLERANCE
    max_iterations: int = MAX_ITERATIONS
    admissible_only: bool = True
    batch_size: int = SEARCH_BATCH_SIZE
    direction: int | None = None

    def __post_init__(self) -> None:
        if self.method not in methods.METHOD_NAMES:
            raise MethodError(
                f"unknown method {self.method!r}; valid methods: {', '.join(methods.METHOD_NAMES)}"
            )
        _require_int("n_slices", self.n_slices, 1)
        _require_int("keep", self.keep, 1)
        _require_int("batch_size", self.batch_size, 1)
        for name in ("min_depth", "min_area", "min_separation"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise MethodError(f"search setting {name} must be a number >= 0, got {value!r}")
        if self.direction is not None and (
            isinstance(self.direction, bool) or self.direction not in (1, -1)
        ):
            raise MethodError(
                f"search setting direction must be +1, -1 or None, got {self.direction!r}"
            )


@dataclass(frozen=True)
class RankedSurface:
    """One trial surface kept by a search, with its factor of safety.

    Attributes
    ----------
    kind : str
        "circle" or "polyline".
    fos : float
        Factor of safety [-] by ``method``.
    method : str
        Method of slices that gave ``fos``.
    converged : bool
        Whether the method converged on this surface.
    centre_x, centre_y, radius : float
        Circle centre and radius [m], section frame; NaN for polylines.
    points : ndarray (k, 2) or None
        Vertices of a polyline [m], section frame; None for circles.
    scarp_x, toe_x : float
        Offsets [m] of the ends of the surface on the ground: the upper end, where the main
        scarp of the slide would form (behind or on the crest), and the lower end, the toe of the
        surface of rupture (on the face or beyond the slope's toe); section frame. Landslide
        nomenclature after Cruden and Varnes (1996).
    depth : float
        Largest vertical depth of the surface below the ground [m] (at slice mid-points).
    area : float
        Area of the sliding mass [m2].
    direction : int or None
        Direction of movement along x (+1 or -1) the surface was solved with; pass it to
        :func:`solver.slicing.slice_surface` to slice it again the same way (needed where
        the ends of the ground are level). None: from the ground.
    """

    kind: str
    fos: float
    method: str
    converged: bool
    centre_x: float
    centre_y: float
    radius: float
    points: np.ndarray | None
    scarp_x: float
    toe_x: float
    depth: float
    area: float
    direction: int | None = None

    def describe(self) -> str:
        """One line locating the surface, for reports."""
        where = f"scarp at x = {self.scarp_x:.2f} m, toe at x = {self.toe_x:.2f} m"
        if self.kind == "circle":
            return (
                f"circle centre ({self.centre_x:.2f}, {self.centre_y:.2f}) m, "
                f"radius {self.radius:.2f} m, {where}, depth {self.depth:.2f} m"
            )
        return f"polyline of {len(self.points)} vertices, {where}, depth {self.depth:.2f} m"


@dataclass(frozen=True)
class SearchResult:
    """Outcome of a critical-surface search.

    Attributes
    ----------
    surfaces : tuple of RankedSurface
        The best distinct surfaces, lowest factor of safety first.
    method : str
        Method of slices used for ranking.
    settings : SearchSettings
        Settings of the search (reused by refinement and warm re-evaluation).
    n_trials : int
        Trial surfaces generated (all stages).
    n_valid : int
        Trial surfaces that were geometrically admissible and solved.
    rejected : Counter
        Trial surfaces rejected by slicing, counted by reason.
    filtered : Counter
        Admissible surfaces that did not compete, counted by reason (too shallow, too small,
        method did not converge).
    stages : tuple of str
        Search stages run, in order (e.g. "centre lattice", "circle refinement").
    notes : tuple of str
        Warnings about the search itself, e.g. a best lattice centre on the edge of the centre
        lattice.
    faces : tuple of int
        Directions of movement (+1, -1) of the faces searched (:func:`slope_faces`); each kept
        surface belongs to one of them.
    lattice_edge : tuple of int
        Faces (directions) whose best circle of a centre lattice has its centre on the edge of
        the lattice: the critical circle may lie outside it.
    lowest_tangent : tuple of int
        Faces whose best circle of a centre lattice touches its lowest tangent level (above
        the base): deeper circles may be more critical.
    """

    surfaces: tuple[RankedSurface, ...]
    method: str
    settings: SearchSettings
    n_trials: int
    n_valid: int
    rejected: Counter = field(default_factory=Counter)
    filtered: Counter = field(default_factory=Counter)
    stages: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    faces: tuple[int, ...] = ()
    lattice_edge: tuple[int, ...] = ()
    lowest_tangent: tuple[int, ...] = ()

    @property
    def by_face(self) -> dict:
        """The critical surface of each face searched, {direction: RankedSurface or None},
        lowest factor of safety first; None for a face where no surface was admissible. The
        governing surface (:attr:`critical`) is the first."""
        best = {}
        for surface in self.surfaces:  # ranked, lowest FoS first
            best.setdefault(surface.direction, surface)
        return best | {d: None for d in self.faces if d not in best}

    @property
    def critical(self) -> RankedSurface:
        """The surface with the lowest factor of safety."""
        return self.surfaces[0]

    @property
    def fos(self) -> float:
        """The lowest factor of safety found [-]."""
        return self.surfaces[0].fos

    @property
    def n_rejected(self) -> int:
        return sum(self.rejected.values())

    @property
    def n_filtered(self) -> int:
        return sum(self.filtered.values())


@dataclass(frozen=True)
class WarmResult:
    """Outcome of :func:`warm_reevaluate`.

    Attributes
    ----------
    fos : float
        Lowest factor of safety among the cached surfaces under the new conditions [-].
    critical : RankedSurface
        The cached surface that now gives ``fos``.
    surfaces : tuple of RankedSurface
        The cached surfaces re-evaluated, lowest factor of safety first (surfaces that became
        inadmissible or did not converge are left out and listed in ``dropped``).
    previous_fos : float
        Critical factor of safety of the previous result [-].
    relative_change : float
        (fos - previous_fos) / previous_fos [-].
    ranking_changed : bool
        True when the critical surface is no longer the previous critical surface.
    full_search_advised : bool
        True when the relative change exceeds the tolerance or the ranking changed: the
        critical surface may have moved outside the cached set. The caller decides whether to
        run a full search; this function never does.
    reasons : tuple of str
        Why a full search is advised (empty when it is not).
    dropped : Counter
        Cached surfaces that could not be re-evaluated, by reason.
    evaluation : str
        What was done: always a warm re-evaluation of the cached surfaces, never a full search.
    method : str
        Method of slices used.
    """

    fos: float
    critical: RankedSurface
    surfaces: tuple[RankedSurface, ...]
    previous_fos: float
    relative_change: float
    ranking_changed: bool
    full_search_advised: bool
    reasons: tuple[str, ...]
    dropped: Counter
    evaluation: str
    method: str


# ----------------------------------------------------------------------------------------------
# Trial circles (pure geometry)
# ----------------------------------------------------------------------------------------------


def lattice_circles(
    x_range: tuple[float, float],
    y_range: tuple[float, float],
    nx: int,
    ny: int,
    *,
    tangent_elevations=None,
    radii=None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Trial circles of the centre-lattice search.

    A rectangular lattice of ``nx * ny`` centres; every centre carries one circle per tangent
    elevation (the elevation its lowest point touches, ``radius = centre_y - tangent``) or one
    per explicit radius. Circles with a radius <= 0 (tangent above the centre) are left out.

    Parameters
    ----------
    x_range, y_range : (float, float)
        [m] Extent of the lattice of centres, section frame.
    nx, ny : int
        Centres along x and y (1 gives the middle of the range).
    tangent_elevations : array_like, optional
        [m] Elevations touched by the bottom of the circles.
    radii : array_like, optional
        [m] Explicit radii (give either these or ``tangent_elevations``).

    Returns
    -------
    centre_x, centre_y, radius : ndarray (n,)
        [m] One value per trial circle, centre-major order.
    """
    _require_int("nx", nx, 1)
    _require_int("ny", ny, 1)
    if (tangent_elevations is None) == (radii is None):
        raise MethodError("give either tangent_elevations or radii for the centre lattice, "
                          "not both")
    xs = _spread(x_range, nx, "x_range")
    ys = _spread(y_range, ny, "y_range")
    cx, cy = (a.ravel() for a in np.meshgrid(xs, ys, indexing="ij"))
    if radii is not None:
        levels = np.atleast_1d(np.asarray(radii, dtype=float))
        radius = np.broadcast_to(levels, (cx.size, levels.size))
    else:
        levels = np.atleast_1d(np.asarray(tangent_elevations, dtype=float))
        radius = cy[:, None] - levels[None, :]
    if levels.size == 0 or not np.all(np.isfinite(levels)):
        raise MethodError(f"centre lattice radii / tangent elevations must be finite, got {levels}")
    centre_x = np.repeat(cx, levels.size)
    centre_y = np.repeat(cy, levels.size)
    radius = radius.ravel()
    keep = radius > 0
    return centre_x[keep], centre_y[keep], radius[keep]


def polyline_from_circle(centre_x, centre_y, radius, scarp_x, toe_x, scarp_y, toe_y, n_vertices):
    """Vertices of the arc of a circle between its two ground intersections, evenly spaced in
    angle, as a polyline of ``n_vertices`` points [m] (k, 2), ordered by increasing x."""
    _require_int("n_vertices", n_vertices, 3)
    x_lo, x_hi = sorted((scarp_x, toe_x))
    y_lo = scarp_y if x_lo == scarp_x else toe_y
    y_hi = toe_y if x_lo == scarp_x else scarp_y
    theta_lo = np.arctan2(y_lo - centre_y, x_lo - centre_x)
    theta_hi = np.arctan2(y_hi - centre_y, x_hi - centre_x)
    # Walk from the left point through the bottom of the circle (-pi/2) to the right point.
    if theta_lo > -0.5 * np.pi:
        theta_lo -= 2 * np.pi
    if theta_hi < -0.5 * np.pi:
        theta_hi += 2 * np.pi
    theta = np.linspace(theta_lo, theta_hi, n_vertices)
    points = np.column_stack(
        (centre_x + radius * np.cos(theta), centre_y + radius * np.sin(theta))
    )
    points[0] = (x_lo, y_lo)
    points[-1] = (x_hi, y_hi)
    return points


# ----------------------------------------------------------------------------------------------
# Default placement from the section's geometry
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SlopeGeometry:
    """Where the slope is, read from the ground line (used to place default search grids).

    ``x_crest``/``x_toe`` bound the face: the last point near the upper ground level and the
    first near the lower one, walking down the slope. ``facing`` is +1 when the slope descends
    towards +x, -1 otherwise. ``base_top`` is the highest point of the impenetrable base [m]
    (None without a base).
    """

    facing: int
    x_crest: float
    x_toe: float
    y_crest: float
    y_toe: float
    x_min: float
    x_max: float
    base_top: float | None

    @property
    def height(self) -> float:
        return self.y_crest - self.y_toe

    @property
    def face_length(self) -> float:
        return abs(self.x_toe - self.x_crest)


def _face(ground, direction: int):
    """The face of the ground whose mass moves in ``direction``: (x, y) of the ground in the
    movement frame (the face descends towards +x) and the indices of its crest and toe.

    The face is the largest fall of the ground in that direction, from the highest point
    before it (crest level) to its lowest point (toe level); the crest is the last point near
    crest level and the toe the first point near toe level after it ("near": within 2 % of
    the fall). Its height is 0 where the ground never falls that way.
    """
    x, y = ground[:, 0], ground[:, 1]
    if direction < 0:
        x, y = -x[::-1], y[::-1]
    highest_before = np.maximum.accumulate(y)
    fall = highest_before - y
    j = int(np.argmax(fall))
    y_high, y_low = highest_before[j], y[j]
    band = 0.02 * max(y_high - y_low, 1e-9)
    i_crest = int(np.nonzero(y[: j + 1] >= y_high - band)[0].max())
    i_toe = i_crest + int(np.nonzero(y[i_crest:] <= y_low + band)[0].min())
    return x, y, i_crest, i_toe


def slope_faces(section, min_height_fraction: float = SEARCH_FACE_MIN_HEIGHT_FRACTION):
    """Directions of movement (+1, -1) of the faces of ``section``, highest face first.

    The ground has a face towards +x (-x) where it falls in that direction by at least
    ``min_height_fraction`` of its whole relief: one face for a natural slope or one side of a
    cutting, two for an embankment, a ridge, a spoil heap or a cutting with both sides. Level
    ground has no fall either way; both directions are then returned.

    Parameters
    ----------
    section : Section or array (n, 2)
        The section, or its ground points [m].
    min_height_fraction : float
        Smallest fall that counts as a face, as a fraction of the relief [-].

    Returns
    -------
    tuple of int
    """
    ground = _ground_points(section)
    heights = {}
    for direction in (1, -1):
        _, y, i_crest, i_toe = _face(ground, direction)
        heights[direction] = float(y[i_crest] - y[i_toe])
    relief = float(np.ptp(ground[:, 1]))
    if relief <= 0:
        return (1, -1)
    faces = [d for d in (1, -1) if heights[d] > 0 and heights[d] >= min_height_fraction * relief]
    return tuple(sorted(faces, key=lambda d: -heights[d]))


def face_name(direction: int) -> str:
    """The name of the face (:data:`FACES`) whose slides move in ``direction`` (+1 or -1)."""
    return next(name for name, d in FACES.items() if d == direction)


def slope_geometry(section, direction: int | None = None) -> SlopeGeometry:
    """Crest, toe and facing of the slope of ``section`` (see :class:`SlopeGeometry`): of the
    face whose mass moves in ``direction`` (+1 towards +x, -1 towards -x), by default the
    highest face (:func:`slope_faces`)."""
    ground = _ground_points(section)
    facing = slope_faces(section)[0] if direction is None else int(direction)
    x, y, i_crest, i_toe = _face(ground, facing)
    x_crest, x_toe = facing * x[i_crest], facing * x[i_toe]
    base = _base_points(section)
    return SlopeGeometry(
        facing=facing,
        x_crest=float(x_crest),
        x_toe=float(x_toe),
        y_crest=float(y[i_crest]),
        y_toe=float(y[i_toe]),
        x_min=float(ground[0, 0]),
        x_max=float(ground[-1, 0]),
        base_top=None if base is None else float(base[:, 1].max()),
    )


def default_centre_lattice(section, nx: int = _DEFAULT_CENTRES, ny: int = _DEFAULT_CENTRES,
                           n_radii: int = _DEFAULT_TANGENT_LEVELS, *,
                           direction: int | None = None):
    """Default centre lattice placement above the slope of ``section``.

    Centres cover a rectangle above the face: in x from one slope width before the crest to one
    after the toe (the slope width being the larger of the face's run and its height), in y from
    the crest level up to two slope widths above it. The tangent elevations run from just below
    the crest (shallow circles, which ``min_depth`` may filter) down to one slope height below
    the toe, or down to the top of the impenetrable base. Common practice (Duncan, Wright and
    Brandon 2014, ch. 8); the lattice should be checked so that the critical centre is not on its
    edge, which :func:`centre_lattice` reports. ``direction`` picks the face as in
    :func:`slope_geometry`.

    Returns
    -------
    dict
        Keyword arguments for :func:`lattice_circles`.
    """
    g = slope_geometry(section, direction)
    width = max(g.face_length, g.height, 1.0)
    x_mid = 0.5 * (g.x_crest + g.x_toe)
    half = 0.5 * g.face_length + width
    lowest = g.y_toe - g.height
    if g.base_top is not None:
        lowest = g.base_top
    tangents = np.linspace(g.y_crest - 0.05 * g.height, lowest, n_radii)
    return dict(
        x_range=(x_mid - half, x_mid + half),
        y_range=(g.y_crest, g.y_crest + 2.0 * width),
        nx=nx,
        ny=ny,
        tangent_elevations=tangents,
    )


def default_scarp_toe_band(section, n_scarp: int = 20, n_toe: int = 20, n_tangents: int = 10,
                           *, direction: int | None = None):
    """Default ranges of the scarp-to-toe band search for ``section``.

    Scarp points (upper ends) run from one slope width behind the crest to the middle of the
    face; toe points (lower ends) from the middle of the face to one slope width beyond the toe
    (clipped to the ground line). Tangent elevations run from the toe level down to one slope height below it (or to the
    top of the base). Common practice (Duncan, Wright and Brandon 2014, ch. 8). ``direction``
    picks the face as in :func:`slope_geometry`.

    Returns
    -------
    dict
        Keyword arguments for :func:`scarp_toe_band`.
    """
    g = slope_geometry(section, direction)
    width = max(g.face_length, g.height, 1.0)
    x_mid = 0.5 * (g.x_crest + g.x_toe)
    behind = np.clip(g.x_crest - g.facing * width, g.x_min, g.x_max)
    beyond = np.clip(g.x_toe + g.facing * width, g.x_min, g.x_max)
    lowest = g.y_toe - g.height if g.base_top is None else g.base_top
    return dict(
        scarp_range=tuple(sorted((float(behind), float(x_mid)))),
        toe_range=tuple(sorted((float(x_mid), float(beyond)))),
        n_scarp=n_scarp,
        n_toe=n_toe,
        tangent_elevations=np.linspace(g.y_toe - 0.05 * g.height, lowest, n_tangents),
    )


# ----------------------------------------------------------------------------------------------
# Searches
# ----------------------------------------------------------------------------------------------


def centre_lattice(
    section,
    settings: SearchSettings | None = None,
    *,
    x_range=None,
    y_range=None,
    nx: int = _DEFAULT_CENTRES,
    ny: int = _DEFAULT_CENTRES,
    tangent_elevations=None,
    radii=None,
    n_radii: int = _DEFAULT_TANGENT_LEVELS,
) -> SearchResult:
    """Centre-lattice search for the critical circle.

    Every centre of an ``nx * ny`` lattice carries one circle per tangent elevation (or explicit
    radius); all circles are sliced and solved in batches and the lowest factor of safety
    among the admissible, converged circles that pass the size filters wins. Omitted ranges
    and tangents come from :func:`default_centre_lattice`. Unless ``settings.direction`` names
    one, every face of the section is searched (:func:`slope_faces`), each with its own default
    placement; :attr:`SearchResult.by_face` gives the critical surface of each.

    Parameters
    ----------
    section : Section
        The cross-section.
    settings : SearchSettings, optional
        Method, slices, filters, numerical settings.
    x_range, y_range : (float, float), optional
        [m] Extent of the lattice of centres.
    nx, ny : int
        Centres along x and y.
    tangent_elevations, radii : array_like, optional
        [m] Elevations touched by the circle bottoms, or explicit radii.
    n_radii : int
        Tangent elevations of the default placement.

    Returns
    -------
    SearchResult

    Raises
    ------
    SearchError
        No circle is admissible; the message counts the rejections by reason.

    References
    ----------
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
        2nd ed. Wiley, ch. 8.
    """
    settings = settings or SearchSettings()
    parts, grids = [], {}
    for direction in _directions(section, settings):
        grid = dict(x_range=x_range, y_range=y_range, tangent_elevations=tangent_elevations)
        if x_range is None or y_range is None or (tangent_elevations is None and radii is None):
            default = default_centre_lattice(section, nx, ny, n_radii, direction=direction)
            for key in ("x_range", "y_range"):
                grid[key] = default[key] if grid[key] is None else grid[key]
            if tangent_elevations is None and radii is None:
                grid["tangent_elevations"] = default["tangent_elevations"]
        centre_x, centre_y, radius = lattice_circles(nx=nx, ny=ny, radii=radii, **grid)
        n_dropped = nx * ny * np.atleast_1d(
            grid["tangent_elevations"] if radii is None else radii).size
        evaluated = _evaluate_circles(section, centre_x, centre_y, radius, settings, direction)
        evaluated.rejected["tangent above the centre"] += int(n_dropped - centre_x.size)
        evaluated.n_trials += int(n_dropped - centre_x.size)
        parts.append(evaluated)
        grids[direction] = grid
    result = _finish(section, _concatenate(parts, sum(p.n_trials for p in parts)), settings,
                     (f"centre lattice ({settings.method})",))
    notes, on_edge, on_lowest = (), (), ()
    for direction, best in result.by_face.items():
        if best is None:
            continue
        grid = grids[direction]
        edge, lowest = _lattice_edges(best, grid["x_range"], grid["y_range"], nx, ny,
                                      grid["tangent_elevations"], _base_points(section))
        on_edge += (direction,) * edge
        on_lowest += (direction,) * lowest
        notes += _lattice_edge_notes(best, grid, edge, lowest, len(grids) > 1)
    return replace(result, notes=result.notes + notes, lattice_edge=on_edge,
                   lowest_tangent=on_lowest)


def scarp_toe_band(
    section,
    settings: SearchSettings | None = None,
    *,
    scarp_range=None,
    toe_range=None,
    n_scarp: int = 20,
    n_toe: int = 20,
    tangent_elevations=None,
    radii=None,
    n_tangents: int = 10,
) -> SearchResult:
    """Scarp-to-toe band search for the critical circle.

    Scarp points (upper ends) on the upper ground and toe points (lower ends) on the lower
    ground (evenly spaced over the given ranges, on the ground line) are joined by circles of
    each radius, or touching each tangent elevation
    (:func:`solver.surfaces.circle_from_scarp_toe`). Omitted ranges come from
    :func:`default_scarp_toe_band`, for every face of the section unless
    ``settings.direction`` names one.

    Parameters
    ----------
    section : Section
    settings : SearchSettings, optional
    scarp_range, toe_range : (float, float), optional
        [m] Offsets of the scarp (upper, crest side) and toe (lower) ends.
    n_scarp, n_toe : int
        Points in each range.
    tangent_elevations, radii : array_like, optional
        [m] Elevations touched by the circle bottoms, or radii.
    n_tangents : int
        Tangent elevations of the default placement.

    Returns
    -------
    SearchResult

    References
    ----------
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
        2nd ed. Wiley, ch. 8.
    """
    settings = settings or SearchSettings()
    _require_int("n_scarp", n_scarp, 1)
    _require_int("n_toe", n_toe, 1)
    parts = []
    for direction in _directions(section, settings):
        entries, exits, tangents = scarp_range, toe_range, tangent_elevations
        if entries is None or exits is None or (tangents is None and radii is None):
            default = default_scarp_toe_band(section, n_scarp, n_toe, n_tangents,
                                         direction=direction)
            entries = default["scarp_range"] if entries is None else entries
            exits = default["toe_range"] if exits is None else exits
            if tangents is None and radii is None:
                tangents = default["tangent_elevations"]
        levels = np.atleast_1d(np.asarray(tangents if radii is None else radii, float))
        x1 = _spread(entries, n_scarp, "scarp_range")
        x2 = _spread(exits, n_toe, "toe_range")
        x1, x2, level = (a.ravel() for a in np.meshgrid(x1, x2, levels, indexing="ij"))
        key = "radius" if radii is not None else "tangent_elevation"
        circles = circle_from_scarp_toe(section, x1, x2, **{key: level})
        cx, cy, r = (np.asarray(v, float)
                     for v in (circles.centre_x, circles.centre_y, circles.radius))
        ok = np.isfinite(r)
        evaluated = _evaluate_circles(section, cx[ok], cy[ok], r[ok], settings, direction)
        evaluated.rejected["no circle through the scarp and toe points"] += int((~ok).sum())
        evaluated.n_trials += int((~ok).sum())
        parts.append(evaluated)
    return _finish(section, _concatenate(parts, sum(p.n_trials for p in parts)), settings,
                   (f"scarp-to-toe band ({settings.method})",))


def refine_circle(
    section,
    result: SearchResult,
    *,
    starts: int = 3,
    initial_step: float | None = None,
    step_tolerance: float = SEARCH_REFINE_STEP_TOLERANCE,
    max_steps: int = SEARCH_REFINE_MAX_STEPS,
) -> SearchResult:
    """Refine the best circles of a search by a shrinking pattern search on (xc, yc, r).

    From each of the ``starts`` best distinct circles, the 26 neighbours
    ``(xc + i h, yc + j h, r + k h)``, i, j, k in {-1, 0, 1}, are solved as one batch; the
    search moves to the best neighbour when it lowers the factor of safety and halves h when
    none does, until h < ``step_tolerance`` (Hooke and Jeeves 1961). A move is accepted only
    when it lowers the factor of safety, so the refined result is never higher than the
    result it starts from.

    Parameters
    ----------
    section : Section
    result : SearchResult
        A circular search (its settings are reused).
    starts : int
        Number of kept circles refined on each face (guards against a local minimum near the
        best one).
    initial_step : float, optional
        [m] First step h; default 5 % of the radius of each start circle.
    step_tolerance : float
        [m] Smallest step.
    max_steps : int
        Iteration limit per start.

    Returns
    -------
    SearchResult

    References
    ----------
    Hooke, R. and Jeeves, T.A. (1961). "Direct search" solution of numerical and statistical
        problems. Journal of the ACM, 8(2), 212-229.
    """
    _require_int("starts", starts, 1)
    _require_int("max_steps", max_steps, 1)
    if not step_tolerance > 0:
        raise MethodError(f"step_tolerance must be > 0 m, got {step_tolerance!r}")
    if initial_step is not None and not initial_step > step_tolerance:
        raise MethodError(f"initial_step must exceed step_tolerance, got {initial_step!r} m")
    settings = result.settings
    circles = []
    for direction in dict.fromkeys(s.direction for s in result.surfaces):
        circles += [s for s in result.surfaces
                    if s.kind == "circle" and s.direction == direction][:starts]
    if not circles:
        raise SearchError("refine_circle needs a search result that kept at least one circle")
    pattern = np.array([p for p in product((-1, 0, 1), repeat=3) if any(p)], dtype=float)
    candidates = list(result.surfaces)
    tally = _Tally()
    for start in circles:
        point = np.array([start.centre_x, start.centre_y, start.radius])
        best = start.fos
        step = initial_step or 0.05 * start.radius
        for _ in range(max_steps):
            if step < step_tolerance:
                break
            trial = point + step * pattern
            evaluated = _evaluate_circles(section, *trial.T, settings, start.direction)
            tally.add(evaluated)
            if evaluated.fos.size and evaluated.fos.min() < best:
                i = int(np.argmin(evaluated.fos))
                best = float(evaluated.fos[i])
                point = np.array(
                    [evaluated.centre_x[i], evaluated.centre_y[i], evaluated.radius[i]]
                )
            else:
                step *= 0.5
        if best < start.fos:
            refined = _single_circle(section, point, settings, start.direction)
            if refined is not None:
                candidates.append(refined)
    return _merge(
        section, result, candidates, settings, tally, f"circle refinement ({settings.method})"
    )


def optimise_polyline(
    section,
    result: SearchResult,
    *,
    method: str = "spencer",
    n_vertices: int = SEARCH_POLYLINE_VERTICES,
    max_inclination: float = SEARCH_MAX_INCLINATION_DEG,
    max_angle_change: float = SEARCH_MAX_ANGLE_CHANGE_DEG,
    optimiser: str = "Nelder-Mead",
    max_evaluations: int = SEARCH_POLYLINE_MAX_EVALUATIONS,
) -> SearchResult:
    """Non-circular search: turn the critical circle into a polyline and move its vertices.

    This is done from the best circle of each face searched. The arc of the circle between its
    ground intersections becomes ``n_vertices`` points.
    The free parameters are the offsets of the two end points (which stay on the ground) and
    the elevations of the interior vertices (whose offsets keep their fractions of the span), so
    x stays strictly increasing. They are moved by :func:`scipy.optimize.minimize` on the factor
    of safety by ``method``; a polyline that is not kinematically admissible gets a penalty:
    every segment at most ``max_inclination`` from the horizontal, the inclination changing by
    at most ``max_angle_change`` at each vertex and never turning convex (the surface stays
    concave upwards, so the mass can slide without breaking up; Greco 1996), and the slicing
    must accept it (it must not cross the base). The surfaces kept by ``result`` are re-solved by
    ``method`` so that the ranking compares like with like.

    Parameters
    ----------
    section : Section
    result : SearchResult
        A search whose critical surface is a circle.
    method : str
        Method of slices; Spencer or Morgenstern-Price suit non-circular surfaces (they satisfy
        both force and moment equilibrium).
    n_vertices : int
        Vertices of the polyline (>= 3).
    max_inclination : float
        [deg] Steepest admissible segment (0 < value < 90).
    max_angle_change : float
        [deg] Largest change of inclination at a vertex (> 0).
    optimiser : str
        "Nelder-Mead" or "Powell" (derivative-free methods of :func:`scipy.optimize.minimize`;
        the factor of safety has kinks where vertices cross strata boundaries).
    max_evaluations : int
        Limit of factor-of-safety evaluations of the optimiser.

    Returns
    -------
    SearchResult
        Ranked by ``method``; its stages end with "non-circular optimisation".

    References
    ----------
    Greco, V.R. (1996). Efficient Monte Carlo technique for locating critical slip surface.
        Journal of Geotechnical Engineering, ASCE, 122(7), 517-525.
    Nelder, J.A. and Mead, R. (1965). A simplex method for function minimization. The Computer
        Journal, 7(4), 308-313.
    """
    _require_int("n_vertices", n_vertices, 3)
    _require_int("max_evaluations", max_evaluations, 1)
    if not 0 < max_inclination < 90:
        raise MethodError(f"max_inclination must be between 0 and 90 deg, got {max_inclination!r}")
    if not 0 < max_angle_change <= 180:
        raise MethodError(f"max_angle_change must be in (0, 180] deg, got {max_angle_change!r}")
    if optimiser not in ("Nelder-Mead", "Powell"):
        raise MethodError(f"optimiser must be 'Nelder-Mead' or 'Powell', got {optimiser!r}")
    settings = replace(result.settings, method=method)
    # The best circle of each face (the kept surfaces are ranked, lowest FoS first).
    starts = [next((s for s in result.surfaces
                    if s.kind == "circle" and s.direction == d), None) for d in result.by_face]
    starts = [s for s in starts if s is not None]
    if not starts:
        raise SearchError("optimise_polyline needs a search result that kept a circle")
    candidates = list(result.surfaces)
    tally = _Tally()
    for start in starts:
        points = _optimise_from(section, start, settings, n_vertices, max_inclination,
                                max_angle_change, optimiser, max_evaluations, tally)
        if points is not None:
            candidates.append(_polyline_surface(points, start.direction))
    return _merge(
        section, result, candidates, settings, tally, f"non-circular optimisation ({method})"
    )


def _optimise_from(section, start, settings, n_vertices, max_inclination, max_angle_change,
                   optimiser, max_evaluations, tally):
    """The polyline optimised from the circle ``start`` (:func:`optimise_polyline`), or None
    when the optimiser found no admissible one."""
    ground = _ground_points(section)
    scarp_y = float(_ground_elevation(section, start.scarp_x))
    toe_y = float(_ground_elevation(section, start.toe_x))
    points0 = polyline_from_circle(
        start.centre_x, start.centre_y, start.radius,
        start.scarp_x, start.toe_x, scarp_y, toe_y, n_vertices,
    )
    span0 = points0[-1, 0] - points0[0, 0]
    fractions = (points0[1:-1, 0] - points0[0, 0]) / span0
    theta0 = np.arctan(np.diff(points0[:, 1]) / np.diff(points0[:, 0]))
    # The arc itself must be admissible, whatever the limits asked for.
    limit_incl = max(np.radians(max_inclination), np.abs(theta0).max() + 1e-9)
    limit_turn = max(np.radians(max_angle_change), np.diff(theta0).max() + 1e-9)

    def points_of(p):
        x_lo, x_hi = p[0], p[1]
        xs = np.concatenate(([x_lo], x_lo + fractions * (x_hi - x_lo), [x_hi]))
        ends = _ground_elevation(section, np.array([x_lo, x_hi]))
        ys = np.concatenate(([ends[0]], p[2:], [ends[1]]))
        return np.column_stack((xs, ys))

    def objective(p):
        if not (ground[0, 0] <= p[0] < p[1] <= ground[-1, 0]):
            return _PENALTY * (2 + abs(p[1] - p[0]))
        pts = points_of(p)
        theta = np.arctan(np.diff(pts[:, 1]) / np.diff(pts[:, 0]))
        turn = np.diff(theta)
        violation = (
            np.clip(np.abs(theta) - limit_incl, 0, None).sum()
            + np.clip(turn - limit_turn, 0, None).sum()
            + np.clip(-turn, 0, None).sum()
        )
        if violation > 0:
            return _PENALTY * (1 + violation)
        evaluated = _evaluate_polylines(section, pts[None], settings, start.direction)
        tally.add(evaluated)
        if evaluated.fos.size == 0:
            return _PENALTY
        return float(evaluated.fos[0])

    p0 = np.concatenate(([points0[0, 0], points0[-1, 0]], points0[1:-1, 1]))
    scale = 0.05 * span0
    options = {"maxfev": max_evaluations, "xatol": 1e-3, "fatol": 1e-5}
    if optimiser == "Nelder-Mead":
        simplex = np.vstack([p0, p0 + scale * np.eye(p0.size)])
        options["initial_simplex"] = simplex
    else:
        options = {"maxfev": max_evaluations, "direc": scale * np.eye(p0.size), "xtol": 1e-3}
    solution = optimize.minimize(objective, p0, method=optimiser, options=options)
    if solution.fun < _PENALTY:
        return points_of(solution.x)
    return None


def rerank(section, result: SearchResult, method: str) -> SearchResult:
    """The surfaces kept by ``result`` re-solved and ranked by another ``method``.

    Used after screening many circles with a fast method: on circles, Bishop's simplified
    method and the complete methods (Spencer, Morgenstern-Price) usually agree within a few per
    cent (Duncan, Wright and Brandon 2014, ch. 7), so the circles it ranks best are the ones
    worth solving by the slower method.
    """
    settings = replace(result.settings, method=method)
    return _merge(section, result, list(result.surfaces), settings, _Tally(), f"ranked by {method}")


def placement_from_section(search: dict) -> dict:
    """The centre-lattice placement (keyword arguments of :func:`centre_lattice`) set by a
    section file's ``[search]`` table (docs/formats.md, section 1): ``centre_x_range`` and
    ``centre_y_range`` [m] (x_range, y_range), ``centres`` [along x, along y] (nx, ny),
    ``tangent_range`` [m] and ``tangent_levels`` (tangent levels evenly spread over the range,
    or the count of the default levels). Keys left out keep the default placement
    (:func:`default_centre_lattice`); on a section with two faces the given ranges serve both
    faces searched, so give them with ``face``, or wide enough to cover both."""
    placement = {}
    if "centre_x_range" in search:
        placement["x_range"] = tuple(float(v) for v in search["centre_x_range"])
    if "centre_y_range" in search:
        placement["y_range"] = tuple(float(v) for v in search["centre_y_range"])
    if "centres" in search:
        placement["nx"], placement["ny"] = (int(v) for v in search["centres"])
    levels = int(search.get("tangent_levels", _DEFAULT_TANGENT_LEVELS))
    if "tangent_range" in search:
        low, high = (float(v) for v in search["tangent_range"])
        placement["tangent_elevations"] = np.linspace(high, low, levels)
    elif "tangent_levels" in search:
        placement["n_radii"] = levels
    return placement


def search_critical_surface(
    section,
    settings: SearchSettings | None = None,
    *,
    circles: str = "centre lattice",
    screen_with: str | None = None,
    refine: bool = True,
    non_circular: bool = False,
    non_circular_method: str | None = None,
    placement: dict | None = None,
) -> SearchResult:
    """The full search: circles, refinement, optional polyline.

    Parameters
    ----------
    section : Section
    settings : SearchSettings, optional
    circles : str
        "centre lattice" or "scarp-to-toe band".
    screen_with : str, optional
        Rank the many trial circles by this (faster) method, then re-rank the kept ones by
        ``settings.method`` (:func:`rerank`) before refining; None screens with
        ``settings.method`` itself.
    refine : bool
        Refine the best circles (:func:`refine_circle`).
    non_circular : bool
        Then optimise a polyline from the best circle (:func:`optimise_polyline`).
    non_circular_method : str, optional
        Method of the non-circular stage (and of the final ranking); default
        ``settings.method``.
    placement : dict, optional
        Keyword arguments of the circle search that place its trial circles (for the centre
        lattice: x_range, y_range, nx, ny, tangent_elevations, n_radii; see
        :func:`placement_from_section`); omitted ones come from the default placement.

    Returns
    -------
    SearchResult
    """
    settings = settings or SearchSettings()
    searches = {"centre lattice": centre_lattice, "scarp-to-toe band": scarp_toe_band}
    if circles not in searches:
        raise MethodError(f"unknown circle search {circles!r}; valid: {', '.join(searches)}")
    placement = placement or {}
    if screen_with and screen_with != settings.method:
        result = searches[circles](section, replace(settings, method=screen_with), **placement)
        result = rerank(section, result, settings.method)
    else:
        result = searches[circles](section, settings, **placement)
    if refine:
        result = refine_circle(section, result)
    if non_circular:
        result = optimise_polyline(
            section, result, method=non_circular_method or settings.method
        )
    return result


# ----------------------------------------------------------------------------------------------
# Warm re-evaluation
# ----------------------------------------------------------------------------------------------


def warm_reevaluate(
    section,
    previous: SearchResult,
    *,
    method: str | None = None,
    full_search_tolerance: float = SEARCH_FULL_SEARCH_TOLERANCE,
) -> WarmResult:
    """Re-solve only the surfaces cached by a previous search, under new conditions.

    Meant for monitoring: the section is the same but its water lines have been rebuilt from
    new readings. Re-slicing a fixed surface is cheap, so only the ``previous.surfaces`` are
    evaluated. A full search is advised (never run) when the critical factor of safety moved by
    more than ``full_search_tolerance`` relative to the previous one, or when another cached
    surface became critical; either means the critical surface may now lie elsewhere.

    Parameters
    ----------
    section : Section
        The section with its new water lines (same geometry as the searched one).
    previous : SearchResult
        The previous search.
    method : str, optional
        Method of slices; default the previous search's method.
    full_search_tolerance : float
        Relative change of the critical factor of safety [-] beyond which a full search is
        advised.

    Returns
    -------
    WarmResult

    Raises
    ------
    SearchError
        None of the cached surfaces can be evaluated any more.
    """
    if not (np.isfinite(full_search_tolerance) and full_search_tolerance >= 0):
        raise MethodError(
            f"full_search_tolerance must be a number >= 0, got {full_search_tolerance!r}"
        )
    settings = replace(previous.settings, method=method or previous.method)
    surfaces, dropped = _evaluate_surfaces(section, previous.surfaces, settings)
    if not surfaces:
        raise SearchError(
            f"none of the {len(previous.surfaces)} cached surfaces could be re-evaluated "
            f"({_reasons(dropped)}); run a full search"
        )
    critical = surfaces[0]
    previous_fos = previous.fos
    change = (critical.fos - previous_fos) / previous_fos
    reasons = []
    if abs(change) > full_search_tolerance:
        reasons.append(
            f"critical FoS changed by {100 * change:+.1f} % "
            f"(tolerance {100 * full_search_tolerance:.1f} %)"
        )
    ranking_changed = not _same_surface(critical, previous.critical)
    if ranking_changed:
        reasons.append("another cached surface became critical")
    if settings.method != previous.method:
        reasons.append(
            f"method changed from {previous.method} to {settings.method}; the cached "
            f"surfaces were ranked by {previous.method}"
        )
    if dropped:
        reasons.append(f"cached surfaces dropped ({_reasons(dropped)})")
    return WarmResult(
        fos=critical.fos,
        critical=critical,
        surfaces=tuple(surfaces),
        previous_fos=previous_fos,
        relative_change=float(change),
        ranking_changed=ranking_changed,
        full_search_advised=bool(reasons),
        reasons=tuple(reasons),
        dropped=dropped,
        evaluation=f"warm re-evaluation of {len(previous.surfaces)} cached surfaces; "
        "no full search was run",
        method=settings.method,
    )


# ----------------------------------------------------------------------------------------------
# Private machinery
# ----------------------------------------------------------------------------------------------


@dataclass
class _Evaluated:
    """Admissible, converged trial surfaces that passed the filters, with their FoS, plus the
    counts of those that did not."""

    centre_x: np.ndarray
    centre_y: np.ndarray
    radius: np.ndarray
    points: np.ndarray | None
    fos: np.ndarray
    scarp_x: np.ndarray
    toe_x: np.ndarray
    depth: np.ndarray
    area: np.ndarray
    direction: np.ndarray  # (n,) +1 / -1 of movement along x
    n_trials: int
    n_valid: int
    rejected: Counter
    filtered: Counter


class _Tally:
    """Counts accumulated over the many small batches of a refinement or optimisation."""

    def __init__(self) -> None:
        self.n_trials = 0
        self.n_valid = 0
        self.rejected: Counter = Counter()
        self.filtered: Counter = Counter()

    def add(self, evaluated: _Evaluated) -> None:
        self.n_trials += evaluated.n_trials
        self.n_valid += evaluated.n_valid
        self.rejected.update(evaluated.rejected)
        self.filtered.update(evaluated.filtered)


def _directions(section, settings) -> tuple[int, ...]:
    """Directions of movement (+1, -1) to search: the settings' one, else every face of the
    section (:func:`slope_faces`)."""
    if settings.direction is not None:
        return (settings.direction,)
    return slope_faces(section)


def _evaluate_circles(section, centre_x, centre_y, radius, settings, direction=None):
    direction = _directions(section, settings)[0] if direction is None else direction
    parts = []
    for start in range(0, len(centre_x), settings.batch_size):
        part = slice(start, start + settings.batch_size)
        batch = slice_circles(
            section, centre_x[part], centre_y[part], radius[part], n_slices=settings.n_slices,
            direction=direction, weight_centroid=section.kh != 0,
        )
        parts.append(_solve_batch(batch, settings, centre_x[part], centre_y[part],
                                  radius[part], None, direction))
    return _concatenate(parts, len(centre_x))


def _evaluate_polylines(section, points, settings, direction=None) -> _Evaluated:
    direction = _directions(section, settings)[0] if direction is None else direction
    parts = []
    for start in range(0, len(points), settings.batch_size):
        part = points[start : start + settings.batch_size]
        batch = slice_polyline(section, part, n_slices=settings.n_slices, direction=direction)
        nan = np.full(len(part), np.nan)
        parts.append(_solve_batch(batch, settings, nan, nan, nan, part, direction))
    return _concatenate(parts, len(points))


def _solve_batch(batch, settings, centre_x, centre_y, radius, points, direction) -> _Evaluated:
    rejected = batch.rejected()
    index = np.asarray(batch.index, dtype=int)
    n_valid = int(index.size)
    filtered: Counter = Counter()
    if n_valid == 0:
        empty = np.empty(0)
        return _Evaluated(
            centre_x=empty, centre_y=empty, radius=empty,
            points=None if points is None else np.asarray(points)[:0],
            fos=empty, scarp_x=empty, toe_x=empty, depth=empty, area=empty,
            direction=np.empty(0, dtype=int),
            n_trials=len(centre_x), n_valid=0, rejected=rejected, filtered=filtered,
        )
    slices = batch.slices
    fos, last, converged, doubtful, doubt_reasons = _screen(slices, settings)
    has_fos = np.isfinite(last) & (last > 0)
    converged = converged & has_fos
    doubtful &= converged
    if not settings.admissible_only:
        doubtful[:] = False
    depth, area = _surface_measures(slices)
    scarp_x, toe_x = np.asarray(batch.scarp_x, float), np.asarray(batch.toe_x, float)
    shallow = depth < settings.min_depth
    small = area < settings.min_area
    filtered[NO_FOS] += int((~has_fos).sum())
    filtered[NOT_CONVERGED] += int((has_fos & ~converged).sum())
    filtered.update(doubt_reasons(doubtful))
    fine = converged & ~doubtful
    filtered[TOO_SHALLOW] += int((fine & shallow).sum())
    filtered[TOO_SMALL] += int((fine & ~shallow & small).sum())
    keep = fine & ~shallow & ~small
    rows = index[keep]
    return _Evaluated(
        centre_x=np.asarray(centre_x)[rows],
        centre_y=np.asarray(centre_y)[rows],
        radius=np.asarray(radius)[rows],
        points=None if points is None else np.asarray(points)[rows],
        fos=fos[keep],
        scarp_x=scarp_x[keep],
        toe_x=toe_x[keep],
        depth=depth[keep],
        area=area[keep],
        direction=np.full(int(keep.sum()), direction, dtype=int),
        n_trials=len(centre_x),
        n_valid=n_valid,
        rejected=rejected,
        filtered=+filtered,
    )


def _screen(slices, settings):
    """FoS, last iterate, converged flag and "doubtful" flag (converged but m_alpha too low) of
    every surface of a batch by the search's method, and a function that counts the reasons
    of the doubtful ones from the result's flags. Bishop's method screens without building
    the per-slice audit tables (:func:`solver.methods.bishop_screening`); the other methods
    give a full result.
    """
    if settings.method == "bishop_simplified":
        solved = methods.bishop_screening(slices, **_method_options(settings))
    else:
        solved = factor_of_safety(slices, method=settings.method, **_method_options(settings))
    doubtful = ~np.asarray(solved.admissible, dtype=bool) & solved.low_m_alpha

    def doubt_reasons(doubtful):
        return _doubt_reasons(solved.negative_normal[doubtful])

    return (np.asarray(solved.fos, dtype=float), np.asarray(solved.last_iterate, dtype=float),
            np.asarray(solved.converged, dtype=bool), doubtful, doubt_reasons)


def _method_options(settings) -> dict:
    """The numerical settings the chosen method takes (the ordinary method is not iterative)."""
    parameters = inspect.signature(getattr(methods, settings.method)).parameters
    options = {"tolerance": settings.tolerance, "max_iterations": settings.max_iterations}
    return {name: value for name, value in options.items() if name in parameters}


def every_method(slices, settings: SearchSettings | None = None) -> dict:
    """Every method of :data:`solver.methods.METHOD_NAMES` on the same slice table, with the
    numerical settings of ``settings``: {method name: SafetyResult}."""
    settings = settings or SearchSettings()
    return {
        name: factor_of_safety(slices, method=name,
                               **_method_options(replace(settings, method=name)))
        for name in methods.METHOD_NAMES
    }


_LOW_M_ALPHA_REASON = "not admissible: m_alpha <= M_ALPHA_MIN at a slice base"


def _doubt_reasons(negative_normal: np.ndarray) -> Counter:
    """Count keys of converged surfaces set aside for low m_alpha, from the flags of the
    method's result: with or without a negative effective normal force as well."""
    tension = int(np.count_nonzero(negative_normal))
    return +Counter({_LOW_M_ALPHA_REASON: negative_normal.size - tension,
                     _LOW_M_ALPHA_REASON + "; " + methods.NEGATIVE_NORMAL_NOTE: tension})


def _concatenate(parts, n_trials) -> _Evaluated:
    tally = _Tally()
    for part in parts:
        tally.add(part)
    has_points = bool(parts) and parts[0].points is not None

    def cat(name):
        if not parts:
            return np.empty(0)
        return np.concatenate([getattr(p, name) for p in parts])

    return _Evaluated(
        centre_x=cat("centre_x"),
        centre_y=cat("centre_y"),
        radius=cat("radius"),
        points=cat("points") if has_points else None,
        fos=cat("fos"),
        scarp_x=cat("scarp_x"),
        toe_x=cat("toe_x"),
        depth=cat("depth"),
        area=cat("area"),
        direction=cat("direction").astype(int),
        n_trials=n_trials,
        n_valid=tally.n_valid,
        rejected=tally.rejected,
        filtered=tally.filtered,
    )


def _surface_measures(slices):
    """Largest vertical depth below the ground [m] and area of the sliding mass [m2] of each
    surface of a slice table (from the slice mid-points)."""
    active = np.asarray(slices.active, dtype=bool)
    thickness = np.where(active, slices.y_top - slices.y_base, 0.0)
    depth = thickness.max(axis=1)
    area = (thickness * np.where(active, slices.width, 0.0)).sum(axis=1)
    return depth, area


def _candidates_of(evaluated: _Evaluated, method: str) -> list[RankedSurface]:
    """Surfaces of an evaluation as RankedSurface records (no ranking)."""
    kind = "circle" if evaluated.points is None else "polyline"
    out = []
    for i in range(evaluated.fos.size):
        out.append(
            RankedSurface(
                kind=kind,
                fos=float(evaluated.fos[i]),
                method=method,
                converged=True,
                centre_x=float(evaluated.centre_x[i]),
                centre_y=float(evaluated.centre_y[i]),
                radius=float(evaluated.radius[i]),
                points=None if evaluated.points is None else evaluated.points[i],
                scarp_x=float(evaluated.scarp_x[i]),
                toe_x=float(evaluated.toe_x[i]),
                depth=float(evaluated.depth[i]),
                area=float(evaluated.area[i]),
                direction=int(evaluated.direction[i]),
            )
        )
    return out


def _distinct_best(evaluated: _Evaluated, settings: SearchSettings) -> np.ndarray:
    """Indices of the best ``keep`` surfaces of each face, each at least ``min_separation``
    away (in scarp or toe offset) from every better one of its face; lowest FoS first."""
    order = np.argsort(evaluated.fos, kind="stable")
    chosen: dict[int, list[int]] = {}
    for i in order:
        mine = chosen.setdefault(int(evaluated.direction[i]), [])
        if len(mine) == settings.keep:
            continue
        if mine:
            d_scarp = np.abs(evaluated.scarp_x[mine] - evaluated.scarp_x[i])
            d_toe = np.abs(evaluated.toe_x[mine] - evaluated.toe_x[i])
            if np.any(np.maximum(d_scarp, d_toe) < settings.min_separation):
                continue
        mine.append(int(i))
    rows = np.array([i for mine in chosen.values() for i in mine], dtype=int)
    return rows[np.argsort(evaluated.fos[rows], kind="stable")]


def _finish(section, evaluated: _Evaluated, settings, stages) -> SearchResult:
    if evaluated.fos.size == 0:
        raise SearchError(
            _no_surface_message(evaluated.n_trials, evaluated.rejected, evaluated.filtered)
        )
    chosen = _distinct_best(evaluated, settings)
    best = _select(evaluated, chosen)
    surfaces, dropped = _evaluate_surfaces(section, _candidates_of(best, settings.method), settings)
    if not surfaces:
        raise SearchError(_no_surface_message(evaluated.n_trials, evaluated.rejected, dropped))
    return SearchResult(
        surfaces=tuple(surfaces),
        method=settings.method,
        settings=settings,
        n_trials=evaluated.n_trials,
        n_valid=evaluated.n_valid,
        rejected=+evaluated.rejected,
        filtered=+evaluated.filtered,
        stages=tuple(stages),
        faces=_directions(section, settings),
    )


def _merge(section, result, candidates, settings, tally: _Tally, stage) -> SearchResult:
    """A new result from the previous kept surfaces plus new candidates, all re-solved by the
    settings' method and ranked."""
    surfaces, dropped = _evaluate_surfaces(section, candidates, settings)
    if not surfaces:
        raise SearchError(
            _no_surface_message(result.n_trials + tally.n_trials, result.rejected + tally.rejected,
                                dropped)
        )
    kept: list[RankedSurface] = []
    for surface in surfaces:
        mine = [k for k in kept if k.direction == surface.direction]
        if len(mine) < settings.keep and all(
            max(abs(surface.scarp_x - k.scarp_x), abs(surface.toe_x - k.toe_x))
            >= settings.min_separation
            for k in mine
        ):
            kept.append(surface)
    return SearchResult(
        surfaces=tuple(kept),
        method=settings.method,
        settings=settings,
        n_trials=result.n_trials + tally.n_trials,
        n_valid=result.n_valid + tally.n_valid,
        rejected=+(result.rejected + tally.rejected),
        filtered=+(result.filtered + tally.filtered),
        stages=result.stages + (stage,),
        notes=result.notes,
        faces=result.faces or _directions(section, settings),
        lattice_edge=result.lattice_edge,
        lowest_tangent=result.lowest_tangent,
    )


def _evaluate_surfaces(section, surfaces, settings) -> tuple[list[RankedSurface], Counter]:
    """Solve given surfaces (circles and polylines) by ``settings``; the ranked list and the
    count of those that dropped out, by reason. The methods iterate each surface until it
    alone converges, so a surface gets the same factor of safety whichever batch it is in."""
    circles = [s for s in surfaces if s.kind == "circle"]
    polylines = [s for s in surfaces if s.kind == "polyline"]
    out: list[RankedSurface] = []
    dropped: Counter = Counter()
    evaluations = []
    for direction in sorted({s.direction for s in surfaces}, key=lambda d: d or 0):
        group = [s for s in circles if s.direction == direction]
        if group:
            values = np.array([(s.centre_x, s.centre_y, s.radius) for s in group])
            evaluations.append(_evaluate_circles(section, *values.T, settings, direction))
        by_size: dict[int, list] = {}
        for surface in polylines:
            if surface.direction == direction:
                by_size.setdefault(len(surface.points), []).append(surface.points)
        for stack in by_size.values():
            evaluations.append(_evaluate_polylines(section, np.stack(stack), settings, direction))
    for evaluated in evaluations:
        dropped.update(evaluated.rejected)
        dropped.update(evaluated.filtered)
        out.extend(_candidates_of(evaluated, settings.method))
    out.sort(key=lambda s: s.fos)
    return out, +dropped


def _single_circle(section, point, settings, direction=None) -> RankedSurface | None:
    evaluated = _evaluate_circles(section, *(np.array([v]) for v in point), settings, direction)
    found = _candidates_of(evaluated, settings.method)
    return found[0] if found else None


def _polyline_surface(points, direction=None) -> RankedSurface:
    nan = float("nan")
    return RankedSurface("polyline", nan, "", False, nan, nan, nan, np.asarray(points, float),
                         float(points[0, 0]), float(points[-1, 0]), nan, nan, direction)


def _select(evaluated: _Evaluated, rows) -> _Evaluated:
    values = {
        name: getattr(evaluated, name)[rows]
        for name in ("centre_x", "centre_y", "radius", "fos", "scarp_x", "toe_x", "depth", "area",
                     "direction")
    }
    points = None if evaluated.points is None else evaluated.points[rows]
    return _Evaluated(points=points, n_trials=evaluated.n_trials, n_valid=evaluated.n_valid,
                      rejected=evaluated.rejected, filtered=evaluated.filtered, **values)


def _same_surface(a: RankedSurface, b: RankedSurface) -> bool:
    if None not in (a.direction, b.direction) and a.direction != b.direction:
        return False
    if a.kind != b.kind:
        return False
    if a.kind == "circle":
        return (a.centre_x, a.centre_y, a.radius) == (b.centre_x, b.centre_y, b.radius)
    return a.points.shape == b.points.shape and bool(np.all(a.points == b.points))


def _lattice_edges(best, x_range, y_range, nx, ny, tangent_elevations, base):
    """Whether the best circle of a centre lattice has its centre on the lattice's edge, and
    whether it touches the lowest tangent level (above the base): the critical circle may then
    lie outside what was searched (Duncan, Wright and Brandon 2014, ch. 8)."""
    close = 1e-9 * max(1.0, abs(best.centre_x), abs(best.centre_y))
    on_x = nx > 1 and min(abs(best.centre_x - v) for v in x_range) <= close
    on_y = ny > 1 and min(abs(best.centre_y - v) for v in y_range) <= close
    on_lowest = False
    if tangent_elevations is not None and np.size(tangent_elevations) > 1:
        lowest = float(np.min(tangent_elevations))
        on_lowest = abs(best.centre_y - best.radius - lowest) <= close and (
            base is None or lowest < float(base[:, 1].min()) - 1e-6
        )
    return bool(on_x or on_y), bool(on_lowest)


#: The section-file keys (docs/formats.md, [search]) that move the centre lattice and its
#: tangent levels; named by the warnings so that the engineer knows what to change.
_LATTICE_KEYS = "[search] centre_x_range and centre_y_range"
_TANGENT_KEY = "[search] tangent_range"


def _lattice_edge_notes(best, grid, on_edge, on_lowest, name_face) -> tuple:
    """The warnings, for people, of :func:`_lattice_edges` (the flags travel as data in
    :attr:`SearchResult.lattice_edge` and :attr:`SearchResult.lowest_tangent`)."""
    notes = []
    if on_edge:
        (x_lo, x_hi), (y_lo, y_hi) = grid["x_range"], grid["y_range"]
        notes.append(
            f"the best lattice centre ({best.centre_x:.2f}, {best.centre_y:.2f}) m lies on the "
            f"edge of the centre lattice (x {x_lo:.2f} to {x_hi:.2f} m, y {y_lo:.2f} to "
            f"{y_hi:.2f} m); the critical circle may lie outside it: widen or move the lattice "
            f"({_LATTICE_KEYS} of the section file)"
        )
    if on_lowest:
        lowest = float(np.min(grid["tangent_elevations"]))
        notes.append(
            f"the best circle touches the lowest tangent level ({lowest:.2f} m); deeper "
            f"circles may be more critical: lower the tangent levels ({_TANGENT_KEY} of the "
            "section file)"
        )
    if name_face:
        notes = [f"{face_name(best.direction)} face: {note}" for note in notes]
    return tuple(notes)


def _no_surface_message(n_trials, rejected: Counter, filtered: Counter) -> str:
    parts = [f"no valid slip surface among {n_trials} trial surfaces"]
    if rejected:
        parts.append(f"rejected by the slicing: {_reasons(rejected)}")
    if filtered:
        parts.append(f"admissible but not competing: {_reasons(filtered)}")
    parts.append(f"widen or move the centre lattice ({_LATTICE_KEYS}, {_TANGENT_KEY} of the "
                 "section file), or lower [search] min_depth")
    return "; ".join(parts)


def _reasons(counts: Counter) -> str:
    return ", ".join(f"{n} {reason}" for reason, n in counts.most_common())


def _spread(bounds, n, name) -> np.ndarray:
    lo, hi = (float(v) for v in bounds)
    if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
        raise MethodError(f"{name} must be two finite numbers, low then high, got {bounds!r}")
    return np.array([0.5 * (lo + hi)]) if n == 1 else np.linspace(lo, hi, n)


def _require_int(name, value, minimum) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise MethodError(f"{name} must be an integer >= {minimum}, got {value!r}")


def _ground_points(section) -> np.ndarray:
    return np.asarray(section.ground, dtype=float)


def _base_points(section):
    base = getattr(section, "base", None)
    return None if base is None else np.asarray(base, dtype=float)


def _ground_elevation(section, x):
    return section.ground_elevation(x)
