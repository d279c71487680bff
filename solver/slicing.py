"""Vertical slices of many trial slip surfaces at once: the producer of ``solver.slices.Slices``.

Slicing works in the movement frame (see ``solver.slices``): a section whose slope rises to the
right is mirrored (x -> -x) first, and the slice table says so with ``mirrored=True``.

Slice boundaries are ``n_slices`` equal-width slices between the ends of the sliding mass PLUS
every geometry break between them: vertices of the ground, of the strata boundaries, of the
water lines and of the base; surcharge edges; points where a water line crosses a stratum
boundary or the ground; and the points where the slip surface crosses a stratum boundary or a
water line. Between two boundaries every line is then straight, so the areas computed from the
column at the slice mid-point are exact for the mass bounded by the ground above and, below,
the chord polyline through the surface points at the slice boundaries (the slip surface itself
for polylines). Slices are then compacted (real slices first, in order of x) and padded to one
count per batch with zero-width slices whose ``active`` flag is False.

Per slice (at the mid-point, on the chord between the surface points at the slice boundaries):

* weight W = sum over strata of gamma * area, moist unit weight above the water line of the
  stratum's material and saturated below it (ru and dry materials: moist), at the centroid
  ``y_weight`` (the soil weight is also ``seismic_weight``, the weight kh acts on);
* ponded water, when ``Section.pond`` is true and the (unconfined) water line of the material at
  the ground surface lies above it: its pressure acts normal to the ground on the slice top.
  The ponding rule, one for every line: water stands on the ground only at the level of the
  line of the material at the ground surface (the line in contact with it), and the free water
  surface over a slice is that level where it ponds, else the ground. The head of any
  unconfined line at a slice base is capped at the free water surface, so every head above
  the ground is matched by ponded water at least as high (a buried layer's line drawn above
  the ground without ponded water over it is artesian and must say so: ``confined``);
  Its vertical part, gamma_w * (mean depth) * width, is added to W; its horizontal part,
  gamma_w * (mean depth) * (rise of the ground across the slice in the direction of movement),
  is ``top_water_horizontal``, at the elevation ``y_top_water`` that makes the two parts
  statically equivalent to the resultant through the centroid of the pressure on the ground
  segment. With the pore pressure of the full head at the base this makes a submerged slope
  give the factor of safety of its buoyant unit weight (Duncan, Wright and Brandon 2014,
  ch. 6); kh does not act on the water;
* strength at the base: c', tan(phi') of a drained material; Su(y_base) and tan(phi) = 0 of an
  undrained one;
* pore pressure at the base:

  - water line: u = gamma_w (h_line - y_base), times cos^2(theta) of the line's slope when the
    line has ``inclination_correction`` (Skempton and DeLory 1957), floored at 0 unless the line
    has ``allow_suction``. An unconfined line's head is capped at the free water surface (the
    ground, or the ponded water over it: the ponding rule above); a ``confined`` line keeps its
    full head above the ground (artesian: the full head acts at the base, nothing is ponded);
  - ru: u = ru * sigma_v, sigma_v = soil weight of the column / width (Bishop and Morgenstern
    1960);
  - undrained (total stress) and dry materials: u = 0;
* surcharge: sum of pressure * overlap of each strip with the slice.

Tension crack: the mass begins where the slip surface first lies ``crack.depth`` below the
ground (the crack bottom); water standing in the crack pushes with 0.5 gamma_w z_w^2 at z_w / 3
above the crack bottom.

Moment centre of polylines: the centre of the circle through the two ends of the mass and the
polyline vertex deepest below the chord joining them; for a (nearly) planar surface, whose
circle is infinite, a point one chord length above the chord's mid-point, on its normal.

References
----------
Bishop, A.W. and Morgenstern, N. (1960). Stability coefficients for earth slopes. Geotechnique,
    10(4), 129-150.
Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability, 2nd ed.
    Wiley, ch. 6 (external water pressures; submerged slopes and buoyant unit weights).
Fredlund, D.G. and Krahn, J. (1977). Comparison of slope stability methods of analysis.
    Canadian Geotechnical Journal, 14(3), 429-439.
Skempton, A.W. and DeLory, F.A. (1957). Stability of natural slopes in London Clay. Proc. 4th
    Int. Conf. Soil Mechanics and Foundation Engineering, London, 2, 378-381.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np

from solver.constants import GAMMA_W
from solver.errors import MethodError, SectionError, SurfaceError
from solver.section import DRY, UNDRAINED, Section
from solver.slices import Slices
from solver.surfaces import CircularSurface, PolylineSurface

#: Smallest area [m2] of an admissible sliding mass; smaller masses come from circles that
#: barely graze the ground and only add numerical noise to a search.
MIN_MASS_AREA = 1e-3

#: Slices narrower than this [m] are dropped (they come from coincident breaks).
_MIN_WIDTH = 1e-9
#: Slack [m] on geometric comparisons (surface below ground, clearance above the base).
_TOL = 1e-9

# Reasons for rejecting a trial surface (SliceBatch.reason).
NO_CUT = "does not cut the ground surface twice"
MULTI_CUT = "cuts the ground surface more than twice"
LEAVES = "leaves the section"
BURIED_CIRCLE = "circle ends below the ground (centre too low)"
BURIED_POLYLINE = "polyline ends below the ground surface"
CROSSES_BASE = "crosses the impenetrable base"
BELOW_STRATA = "goes below the lowest stratum"
TOO_SMALL = "sliding mass too small"
SHALLOWER_THAN_CRACK = "shallower than the tension crack"
NOT_A_CIRCLE = "not a valid circle (NaN or non-positive radius)"
DOUBLES_BACK = "doubles back in x"


@dataclass(frozen=True, eq=False)
class SliceBatch:
    """Slices of a batch of trial surfaces, with the verdict on every trial.

    Attributes
    ----------
    slices : Slices
        Slice table of the valid surfaces only (movement frame).
    valid : ndarray of bool (n_trials,)
        Whether each trial surface is admissible.
    index : ndarray of int (n_valid,)
        Trial index of each row of ``slices``.
    reason : ndarray of object (n_trials,)
        "" for valid surfaces, else a short reason (the module constants NO_CUT, LEAVES, ...).
    scarp_x, toe_x : ndarray (n_valid,)
        [m] Upslope (scarp) and downslope (toe) ends of the sliding mass, in the section's own
        x. The upslope end is at the crack when there is a tension crack. For a mirrored section
        scarp_x > toe_x.
    """

    slices: Slices
    valid: np.ndarray
    index: np.ndarray
    reason: np.ndarray
    scarp_x: np.ndarray
    toe_x: np.ndarray

    @property
    def n_trials(self) -> int:
        return self.valid.size

    def rejected(self) -> Counter:
        """Number of rejected trial surfaces per reason."""
        return Counter(self.reason[~self.valid].tolist())


# --------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------


def slice_circles(
    section: Section,
    centre_x,
    centre_y,
    radius,
    n_slices: int = 30,
    *,
    direction: int | None = None,
    min_area: float = MIN_MASS_AREA,
    weight_centroid: bool = True,
) -> SliceBatch:
    """Slice many circular trial surfaces at once.

    Parameters
    ----------
    section : Section
        The cross-section.
    centre_x, centre_y, radius : array (n,) or float
        [m] Circle centres (section's own x) and radii. The slip surface is the lower half of
        each circle.
    n_slices : int
        Equal-width slices between the ends of the mass; geometry breaks add more.
    direction : {+1, -1, None}
        Direction of movement along x; None takes it from the ground (the mass moves from the
        higher end of the ground towards the lower end).
    min_area : float
        [m2] Smaller sliding masses are rejected as "sliding mass too small".
    weight_centroid : bool
        False skips the centroid of the soil weight where no method needs it (kh = 0): the
        ``y_weight`` of the slice table is then the base elevation, a placeholder. For
        searches, which keep only the factors of safety.

    Returns
    -------
    SliceBatch
    """
    _check_settings(n_slices, min_area)
    frame = _frame_of(section, direction)
    if not weight_centroid and frame.kh != 0:
        raise MethodError(f"weight_centroid=False needs kh = 0 (the line of action of kh W); "
                          f"section {section.id!r} has kh = {frame.kh:g}")
    xc, yc, r = (np.atleast_1d(np.asarray(v, dtype=float)).ravel() for v in
                 np.broadcast_arrays(centre_x, centre_y, radius))
    surface = _Arc(frame.sign * xc, yc, r)
    reason = np.full(xc.size, "", dtype=object)
    reason[~(np.isfinite(xc) & np.isfinite(yc) & np.isfinite(r) & (r > 0))] = NOT_A_CIRCLE
    return _slice(frame, surface, reason, n_slices, min_area, BURIED_CIRCLE, weight_centroid)


def slice_polyline(
    section: Section,
    points,
    n_slices: int = 30,
    *,
    direction: int | None = None,
    min_area: float = MIN_MASS_AREA,
) -> SliceBatch:
    """Slice non-circular trial surfaces.

    Parameters
    ----------
    section : Section
        The cross-section.
    points : array (k, 2) or (n, k, 2)
        [m] Vertices of one polyline or of a stack of polylines with the same vertex count,
        section's own x, strictly increasing. The ends must lie on or above the ground; the
        ends of the sliding mass (scarp and toe) are where the polyline crosses the ground.
    n_slices, direction, min_area
        As for :func:`slice_circles`. Every vertex is also a slice boundary.

    Returns
    -------
    SliceBatch
        The moment centre (``moment_x``, ``moment_y``) of each surface is the centre of the
        circle through the ends of the mass and the vertex deepest below their chord (see the
        module docstring).
    """
    _check_settings(n_slices, min_area)
    frame = _frame_of(section, direction)
    stack = np.asarray(points, dtype=float)
    if stack.ndim == 2:
        stack = stack[np.newaxis]
    if stack.ndim != 3 or stack.shape[2] != 2 or stack.shape[1] < 2:
        raise SurfaceError(f"polyline points must be (k, 2) or (n, k, 2), k >= 2; got shape "
                           f"{stack.shape}")
    px = frame.sign * stack[:, :, 0]
    py = stack[:, :, 1]
    if frame.sign < 0:
        px, py = px[:, ::-1], py[:, ::-1]
    reason = np.full(len(stack), "", dtype=object)
    finite = np.isfinite(px).all(axis=1) & np.isfinite(py).all(axis=1)
    reason[~finite] = "not a valid polyline (non-finite points)"
    increasing = np.all(np.diff(px, axis=1) > 0, axis=1)
    reason[finite & ~increasing] = DOUBLES_BACK
    # Rejected rows get a harmless shape so that the vectorised code runs on every row.
    fake = ~(finite & increasing)
    px = np.where(fake[:, None], np.arange(px.shape[1], dtype=float)[None], px)
    py = np.where(fake[:, None], 0.0, py)
    return _slice(frame, _Polyline(px, py), reason, n_slices, min_area, BURIED_POLYLINE)


def slice_surface(
    section: Section,
    surface: CircularSurface | PolylineSurface,
    n_slices: int = 30,
    *,
    direction: int | None = None,
    min_area: float = MIN_MASS_AREA,
) -> Slices:
    """Slices of one surface; raises SurfaceError with the reason when it is not admissible."""
    if isinstance(surface, CircularSurface):
        if np.ndim(surface.centre_x) or np.ndim(surface.centre_y) or np.ndim(surface.radius):
            raise SurfaceError("slice_surface takes one circle; use slice_circles for many")
        batch = slice_circles(section, surface.centre_x, surface.centre_y, surface.radius,
                              n_slices, direction=direction, min_area=min_area)
        what = (f"circle (centre x = {surface.centre_x:g} m, y = {surface.centre_y:g} m, "
                f"radius {surface.radius:g} m)")
    elif isinstance(surface, PolylineSurface):
        batch = slice_polyline(section, surface.points, n_slices, direction=direction,
                               min_area=min_area)
        what = f"polyline surface from x = {surface.points[0, 0]:g} to {surface.points[-1, 0]:g} m"
    else:
        raise SurfaceError(f"unknown slip surface type {type(surface).__name__}")
    if not batch.valid[0]:
        detail = ""
        if batch.reason[0] == BURIED_POLYLINE:
            detail = _buried_ends(section, surface.points)
        raise SurfaceError(f"{what} {batch.reason[0]} of section {section.id!r}{detail}")
    return batch.slices


def _buried_ends(section: Section, points: np.ndarray) -> str:
    """Which end of a polyline lies below the ground, at which x and how deep (for messages)."""
    ends = np.asarray(points, dtype=float)[[0, -1]]
    depth = section.ground_elevation(ends[:, 0]) - ends[:, 1]
    return "".join(f": its {side} end at x = {x:g} m is {d:.3f} m below the ground"
                   for side, (x, _), d in zip(("left", "right"), ends, depth) if d > _TOL)


# --------------------------------------------------------------------------------------------
# The section in the movement frame
# --------------------------------------------------------------------------------------------


def _segments(points: np.ndarray) -> np.ndarray:
    """Segments (L, 4) x0, x1, y0, y1 of a polyline (k, 2)."""
    return np.column_stack([points[:-1, 0], points[1:, 0], points[:-1, 1], points[1:, 1]])


def _mirror_points(points):
    return None if points is None else np.column_stack([-points[::-1, 0], points[::-1, 1]])


@dataclass(frozen=True, eq=False)
class _Frame:
    """Everything slicing needs, as arrays in the movement frame."""

    sign: float
    ground: np.ndarray
    base: np.ndarray | None
    pond: bool
    kh: float
    crack_depth: float
    crack_water: float
    cells: np.ndarray
    layer_material: np.ndarray
    layers_uniform: bool
    edge_x: np.ndarray
    boundary_y: np.ndarray
    lines: tuple
    line_correction: np.ndarray
    line_suction: np.ndarray
    line_confined: np.ndarray
    gamma: np.ndarray
    gamma_saturated: np.ndarray
    cohesion: np.ndarray
    tan_phi: np.ndarray
    undrained: np.ndarray
    su_0: np.ndarray
    su_gradient: np.ndarray
    su_datum: np.ndarray
    water_index: np.ndarray
    ru: np.ndarray
    surcharges: np.ndarray
    fixed_breaks: np.ndarray
    layer_segments: np.ndarray
    water_segments: np.ndarray
    floor_segments: np.ndarray

    @classmethod
    def of(cls, section: Section, direction: int | None) -> "_Frame":
        sign = _movement_sign(section, direction)
        columns = section.columns
        if sign > 0:
            ground, base = section.ground, section.base
            lines = tuple(line.points for line in section.water_lines)
            cells = columns.x
            tl, tr = columns.top_left, columns.top_right
            bl, br = columns.bottom_left, columns.bottom_right
            layer_material = columns.material
            surcharges = np.array([[s.x_from, s.x_to, s.pressure] for s in section.surcharges])
        else:
            ground, base = _mirror_points(section.ground), _mirror_points(section.base)
            lines = tuple(_mirror_points(line.points) for line in section.water_lines)
            cells = -columns.x[::-1]
            # Mirroring swaps the left and right edges of every cell.
            tl, tr = columns.top_right[::-1], columns.top_left[::-1]
            bl, br = columns.bottom_right[::-1], columns.bottom_left[::-1]
            layer_material = columns.material[::-1]
            surcharges = np.array([[-s.x_to, -s.x_from, s.pressure] for s in section.surcharges])
        surcharges = surcharges.reshape(-1, 3)
        names = [line.name for line in section.water_lines]
        materials = section.materials

        def values(get):
            return np.array([float(get(m)) for m in materials])

        # Stratum boundary lines inside each cell (tops and bottoms of every layer), without
        # repeats and without the unbounded floor, for the surface crossings.
        x0 = np.repeat(cells[:-1], tl.shape[1])
        x1 = np.repeat(cells[1:], tl.shape[1])
        layer = np.concatenate([
            np.column_stack([x0, x1, tl.ravel(), tr.ravel()]),
            np.column_stack([x0, x1, bl.ravel(), br.ravel()]),
        ])
        # Drop the floor of an unbounded last stratum (far below everything) and the ground
        # itself (surfaces cross it only at their ends), then repeats.
        deep = ground[:, 1].min() - 1e5
        layer = layer[(layer[:, 2] > deep) & (layer[:, 3] > deep)]
        on_ground = np.isclose(layer[:, 2], np.interp(layer[:, 0], *ground.T), rtol=0,
                               atol=1e-12) & np.isclose(
            layer[:, 3], np.interp(layer[:, 1], *ground.T), rtol=0, atol=1e-12)
        layer = np.unique(layer[~on_ground], axis=0)
        water = np.concatenate([_segments(p) for p in lines]) if lines else np.empty((0, 4))
        floor = np.column_stack([cells[:-1], cells[1:], bl[:, -1], br[:, -1]])
        # Geometry breaks that do not depend on the surface.
        breaks = [cells, surcharges[:, 0], surcharges[:, 1]]
        if base is not None:
            breaks.append(base[:, 0])
        for points in lines:
            breaks.append(points[:, 0])
            crossings = _Polyline(points[None, :, 0], points[None, :, 1]).crossings(layer)
            breaks.append(crossings[np.isfinite(crossings)])
            ground_cross = _Polyline(points[None, :, 0], points[None, :, 1]).crossings(
                _segments(ground))
            breaks.append(ground_cross[np.isfinite(ground_cross)])
        fixed = np.unique(np.concatenate(breaks))
        fixed = fixed[(fixed > ground[0, 0]) & (fixed < ground[-1, 0])]
        crack = section.crack
        return cls(
            sign=sign,
            ground=ground,
            base=base,
            pond=section.pond,
            kh=float(section.kh),
            crack_depth=0.0 if crack is None else float(crack.depth),
            crack_water=0.0 if crack is None else float(crack.water_depth),
            cells=cells,
            layer_material=layer_material,
            layers_uniform=bool(np.all(layer_material == layer_material[:1])),
            # The layer boundaries as polylines over the cells, every inner cell edge doubled
            # (left-hand cell's value, then the right-hand cell's), so that np.interp gives
            # each cell's own straight boundary strictly inside it, where slices have their
            # mid-points (cell edges are slice boundaries).
            edge_x=np.repeat(cells, 2)[1:-1],
            boundary_y=np.vstack([
                np.column_stack([tl[:, 0], tr[:, 0]]).ravel(),
                *(np.column_stack([bl[:, k], br[:, k]]).ravel() for k in range(bl.shape[1])),
            ]),
            lines=lines,
            line_correction=np.array([w.inclination_correction for w in section.water_lines]
                                     + [False]),
            line_suction=np.array([w.allow_suction for w in section.water_lines] + [False]),
            line_confined=np.array([w.confined for w in section.water_lines] + [False]),
            gamma=values(lambda mat: mat.unit_weight),
            gamma_saturated=values(lambda mat: mat.unit_weight_saturated),
            cohesion=values(lambda mat: mat.cohesion),
            tan_phi=values(lambda mat: mat.tan_phi),
            undrained=np.array([mat.model == UNDRAINED for mat in materials]),
            su_0=values(lambda mat: mat.undrained_strength),
            su_gradient=values(lambda mat: mat.strength_gradient),
            su_datum=values(lambda mat: mat.strength_datum or 0.0),
            # The dry "line" is the last row of the water-level stack (index -1).
            water_index=np.array([names.index(mat.water) if mat.water != DRY else -1
                                  for mat in materials]),
            ru=values(lambda mat: np.nan if mat.ru is None else mat.ru),
            surcharges=surcharges,
            fixed_breaks=fixed,
            layer_segments=layer,
            water_segments=water,
            floor_segments=floor if columns.bounded_below else np.empty((0, 4)),
        )


# The last section sliced, its direction and frame: a search slices the same section in many
# batches, and a Section is immutable.
_last_frame: tuple = (None, None, None)


def _frame_of(section: Section, direction: int | None) -> _Frame:
    global _last_frame
    last = _last_frame  # one read: another thread may replace it meanwhile
    if last[0] is section and last[1] == direction:
        return last[2]
    frame = _Frame.of(section, direction)
    _last_frame = (section, direction, frame)
    return frame


def _movement_sign(section: Section, direction: int | None) -> float:
    if direction is not None:
        if direction not in (1, -1):
            raise SectionError(f"direction = {direction!r} must be +1, -1 or None")
        return float(direction)
    left, right = section.ground[0, 1], section.ground[-1, 1]
    if left == right:
        raise SectionError(
            f"section {section.id!r}: both ends of the ground are at y = {left:g} m, so the "
            "direction of movement is ambiguous; pass direction=+1 (towards +x) or -1"
        )
    return 1.0 if left > right else -1.0


def _check_settings(n_slices, min_area) -> None:
    if isinstance(n_slices, bool) or not isinstance(n_slices, (int, np.integer)) or n_slices < 1:
        raise MethodError(f"n_slices must be a positive integer, got {n_slices!r}")
    if not (np.isfinite(min_area) and min_area >= 0):
        raise MethodError(f"min_area must be a finite number >= 0 m2, got {min_area!r}")


# --------------------------------------------------------------------------------------------
# Surfaces as arrays (movement frame)
# --------------------------------------------------------------------------------------------


class _Arc:
    """Lower halves of n circles."""

    kind = "circle"

    def __init__(self, xc, yc, r):
        self.xc, self.yc, self.r = xc, yc, r

    def __len__(self):
        return self.xc.size

    def take(self, rows):
        return _Arc(self.xc[rows], self.yc[rows], self.r[rows])

    def _p(self, value, ndim):
        return value.reshape((-1,) + (1,) * (ndim - 1))

    def y(self, x):
        xc, yc, r = (self._p(v, x.ndim) for v in (self.xc, self.yc, self.r))
        return yc - np.sqrt(np.maximum(r * r - (x - xc) ** 2, 0.0))

    def span(self):
        return self.xc - self.r, self.xc + self.r

    def vertices(self):
        return np.empty((len(self), 0))

    def crossings(self, segments):
        """x (n, 2L) where the lower arcs cross the segments (L, 4); NaN where they do not."""
        x0, x1, y0, y1 = segments.T
        b = (y1 - y0) / (x1 - x0)
        xc, yc, r = self.xc[:, None], self.yc[:, None], self.r[:, None]
        # Line relative to the centre: y - yc = a + b (x - xc); then (1 + b^2) u^2 + 2 a b u
        # + a^2 - r^2 = 0 with u = x - xc. Local coordinates keep the quadratic well scaled.
        a = y0 + b * (xc - x0) - yc
        big_a = 1.0 + b * b
        half_b = a * b
        disc = half_b * half_b - big_a * (a * a - r * r)
        root = np.sqrt(np.where(disc >= 0, disc, np.nan))
        out = []
        for u in ((-half_b - root) / big_a, (-half_b + root) / big_a):
            x = xc + u
            ok = (x >= x0 - _TOL) & (x <= x1 + _TOL) & (a + b * u <= _TOL)
            out.append(np.where(ok, x, np.nan))
        return np.concatenate(out, axis=1)

    def clearance_points(self, segments):
        """x (n, L) where the lower arc comes closest to each segment's line (dy/dx = slope)."""
        x0, x1, y0, y1 = segments.T
        b = (y1 - y0) / (x1 - x0)
        return self.xc[:, None] + b * self.r[:, None] / np.sqrt(1 + b * b)


class _Polyline:
    """n polylines with k vertices each, x strictly increasing."""

    kind = "polyline"

    def __init__(self, px, py):
        self.px, self.py = px, py

    def __len__(self):
        return self.px.shape[0]

    def take(self, rows):
        return _Polyline(self.px[rows], self.py[rows])

    def y(self, x):
        shape = x.shape
        flat = x.reshape(shape[0], int(np.prod(shape[1:])))
        if self.px.shape[1] > 2:
            seg = (flat[:, :, None] >= self.px[:, None, 1:-1]).sum(axis=2)
        else:
            seg = np.zeros(flat.shape, dtype=int)
        x0 = np.take_along_axis(self.px, seg, 1)
        x1 = np.take_along_axis(self.px, seg + 1, 1)
        y0 = np.take_along_axis(self.py, seg, 1)
        y1 = np.take_along_axis(self.py, seg + 1, 1)
        return (y0 + (y1 - y0) * (flat - x0) / (x1 - x0)).reshape(shape)

    def span(self):
        return self.px[:, 0], self.px[:, -1]

    def vertices(self):
        return self.px

    def crossings(self, segments):
        """x (n, (k-1) L) where the polylines cross the segments (L, 4); NaN elsewhere."""
        x0, x1, y0, y1 = (v[None, None, :] for v in segments.T)
        b = (y1 - y0) / (x1 - x0)
        p0, p1 = self.px[:, :-1, None], self.px[:, 1:, None]
        q0, q1 = self.py[:, :-1, None], self.py[:, 1:, None]
        pb = (q1 - q0) / (p1 - p0)
        with np.errstate(divide="ignore", invalid="ignore"):
            x = p0 + (y0 + b * (p0 - x0) - q0) / (pb - b)
        ok = (x >= np.maximum(p0, x0) - _TOL) & (x <= np.minimum(p1, x1) + _TOL)
        return np.where(ok, x, np.nan).reshape(len(self), x.shape[1] * x.shape[2])

    def clearance_points(self, segments):
        # Both lines are straight between vertices: the closest approach is at a vertex.
        return np.repeat(self.px[:, None, :], len(segments), axis=1).reshape(
            len(self), len(segments) * self.px.shape[1])


# --------------------------------------------------------------------------------------------
# Slicing
# --------------------------------------------------------------------------------------------


def _interp_rows(x, points):
    return np.interp(x, points[:, 0], points[:, 1])


def _slice(frame: _Frame, surface, reason, n_slices, min_area, buried_reason,
           weight_centroid=True) -> SliceBatch:
    n = len(surface)
    entry, exit_ = _ends_on_ground(frame, surface, reason, buried_reason)
    crack_force = np.zeros(n)
    crack_y = np.zeros(n)
    if frame.crack_depth > 0:
        entry, crack_force, crack_y = _crack(frame, surface, entry, exit_, reason)
    ok = reason == ""
    for segments, why in (
        (None if frame.base is None else _segments(frame.base), CROSSES_BASE),
        (frame.floor_segments, BELOW_STRATA),
    ):
        if segments is None or len(segments) == 0 or not ok.any():
            continue
        rows = np.flatnonzero(ok)
        gap = _clearance(surface.take(rows), segments, entry[rows], exit_[rows])
        reason[rows[gap < -_TOL]] = why
        ok = reason == ""

    rows = np.flatnonzero(ok)
    part = surface.take(rows)
    table, area, unbased = _slice_table(frame, part, entry[rows], exit_[rows], n_slices,
                                        weight_centroid)
    reason[rows[unbased]] = BELOW_STRATA
    reason[rows[~unbased & (area < min_area)]] = TOO_SMALL
    keep = (reason[rows] == "")
    rows = rows[keep]
    table = _select(table, keep)
    table.update(
        kh=frame.kh,
        crack_water_force=crack_force[rows],
        crack_water_y=crack_y[rows],
        mirrored=frame.sign < 0,
    )
    if surface.kind == "circle":
        cx, cy, r = part.xc[keep], part.yc[keep], part.r[keep]
        table.update(centre_x=cx, centre_y=cy, radius=r, moment_x=cx, moment_y=cy)
    else:
        mx, my = _moment_centre(part.take(keep), entry[rows], exit_[rows])
        nan = np.full(rows.size, np.nan)
        table.update(centre_x=nan, centre_y=nan.copy(), radius=nan.copy(), moment_x=mx,
                     moment_y=my)
    valid = reason == ""
    return SliceBatch(
        slices=Slices(**table),
        valid=valid,
        index=rows,
        reason=reason,
        scarp_x=frame.sign * entry[rows],
        toe_x=frame.sign * exit_[rows],
    )


def _ends_on_ground(frame: _Frame, surface, reason, buried_reason):
    """Ends of the sliding mass (n,) [m]; rejects surfaces whose mass is not one interval
    strictly inside the section and the surface's own extent."""
    n = len(surface)
    g0, g1 = frame.ground[0, 0], frame.ground[-1, 0]
    s0, s1 = surface.span()
    lo, hi = np.maximum(s0, g0), np.minimum(s1, g1)
    usable = (reason == "") & (lo < hi)
    reason[(reason == "") & ~usable] = LEAVES
    lo, hi = np.where(usable, lo, g0), np.where(usable, hi, g1)
    roots = surface.crossings(_segments(frame.ground))
    roots = np.where((roots > lo[:, None]) & (roots < hi[:, None]), roots, np.nan)
    roots = np.sort(roots, axis=1)
    roots = np.where(np.isnan(roots), hi[:, None], roots)
    points = np.concatenate([lo[:, None], roots, hi[:, None]], axis=1)
    mid = 0.5 * (points[:, :-1] + points[:, 1:])
    inside = (_interp_rows(mid, frame.ground) - surface.y(mid) > _TOL) & (
        points[:, 1:] > points[:, :-1]
    )
    starts = inside & ~np.concatenate([np.zeros((n, 1), bool), inside[:, :-1]], axis=1)
    runs = starts.sum(axis=1)
    first = np.argmax(inside, axis=1)
    last = inside.shape[1] - 1 - np.argmax(inside[:, ::-1], axis=1)
    entry = np.take_along_axis(points, first[:, None], 1)[:, 0]
    exit_ = np.take_along_axis(points, last[:, None] + 1, 1)[:, 0]
    ends = np.column_stack([lo, hi])
    below = _interp_rows(ends, frame.ground) - surface.y(ends) > _TOL
    at_section = np.column_stack([lo <= g0, hi >= g1])
    todo = reason == ""
    reason[todo & (below & at_section).any(axis=1)] = LEAVES
    todo = reason == ""
    reason[todo & below.any(axis=1)] = buried_reason
    todo = reason == ""
    reason[todo & (runs == 0)] = NO_CUT
    reason[todo & (runs > 1)] = MULTI_CUT
    return entry, exit_


def _crack(frame: _Frame, surface, entry, exit_, reason):
    """Move the upslope end of each mass to the bottom of the tension crack."""
    depth = frame.crack_depth
    shifted = _segments(frame.ground) - np.array([0.0, 0.0, depth, depth])
    roots = surface.crossings(shifted)
    roots = np.where((roots > entry[:, None]) & (roots < exit_[:, None]), roots, np.nan)
    has = np.isfinite(roots).any(axis=1)
    reason[(reason == "") & ~has] = SHALLOWER_THAN_CRACK
    x_crack = np.where(has, np.nanmin(np.where(has[:, None], roots, 0.0), axis=1), entry)
    zw = frame.crack_water
    force = np.full(len(surface), 0.5 * GAMMA_W * zw * zw)
    y_bottom = _interp_rows(x_crack, frame.ground) - depth
    return x_crack, force, y_bottom + zw / 3.0


def _clearance(surface, segments, entry, exit_):
    """Smallest height [m] of each surface above the segments (L, 4) inside [entry, exit]."""
    x0, x1, y0, y1 = (v[None, :] for v in segments.T)
    lo = np.maximum(x0, entry[:, None])
    hi = np.minimum(x1, exit_[:, None])
    empty = lo > hi
    inner = surface.clearance_points(segments).reshape(len(surface), len(segments), -1)
    candidates = np.concatenate(
        [lo[:, :, None], hi[:, :, None],
         np.clip(inner, lo[:, :, None], np.maximum(lo, hi)[:, :, None])], axis=2)
    b = (y1 - y0) / (x1 - x0)
    line = y0[:, :, None] + b[:, :, None] * (candidates - x0[:, :, None])
    gap = surface.y(candidates) - line
    gap = np.where(empty[:, :, None], np.inf, gap)
    return gap.reshape(len(surface), -1).min(axis=1, initial=np.inf)


def _slice_table(frame: _Frame, surface, entry, exit_, n_slices, weight_centroid=True):
    """The per-slice arrays of valid surfaces, with the mass area (n,) and a flag for surfaces
    with an active slice whose base lies in no stratum (n,)."""
    n = len(surface)
    lo, hi = entry[:, None], exit_[:, None]
    equal = lo + (hi - lo) * np.linspace(0.0, 1.0, n_slices + 1)[None, :]
    equal[:, -1] = exit_  # exactly: lo + (hi - lo) may round
    extra = [
        np.broadcast_to(frame.fixed_breaks, (n, frame.fixed_breaks.size)),
        surface.vertices(),
        surface.crossings(frame.layer_segments),
    ]
    if len(frame.water_segments):
        extra.append(surface.crossings(frame.water_segments))
    extra = np.concatenate(extra, axis=1)
    extra = np.where(np.isfinite(extra), np.clip(extra, lo, hi), lo)
    bounds = np.sort(np.concatenate([equal, extra], axis=1), axis=1)
    # The distinct boundaries of each row, in order, then padding at the row's last boundary
    # (zero-width slices): boolean masks read and write row by row, and every row has as many
    # new boundaries in ``new`` as leading True values in ``active``. Slices share their
    # boundaries, so the surface is evaluated once per boundary.
    new = np.diff(bounds, axis=1) > _MIN_WIDTH
    per_row = new.sum(axis=1)
    active = np.arange(per_row.max(initial=0)) < per_row[:, None]
    edges = np.empty((n, active.shape[1] + 1))
    edges[:, 0] = entry
    edges[:, 1:][active] = bounds[:, 1:][new]
    np.copyto(edges[:, 1:], edges[np.arange(n), per_row][:, None], where=~active)
    x_left, x_right = edges[:, :-1], edges[:, 1:]
    b = x_right - x_left
    xm = 0.5 * (x_left + x_right)
    y_edges = surface.y(edges)
    y_left, y_right = y_edges[:, :-1], y_edges[:, 1:]
    y_base = 0.5 * (y_left + y_right)
    alpha = np.arctan2(y_left - y_right, b)
    y_top = _interp_rows(xm, frame.ground)
    levels = [_interp_rows(xm, p) for p in frame.lines]

    # Layer boundaries at each slice, top down: the top of the first layer, then the bottom of
    # every layer (the floor of an unbounded last layer lies far below any surface).
    boundary = [np.interp(xm, frame.edge_x, line) for line in frame.boundary_y]
    n_layers = len(boundary) - 1
    cell = None
    if not frame.layers_uniform:
        cells = frame.cells
        cell = np.clip(np.searchsorted(cells, xm, side="right") - 1, 0, cells.size - 2)

    def per_layer(values, k):
        # Per-material values of layer k at each slice; a plain number when layer k is the
        # same material in every cell (layered strata always are), which saves a gather.
        if cell is None:
            return values[frame.layer_material[0, k]]
        return values[frame.layer_material[cell, k]]

    def water_level(k):
        return _level(levels, per_layer(frame.water_index, k), xm.shape)

    # Each layer's soil lies between max(bottom, y_base) and max(top, y_base); its saturated
    # part between the same limits with each boundary first capped at the layer's water level.
    above = [np.maximum(e, y_base) for e in boundary]
    shared_water = frame.layers_uniform and np.unique(frame.water_index[
        frame.layer_material[0]]).size == 1
    if shared_water:
        level = water_level(0)
        wet = [np.maximum(np.minimum(e, level), y_base) for e in boundary]
    stress = np.zeros(xm.shape)  # [kPa] vertical total stress of the soil column
    moment = np.zeros(xm.shape) if weight_centroid else None
    for k in range(n_layers):
        thickness = above[k] - above[k + 1]
        if shared_water:
            saturated = wet[k] - wet[k + 1]
        else:
            level = water_level(k)
            saturated = (np.maximum(np.minimum(boundary[k], level), y_base)
                         - np.maximum(np.minimum(boundary[k + 1], level), y_base))
        gamma = per_layer(frame.gamma, k)
        gamma_saturated = per_layer(frame.gamma_saturated, k)
        stress += gamma * thickness
        stress += (gamma_saturated - gamma) * saturated
        if weight_centroid:
            # The saturated part is at the bottom of the layer's soil.
            low = above[k + 1]
            moist = thickness - saturated
            moment += gamma_saturated * saturated * (low + 0.5 * saturated) + gamma * moist * (
                low + saturated + 0.5 * moist)

    # The layer at the base: as many layers lie wholly above it as bottoms lie above it; a
    # chord may rise above a convex ground corner, and its base is then in the top layer that
    # is present there (layers pinched out at the ground have their bottom at the top).
    layer = np.zeros(xm.shape, dtype=np.intp)
    for e in boundary[1:]:
        layer += e > y_base
    over = y_base >= boundary[0]
    if over.any():
        at_top = np.zeros(xm.shape, dtype=np.intp)
        for e in boundary[1:]:
            at_top += e >= boundary[0]
        layer = np.where(over, at_top, layer)
    in_strata = layer < n_layers
    layer = np.minimum(layer, n_layers - 1)
    materials = frame.layer_material
    base_material = np.where(
        in_strata, materials[0][layer] if cell is None else materials[cell, layer], -1)
    weight = stress * b
    if weight_centroid:
        with np.errstate(invalid="ignore", divide="ignore"):
            y_weight = np.where(stress > 0, moment / stress, y_base)
    else:
        y_weight = y_base.copy()
    seismic_weight = weight.copy()
    top_water_horizontal = np.zeros(xm.shape)
    y_top_water = y_top.copy()
    # The free water surface over each slice: the ground, or the level of the ponded water
    # where water ponds on it. No unconfined line's head at a base rises above it (the
    # ponding rule of the module docstring).
    free_surface = y_top
    if frame.pond:
        top_layer = np.zeros(xm.shape, dtype=np.intp)
        for e in boundary[1:]:
            top_layer += e >= boundary[0]
        top_material = materials[0][np.minimum(top_layer, n_layers - 1)] if cell is None \
            else materials[cell, np.minimum(top_layer, n_layers - 1)]
        line = frame.water_index[top_material]
        ponds = (line >= 0) & ~frame.line_confined[line]
        if ponds.any():
            weight, top_water_horizontal, y_top_water = _ponded_water(
                frame, line, ponds, x_left, x_right, y_top, weight)
            free_surface = np.where(
                ponds, np.maximum(y_top, _level(levels, line, xm.shape)), y_top)

    material = np.maximum(base_material, 0)
    cohesion = frame.cohesion[material]
    tan_phi = frame.tan_phi[material]
    pore = _pore_pressure(frame, xm, y_base, free_surface, material, levels, stress)
    if frame.undrained.any():
        undrained = frame.undrained[material]
        su = frame.su_0[material] + frame.su_gradient[material] * np.maximum(
            frame.su_datum[material] - y_base, 0.0)
        cohesion = np.where(undrained, su, cohesion)
        tan_phi = np.where(undrained, 0.0, tan_phi)
        pore = np.where(undrained, 0.0, pore)

    surcharge = np.zeros(xm.shape)
    for x_from, x_to, pressure in frame.surcharges:
        overlap = np.minimum(x_right, x_to) - np.maximum(x_left, x_from)
        surcharge += pressure * np.maximum(overlap, 0.0)

    unbased = (active & ~in_strata).any(axis=1)
    area = (np.maximum(y_top - y_base, 0.0) * b).sum(axis=1)

    padding = ~active

    def zero(v):
        # In place: every array zeroed here is a fresh result of this function.
        np.copyto(v, 0, where=padding)
        return v

    table = dict(
        x_left=x_left,
        x_right=x_right,
        alpha=zero(alpha),
        y_base=zero(y_base),
        y_top=zero(y_top),
        weight=zero(weight),
        y_weight=zero(y_weight),
        seismic_weight=zero(seismic_weight),
        top_water_horizontal=zero(top_water_horizontal),
        y_top_water=zero(y_top_water),
        cohesion=zero(cohesion),
        tan_phi=zero(tan_phi),
        pore_pressure=zero(pore),
        surcharge=zero(surcharge),
        base_material=np.where(padding, -1, base_material),
        active=active,
    )
    return table, area, unbased


def _ponded_water(frame: _Frame, line, ponds, x_left, x_right, y_top, weight):
    """Weight with the vertical part of the ponded water added, and the horizontal part with
    its line of action, for the slices ``ponds`` whose (unconfined) line ``line`` may stand
    above the ground (module docstring).

    Water-line vertices and their crossings of the ground are slice boundaries, so the depth
    d varies linearly across a slice and never changes sign inside it. The pressure
    gamma_w * d acts normal to the ground segment; its resultant (gamma_w * mean d * segment
    length) passes through the centroid of the pressure along the segment, at the fraction
    t = (d_l + 2 d_r) / (3 (d_l + d_r)) of it from the left end.
    """
    b = x_right - x_left
    g_left = _interp_rows(x_left, frame.ground)
    g_right = _interp_rows(x_right, frame.ground)
    rise = g_right - g_left

    def depth(x, g):
        levels = [_interp_rows(x, p) for p in frame.lines]
        return np.where(ponds, np.maximum(_level(levels, line, x.shape) - g, 0.0), 0.0)

    d_left, d_right = depth(x_left, g_left), depth(x_right, g_right)
    mean = 0.5 * (d_left + d_right)
    weight = weight + GAMMA_W * mean * b
    horizontal = GAMMA_W * mean * rise
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(mean > 0, (d_left + 2.0 * d_right) / (6.0 * mean), 0.5)
        # The resultant, normal to the ground, crosses the slice's mid-line (where the
        # vertical part acts, with the soil weight) at this elevation.
        y_cross = g_left + t * rise - (0.5 - t) * b * b / rise
    sloped = np.abs(rise) > 1e-9 * np.maximum(b, 1e-300)
    y_water = np.where((mean > 0) & sloped, y_cross, y_top)
    return weight, horizontal, y_water


def _level(levels, line_index, shape):
    """Water level [m] at each slice of the line with the given index (-1: none, -inf)."""
    if np.ndim(line_index) == 0:
        return levels[line_index] if line_index >= 0 else np.full(shape, -np.inf)
    out = np.full(shape, -np.inf)
    for i, values in enumerate(levels):
        out = np.where(line_index == i, values, out)
    return out


def _pore_pressure(frame: _Frame, xm, y_base, free_surface, material, levels, soil_stress):
    # One line number for every slice when all materials share a water line (the usual case).
    index = frame.water_index
    line = index[0] if index.min() == index.max() else index[material]
    head = _level(levels, line, xm.shape)
    # An unconfined line's head stands no higher than the free water surface over the slice
    # (the ground, or the ponded water on it); a confined line keeps its full head.
    confined = frame.line_confined[line]
    if np.ndim(confined):
        head = np.where(confined, head, np.minimum(head, free_surface))
    elif not confined:
        head = np.minimum(head, free_surface)
    with np.errstate(invalid="ignore"):
        u = GAMMA_W * (head - y_base)
    if frame.line_correction.any():
        cos2 = np.ones(xm.shape)
        for i, points in enumerate(frame.lines):
            if not frame.line_correction[i]:
                continue
            slope = np.diff(points[:, 1]) / np.diff(points[:, 0])
            seg = np.clip(np.searchsorted(points[:, 0], xm, side="right") - 1, 0, slope.size - 1)
            cos2 = np.where(line == i, 1.0 / (1.0 + slope[seg] ** 2), cos2)
        u = u * cos2
    if frame.line_suction.any():
        u = np.where(frame.line_suction[line], u, np.maximum(u, 0.0))
    else:
        u = np.maximum(u, 0.0)
    if np.any(line < 0):
        u = np.where(line < 0, 0.0, u)
    if np.isnan(frame.ru).all():
        return u
    ru = frame.ru[material]
    return np.where(np.isfinite(ru), ru * soil_stress, u)


def _select(table: dict, keep) -> dict:
    if keep.all():
        return table
    out = {}
    for name, value in table.items():
        out[name] = value[keep]
    if keep.size and not keep.all():
        # Trim padding that only the dropped surfaces needed.
        count = int(out["active"].sum(axis=1).max(initial=0))
        out = {name: value[:, :count] for name, value in out.items()}
    return out


def _moment_centre(surface: _Polyline, entry, exit_):
    """Moment centre of polylines: see the module docstring."""
    ya, yb = surface.y(entry[:, None])[:, 0], surface.y(exit_[:, None])[:, 0]
    chord = np.hypot(exit_ - entry, yb - ya)
    px, py = surface.px, surface.py
    chord_y = ya[:, None] + (yb - ya)[:, None] * (px - entry[:, None]) / (exit_ - entry)[:, None]
    sag = np.where((px > entry[:, None]) & (px < exit_[:, None]), chord_y - py, -np.inf)
    deepest = np.argmax(sag, axis=1)
    xd = np.take_along_axis(px, deepest[:, None], 1)[:, 0]
    yd = np.take_along_axis(py, deepest[:, None], 1)[:, 0]
    depth = np.take_along_axis(sag, deepest[:, None], 1)[:, 0]
    # Circumcentre in coordinates relative to the entry point.
    bx, by = exit_ - entry, yb - ya
    cx, cy = xd - entry, yd - ya
    d = 2.0 * (bx * cy - by * cx)
    planar = ~(depth > 1e-3 * chord) | (np.abs(d) < 1e-12)
    d = np.where(planar, 1.0, d)
    ux = (cy * (bx * bx + by * by) - by * (cx * cx + cy * cy)) / d
    uy = (bx * (cx * cx + cy * cy) - cx * (bx * bx + by * by)) / d
    # Planar surface: one chord length above the chord mid-point, on its upward normal.
    nx, ny = -by / chord, bx / chord
    mx = np.where(planar, entry + 0.5 * bx + chord * nx, entry + ux)
    my = np.where(planar, ya + 0.5 * by + chord * ny, ya + uy)
    return mx, my
