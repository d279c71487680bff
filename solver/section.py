"""Cross-sections: ground, strata, materials, piezometric lines and loads.

A :class:`Section` is an immutable, validated description of one cross-section in the layout of
the section file (docs/formats.md, section 1). :func:`section_from_dict` builds it from the
dictionary that ``tomllib`` returns for such a file; :func:`section_to_dict` is the inverse and
gives a JSON-friendly dictionary (the store keeps parameter versions as JSON).

Coordinates: x is the offset along the section [m], y the elevation [m]. The slope may face
either way; slicing puts it into the movement frame (see ``solver.slices``).

Strata come in one of two forms, never mixed within a section:

* layered: each stratum lies between the bottom of the one above (the ground for the first)
  and its own ``bottom`` polyline. A bottom above the previous bottom pinches the stratum out,
  so the effective boundaries are running minima of the bottoms; the last stratum may omit
  ``bottom`` and then has no lower limit (the base, if any, bounds every slip surface);
* polygons: closed polygons that tile the section below the ground without overlaps or gaps.

Both forms are compiled into :class:`StratumColumns`, a column-wise description in which every
boundary is a straight line inside each cell between consecutive geometry breaks.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import shapely

from solver.errors import SectionError

#: The faces of a section by name, with the direction of movement (along x) of their slides:
#: the "right" face descends towards +x (its slides move to the right of the drawing), the
#: "left" face towards -x. Section files name them in ``[search] face``.
FACES = {"right": 1, "left": -1}

DRAINED = "drained"
UNDRAINED = "undrained"
#: Value of ``Material.water`` for a material without pore pressure from a water line.
DRY = "none"

#: Tolerance on coincident geometry [m] (polygon edges that should meet, stratum tops on the
#: ground). Section coordinates are surveyed to mm at best, so 1e-6 m only absorbs rounding.
GEOMETRY_TOLERANCE = 1e-6

#: Depth [m] below the lowest point of the section given to a last stratum without a bottom:
#: deep enough that no admissible slip surface reaches it, finite so that arithmetic stays exact.
_UNBOUNDED_DEPTH = 1e6

_MAX_FRICTION_ANGLE = 89.0


# --------------------------------------------------------------------------------------------
# Building blocks
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Material:
    """A soil or rock with drained (c', phi') or undrained (Su) strength.

    Attributes
    ----------
    name : str
        Unique name within the section.
    unit_weight : float
        [kN/m3] Unit weight above the material's water line (and of ru or dry materials).
    unit_weight_saturated : float
        [kN/m3] Unit weight below the water line; defaults to ``unit_weight``.
    model : str
        "drained" (effective stress, c' and phi') or "undrained" (total stress, Su).
    cohesion : float
        [kPa] c' of a drained material.
    friction_angle : float
        [deg] phi' of a drained material, 0 <= phi' <= 89.
    undrained_strength : float
        [kPa] Su at elevation ``strength_datum`` (or everywhere when the gradient is 0).
    strength_gradient : float
        [kPa/m] Increase of Su with depth below ``strength_datum``:
        Su(y) = Su0 + gradient * max(0, datum - y).
    strength_datum : float or None
        [m] Elevation where Su = ``undrained_strength``; required when the gradient is not 0.
    water : str
        Name of the water line that gives the pore pressure (and the saturated zone) of this
        material, or "none" (dry).
    ru : float or None
        [-] Pore-pressure ratio u / sigma_v (Bishop and Morgenstern 1960) used instead of a
        water line; 0 <= ru < 1.
    """

    name: str
    unit_weight: float
    unit_weight_saturated: float | None = None
    model: str = DRAINED
    cohesion: float = 0.0
    friction_angle: float = 0.0
    undrained_strength: float = 0.0
    strength_gradient: float = 0.0
    strength_datum: float | None = None
    water: str = DRY
    ru: float | None = None

    def __post_init__(self) -> None:
        where = f"material {self.name!r}"
        if not isinstance(self.name, str) or not self.name.strip():
            raise SectionError(f"material name = {self.name!r} must be a non-empty string")
        if self.model not in (DRAINED, UNDRAINED):
            raise SectionError(f"{where}: model = {self.model!r} must be 'drained' or 'undrained'")
        if self.unit_weight_saturated is None:
            object.__setattr__(self, "unit_weight_saturated", self.unit_weight)
        for key in ("unit_weight", "unit_weight_saturated"):
            value = _finite(getattr(self, key), f"{where}: {key}")
            if value <= 0:
                raise SectionError(f"{where}: {key} = {value!r} kN/m3 must be positive")
        if self.model == DRAINED:
            if _finite(self.cohesion, f"{where}: cohesion") < 0:
                raise SectionError(f"{where}: cohesion = {self.cohesion!r} kPa must be >= 0")
            phi = _finite(self.friction_angle, f"{where}: friction_angle")
            if not 0 <= phi <= _MAX_FRICTION_ANGLE:
                raise SectionError(
                    f"{where}: friction_angle = {phi!r} deg is outside [0, {_MAX_FRICTION_ANGLE:g}]"
                )
        else:
            if _finite(self.undrained_strength, f"{where}: undrained_strength") < 0:
                raise SectionError(
                    f"{where}: undrained_strength = {self.undrained_strength!r} kPa must be >= 0"
                )
            gradient = _finite(self.strength_gradient, f"{where}: strength_gradient")
            if gradient < 0:
                raise SectionError(
                    f"{where}: strength_gradient = {gradient!r} kPa/m must be >= 0"
                )
            if gradient != 0 and self.strength_datum is None:
                raise SectionError(
                    f"{where}: strength_gradient = {gradient!r} needs a strength_datum elevation"
                )
            if self.strength_datum is not None:
                _finite(self.strength_datum, f"{where}: strength_datum")
            if self.ru is not None:
                raise SectionError(
                    f"{where}: ru = {self.ru!r} has no meaning for an undrained (total stress) "
                    "material; remove it"
                )
        if self.ru is not None:
            ru = _finite(self.ru, f"{where}: ru")
            if not 0 <= ru < 1:
                raise SectionError(f"{where}: ru = {ru!r} is outside [0, 1)")
            if self.water != DRY:
                raise SectionError(
                    f"{where}: give either water = {self.water!r} or ru = {ru!r}, not both"
                )

    @property
    def tan_phi(self) -> float:
        """tan(phi') [-]; 0 for undrained materials."""
        return math.tan(math.radians(self.friction_angle)) if self.model == DRAINED else 0.0


@dataclass(frozen=True, eq=False)
class Stratum:
    """One stratum: its material and either its ``bottom`` polyline (layered form; None for a
    last stratum without lower limit) or a closed ``polygon`` (polygon form)."""

    material: str
    bottom: np.ndarray | None = None
    polygon: np.ndarray | None = None

    def __post_init__(self) -> None:
        where = f"stratum of {self.material!r}"
        if self.bottom is not None and self.polygon is not None:
            raise SectionError(f"{where}: give either bottom or polygon, not both")
        if self.bottom is not None:
            object.__setattr__(self, "bottom", _polyline(self.bottom, f"{where}: bottom"))
        if self.polygon is not None:
            object.__setattr__(self, "polygon", _polygon(self.polygon, f"{where}: polygon"))


@dataclass(frozen=True, eq=False)
class WaterLine:
    """A piezometric line.

    Attributes
    ----------
    name : str
        Name referred to by ``Material.water``.
    points : ndarray (k, 2)
        [m] Vertices, x strictly increasing, spanning the ground's x range.
    inclination_correction : bool
        When true, u = gamma_w * h * cos^2(theta), theta the slope of the line, as for seepage
        parallel to an inclined phreatic surface (Skempton and DeLory 1957).
    allow_suction : bool
        When false (default), negative pore pressure above the line is set to 0.
    confined : bool
        When true, the line is the piezometric level of a confined (artesian) aquifer: where
        it rises above the ground, the pore pressure at a slice base still uses its full head
        (u = gamma_w * (h_line - y_base)), and no water is ponded on the ground by it. When
        false (default), a head above the ground is taken at ground level, or at the level
        of the ponded water where the section allows ponding and water ponds there.
    """

    name: str
    points: np.ndarray
    inclination_correction: bool = False
    allow_suction: bool = False
    confined: bool = False

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip() or self.name == DRY:
            raise SectionError(f"water_line name = {self.name!r} must be a non-empty string "
                               f"other than {DRY!r}")
        object.__setattr__(
            self, "points", _polyline(self.points, f"water_line {self.name!r}: points")
        )
        for key in ("inclination_correction", "allow_suction", "confined"):
            if not isinstance(getattr(self, key), bool):
                raise SectionError(
                    f"water_line {self.name!r}: {key} = {getattr(self, key)!r} must be true "
                    "or false"
                )


@dataclass(frozen=True, eq=False)
class Surcharge:
    """Vertical strip load of ``pressure`` [kPa] from ``x_from`` to ``x_to`` [m]."""

    x_from: float
    x_to: float
    pressure: float

    def __post_init__(self) -> None:
        where = "surcharge"
        x_from = _finite(self.x_from, f"{where}: x_from")
        x_to = _finite(self.x_to, f"{where}: x_to")
        if not x_to > x_from:
            raise SectionError(f"{where}: x_to = {x_to!r} must be greater than x_from = {x_from!r}")
        if _finite(self.pressure, f"{where}: pressure") < 0:
            raise SectionError(f"{where}: pressure = {self.pressure!r} kPa must be >= 0")


@dataclass(frozen=True, eq=False)
class TensionCrack:
    """Tension crack at the upslope end of the slip surface: ``depth`` [m] below the ground,
    with ``water_depth`` [m] of water standing in it (0 <= water_depth <= depth)."""

    depth: float = 0.0
    water_depth: float = 0.0

    def __post_init__(self) -> None:
        depth = _finite(self.depth, "tension_crack: depth")
        water = _finite(self.water_depth, "tension_crack: water_depth")
        if depth < 0:
            raise SectionError(f"tension_crack: depth = {depth!r} m must be >= 0")
        if not 0 <= water <= depth:
            raise SectionError(
                f"tension_crack: water_depth = {water!r} m must be between 0 and the crack "
                f"depth = {depth!r} m"
            )


# --------------------------------------------------------------------------------------------
# The section
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Section:
    """One validated cross-section (see the module docstring and docs/formats.md, section 1).

    Attributes
    ----------
    id, name : str
        Identifier (unique within the site) and display name.
    ground : ndarray (n, 2)
        [m] Ground surface, x strictly increasing.
    pond : bool
        Whether water may stand above the ground (its weight then loads the slope). Water
        ponds at the level of the water line of the material at the ground surface; the head
        of any unconfined line at a slice base is capped at that ponded level, or at the
        ground where nothing ponds (solver.slicing, the ponding rule).
    base : ndarray (k, 2) or None
        [m] Impenetrable base that no slip surface may cross.
    materials, strata, water_lines, surcharges : tuples
        Building blocks; strata listed from the top down.
    kh : float
        [-] Pseudo-static horizontal seismic coefficient.
    crack : TensionCrack or None
        Tension crack at the upslope end of slip surfaces.
    description : str
        Free text.
    search : dict
        Defaults for the critical-surface search ([search] table), kept as given.
    """

    id: str
    name: str
    ground: np.ndarray
    materials: tuple[Material, ...]
    strata: tuple[Stratum, ...]
    water_lines: tuple[WaterLine, ...] = ()
    surcharges: tuple[Surcharge, ...] = ()
    pond: bool = False
    base: np.ndarray | None = None
    kh: float = 0.0
    crack: TensionCrack | None = None
    description: str = ""
    search: dict = field(default_factory=dict)
    _columns: Any = field(default=None, init=False, repr=False)

    def __post_init__(self) -> None:
        if not isinstance(self.id, str) or not self.id.strip():
            raise SectionError(f"section id = {self.id!r} must be a non-empty string")
        ground = _polyline(self.ground, f"section {self.id!r}: ground points")
        object.__setattr__(self, "ground", ground)
        for key in ("materials", "strata", "water_lines", "surcharges"):
            object.__setattr__(self, key, tuple(getattr(self, key)))
        if not isinstance(self.pond, bool):
            raise SectionError(f"ground: pond = {self.pond!r} must be true or false")
        kh = _finite(self.kh, "seismic: kh")
        if not 0 <= kh < 1:
            raise SectionError(f"seismic: kh = {kh!r} is outside [0, 1)")
        self._check_names()
        for line in self.water_lines:
            _check_span(line.points, ground, f"water_line {line.name!r}")
        if self.base is not None:
            base = _polyline(self.base, "base: points")
            object.__setattr__(self, "base", base)
            _check_span(base, ground, "base")
            x = np.union1d(base[:, 0], ground[:, 0])
            x = x[(x >= ground[0, 0]) & (x <= ground[-1, 0])]
            above = np.interp(x, *base.T) >= np.interp(x, *ground.T)
            if above.any():
                raise SectionError(
                    f"base: at x = {x[above][0]:g} m the base (y = "
                    f"{np.interp(x[above][0], *base.T):g} m) is not below the ground "
                    f"(y = {np.interp(x[above][0], *ground.T):g} m)"
                )
        object.__setattr__(self, "_columns", stratum_columns(self))

    def _check_names(self) -> None:
        if not self.materials:
            raise SectionError(f"section {self.id!r}: no [[material]] given")
        if not self.strata:
            raise SectionError(f"section {self.id!r}: no [[stratum]] given")
        names = [m.name for m in self.materials]
        for name in names:
            if names.count(name) > 1:
                raise SectionError(f"material {name!r} is defined twice")
        lines = [w.name for w in self.water_lines]
        for name in lines:
            if lines.count(name) > 1:
                raise SectionError(f"water_line {name!r} is defined twice")
        for material in self.materials:
            if material.water != DRY and material.water not in lines:
                raise SectionError(
                    f"material {material.name!r}: water = {material.water!r} is not a "
                    f"water_line of the section (known: {', '.join(lines) or 'none'})"
                )
        for stratum in self.strata:
            if stratum.material not in names:
                raise SectionError(
                    f"stratum material = {stratum.material!r} is not a defined material "
                    f"(known: {', '.join(names)})"
                )

    def material_index(self, name: str) -> int:
        """Index of the material called ``name`` in ``materials``."""
        for i, material in enumerate(self.materials):
            if material.name == name:
                return i
        raise SectionError(f"material {name!r} is not defined in section {self.id!r}")

    def water_line(self, name: str) -> WaterLine:
        """The water line called ``name``."""
        for line in self.water_lines:
            if line.name == name:
                return line
        raise SectionError(f"water_line {name!r} is not defined in section {self.id!r}")

    @property
    def columns(self) -> "StratumColumns":
        """The strata compiled into columns (computed once, at construction)."""
        return self._columns

    def with_water_lines(
        self,
        points: Mapping[str, Any],
        inclination_correction: Mapping[str, bool] | None = None,
    ) -> "Section":
        """A copy whose named water lines have new ``points`` ((k, 2) [m] each); other lines,
        the geometry and the materials are shared, not copied or re-validated.

        ``inclination_correction`` sets that flag of the named new lines (default: each keeps
        its own). A line drawn through measured piezometric heads needs it off: the heads are
        already the pressure heads at the tips, and the cos^2 factor belongs to a phreatic
        surface with seepage parallel to it (Skempton and DeLory 1957).

        Raises SectionError for an unknown line name or invalid points.
        """
        known = {line.name: line for line in self.water_lines}
        corrections = dict(inclination_correction or {})
        for name in [*points, *corrections]:
            if name not in known:
                raise SectionError(
                    f"water_line {name!r} is not defined in section {self.id!r} "
                    f"(known: {', '.join(known) or 'none'})"
                )
        lines = []
        for line in self.water_lines:
            if line.name in points:
                new = WaterLine(
                    line.name, points[line.name],
                    corrections.get(line.name, line.inclination_correction),
                    line.allow_suction, line.confined,
                )
                _check_span(new.points, self.ground, f"water_line {line.name!r}")
                line = new
            lines.append(line)
        # A shallow copy shares the validated ground, strata and their compiled columns.
        result = copy.copy(self)
        object.__setattr__(result, "water_lines", tuple(lines))
        return result

    def ground_elevation(self, x) -> np.ndarray:
        """Ground elevation [m] at offsets ``x`` [m] (linear between the ground points)."""
        return np.interp(x, self.ground[:, 0], self.ground[:, 1])


# --------------------------------------------------------------------------------------------
# Strata compiled into columns
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class StratumColumns:
    """The strata as columns: inside each cell ``x[j] <= x <= x[j + 1]`` the section is a stack
    of ``n_layers`` layers, top down, each bounded by straight lines given by their elevations
    at the two cell edges. Empty layers (pinched out, padding) have zero thickness.

    Attributes
    ----------
    x : ndarray (m + 1,)
        [m] Cell edges: every vertex of the ground and of the strata, and every point where a
        layered bottom crosses the boundary above it.
    top_left, top_right, bottom_left, bottom_right : ndarray (m, n_layers)
        [m] Elevations of the layer boundaries at the cell edges.
    material : ndarray of int (m, n_layers)
        Index into ``Section.materials``.
    bounded_below : bool
        False when the lowest stratum has no lower limit.
    """

    x: np.ndarray
    top_left: np.ndarray
    top_right: np.ndarray
    bottom_left: np.ndarray
    bottom_right: np.ndarray
    material: np.ndarray
    bounded_below: bool

    @property
    def n_layers(self) -> int:
        return self.material.shape[1]


def stratum_columns(section: Section) -> StratumColumns:
    """Compile the strata of ``section`` into :class:`StratumColumns`; raises SectionError for
    strata that overlap, leave gaps, rise above the ground or do not span the section."""
    with_bottom = [s.polygon is None for s in section.strata]
    if all(with_bottom):
        return _layered_columns(section)
    if not any(with_bottom):
        return _polygon_columns(section)
    raise SectionError(
        f"section {section.id!r}: strata mix `bottom` and `polygon` forms; use one form"
    )


def _layered_columns(section: Section) -> StratumColumns:
    ground = section.ground
    strata = section.strata
    for i, stratum in enumerate(strata):
        if stratum.bottom is None and i < len(strata) - 1:
            raise SectionError(
                f"stratum {i + 1} ({stratum.material!r}) has no bottom; only the last stratum "
                "may omit it"
            )
        if stratum.bottom is not None:
            _check_span(stratum.bottom, ground, f"stratum {i + 1} ({stratum.material!r}) bottom")
    x = ground[:, 0].copy()
    lo, hi = x[0], x[-1]
    boundaries = [ground[:, 1].copy()]
    for stratum in strata:
        if stratum.bottom is None:
            floor = min(ground[:, 1].min(), *(b.min() for b in boundaries)) - _UNBOUNDED_DEPTH
            boundaries.append(np.full(x.size, floor))
            continue
        bx = stratum.bottom[:, 0]
        new_x = np.union1d(x, bx[(bx > lo) & (bx < hi)])
        boundaries = [np.interp(new_x, x, b) for b in boundaries]
        x = new_x
        bottom = np.interp(x, *stratum.bottom.T)
        # The effective boundary is min(previous boundary, bottom): add the points where the
        # two cross so that the minimum stays linear inside every cell.
        d = boundaries[-1] - bottom
        cross = d[:-1] * d[1:] < 0
        if cross.any():
            xc = x[:-1][cross] + (x[1:] - x[:-1])[cross] * d[:-1][cross] / (
                d[:-1][cross] - d[1:][cross]
            )
            new_x = np.union1d(x, xc)
            boundaries = [np.interp(new_x, x, b) for b in boundaries]
            bottom = np.interp(new_x, *stratum.bottom.T)
            x = new_x
        boundaries.append(np.minimum(boundaries[-1], bottom))
    b = np.array(boundaries)
    material = np.array([section.material_index(s.material) for s in strata])
    m = x.size - 1
    return StratumColumns(
        x=x,
        top_left=b[:-1, :-1].T.copy(),
        top_right=b[:-1, 1:].T.copy(),
        bottom_left=b[1:, :-1].T.copy(),
        bottom_right=b[1:, 1:].T.copy(),
        material=np.broadcast_to(material, (m, material.size)).copy(),
        bounded_below=strata[-1].bottom is not None,
    )


def _polygon_columns(section: Section) -> StratumColumns:
    ground = section.ground
    tol = GEOMETRY_TOLERANCE
    shapes = []
    for i, stratum in enumerate(section.strata):
        shape = shapely.Polygon(stratum.polygon)
        if not shape.is_valid or shape.area <= 0:
            raise SectionError(
                f"stratum {i + 1} ({stratum.material!r}): polygon is not a simple polygon "
                f"({shapely.is_valid_reason(shape)})"
            )
        x_min, _, x_max, _ = shape.bounds
        if x_min < ground[0, 0] - tol or x_max > ground[-1, 0] + tol:
            raise SectionError(
                f"stratum {i + 1} ({stratum.material!r}): polygon spans x = {x_min:g} to "
                f"{x_max:g} m, beyond the ground (x = {ground[0, 0]:g} to {ground[-1, 0]:g} m)"
            )
        shapes.append(shape)
    scale = max(1.0, float(np.ptp(ground[:, 0])))
    for i in range(len(shapes)):
        for j in range(i + 1, len(shapes)):
            overlap = shapes[i].intersection(shapes[j]).area
            if overlap > tol * scale:
                raise SectionError(
                    f"strata {i + 1} ({section.strata[i].material!r}) and {j + 1} "
                    f"({section.strata[j].material!r}) overlap by {overlap:.4g} m2"
                )
    high = ground[:, 1].max() + scale
    sky = shapely.Polygon([*ground, (ground[-1, 0], high), (ground[0, 0], high)])
    for i, shape in enumerate(shapes):
        above = shape.intersection(sky).area
        if above > tol * scale:
            raise SectionError(
                f"stratum {i + 1} ({section.strata[i].material!r}): polygon rises above the "
                f"ground ({above:.4g} m2 above it)"
            )

    x = np.unique(np.concatenate([ground[:, 0], *(s.polygon[:, 0] for s in section.strata)]))
    x = x[(x >= ground[0, 0]) & (x <= ground[-1, 0])]
    m = x.size - 1
    cells: list[list[tuple]] = [[] for _ in range(m)]
    for i, stratum in enumerate(section.strata):
        material = section.material_index(stratum.material)
        ring = np.asarray(shapely.orient_polygons(shapes[i]).exterior.coords)
        tops: dict[int, list] = {}
        bottoms: dict[int, list] = {}
        for (xa, ya), (xb, yb) in zip(ring[:-1], ring[1:]):
            if xa == xb:
                continue
            # Counter-clockwise ring: edges run right to left along the top of the polygon.
            target = tops if xb < xa else bottoms
            (x0, y0), (x1, y1) = sorted(((xa, ya), (xb, yb)))
            j0, j1 = np.searchsorted(x, [x0, x1])
            for j in range(j0, j1):
                left = y0 + (y1 - y0) * (x[j] - x0) / (x1 - x0)
                right = y0 + (y1 - y0) * (x[j + 1] - x0) / (x1 - x0)
                target.setdefault(j, []).append((left, right))
        for j, cell_tops in tops.items():
            cell_bottoms = bottoms.get(j, [])
            # A vertical line meets a simple polygon in intervals: sorted from the top, top and
            # bottom edges alternate.
            cell_tops.sort(key=lambda e: -(e[0] + e[1]))
            cell_bottoms.sort(key=lambda e: -(e[0] + e[1]))
            for top, bottom in zip(cell_tops, cell_bottoms):
                cells[j].append((top[0], top[1], bottom[0], bottom[1], material, i))
    n_layers = max(len(c) for c in cells) if cells else 0
    arrays = np.zeros((5, m, n_layers))
    owner = np.zeros((m, n_layers), dtype=int)
    for j, column in enumerate(cells):
        column.sort(key=lambda e: -(e[0] + e[1]))
        where = f"x = {x[j]:g} to {x[j + 1]:g} m"
        if not column:
            raise SectionError(f"the strata leave a gap under the ground at {where}")
        g_left, g_right = np.interp(x[j : j + 2], *ground.T)
        if abs(column[0][0] - g_left) > tol or abs(column[0][1] - g_right) > tol:
            raise SectionError(
                f"the strata leave a gap between the ground and stratum {column[0][5] + 1} "
                f"({section.strata[column[0][5]].material!r}) at {where}"
            )
        for upper, lower in zip(column[:-1], column[1:]):
            if abs(upper[2] - lower[0]) > tol or abs(upper[3] - lower[1]) > tol:
                raise SectionError(
                    f"the strata leave a gap between stratum {upper[5] + 1} "
                    f"({section.strata[upper[5]].material!r}) and stratum {lower[5] + 1} "
                    f"({section.strata[lower[5]].material!r}) at {where}"
                )
        padded = column + [(column[-1][2], column[-1][3], column[-1][2], column[-1][3],
                            column[-1][4], column[-1][5])] * (n_layers - len(column))
        values = np.array(padded)
        arrays[:, j, :] = values[:, :5].T
        owner[j] = values[:, 5]
    return StratumColumns(
        x=x,
        top_left=arrays[0],
        top_right=arrays[1],
        bottom_left=arrays[2],
        bottom_right=arrays[3],
        material=arrays[4].astype(int),
        bounded_below=True,
    )


# --------------------------------------------------------------------------------------------
# Parsing and writing the section format
# --------------------------------------------------------------------------------------------

_TABLES = {
    "section": {"id", "name", "description"},
    "ground": {"points", "pond"},
    "base": {"points"},
    "seismic": {"kh"},
    "tension_crack": {"depth", "water_depth"},
    "search": {"method", "min_depth", "slices", "face", "centre_x_range", "centre_y_range",
               "centres", "tangent_range", "tangent_levels"},
}
_ARRAYS = {
    "material": {
        "name", "model", "unit_weight", "unit_weight_saturated", "cohesion", "friction_angle",
        "undrained_strength", "strength_gradient", "strength_datum", "water", "ru",
    },
    "stratum": {"material", "bottom", "polygon"},
    "water_line": {"name", "points", "inclination_correction", "allow_suction", "confined"},
    "surcharge": {"x_from", "x_to", "pressure"},
}
_DRAINED_ONLY = {"cohesion", "friction_angle"}
_UNDRAINED_ONLY = {"undrained_strength", "strength_gradient", "strength_datum"}


def section_from_dict(data: Mapping[str, Any]) -> Section:
    """Build and validate a :class:`Section` from the dictionary of a section file.

    Parameters
    ----------
    data : mapping
        What ``tomllib.load`` returns for a section file (docs/formats.md, section 1), or what
        :func:`section_to_dict` returns.

    Raises
    ------
    SectionError
        Naming the table, item and value at fault: unknown keys, missing keys, ground that
        doubles back, phi' outside [0, 89] deg, non-positive unit weights, unknown material or
        water-line names, ru outside [0, 1), crack water deeper than the crack, overlapping or
        gapped strata polygons, a base above the ground, ...
    """
    if not isinstance(data, Mapping):
        raise SectionError(f"a section must be a table, got {type(data).__name__}")
    for key in data:
        if key not in _TABLES and key not in _ARRAYS:
            raise SectionError(
                f"unknown table [{key}] (known: {', '.join(sorted({*_TABLES, *_ARRAYS}))})"
            )
    tables = {key: _table(data, key) for key in _TABLES}
    arrays = {key: _array_of_tables(data, key) for key in _ARRAYS}

    head = tables["section"]
    ground = tables["ground"]
    if "id" not in head:
        raise SectionError("[section] needs an id")
    if "points" not in ground:
        raise SectionError("[ground] needs points")
    lines = tuple(
        WaterLine(
            name=_required(item, "name", "water_line"),
            points=_required(item, "points", f"water_line {item.get('name')!r}"),
            inclination_correction=item.get("inclination_correction", False),
            allow_suction=item.get("allow_suction", False),
            confined=item.get("confined", False),
        )
        for item in arrays["water_line"]
    )
    materials = tuple(_material(item, has_lines=bool(lines)) for item in arrays["material"])
    strata = tuple(
        Stratum(
            material=_required(item, "material", "stratum"),
            bottom=item.get("bottom"),
            polygon=item.get("polygon"),
        )
        for item in arrays["stratum"]
    )
    surcharges = tuple(
        Surcharge(**{k: _required(item, k, "surcharge") for k in ("x_from", "x_to", "pressure")})
        for item in arrays["surcharge"]
    )
    crack = None
    if tables["tension_crack"]:
        crack = TensionCrack(
            depth=tables["tension_crack"].get("depth", 0.0),
            water_depth=tables["tension_crack"].get("water_depth", 0.0),
        )
    base = tables["base"].get("points") if tables["base"] else None
    if tables["base"] and base is None:
        raise SectionError("[base] needs points")
    return Section(
        id=head["id"],
        name=head.get("name", head["id"]),
        description=head.get("description", ""),
        ground=ground["points"],
        pond=ground.get("pond", False),
        base=base,
        materials=materials,
        strata=strata,
        water_lines=lines,
        surcharges=surcharges,
        kh=tables["seismic"].get("kh", 0.0),
        crack=crack,
        search=_search(tables["search"]),
    )


def section_to_dict(section: Section) -> dict:
    """The JSON-friendly dictionary of ``section`` in the layout of the section file; the
    inverse of :func:`section_from_dict`."""
    data: dict[str, Any] = {
        "section": {"id": section.id, "name": section.name, "description": section.description},
        "ground": {"points": section.ground.tolist(), "pond": section.pond},
    }
    if section.base is not None:
        data["base"] = {"points": section.base.tolist()}
    data["material"] = [_material_to_dict(m) for m in section.materials]
    data["stratum"] = []
    for stratum in section.strata:
        item: dict[str, Any] = {"material": stratum.material}
        if stratum.bottom is not None:
            item["bottom"] = stratum.bottom.tolist()
        if stratum.polygon is not None:
            item["polygon"] = stratum.polygon.tolist()
        data["stratum"].append(item)
    data["water_line"] = [
        {
            "name": w.name,
            "points": w.points.tolist(),
            "inclination_correction": w.inclination_correction,
            "allow_suction": w.allow_suction,
            "confined": w.confined,
        }
        for w in section.water_lines
    ]
    data["surcharge"] = [
        {"x_from": float(s.x_from), "x_to": float(s.x_to), "pressure": float(s.pressure)}
        for s in section.surcharges
    ]
    data["seismic"] = {"kh": float(section.kh)}
    if section.crack is not None:
        data["tension_crack"] = {
            "depth": float(section.crack.depth),
            "water_depth": float(section.crack.water_depth),
        }
    if section.search:
        data["search"] = dict(section.search)
    return data


def _material(item: Mapping[str, Any], has_lines: bool) -> Material:
    name = _required(item, "name", "material")
    model = item.get("model", DRAINED)
    where = f"material {name!r}"
    if model not in (DRAINED, UNDRAINED):
        raise SectionError(f"{where}: model = {model!r} must be 'drained' or 'undrained'")
    wrong = _UNDRAINED_ONLY if model == DRAINED else _DRAINED_ONLY
    for key in wrong & set(item):
        kind = "a drained" if model == DRAINED else "an undrained"
        raise SectionError(f"{where}: {key} does not apply to {kind} material")
    if "water" not in item and "ru" not in item and has_lines and model == DRAINED:
        # Silence here would mean a dry analysis of a wet slope.
        raise SectionError(
            f"{where}: say which water line gives its pore pressure (water = \"<name>\"), "
            "give ru, or write water = \"none\" for a dry material"
        )
    if model == DRAINED:
        _required(item, "friction_angle", where)
    else:
        _required(item, "undrained_strength", where)
    _required(item, "unit_weight", where)
    return Material(**dict(item))


def _material_to_dict(material: Material) -> dict:
    data: dict[str, Any] = {
        "name": material.name,
        "model": material.model,
        "unit_weight": float(material.unit_weight),
        "unit_weight_saturated": float(material.unit_weight_saturated),
    }
    if material.model == DRAINED:
        data["cohesion"] = float(material.cohesion)
        data["friction_angle"] = float(material.friction_angle)
    else:
        data["undrained_strength"] = float(material.undrained_strength)
        data["strength_gradient"] = float(material.strength_gradient)
        if material.strength_datum is not None:
            data["strength_datum"] = float(material.strength_datum)
    if material.ru is not None:
        data["ru"] = float(material.ru)
    else:
        data["water"] = material.water
    return data


def _search(table: Mapping[str, Any]) -> dict:
    search = dict(table)
    if "method" in search and not isinstance(search["method"], str):
        raise SectionError(f"search: method = {search['method']!r} must be a method name")
    if "min_depth" in search and _finite(search["min_depth"], "search: min_depth") < 0:
        raise SectionError(f"search: min_depth = {search['min_depth']!r} m must be >= 0")
    for key in ("slices", "tangent_levels"):
        if key in search:
            _count(search[key], f"search: {key}")
    if "centres" in search:
        centres = search["centres"]
        if not isinstance(centres, (list, tuple)) or len(centres) != 2:
            raise SectionError(f"search: centres = {centres!r} must be [along x, along y], two "
                               "positive integers")
        for value in centres:
            _count(value, "search: centres")
    if "face" in search and search["face"] not in FACES:
        raise SectionError(f"search: face = {search['face']!r} must be one of "
                           f"{', '.join(repr(f) for f in FACES)} (leave it out to search every "
                           "face)")
    for key in ("centre_x_range", "centre_y_range", "tangent_range"):
        if key in search:
            values = search[key]
            if not isinstance(values, (list, tuple)) or len(values) != 2:
                raise SectionError(f"search: {key} = {values!r} must be two numbers [m], low "
                                   "then high")
            low, high = (_finite(v, f"search: {key}") for v in values)
            if not low <= high:
                raise SectionError(f"search: {key} = {values!r} m must be low then high")
            search[key] = [low, high]
    return search


def _count(value, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise SectionError(f"{where} = {value!r} must be a positive integer")
    return value


def _table(data: Mapping[str, Any], key: str) -> dict:
    table = data.get(key, {})
    if not isinstance(table, Mapping):
        raise SectionError(f"[{key}] must be a table, got {table!r}")
    _known(table, _TABLES[key], f"[{key}]")
    return dict(table)


def _array_of_tables(data: Mapping[str, Any], key: str) -> list:
    items = data.get(key, [])
    if isinstance(items, Mapping) or not isinstance(items, (list, tuple)):
        raise SectionError(f"[[{key}]] must be an array of tables (write [[{key}]])")
    for i, item in enumerate(items):
        if not isinstance(item, Mapping):
            raise SectionError(f"[[{key}]] item {i + 1} must be a table, got {item!r}")
        _known(item, _ARRAYS[key], f"[[{key}]] item {i + 1}")
    return list(items)


def _known(table: Mapping[str, Any], allowed: set, where: str) -> None:
    for key in table:
        if key not in allowed:
            raise SectionError(
                f"{where}: unknown key {key!r} (known: {', '.join(sorted(allowed))})"
            )


def _required(item: Mapping[str, Any], key: str, where: str):
    if key not in item:
        raise SectionError(f"{where}: {key} is required")
    return item[key]


def _finite(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise SectionError(f"{where} = {value!r} must be a number")
    if not math.isfinite(value):
        raise SectionError(f"{where} = {value!r} must be finite")
    return float(value)


def _points(value, where: str, minimum: int) -> np.ndarray:
    try:
        points = np.array(value, dtype=float)
    except (TypeError, ValueError):
        raise SectionError(f"{where} = {value!r} must be a list of [x, y] pairs") from None
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] < minimum:
        raise SectionError(f"{where}: need at least {minimum} [x, y] pairs, got {value!r}")
    if not np.isfinite(points).all():
        raise SectionError(f"{where}: coordinates must be finite, got {value!r}")
    points.setflags(write=False)
    return points


def _polyline(value, where: str) -> np.ndarray:
    points = _points(value, where, 2)
    step = np.diff(points[:, 0])
    if (step <= 0).any():
        i = int(np.argmax(step <= 0))
        raise SectionError(
            f"{where}: x must increase strictly from point to point, but x = "
            f"{points[i, 0]:g} is followed by x = {points[i + 1, 0]:g} (the line doubles back)"
        )
    return points


def _polygon(value, where: str) -> np.ndarray:
    points = _points(value, where, 3)
    if len(points) > 3 and np.array_equal(points[0], points[-1]):
        points = points[:-1]
        points.setflags(write=False)
    return points


def _check_span(points: np.ndarray, ground: np.ndarray, where: str) -> None:
    lo, hi = ground[0, 0], ground[-1, 0]
    if points[0, 0] > lo + GEOMETRY_TOLERANCE or points[-1, 0] < hi - GEOMETRY_TOLERANCE:
        raise SectionError(
            f"{where}: spans x = {points[0, 0]:g} to {points[-1, 0]:g} m but must cover the "
            f"ground, x = {lo:g} to {hi:g} m"
        )
