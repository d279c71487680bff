"""Limit-equilibrium methods of slices, vectorised over many trial surfaces at once.

Every method takes a :class:`solver.slices.Slices` table (arrays of shape
``(n_surfaces, n_slices)``) and returns a :class:`SafetyResult` with one factor of safety per
surface and the per-slice forces for the audit table.

Sign conventions (movement frame of :mod:`solver.slices`): x points in the direction of movement,
y up; ``alpha > 0`` where the base descends in the direction of movement. At slice boundary ``j``
the soil on the upslope side pushes the soil on the downslope side with the force ``(E_j, -X_j)``:
``E`` is the interslice normal force (compression positive) and ``X`` the interslice shear force,
positive when the upslope soil drags the downslope soil downwards (the usual case, which makes
Spencer's ``lambda`` positive). On slice ``i`` (boundaries ``i`` and ``i + 1``) the base carries
the total normal force ``N = N' + u l`` and the mobilised shear
``S = (c' l + N' tan(phi')) / F`` (Mohr-Coulomb, F the factor of safety), both at the base
mid-point. External loads: weight ``W`` (soil plus the vertical part of ponded water) and surcharge ``Q``
(vertical, at the slice mid-point), pseudo-static ``kh W_s`` on the soil weight ``W_s``
(``seismic_weight``; horizontal, at ``y_weight``), the horizontal part ``H_w`` of the ponded
water pressure on the slice top (at ``y_top_water``) and the crack-water thrust ``P_w``
(horizontal, at ``crack_water_y``, on the first active slice). Below, ``H = kh W_s + H_w + P_w``
is the sum of the horizontal loads of a slice and ``y_H`` stands for the line of action of each.

Equilibrium of slice i (the scalar form every array expression below implements)::

    horizontal:  -(E_{i+1} - E_i) + H + N sin(a) - S cos(a)     = 0
    vertical:     (X_{i+1} - X_i) - W - Q + N cos(a) + S sin(a) = 0

so that, with ``m_alpha = cos(a) + sin(a) tan(phi') / F`` (Bishop 1955),

    N = [W + Q - (X_{i+1} - X_i) - (c' l - u l tan(phi')) sin(a) / F] / m_alpha.

Moment equilibrium of the whole mass about a point (x_c, y_c) reads::

    F = sum(S_r r_S) / [sum((x_c - x) (W + Q)) + sum((y_c - y_H) H) + sum(N a_N)]

with ``S_r = c' l + N' tan(phi')``, the shear lever arm
``r_S = (x_c - x) sin(a) + (y_c - y_b) cos(a)`` (the radius R on a circle) and the normal-force
lever arm ``a_N = (x - x_c) cos(a) - (y_b - y_c) sin(a)`` (zero on a circle): the general
moment equation of Fredlund and Krahn (1977), Eq. 7, in this frame.

Inactive (padding) slices are zeroed before any sum, so they never change a result.

References
----------
Fredlund, D.G. and Krahn, J. (1977). Comparison of slope stability methods of analysis.
Canadian Geotechnical Journal 14(3), 429-439. doi:10.1139/t77-045
"""

from __future__ import annotations

import inspect
import numbers
from dataclasses import dataclass, fields
from functools import cached_property

import numpy as np

from solver.constants import (
    FOS_TOLERANCE,
    GAMMA_W,
    MAX_ITERATIONS,
    M_ALPHA_MIN,
    THRUST_LINE_MIN_FORCE_RATIO,
)
from solver.errors import MethodError
from solver.slices import Slices

__all__ = [
    "INTERSLICE_FORCES",
    "METHOD_NAMES",
    "SafetyResult",
    "ScreeningResult",
    "SurfaceSafety",
    "bishop_screening",
    "bishop_simplified",
    "factor_of_safety",
    "janbu_correction_factor",
    "janbu_simplified",
    "morgenstern_price",
    "ordinary",
    "spencer",
    "WARNING_FLAGS",
]

#: Interslice force functions f(x) of Morgenstern and Price (1965) offered by
#: :func:`morgenstern_price`, on the normalised abscissa s = (x - x_crest) / (x_toe - x_crest).
INTERSLICE_FUNCTIONS = {
    "constant": lambda s: np.ones_like(s),
    "half_sine": lambda s: np.sin(np.pi * s),
}

#: The interslice normal force that Spencer's and Morgenstern-Price's interslice function applies
#: to: "total" E, the published definition (Spencer 1967; Morgenstern and Price 1965), the
#: default; or "effective" E' = E - U (see :func:`morgenstern_price`).
INTERSLICE_FORCES = ("total", "effective")

#: Coefficient b1 of Janbu's correction factor f0 (Janbu 1973), by the strength at the base.
JANBU_B1 = {"cohesion_only": 0.69, "friction_only": 0.31, "cohesion_and_friction": 0.50}

#: Largest d/L of Janbu's (1973) correction chart (from memory of the chart, as reproduced by
#: Abramson et al. 2002). Beyond it f0 is held at its value here rather than extrapolated
#: (common practice).
JANBU_CHART_MAX_RATIO = 0.4


# --------------------------------------------------------------------------------------------
# Result objects


@dataclass(frozen=True)
class SurfaceSafety:
    """The result of one method on one surface, active slices only (see :class:`SafetyResult`)."""

    fos: float
    last_iterate: float
    converged: bool
    admissible: bool
    iterations: int
    residual: float
    lambda_: float
    method: str
    message: str
    normal_force: np.ndarray
    shear_force: np.ndarray
    m_alpha: np.ndarray
    interslice_normal: np.ndarray
    interslice_shear: np.ndarray
    thrust_line_y: np.ndarray
    interslice_water: np.ndarray
    low_m_alpha: bool
    negative_normal: bool
    thrust_outside: bool
    beyond_correction_chart: bool


@dataclass(frozen=True)
class SafetyResult:
    """Factors of safety of many trial surfaces by one method, with the per-slice forces.

    Attributes
    ----------
    fos : ndarray (n_surfaces,)
        Factor of safety [-] of the surfaces that converged; NaN where the iteration did not
        converge (see ``last_iterate``) or F could not be computed (no active slice, no moment
        centre, non-positive driving moment or force, numerical breakdown).
    last_iterate : ndarray (n_surfaces,)
        The last iterate of F [-] (for Janbu's method, times f0): equal to ``fos`` where the
        method converged, and kept where it did not so that the audit can show how far the
        iteration got. Not a factor of safety where ``converged`` is False. NaN where no
        iterate could be computed.
    converged : ndarray of bool (n_surfaces,)
        True when the iteration met the tolerance within the iteration limit (always True
        for the non-iterative ordinary method when ``fos`` is finite).
    admissible : ndarray of bool (n_surfaces,)
        False when the result is converged but physically doubtful (``low_m_alpha`` or
        ``negative_normal``) or not converged; ``message`` says why in words. A line of thrust
        outside the sliding mass (``thrust_outside``) is a warning only.
    iterations : ndarray of int (n_surfaces,)
        Iterations used.
    residual : ndarray (n_surfaces,)
        Last change of F (and of lambda for Spencer and Morgenstern-Price) between iterations
        [-]; 0 for the ordinary method.
    lambda_ : ndarray (n_surfaces,)
        Interslice force scale factor lambda of Spencer (tan of the interslice force
        inclination) and Morgenstern-Price [-], at the last iterate; NaN for the other
        methods.
    method : str
        Name of the method.
    message : tuple of str (n_surfaces,)
        Why a surface is not converged or not admissible; "" when all is well.
    normal_force : ndarray (n_surfaces, n_slices)
        Effective normal force N' on the slice base [kN/m] (at the last iterate where not
        converged; likewise the other per-slice arrays).
    shear_force : ndarray (n_surfaces, n_slices)
        Mobilised shear force S = S_r / F on the slice base [kN/m].
    m_alpha : ndarray (n_surfaces, n_slices)
        m_alpha = cos(alpha) + sin(alpha) tan(phi') / F [-] (Bishop 1955); for Spencer and
        Morgenstern-Price with alpha measured from the interslice force inclination
        atan(lambda f), the smaller value of the slice's two sides (see
        ``_inclined_m_alpha``); NaN for the ordinary method.
    interslice_normal, interslice_shear : ndarray (n_surfaces, n_slices + 1)
        Total E and X at the slice boundaries [kN/m] (sign convention in the module
        docstring). For Bishop and Janbu X = 0 and E follows from horizontal equilibrium of
        each slice (for Bishop its last value shows the force imbalance that the method
        accepts); for Spencer and Morgenstern-Price X = lambda f E (by default; X =
        lambda f (E - U) with ``interslice_force="effective"``, U the water force on the
        boundary); NaN for the ordinary method, which ignores interslice forces.
    thrust_line_y : ndarray (n_surfaces, n_slices + 1)
        Elevation of the line of thrust at the slice boundaries [m] (Spencer and
        Morgenstern-Price; NaN elsewhere and where E is nearly zero).
    interslice_water : ndarray (n_surfaces, n_slices + 1)
        U, the water force on each slice boundary [kN/m], hydrostatic from the neighbouring
        base pore pressures; 0 at the ends of the mass. E - U is the effective interslice
        force, to which Spencer's and Morgenstern-Price's interslice function applies with
        ``interslice_force="effective"``; the ordinary method with ``side_water=True`` keeps U
        while ignoring E - U.
    active : ndarray of bool (n_surfaces, n_slices)
        The ``active`` flags of the slice table (padding slices are False).
    low_m_alpha : ndarray of bool (n_surfaces,)
        m_alpha <= :data:`solver.constants.M_ALPHA_MIN` at an active slice (at the last
        iterate): the normal force is unreliable (Whitman and Bailey 1967). Makes the result
        inadmissible. False for the ordinary method.
    negative_normal : ndarray of bool (n_surfaces,)
        Negative effective normal force N' at an active slice base with friction (the shear
        strength would fall with it). Makes the result inadmissible.
    thrust_outside : ndarray of bool (n_surfaces,)
        The line of thrust leaves the sliding mass at an interior boundary where |E| is at
        least THRUST_LINE_MIN_FORCE_RATIO of its largest value (Spencer and Morgenstern-Price,
        converged results only). A warning: the result stays admissible.
    beyond_correction_chart : ndarray of bool (n_surfaces,)
        Janbu's correction factor f0 was held at its value at the end of the chart (d/L
        beyond JANBU_CHART_MAX_RATIO). A warning; False for the other methods.
    """

    fos: np.ndarray
    last_iterate: np.ndarray
    converged: np.ndarray
    admissible: np.ndarray
    iterations: np.ndarray
    residual: np.ndarray
    lambda_: np.ndarray
    method: str
    message: tuple
    normal_force: np.ndarray
    shear_force: np.ndarray
    m_alpha: np.ndarray
    interslice_normal: np.ndarray
    interslice_shear: np.ndarray
    thrust_line_y: np.ndarray
    interslice_water: np.ndarray
    active: np.ndarray
    low_m_alpha: np.ndarray
    negative_normal: np.ndarray
    thrust_outside: np.ndarray
    beyond_correction_chart: np.ndarray

    @property
    def n_surfaces(self) -> int:
        return self.fos.shape[0]

    def surface(self, index: int) -> SurfaceSafety:
        """The result for one surface, per-slice arrays restricted to its active slices."""
        active = self.active[index]
        # Boundaries of the active slices: from the left edge of the first to the right edge
        # of the last (active slices are contiguous).
        keep_boundary = np.zeros(active.size + 1, dtype=bool)
        if active.any():
            first = int(np.argmax(active))
            last = active.size - 1 - int(np.argmax(active[::-1]))
            keep_boundary[first : last + 2] = True
        return SurfaceSafety(
            fos=float(self.fos[index]),
            last_iterate=float(self.last_iterate[index]),
            converged=bool(self.converged[index]),
            admissible=bool(self.admissible[index]),
            iterations=int(self.iterations[index]),
            residual=float(self.residual[index]),
            lambda_=float(self.lambda_[index]),
            method=self.method,
            message=self.message[index],
            normal_force=self.normal_force[index, active],
            shear_force=self.shear_force[index, active],
            m_alpha=self.m_alpha[index, active],
            interslice_normal=self.interslice_normal[index, keep_boundary],
            interslice_shear=self.interslice_shear[index, keep_boundary],
            thrust_line_y=self.thrust_line_y[index, keep_boundary],
            interslice_water=self.interslice_water[index, keep_boundary],
            low_m_alpha=bool(self.low_m_alpha[index]),
            negative_normal=bool(self.negative_normal[index]),
            thrust_outside=bool(self.thrust_outside[index]),
            beyond_correction_chart=bool(self.beyond_correction_chart[index]),
        )


#: The boolean warning arrays of :class:`SafetyResult` (and fields of :class:`SurfaceSafety`).
WARNING_FLAGS = ("low_m_alpha", "negative_normal", "thrust_outside", "beyond_correction_chart")

#: The words of a result's message for negative N' at a frictional base.
NEGATIVE_NORMAL_NOTE = "negative effective normal force at a frictional slice base"


@dataclass(frozen=True)
class ScreeningResult:
    """What a critical-surface search needs of Bishop's method on many trial surfaces: the
    per-surface values and flags of :class:`SafetyResult`, without its per-slice tables and
    messages (see :func:`bishop_screening`).

    Attributes
    ----------
    fos, last_iterate, converged, admissible, iterations
        As in :class:`SafetyResult`.
    low_m_alpha : ndarray of bool (n_surfaces,)
        m_alpha <= :data:`solver.constants.M_ALPHA_MIN` at an active slice (at the last iterate).
    negative_normal : ndarray of bool (n_surfaces,)
        Negative effective normal force at an active frictional slice.
    any_active : ndarray of bool (n_surfaces,)
        The surface has at least one active slice.
    """

    fos: np.ndarray
    last_iterate: np.ndarray
    converged: np.ndarray
    admissible: np.ndarray
    iterations: np.ndarray
    low_m_alpha: np.ndarray
    negative_normal: np.ndarray
    any_active: np.ndarray


# --------------------------------------------------------------------------------------------
# Shared preparation


@dataclass(frozen=True)
class _Arrays:
    """Slice arrays with inactive slices zeroed (and their elevations carried over from the
    neighbouring active slice, so that boundary sums see no jump there)."""

    active: np.ndarray
    any_active: np.ndarray
    width: np.ndarray
    length: np.ndarray
    sin_a: np.ndarray
    cos_a: np.ndarray
    x: np.ndarray
    y_base: np.ndarray
    y_top: np.ndarray
    y_weight: np.ndarray
    weight: np.ndarray
    surcharge: np.ndarray
    cohesion: np.ndarray
    tan_phi: np.ndarray
    pore_pressure: np.ndarray
    kh_weight: np.ndarray
    top_water: np.ndarray  # H_w
    top_water_y: np.ndarray
    crack_force: np.ndarray  # P_w on the first active slice, 0 elsewhere
    crack_y: np.ndarray  # (n_surfaces, 1)
    x_boundary: np.ndarray  # (n_surfaces, n_slices + 1)

    def take(self, index: np.ndarray) -> "_Arrays":
        """The arrays of a subset of surfaces (iterations work on the unfinished ones only)."""
        return _Arrays(**{f.name: getattr(self, f.name)[index] for f in fields(self)})

    # Derived arrays, computed once per batch (cached_property writes the instance __dict__,
    # which a frozen dataclass allows).
    @cached_property
    def vertical_load(self) -> np.ndarray:
        return self.weight + self.surcharge

    @cached_property
    def has_horizontal_load(self) -> bool:
        """Whether any slice carries a horizontal load (kh, ponded water, crack water)."""
        return bool(self.kh_weight.any() or self.top_water.any() or self.crack_force.any())

    @cached_property
    def horizontal_load(self) -> np.ndarray:
        """H = kh W_s + H_w + P_w [kN/m]."""
        return self.kh_weight + self.top_water + self.crack_force

    @cached_property
    def horizontal_load_moment(self) -> np.ndarray:
        """sum of H y_H over the horizontal loads of each slice [kN m/m]: their moment about
        y = 0, from which the moment about any elevation y_c is y_c H - (this)."""
        return (self.kh_weight * self.y_weight + self.top_water * self.top_water_y
                + self.crack_force * self.crack_y)

    @cached_property
    def side_water(self) -> np.ndarray:
        """U_j, the water force on every slice boundary [kN/m] (n_surfaces, n_slices + 1):
        hydrostatic from the piezometric head h_j interpolated between the bases of the two
        neighbouring slices (h = y_b + u / gamma_w),

            U_j = gamma_w / 2 [max(h_j - y_b,j, 0)^2 - max(h_j - y_g,j, 0)^2]

        with y_b,j the base and y_g,j the ground (mean of the neighbouring mid-points) at the
        boundary: the pressure integrated from the base up to the ground, or to the water
        level below it. 0 at the ends of the mass and next to padding. Exact for hydrostatic
        water (a submerged slope); elsewhere it defines which part of the interslice force the
        effective interslice forces exclude.
        """
        n, m = self.active.shape
        side = np.zeros((n, m + 1))
        if m < 2 or not np.any(self.pore_pressure):
            return side
        head = self.y_base + self.pore_pressure / GAMMA_W
        h = 0.5 * (head[:, :-1] + head[:, 1:])
        base = self.y_base[:, :-1] - 0.5 * self.width[:, :-1] * self.sin_a[:, :-1] / self.cos_a[:, :-1]
        ground = 0.5 * (self.y_top[:, :-1] + self.y_top[:, 1:])
        force = 0.5 * GAMMA_W * (np.maximum(h - base, 0.0) ** 2
                                 - np.maximum(h - np.maximum(ground, base), 0.0) ** 2)
        side[:, 1:-1] = np.where(self.active[:, :-1] & self.active[:, 1:], force, 0.0)
        return side

    @cached_property
    def effective_horizontal_load(self) -> np.ndarray:
        """H + U_i - U_{i+1}: the horizontal loads with the water forces on the slice sides,
        so that the interslice forces left to find are effective ones, E' = E - U.

        The U act at any elevation as far as the equilibrium of the whole mass goes (their
        moments cancel between neighbouring slices), so ``horizontal_load_moment`` needs no
        term for them.
        """
        return self.horizontal_load + self.side_water[:, :-1] - self.side_water[:, 1:]

    @cached_property
    def cohesion_term(self) -> np.ndarray:
        """K = c' l - u l tan(phi') [kN/m]."""
        return (self.cohesion - self.pore_pressure * self.tan_phi) * self.length

    @cached_property
    def cohesion_term_sin(self) -> np.ndarray:
        return self.cohesion_term * self.sin_a

    @cached_property
    def sin_tan_phi(self) -> np.ndarray:
        return self.sin_a * self.tan_phi


def _carry_index(active: np.ndarray) -> np.ndarray:
    """Column of the nearest active slice before each slice (or after it for leading
    padding): ``take_along_axis(values, index, 1)`` carries values over inactive slices."""
    n = active.shape[1]
    index = np.where(active, np.arange(n), -1)
    index = np.maximum.accumulate(index, axis=1)
    first = np.argmax(active, axis=1)[:, np.newaxis]
    return np.where(index < 0, first, index)


def _prepare(slices: Slices, carry: bool = True) -> _Arrays:
    """The arrays of a slice table; ``carry=False`` zeroes the elevations of padding slices
    instead of carrying them over (Bishop's screening multiplies them only by zero forces)."""
    active = np.asarray(slices.active, dtype=bool)
    any_active = active.any(axis=1)

    def zeroed(name: str) -> np.ndarray:
        return np.where(active, np.asarray(getattr(slices, name), dtype=float), 0.0)

    alpha = zeroed("alpha")
    width = zeroed("width")
    cos_a = np.cos(alpha)
    weight = zeroed("weight")
    crack_force = np.asarray(slices.crack_water_force, dtype=float)[:, np.newaxis]
    if np.any(crack_force != 0):
        first = active & (np.cumsum(active, axis=1) == 1)
        crack_force = np.where(first, crack_force, 0.0)
    else:
        crack_force = np.zeros(active.shape)
    seismic_weight = zeroed("seismic_weight")
    top_water = zeroed("top_water_horizontal")
    if carry:
        index = _carry_index(active)
        y_base = np.take_along_axis(np.asarray(slices.y_base, dtype=float), index, axis=1)
        y_top = np.take_along_axis(np.asarray(slices.y_top, dtype=float), index, axis=1)
    else:
        y_base, y_top = zeroed("y_base"), zeroed("y_top")
    x_left = np.asarray(slices.x_left, dtype=float)
    x_start = np.take_along_axis(x_left, np.argmax(active, axis=1)[:, np.newaxis], axis=1)
    x_boundary = x_start + np.concatenate(
        [np.zeros((width.shape[0], 1)), np.cumsum(width, axis=1)], axis=1
    )
    return _Arrays(
        active=active,
        any_active=any_active,
        width=width,
        length=width / cos_a,
        sin_a=np.sin(alpha),
        cos_a=cos_a,
        x=0.5 * (x_boundary[:, :-1] + x_boundary[:, 1:]),
        y_base=y_base,
        y_top=y_top,
        # The line of action of a zero load is irrelevant (and may be NaN).
        y_weight=np.where(active & (seismic_weight != 0), slices.y_weight, 0.0),
        weight=weight,
        surcharge=zeroed("surcharge"),
        cohesion=zeroed("cohesion"),
        tan_phi=zeroed("tan_phi"),
        pore_pressure=zeroed("pore_pressure"),
        kh_weight=float(slices.kh) * seismic_weight,
        top_water=top_water,
        top_water_y=np.where(top_water != 0, slices.y_top_water, 0.0),
        crack_force=crack_force,
        crack_y=np.asarray(slices.crack_water_y, dtype=float)[:, np.newaxis],
        x_boundary=x_boundary,
    )


def _validate_settings(tolerance: float, max_iterations: int) -> None:
    if (
        isinstance(tolerance, bool)
        or not isinstance(tolerance, numbers.Real)
        or not np.isfinite(tolerance)
        or tolerance <= 0
    ):
        raise MethodError(f"tolerance must be a positive finite number, got {tolerance!r}")
    if (
        isinstance(max_iterations, bool)
        or not isinstance(max_iterations, numbers.Integral)
        or max_iterations < 1
    ):
        raise MethodError(f"max_iterations must be a positive integer, got {max_iterations!r}")


def _moment_centre(slices: Slices) -> tuple[np.ndarray, np.ndarray]:
    """Circle centre for circles, otherwise the moment point chosen by slicing; (n, 1) each."""
    circle = np.isfinite(slices.centre_x) & np.isfinite(slices.centre_y)
    xc = np.where(circle, slices.centre_x, slices.moment_x)
    yc = np.where(circle, slices.centre_y, slices.moment_y)
    return np.asarray(xc, dtype=float)[:, np.newaxis], np.asarray(yc, dtype=float)[:, np.newaxis]


def _m_alpha_floor(s: _Arrays) -> np.ndarray:
    """F* = max(-tan(a) tan(phi')): m_alpha > 0 at every slice exactly when F > F*.

    Below F* the normal force of some slice changes sign through a pole; Bishop's and Janbu's
    iterations are kept above it so that they cannot settle on that unphysical branch.
    """
    floor = -(s.sin_a / s.cos_a) * s.tan_phi
    return np.max(np.where(s.active, floor, 0.0), axis=1)


#: Above this F an iteration whose update stays undefined is given up (no driving load).
_FOS_GIVE_UP = 1e6


def _fixed_point(update, take, start, floor, tolerance, max_iterations) -> "_Progress":
    """Fixed-point iteration F <- update(take(index), F) of Bishop's and Janbu's methods.

    The passes work on a compacted copy (``take``) of the unfinished surfaces, renewed when
    half of them have finished. The iteration is kept above the floor F* (half-way from the
    old F down to it when the update falls below), F is doubled when the update is undefined
    (no positive driving term, which happens next to the pole), and an update that moves
    further than the previous one is halved (damps the oscillation of steep surfaces).
    Convergence is judged on the undamped update, so that neither the floor nor the damping
    can pass for it. A surface whose last update was undefined gets F = NaN.
    """
    progress = _Progress(start, tolerance, max_iterations)
    previous = np.full_like(progress.fos, np.inf)
    work = np.arange(progress.fos.size)
    subset = take(slice(None))  # views, no copy, until half of the surfaces have finished
    for _ in range(max_iterations):
        index = np.flatnonzero(progress.running)
        if index.size == 0:
            break
        if index.size < 0.5 * work.size:
            work, subset = index, take(index)
        with np.errstate(all="ignore"):
            raw = update(subset, progress.fos[work])[np.searchsorted(work, index)]
        old = progress.fos[index]
        defined = np.isfinite(raw)
        change = np.where(defined, np.abs(raw - old), np.inf)
        damped = np.where(change > previous[index], 0.5 * (old + raw), raw)
        new = np.where(damped > floor[index], damped, 0.5 * (old + floor[index]))
        new = np.where(defined, new, 2.0 * old)
        change = np.where(~defined & (new > _FOS_GIVE_UP), np.nan, change)
        previous[index] = np.where(defined, change, np.inf)
        progress.fos[index] = new
        progress.step(index, change)
    progress.fos = np.where(np.isfinite(progress.residual), progress.fos, np.nan)
    return progress


def _base_forces(s: _Arrays, fos: np.ndarray, delta_x: np.ndarray | float = 0.0):
    """Total normal force N, effective N' and shear capacity S_r from vertical equilibrium.

    N = [W + Q - dX - (c' l - u l tan(phi')) sin(a) / F] / m_alpha,
    S_r = c' l + N' tan(phi') = (c' l - u l tan(phi')) + N tan(phi')

    (inactive slices have W = Q = 0 and alpha = 0, so N = 0 there).
    """
    f = fos[:, np.newaxis]
    m_alpha = s.cos_a + s.sin_tan_phi / f
    with np.errstate(divide="ignore", invalid="ignore"):
        normal = (s.vertical_load - delta_x - s.cohesion_term_sin / f) / m_alpha
    capacity = s.cohesion_term + normal * s.tan_phi
    effective = normal - s.pore_pressure * s.length
    return normal, effective, capacity, m_alpha


@dataclass(frozen=True)
class _Moment:
    """Lever arms about the moment centre and the driving moment of the applied loads."""

    shear_arm: np.ndarray  # r_S
    normal_arm: np.ndarray  # a_N
    load_moment: np.ndarray  # (n,) driving moment of W, Q and the horizontal loads H

    def take(self, index: np.ndarray) -> "_Moment":
        return _Moment(self.shear_arm[index], self.normal_arm[index], self.load_moment[index])


def _moment_terms(s: _Arrays, xc: np.ndarray, yc: np.ndarray) -> _Moment:
    dx = s.x - xc
    dy = s.y_base - yc
    load = -dx * s.vertical_load
    if s.has_horizontal_load or not np.isfinite(yc).all():
        load = load + yc * s.horizontal_load - s.horizontal_load_moment
    load = np.sum(load, axis=1)
    return _Moment(
        shear_arm=-dx * s.sin_a - dy * s.cos_a,
        normal_arm=dx * s.cos_a - dy * s.sin_a,
        load_moment=load,
    )


def _moment_fos(s: _Arrays, moment: _Moment, normal, capacity) -> np.ndarray:
    """F from moment equilibrium (module docstring)."""
    resisting = np.sum(capacity * moment.shear_arm, axis=1)
    driving = moment.load_moment + np.sum(normal * moment.normal_arm, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(driving > 0, resisting / driving, np.nan)


def _force_fos(s: _Arrays, normal, capacity) -> np.ndarray:
    """F from horizontal force equilibrium of the whole mass with X = 0:
    F = sum(S_r cos(a)) / [sum(N sin(a)) + sum(H)]."""
    resisting = np.sum(capacity * s.cos_a, axis=1)
    driving = np.sum(normal * s.sin_a + s.horizontal_load, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(driving > 0, resisting / driving, np.nan)


def _horizontal_interslice(s: _Arrays, normal, shear) -> np.ndarray:
    """E at the boundaries from horizontal equilibrium of each slice with E_0 = 0."""
    delta_e = s.horizontal_load + normal * s.sin_a - shear * s.cos_a
    return np.concatenate([np.zeros((delta_e.shape[0], 1)), np.cumsum(delta_e, axis=1)], axis=1)


# --------------------------------------------------------------------------------------------
# Iteration bookkeeping


class _Progress:
    """Per-surface state of a fixed-point iteration: each surface stops when it converges or
    breaks down; the others carry on (computing all surfaces each pass is harmless)."""

    def __init__(self, start: np.ndarray, tolerance: float, max_iterations: int):
        self.fos = start.astype(float).copy()
        self.tolerance = tolerance
        self.max_iterations = max_iterations
        n = start.shape[0]
        self.done = ~np.isfinite(self.fos)
        self.converged = np.zeros(n, dtype=bool)
        self.iterations = np.zeros(n, dtype=int)
        self.residual = np.full(n, np.nan)

    @property
    def running(self) -> np.ndarray:
        return ~self.done

    def step(self, index: np.ndarray, change: np.ndarray) -> None:
        """Record one pass of the running surfaces ``index``, given |change| of their iterate
        (NaN: the iteration broke down; inf: no usable update this pass, but it may carry on).
        """
        self.iterations[index] += 1
        self.residual[index] = change
        newly = change < self.tolerance
        self.converged[index[newly]] = True
        self.done[index[newly | np.isnan(change)]] = True


def _iteration_messages(progress: _Progress, fos: np.ndarray, max_iterations: int) -> list[str]:
    messages = [""] * fos.shape[0]
    undefined = ~np.isfinite(fos) | (fos <= 0)
    for i in np.flatnonzero(undefined):
        messages[i] = ("no positive finite factor of safety (driving load not positive or "
                       "iteration broke down)")
    for i in np.flatnonzero(~undefined & ~progress.converged):
        messages[i] = (f"not converged within max_iterations={max_iterations} "
                       f"(last change {progress.residual[i]:.3g})")
    return messages


def _no_centre_messages(messages: list[str], xc: np.ndarray, yc: np.ndarray) -> list[str]:
    for i in np.flatnonzero(~np.isfinite(xc[:, 0] + yc[:, 0])):
        messages[i] = "no moment centre (centre_x/centre_y or moment_x/moment_y) for this surface"
    return messages


def _join(*parts: str) -> str:
    return "; ".join(p for p in parts if p)


def _finish(
    method: str,
    s: _Arrays,
    fos: np.ndarray,
    converged: np.ndarray,
    iterations: np.ndarray,
    residual: np.ndarray,
    messages: list[str],
    *,
    normal: np.ndarray,
    effective: np.ndarray,
    capacity: np.ndarray,
    shear_fos: np.ndarray,
    m_alpha: np.ndarray | None,
    interslice_normal: np.ndarray,
    interslice_shear: np.ndarray,
    lambda_: np.ndarray | None = None,
    thrust_line_y: np.ndarray | None = None,
    thrust_outside: np.ndarray | None = None,
    beyond_correction_chart: np.ndarray | None = None,
) -> SafetyResult:
    """Common checks and flags, then the result object."""
    n = fos.shape[0]
    bad_fos = ~np.isfinite(fos) | (fos <= 0)
    last_iterate = np.where(bad_fos, np.nan, fos)
    converged = converged & ~bad_fos
    with np.errstate(divide="ignore", invalid="ignore"):
        shear = np.where(s.active, capacity / shear_fos[:, np.newaxis], 0.0)

    # Negative N' matters only where friction acts: it would make the shear strength fall.
    tension = np.any(s.active & (effective < 0) & (s.tan_phi > 0), axis=1)
    if m_alpha is not None:
        low_m_alpha = np.any(s.active & (m_alpha <= M_ALPHA_MIN), axis=1)
        min_m_alpha = np.min(np.where(s.active, m_alpha, np.inf), axis=1)
    else:
        low_m_alpha = np.zeros(n, dtype=bool)
        min_m_alpha = np.full(n, np.nan)
        m_alpha = np.full_like(normal, np.nan)
    if thrust_outside is None:
        thrust_outside = np.zeros(n, dtype=bool)
    if beyond_correction_chart is None:
        beyond_correction_chart = np.zeros(n, dtype=bool)

    final_messages = list(messages)
    flagged = low_m_alpha | tension | thrust_outside | ~s.any_active
    for i in np.flatnonzero(flagged):
        if not s.any_active[i]:
            final_messages[i] = "no active slice"
            continue
        final_messages[i] = _join(
            messages[i],
            f"m_alpha {min_m_alpha[i]:.3g} <= M_ALPHA_MIN={M_ALPHA_MIN} at a slice base"
            if low_m_alpha[i]
            else "",
            NEGATIVE_NORMAL_NOTE if tension[i] else "",
            "line of thrust outside the sliding mass" if thrust_outside[i] else "",
        )
    no_slice = ~s.any_active
    last_iterate = np.where(no_slice, np.nan, last_iterate)
    converged = converged & ~no_slice
    # A last iterate that did not converge is not a factor of safety: only converged
    # surfaces report one (scipy's root finders likewise flag, rather than hide, failure).
    fos = np.where(converged, last_iterate, np.nan)
    # A line of thrust outside the mass is reported in the message but does not make the
    # result inadmissible: it is a check of the reasonableness of the interslice forces, and
    # excluding such surfaces from a search could hide the critical one (common practice).
    admissible = converged & ~low_m_alpha & ~tension
    active = s.active
    effective = np.where(active, effective, 0.0)
    return SafetyResult(
        fos=fos,
        last_iterate=last_iterate,
        converged=converged,
        admissible=admissible,
        iterations=np.asarray(iterations, dtype=int),
        residual=np.asarray(residual, dtype=float),
        lambda_=np.full(n, np.nan) if lambda_ is None else lambda_,
        method=method,
        message=tuple(final_messages),
        normal_force=effective,
        shear_force=shear,
        m_alpha=np.where(active, m_alpha, np.nan),
        interslice_normal=interslice_normal,
        interslice_shear=interslice_shear,
        thrust_line_y=np.full_like(interslice_normal, np.nan)
        if thrust_line_y is None
        else thrust_line_y,
        interslice_water=s.side_water,
        active=active,
        low_m_alpha=low_m_alpha,
        negative_normal=tension,
        thrust_outside=thrust_outside,
        beyond_correction_chart=beyond_correction_chart,
    )


# --------------------------------------------------------------------------------------------
# The methods


def ordinary(slices: Slices, *, side_water: bool = False) -> SafetyResult:
    r"""Ordinary method of slices (Fellenius 1936): moment equilibrium, interslice forces ignored.

    The base normal force balances the loads resolved normal to the base, and F follows from
    moment equilibrium about the circle centre (or the moment point of a non-circular surface):

    .. math::

        N = (W + Q)\cos\alpha - (H + U_i - U_{i+1}) \sin\alpha, \qquad N' = N - u\,l

        F = \frac{\sum (c' l + N' \tan\phi') R}{\sum W R \sin\alpha + \ldots}

    (on a circle of radius R; the general lever arms are in the module docstring): every load
    on the slice, vertical (W + Q) and horizontal (H = kh W_s + H_w + P_w: pseudo-static,
    ponded-water and crack-water forces), is resolved normal to its base.

    By default this is the conventional form of Fellenius (U = 0): all interslice forces,
    the water on the slice sides included, are ignored. It is known to be conservative with
    pore pressure, increasingly so as u rises (Whitman and Bailey 1967), and far too low on
    submerged slopes. With ``side_water=True`` only the effective interslice forces are
    ignored: the water forces U on the slice sides (hydrostatic from the base pore pressures,
    as for Spencer's method) stay in the balance. Where the water is hydrostatic this is the
    form N' = (W - u b) cos(alpha) of Turnbull and Hvorslev (1967) (from memory), preferred by
    Duncan, Wright and Brandon (2014, ch. 6), and a submerged slope gives the F of its buoyant
    unit weight.

    Parameters
    ----------
    slices : Slices
        Slice table ([m], [kN/m], [kPa], [rad] as documented in :mod:`solver.slices`).
    side_water : bool
        Keep the water forces on the slice sides (see above); default False, the method as
        Fellenius gave it.

    Returns
    -------
    SafetyResult
        ``iterations`` 0, ``lambda_`` NaN, interslice forces NaN.

    References
    ----------
    Fellenius, W. (1936). Calculation of the stability of earth dams. Transactions of the 2nd
    Congress on Large Dams, Washington, 4, 445-462.
    Whitman, R.V. and Bailey, W.A. (1967). Use of computers for slope stability analysis.
    Journal of the Soil Mechanics and Foundations Division, ASCE 93(SM4), 475-498.
    Turnbull, W.J. and Hvorslev, M.J. (1967). Special problems in slope stability. Journal of
    the Soil Mechanics and Foundations Division, ASCE 93(SM4), 499-528.
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
    2nd ed. Wiley, ch. 6.
    """
    if not isinstance(side_water, bool):
        raise MethodError(f"side_water must be True or False, got {side_water!r}")
    s = _prepare(slices)
    xc, yc = _moment_centre(slices)
    fos, normal, effective, capacity = _ordinary_forces(s, _moment_terms(s, xc, yc), side_water)
    n = fos.shape[0]
    nan_boundary = np.full((n, s.width.shape[1] + 1), np.nan)
    messages = [""] * n
    for i in np.flatnonzero(~(fos > 0)):
        messages[i] = "driving moment not positive"
    messages = _no_centre_messages(messages, xc, yc)
    return _finish(
        "ordinary", s, fos, np.isfinite(fos), np.zeros(n, dtype=int), np.zeros(n), messages,
        normal=normal, effective=effective, capacity=capacity, shear_fos=fos, m_alpha=None,
        interslice_normal=nan_boundary, interslice_shear=nan_boundary,
    )


def _ordinary_forces(s: _Arrays, moment: _Moment, side_water: bool = False):
    """F, N, N' and S_r of the ordinary method (see :func:`ordinary`)."""
    normal = s.vertical_load * s.cos_a
    if side_water:
        normal -= s.effective_horizontal_load * s.sin_a
    elif s.has_horizontal_load:
        normal -= s.horizontal_load * s.sin_a
    normal = np.where(s.active, normal, 0.0)
    effective = normal - s.pore_pressure * s.length
    capacity = s.cohesion * s.length + effective * s.tan_phi
    return _moment_fos(s, moment, normal, capacity), normal, effective, capacity


def _starting_fos(s: _Arrays, moment: _Moment) -> np.ndarray:
    """A positive starting value: the ordinary method where it gives one, else 1."""
    with np.errstate(all="ignore"):
        # The conventional form: a starting value needs no side water forces.
        start = _ordinary_forces(s, moment, side_water=False)[0]
    return np.where(np.isfinite(start) & (start > 0.05), start, 1.0)


class _BishopUpdate:
    """One pass of Bishop's iteration over a set of surfaces, from arrays computed once.

    The update is that of :func:`_base_forces` and :func:`_moment_fos` with X = 0, with the
    F-independent part of the resisting moment summed in advance::

        m_alpha = cos(a) + sin(a) tan(phi') / F,   N = (W + Q - K sin(a) / F) / m_alpha,
        F = [sum(K r_S) + sum(N tan(phi') r_S)] / [M_loads + sum(N a_N)]

    (K = c' l - u l tan(phi')); both sums over N come from one ``vecdot`` per pass, and the
    per-slice work writes into two scratch arrays instead of allocating temporaries.
    """

    def __init__(self, cos_a, sin_tan_phi, vertical_load, cohesion_term_sin, arms,
                 cohesion_moment, load_moment):
        self.cos_a = cos_a
        self.sin_tan_phi = sin_tan_phi
        self.vertical_load = vertical_load
        self.cohesion_term_sin = cohesion_term_sin
        self.arms = arms  # (n, 2, n_slices): tan(phi') r_S and a_N
        self.cohesion_moment = cohesion_moment  # (n,) sum(K r_S)
        self.load_moment = load_moment  # (n,) M_loads
        self._m_alpha = np.empty(cos_a.shape)
        self._normal = np.empty(cos_a.shape)

    @classmethod
    def of(cls, s: _Arrays, moment: _Moment) -> "_BishopUpdate":
        arms = np.empty((s.tan_phi.shape[0], 2, s.tan_phi.shape[1]))
        np.multiply(s.tan_phi, moment.shear_arm, out=arms[:, 0])
        arms[:, 1] = moment.normal_arm
        return cls(s.cos_a, s.sin_tan_phi, s.vertical_load, s.cohesion_term_sin, arms,
                   np.sum(s.cohesion_term * moment.shear_arm, axis=1), moment.load_moment)

    def take(self, index) -> "_BishopUpdate":
        """The update of a subset of the surfaces (the unfinished ones)."""
        return _BishopUpdate(self.cos_a[index], self.sin_tan_phi[index],
                             self.vertical_load[index], self.cohesion_term_sin[index],
                             self.arms[index], self.cohesion_moment[index],
                             self.load_moment[index])

    def __call__(self, fos: np.ndarray) -> np.ndarray:
        f = fos[:, np.newaxis]
        m_alpha = np.divide(self.sin_tan_phi, f, out=self._m_alpha)
        m_alpha += self.cos_a
        normal = np.divide(self.cohesion_term_sin, f, out=self._normal)
        np.subtract(self.vertical_load, normal, out=normal)
        normal /= m_alpha
        sums = np.vecdot(normal[:, np.newaxis, :], self.arms)
        resisting = self.cohesion_moment + sums[:, 0]
        driving = self.load_moment + sums[:, 1]
        return np.where(driving > 0, resisting / driving, np.nan)


def _bishop_iteration(s: _Arrays, moment: _Moment, tolerance, max_iterations) -> "_Progress":
    floor = _m_alpha_floor(s)
    start = np.maximum(_starting_fos(s, moment), 1.1 * floor)
    centred = np.isfinite(moment.load_moment)
    start = np.where(centred & s.any_active, start, np.nan)
    passes = _BishopUpdate.of(s, moment)

    def update(subset, fos):
        return subset(fos)

    return _fixed_point(update, passes.take, start, floor, tolerance, max_iterations)


def bishop_simplified(
    slices: Slices,
    *,
    tolerance: float = FOS_TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> SafetyResult:
    r"""Bishop's simplified method (Bishop 1955): moment equilibrium, interslice shear X = 0.

    N from vertical equilibrium of each slice, F from moment equilibrium about the circle
    centre; on a circle of radius R with no external loads this is Bishop's equation

    .. math::

        F = \frac{\sum [c' b + (W - u b)\tan\phi'] / m_\alpha}{\sum W \sin\alpha},
        \qquad m_\alpha = \cos\alpha\,(1 + \tan\alpha \tan\phi' / F)

    solved by fixed-point iteration. Surcharge, pseudo-static and crack-water loads enter the
    moment equation with their own lever arms; on non-circular surfaces the moment is taken
    about ``moment_x, moment_y`` with the normal-force term of Fredlund and Krahn (1977).

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    tolerance : float
        Convergence tolerance on the change of F between iterations [-].
    max_iterations : int
        Iteration limit.

    Returns
    -------
    SafetyResult
        Flags m_alpha <= M_ALPHA_MIN (Whitman and Bailey 1967, as restated by Duncan, Wright and
        Brandon 2014) and negative N' at frictional bases.

    References
    ----------
    Bishop, A.W. (1955). The use of the slip circle in the stability analysis of slopes.
    Geotechnique 5(1), 7-17. doi:10.1680/geot.1955.5.1.7
    Fredlund, D.G. and Krahn, J. (1977). Comparison of slope stability methods of analysis.
    Canadian Geotechnical Journal 14(3), 429-439. doi:10.1139/t77-045
    """
    _validate_settings(tolerance, max_iterations)
    s = _prepare(slices)
    xc, yc = _moment_centre(slices)
    progress = _bishop_iteration(s, _moment_terms(s, xc, yc), tolerance, max_iterations)
    fos = progress.fos
    normal, effective, capacity, m_alpha = _base_forces(s, fos)
    shear = capacity / fos[:, np.newaxis]
    messages = _no_centre_messages(_iteration_messages(progress, fos, max_iterations), xc, yc)
    return _finish(
        "bishop_simplified", s, fos, progress.converged, progress.iterations, progress.residual,
        messages, normal=normal, effective=effective, capacity=capacity, shear_fos=fos,
        m_alpha=m_alpha, interslice_normal=_horizontal_interslice(s, normal, shear),
        interslice_shear=np.zeros_like(s.x_boundary),
    )


def bishop_screening(
    slices: Slices,
    *,
    tolerance: float = FOS_TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> ScreeningResult:
    """Bishop's simplified method for screening many trial surfaces in a search.

    The same iteration, convergence test and admissibility flags as
    :func:`bishop_simplified` (and so the same factors of safety), without the per-slice
    forces, interslice forces and messages that only the audit of a chosen surface needs.

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    tolerance : float
        Convergence tolerance on the change of F between iterations [-].
    max_iterations : int
        Iteration limit.

    Returns
    -------
    ScreeningResult

    References
    ----------
    Bishop, A.W. (1955). The use of the slip circle in the stability analysis of slopes.
    Geotechnique 5(1), 7-17. doi:10.1680/geot.1955.5.1.7
    """
    _validate_settings(tolerance, max_iterations)
    s = _prepare(slices, carry=False)
    xc, yc = _moment_centre(slices)
    progress = _bishop_iteration(s, _moment_terms(s, xc, yc), tolerance, max_iterations)
    fos = progress.fos
    # N' and m_alpha at the last iterate, for the flags of _finish.
    _, effective, _, m_alpha = _base_forces(s, fos)
    with np.errstate(invalid="ignore"):
        negative_normal = np.any(s.active & (effective < 0) & (s.tan_phi > 0), axis=1)
        low_m_alpha = np.any(s.active & (m_alpha <= M_ALPHA_MIN), axis=1)
    bad_fos = ~np.isfinite(fos) | (fos <= 0)
    last_iterate = np.where(bad_fos | ~s.any_active, np.nan, fos)
    converged = progress.converged & ~bad_fos & s.any_active
    return ScreeningResult(
        fos=np.where(converged, last_iterate, np.nan),
        last_iterate=last_iterate,
        converged=converged,
        admissible=converged & ~low_m_alpha & ~negative_normal,
        iterations=np.asarray(progress.iterations, dtype=int),
        low_m_alpha=low_m_alpha,
        negative_normal=negative_normal,
        any_active=s.any_active,
    )


def janbu_correction_factor(depth, length, b1):
    r"""Janbu's correction factor f0 for the simplified method (Janbu 1973).

    .. math::

        f_0 = 1 + b_1 \left[\frac{d}{L} - 1.4 \left(\frac{d}{L}\right)^2\right]

    with b1 = 0.69 for cohesion only (phi' = 0), 0.31 for friction only (c' = 0) and 0.50 for
    soils with both (Janbu 1973; the curve fit as given by Abramson et al. 2002). Janbu's
    chart stops at d/L = :data:`JANBU_CHART_MAX_RATIO` (0.4, from memory of the chart); beyond
    it f0 is held at its value there instead of following the fitted parabola, which falls
    again (common practice).

    Parameters
    ----------
    depth : float or array_like
        d, greatest depth of the sliding mass below the chord joining the ends of the slip
        surface, measured normal to the chord [m].
    length : float or array_like
        L, length of that chord [m].
    b1 : float or array_like
        Coefficient [-] (see :data:`JANBU_B1`).

    Returns
    -------
    float or ndarray
        f0 [-].

    References
    ----------
    Janbu, N. (1973). Slope stability computations. In Hirschfeld, R.C. and Poulos, S.J. (eds),
    Embankment-Dam Engineering, Casagrande Volume, Wiley, New York, 47-86.
    Abramson, L.W., Lee, T.S., Sharma, S. and Boyce, G.M. (2002). Slope Stability and
    Stabilization Methods, 2nd ed. Wiley, New York.
    """
    ratio = np.asarray(depth, dtype=float) / np.asarray(length, dtype=float)
    ratio = np.minimum(ratio, JANBU_CHART_MAX_RATIO)
    f0 = 1.0 + np.asarray(b1, dtype=float) * (ratio - 1.4 * ratio**2)
    return f0 if f0.ndim else float(f0)


def _janbu_geometry(slices: Slices, s: _Arrays) -> tuple[np.ndarray, np.ndarray]:
    """Chord length L and depth d of each slip surface (movement frame)."""
    # Base elevation at the ends of each slice: the base descends by tan(alpha) per metre.
    tan_a = s.sin_a / s.cos_a
    y_left = s.y_base + 0.5 * s.width * tan_a
    y_right = s.y_base - 0.5 * s.width * tan_a
    first = np.argmax(s.active, axis=1)[:, np.newaxis]
    last = (s.active.shape[1] - 1 - np.argmax(s.active[:, ::-1], axis=1))[:, np.newaxis]
    x0 = s.x_boundary[:, :1]
    x1 = s.x_boundary[:, -1:]
    y0 = np.take_along_axis(y_left, first, axis=1)
    y1 = np.take_along_axis(y_right, last, axis=1)
    length = np.hypot(x1 - x0, y1 - y0)
    with np.errstate(divide="ignore", invalid="ignore"):
        # Distance of each base mid-point below the chord, normal to it.
        depth = ((x1 - x0) * (y0 - s.y_base) - (y1 - y0) * (x0 - s.x)) / length
    depth = np.max(np.where(s.active, depth, 0.0), axis=1)
    return np.maximum(depth, 0.0), length[:, 0]


def janbu_simplified(
    slices: Slices,
    *,
    correction: bool = True,
    tolerance: float = FOS_TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> SafetyResult:
    r"""Janbu's simplified method (Janbu 1973): horizontal force equilibrium, X = 0.

    .. math::

        F_0 = \frac{\sum [c' b + (W - u b)\tan\phi'] / (\cos\alpha\, m_\alpha)}
                   {\sum W \tan\alpha}, \qquad F = f_0 F_0

    (shown without external loads; surcharge, pseudo-static and crack-water forces enter the
    force balance), solved by fixed-point iteration on F_0, then multiplied by Janbu's f0
    (:func:`janbu_correction_factor`) when ``correction`` is True. b1 is chosen per surface from
    the active slice bases: 0.69 if none has friction, 0.31 if none has cohesion, else 0.50.
    Where d/L exceeds the chart (:data:`JANBU_CHART_MAX_RATIO`), f0 is held at its value at
    the chart's end and the message says so.

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    correction : bool
        Apply Janbu's correction factor f0.
    tolerance : float
        Convergence tolerance on the change of F_0 between iterations [-].
    max_iterations : int
        Iteration limit.

    Returns
    -------
    SafetyResult
        ``fos`` is the corrected F; the per-slice forces are the equilibrium solution at F_0.

    References
    ----------
    Janbu, N. (1973). Slope stability computations. In Hirschfeld, R.C. and Poulos, S.J. (eds),
    Embankment-Dam Engineering, Casagrande Volume, Wiley, New York, 47-86.
    """
    _validate_settings(tolerance, max_iterations)
    s = _prepare(slices)
    floor = _m_alpha_floor(s)
    start = _starting_fos(s, _moment_terms(s, *_moment_centre(slices)))
    start = np.where(s.any_active, np.maximum(start, 1.1 * floor), np.nan)

    def update(sub, fos):
        normal, _, capacity, _ = _base_forces(sub, fos)
        return _force_fos(sub, normal, capacity)

    progress = _fixed_point(update, s.take, start, floor, tolerance, max_iterations)
    fos_0 = progress.fos
    normal, effective, capacity, m_alpha = _base_forces(s, fos_0)
    shear = capacity / fos_0[:, np.newaxis]
    fos = fos_0
    messages = _iteration_messages(progress, fos, max_iterations)
    if correction:
        depth, length = _janbu_geometry(slices, s)
        has_c = np.any(s.active & (s.cohesion > 0), axis=1)
        has_phi = np.any(s.active & (s.tan_phi > 0), axis=1)
        b1 = np.where(
            has_c & has_phi,
            JANBU_B1["cohesion_and_friction"],
            np.where(has_c, JANBU_B1["cohesion_only"], JANBU_B1["friction_only"]),
        )
        with np.errstate(divide="ignore", invalid="ignore"):
            fos = fos_0 * janbu_correction_factor(depth, length, b1)
            ratio = depth / length
        held = ratio > JANBU_CHART_MAX_RATIO
        for i in np.flatnonzero(held):
            messages[i] = _join(
                messages[i],
                f"d/L = {ratio[i]:.3g} is beyond Janbu's correction chart (d/L <= "
                f"{JANBU_CHART_MAX_RATIO}): f0 held at its d/L = {JANBU_CHART_MAX_RATIO} value",
            )
    return _finish(
        "janbu_simplified" if correction else "janbu_simplified_uncorrected",
        s, fos, progress.converged, progress.iterations, progress.residual,
        messages,
        normal=normal, effective=effective, capacity=capacity, shear_fos=fos_0, m_alpha=m_alpha,
        interslice_normal=_horizontal_interslice(s, normal, shear),
        interslice_shear=np.zeros_like(s.x_boundary),
        beyond_correction_chart=held if correction else None,
    )


# --------------------------------------------------------------------------------------------
# Spencer and Morgenstern-Price: the concise algorithm of Zhu et al. (2005)


def _interslice_function(s: _Arrays, name: str) -> np.ndarray:
    """f at every slice boundary, on s = (x - x_first) / (x_last - x_first)."""
    span = s.x_boundary[:, -1:] - s.x_boundary[:, :1]
    with np.errstate(divide="ignore", invalid="ignore"):
        position = np.where(span > 0, (s.x_boundary - s.x_boundary[:, :1]) / span, 0.0)
    return INTERSLICE_FUNCTIONS[name](position)


def _phi_terms(s: _Arrays, fos, lam, f_boundary):
    r"""Phi_i(f) = (sin a - lambda f cos a) tan phi' + (cos a + lambda f sin a) F for the
    left (f_i) and right (f_{i+1}) boundaries of every slice."""
    f = fos[:, np.newaxis]
    lf = lam[:, np.newaxis] * f_boundary

    def phi(lf_side):
        return (s.sin_a - lf_side * s.cos_a) * s.tan_phi + (s.cos_a + lf_side * s.sin_a) * f

    return phi(lf[:, :-1]), phi(lf[:, 1:])


def _driving_resisting(s: _Arrays, horizontal: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """T_i (loads along the base) and R_i (strength with the loads' normal component) of
    the vertical loads W + Q and the horizontal loads ``horizontal`` of every slice [kN/m]."""
    driving = s.vertical_load * s.sin_a + horizontal * s.cos_a
    resisting = s.cohesion_term + (
        s.vertical_load * s.cos_a - horizontal * s.sin_a
    ) * s.tan_phi
    return driving, resisting


def _transfer(left_phi: np.ndarray, right_phi: np.ndarray) -> np.ndarray:
    """psi_i = Phi_i(f_i) / Phi_{i-1}(f_i), psi_0 = 1 (unused: E_0 = 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        psi = left_phi[:, 1:] / right_phi[:, :-1]
    return np.concatenate([np.ones((psi.shape[0], 1)), psi], axis=1)


def _gle_force_fos(psi, driving, resisting) -> np.ndarray:
    r"""F from E_n = 0 (Zhu et al. 2005, Eq. 13 in this frame)

    F = sum_i R_i prod_{k>i} psi_k / sum_i T_i prod_{k>i} psi_k
    """
    tail = np.cumprod(psi[:, :0:-1], axis=1)[:, ::-1]  # prod_{k=i+1}^{n-1} psi_k for i < n-1
    tail = np.concatenate([tail, np.ones((psi.shape[0], 1))], axis=1)
    with np.errstate(invalid="ignore", over="ignore"):
        resisting_sum = np.sum(resisting * tail, axis=1)
        driving_sum = np.sum(driving * tail, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(driving_sum > 0, resisting_sum / driving_sum, np.nan)


def _gle_interslice_normal(psi, right_phi, driving, resisting, fos) -> np.ndarray:
    r"""E at the boundaries from the recursion E_{i+1} Phi_i(f_{i+1}) = E_i Phi_i(f_i) + F T_i - R_i
    with E_0 = 0, written as cumulative products: Z_{i+1} = psi_i Z_i + F T_i - R_i,
    Z_{i+1} = C_i cumsum((F T - R) / C)_i with C_i = prod_{k<=i} psi_k."""
    with np.errstate(all="ignore"):
        cumulative = np.cumprod(psi, axis=1)
        increment = fos[:, np.newaxis] * driving - resisting
        z = cumulative * np.cumsum(increment / cumulative, axis=1)
        e = z / right_phi
    return np.concatenate([np.zeros((e.shape[0], 1)), e], axis=1)


def _gle_moment_sums(s: _Arrays, e, f_boundary, horizontal) -> tuple[np.ndarray, np.ndarray]:
    r"""The two sums of the moment equation of the whole mass, taken as the sum of the slice
    moments about their base mid-points (Zhu et al. 2005, Eq. 17, in this frame)::

        lambda * sum_j f_j E_j (b_{j-1} + b_j) / 2
            = sum_j E_j (y_{b,j-1} - y_{b,j}) + sum_i sum_H H (y_H - y_b,i)

    over the interior boundaries j (E_0 = E_n = 0). Returns (right side, sum on the left).
    """
    # Only boundaries between two active slices: E_n (zero at the solution) and padding stay out.
    interior = np.where(s.active[:, :-1] & s.active[:, 1:], e[:, 1:-1], 0.0)
    numerator = (
        np.sum(interior * (s.y_base[:, :-1] - s.y_base[:, 1:]), axis=1)
        + np.sum(s.horizontal_load_moment - horizontal * s.y_base, axis=1)
    )
    denominator = np.sum(
        f_boundary[:, 1:-1] * interior * 0.5 * (s.width[:, :-1] + s.width[:, 1:]), axis=1
    )
    return numerator, denominator


def _thrust_line(s: _Arrays, e, x_shear):
    r"""Elevation of the line of thrust at the boundaries from the moment of each slice about
    its base mid-point::

        E_{i+1} y_{t,i+1} = E_i y_{t,i} + y_b (E_{i+1} - E_i) - b (X_i + X_{i+1}) / 2
                            + sum_H H (y_H - y_b)

    Returns the elevations and a flag per surface when the line leaves the sliding mass at an
    interior boundary where |E| >= THRUST_LINE_MIN_FORCE_RATIO * max |E|.
    """
    delta_e = e[:, 1:] - e[:, :-1]
    moment_step = (
        s.y_base * delta_e
        - 0.5 * s.width * (x_shear[:, :-1] + x_shear[:, 1:])
        + s.horizontal_load_moment - s.horizontal_load * s.y_base
    )
    h = np.concatenate([np.zeros((e.shape[0], 1)), np.cumsum(moment_step, axis=1)], axis=1)
    largest = np.max(np.abs(e), axis=1, keepdims=True)
    meaningful = np.abs(e) >= THRUST_LINE_MIN_FORCE_RATIO * largest
    # Interslice forces that are round-off compared with the loads (identical slices of an
    # infinite slope) have no meaningful point of action.
    load = np.sum(s.vertical_load, axis=1, keepdims=True)
    meaningful &= largest > 1e-9 * load
    with np.errstate(divide="ignore", invalid="ignore"):
        y_thrust = np.where(meaningful, h / e, np.nan)
    # Base and ground at the interior boundaries: the base from the left slice's end, the
    # ground as the mean of the neighbouring mid-points.
    tan_a = s.sin_a / s.cos_a
    base = s.y_base[:, :-1] - 0.5 * s.width[:, :-1] * tan_a[:, :-1]
    top = 0.5 * (s.y_top[:, :-1] + s.y_top[:, 1:])
    y_inner = y_thrust[:, 1:-1]
    interior_active = s.active[:, :-1] & s.active[:, 1:]
    outside = interior_active & np.isfinite(y_inner) & ((y_inner < base) | (y_inner > top))
    return y_thrust, np.any(outside, axis=1)


@dataclass(frozen=True)
class _GleState:
    """Residuals of the two equilibrium conditions at (F, lambda).

    force = F - F_force(F, lambda), with F_force from E_n = 0 (Zhu et al. 2005, Eq. 13);
    moment = (moment imbalance) / (total load x length of the surface); phi_min = the smallest
    Phi_i / F at an active slice (a sign change means a pole of the recursion was crossed).
    """

    force: np.ndarray
    moment: np.ndarray
    phi_min: np.ndarray

    @property
    def norm(self) -> np.ndarray:
        return np.hypot(self.force, self.moment)

    def take(self, index) -> "_GleState":
        return _GleState(self.force[index], self.moment[index], self.phi_min[index])

    def put(self, index, other: "_GleState") -> None:
        """Write ``other`` into the entries ``index`` (in place: the arrays are owned)."""
        self.force[index] = other.force
        self.moment[index] = other.moment
        self.phi_min[index] = other.phi_min


class _Gle:
    """Spencer / Morgenstern-Price equations of one batch of surfaces, on total interslice
    forces (``effective=False``) or on effective ones, E' = E - U (``effective=True``)."""

    def __init__(self, s: _Arrays, f_boundary: np.ndarray, effective: bool):
        self.s = s
        self.f_boundary = f_boundary
        self.effective = effective
        # The horizontal loads of each slice in the recursion: with effective interslice
        # forces the water forces U on the slice sides join them (H + U_i - U_{i+1}).
        self.horizontal = s.effective_horizontal_load if effective else s.horizontal_load
        self.driving, self.resisting = _driving_resisting(s, self.horizontal)
        span = s.x_boundary[:, -1] - s.x_boundary[:, 0]
        self.scale = np.sum(s.vertical_load, axis=1) * span

    def take(self, index: np.ndarray) -> "_Gle":
        return _Gle(self.s.take(index), self.f_boundary[index], self.effective)

    def total_interslice_normal(self, e: np.ndarray) -> np.ndarray:
        """Total E at the boundaries from the E of the recursion (E' + U when effective)."""
        return e + self.s.side_water if self.effective else e

    def interslice_normal(self, fos, lam) -> np.ndarray:
        left_phi, right_phi = _phi_terms(self.s, fos, lam, self.f_boundary)
        psi = _transfer(left_phi, right_phi)
        return _gle_interslice_normal(psi, right_phi, self.driving, self.resisting, fos)

    def state(self, fos, lam) -> _GleState:
        left_phi, right_phi = _phi_terms(self.s, fos, lam, self.f_boundary)
        psi = _transfer(left_phi, right_phi)
        force_fos = _gle_force_fos(psi, self.driving, self.resisting)
        e = _gle_interslice_normal(psi, right_phi, self.driving, self.resisting, fos)
        numerator, denominator = _gle_moment_sums(self.s, e, self.f_boundary, self.horizontal)
        with np.errstate(divide="ignore", invalid="ignore"):
            phi = np.minimum(left_phi, right_phi) / fos[:, np.newaxis]
            moment = (numerator - lam * denominator) / self.scale
        phi_min = np.min(np.where(self.s.active, phi, np.inf), axis=1)
        return _GleState(fos - force_fos, moment, phi_min)


def _newton_step(gle: _Gle, fos, lam, state: _GleState):
    """Newton step on the two residuals with a forward-difference Jacobian. Where the moment
    residual does not depend on lambda (no interslice force to incline, as on identical slices
    of an infinite slope) lambda is indeterminate: the step solves for F alone."""
    step_f = 1e-7 * np.maximum(np.abs(fos), 1.0)
    step_l = 1e-7 * np.maximum(np.abs(lam), 1.0)
    by_f = gle.state(fos + step_f, lam)
    by_l = gle.state(fos, lam + step_l)
    j11 = (by_f.force - state.force) / step_f
    j21 = (by_f.moment - state.moment) / step_f
    j12 = (by_l.force - state.force) / step_l
    j22 = (by_l.moment - state.moment) / step_l
    det = j11 * j22 - j12 * j21
    with np.errstate(divide="ignore", invalid="ignore"):
        d_fos = (-state.force * j22 + state.moment * j12) / det
        d_lam = (-state.moment * j11 + state.force * j21) / det
        # |j22| is the interslice shear moment per unit lambda over (load x length): below
        # 1e-9 the interslice forces are round-off and lambda has nothing to act on.
        singular = (
            ~np.isfinite(d_fos + d_lam)
            | (np.abs(det) <= 1e-12 * np.abs(j11 * j22))
            | (np.abs(j22) < 1e-9)
        )
        d_fos = np.where(singular, -state.force / j11, d_fos)
    d_lam = np.where(singular, 0.0, d_lam)
    return d_fos, d_lam


#: Step halvings tried by the line search of the Spencer / Morgenstern-Price Newton iteration.
_MAX_HALVINGS = 20


def _gle_solve(gle: _Gle, start: np.ndarray, tolerance: float, max_iterations: int):
    """(F, lambda) with force and moment equilibrium, by damped Newton iteration per surface.

    Each full Newton step is halved until the residual norm falls, F stays positive and no
    Phi_i changes sign (which would cross a pole of the force recursion to a spurious branch).
    A surface has converged when the full Newton step changes F and lambda by less than
    ``tolerance``; it breaks down when no halving is acceptable.
    """
    progress = _Progress(start, tolerance, max_iterations)
    lam = np.zeros_like(start)
    with np.errstate(all="ignore"):
        state = gle.state(np.where(progress.running, progress.fos, 1.0), lam)
    for _ in range(max_iterations):
        index = np.flatnonzero(progress.running)
        if index.size == 0:
            break
        sub = gle.take(index)
        fos, lam_now, now = progress.fos[index], lam[index], state.take(index)
        with np.errstate(all="ignore"):
            d_fos, d_lam = _newton_step(sub, fos, lam_now, now)
            change = np.maximum(np.abs(d_fos), np.abs(d_lam))
            # Trust region: F changes by at most half its value, lambda by at most 0.25.
            factor = np.minimum(
                1.0, np.minimum(0.5 * fos / np.abs(d_fos), 0.25 / np.abs(d_lam))
            )
        accepted = np.zeros(index.size, dtype=bool)
        pending = np.arange(index.size)
        for _ in range(_MAX_HALVINGS):
            trial_fos = fos[pending] + factor[pending] * d_fos[pending]
            trial_lam = lam_now[pending] + factor[pending] * d_lam[pending]
            with np.errstate(all="ignore"):
                trial = sub.take(pending).state(
                    np.where(trial_fos > 0, trial_fos, 1.0), trial_lam
                )
                ok = (
                    (trial_fos > 0)
                    & np.isfinite(trial.norm)
                    & ((trial.norm < now.norm[pending]) | (change[pending] < tolerance))
                    & ((trial.phi_min > 0) | (now.phi_min[pending] <= 0))
                )
            good = index[pending[ok]]
            progress.fos[good] = trial_fos[ok]
            lam[good] = trial_lam[ok]
            state.put(good, trial.take(ok))
            accepted[pending[ok]] = True
            pending = pending[~ok]
            if pending.size == 0:
                break
            factor[pending] *= 0.5
        progress.step(index, np.where(accepted, change, np.nan))
    broke = ~progress.converged & np.isnan(progress.residual)
    progress.fos = np.where(broke, np.nan, progress.fos)
    return progress, lam


#: Range [-] and step of lambda over which the force-equilibrium curve F_f(lambda) is traced
#: when the Newton iteration fails (|lambda| up to tan 63 deg; numerical settings).
TRACE_LAMBDA_MAX = 2.0
TRACE_LAMBDA_STEP = 0.05

#: Bisection halvings of the root of the force balance in F and of the crossing in lambda.
_BISECTIONS = 60


def _force_balance(gle: _Gle, fos: np.ndarray, lam: np.ndarray) -> np.ndarray:
    r"""The force equilibrium E_n = 0 without the poles of the recursion, normalised [-].

    Multiplying the recursion E_{i+1} b_i = E_i a_i + F T_i - R_i (a_i = Phi_i(f_i),
    b_i = Phi_i(f_{i+1}); :func:`morgenstern_price`) through by the products of the Phi gives

        E_n prod_k b_k = sum_i (F T_i - R_i) w_i,    w_i = prod_{k<i} b_k prod_{k>i} a_k,

    a polynomial in F and lambda, continuous where the recursion has a pole (some b_k = 0).
    Returned divided by sum_i (|F T_i| + |R_i|) |w_i| (the w_i are scaled in logarithms, so
    that long products neither overflow nor underflow). Its roots in F are the force-
    equilibrium factors of safety F_f(lambda); its sign is not that of E_n.
    """
    s = gle.s
    left, right = _phi_terms(s, fos, lam, gle.f_boundary)
    n = fos.shape[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        log_a, log_b = np.log(np.abs(left)), np.log(np.abs(right))
        # prod_{k<i} b_k and prod_{k>i} a_k, as logarithms and signs.
        zero = np.zeros((n, 1))
        before = np.concatenate([zero, np.cumsum(log_b, axis=1)[:, :-1]], axis=1)
        after = np.concatenate([np.cumsum(log_a[:, ::-1], axis=1)[:, ::-1][:, 1:], zero], axis=1)
        one = np.ones((n, 1))
        sign = (np.concatenate([one, np.cumprod(np.sign(right), axis=1)[:, :-1]], axis=1)
                * np.concatenate([np.cumprod(np.sign(left[:, ::-1]), axis=1)[:, ::-1][:, 1:],
                                  one], axis=1))
        log_w = before + after
        log_w = np.where(s.active, log_w, -np.inf)
        w = sign * np.exp(log_w - np.max(log_w, axis=1, keepdims=True))
        f = fos[:, np.newaxis]
        balance = np.sum((f * gle.driving - gle.resisting) * w, axis=1)
        size = np.sum((np.abs(f * gle.driving) + np.abs(gle.resisting)) * np.abs(w), axis=1)
        return balance / size


def _regular_interval(gle: _Gle, lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The interval (F_low, F_high) of F in which every Phi_i(f) > 0 at lambda [-].

    Phi = p + q F with p = (sin a - lambda f cos a) tan(phi'), q = cos a + lambda f sin a, at
    both sides of every active slice: F > -p / q where q > 0 and F < -p / q where q < 0. At
    lambda = 0, Phi = F m_alpha and F_low is the m_alpha floor F*. Empty when F_low >= F_high.
    """
    s = gle.s
    lf = lam[:, np.newaxis] * gle.f_boundary
    low = np.zeros(lam.shape[0])
    high = np.full(lam.shape[0], np.inf)
    for side in (lf[:, :-1], lf[:, 1:]):
        p = (s.sin_a - side * s.cos_a) * s.tan_phi
        q = s.cos_a + side * s.sin_a
        with np.errstate(divide="ignore", invalid="ignore"):
            bound = -p / q
        low = np.maximum(low, np.max(np.where(s.active & (q > 0), bound, 0.0), axis=1))
        high = np.minimum(high, np.min(np.where(s.active & (q < 0), bound, np.inf), axis=1))
        # q = 0 with p <= 0: Phi <= 0 whatever F.
        high = np.where(np.any(s.active & (q == 0) & (p <= 0), axis=1), 0.0, high)
    return low, high


def _force_root(gle: _Gle, lam, low, high, guess, points: int = 41) -> np.ndarray:
    """F_f(lambda): the root of :func:`_force_balance` nearest to ``guess`` (in log F) in
    [low, high] and where every Phi_i > 0 (:func:`_regular_interval`), bracketed on a
    logarithmic grid of ``points`` values and refined by bisection; NaN where the balance does
    not change sign there."""
    n = lam.shape[0]
    regular_low, regular_high = _regular_interval(gle, lam)
    low = np.maximum(low, regular_low * (1 + 1e-9) + 1e-12)
    high = np.minimum(high, regular_high * (1 - 1e-9))
    low, high = np.where(low < high, low, np.nan), np.where(low < high, high, np.nan)
    grid = np.exp(np.linspace(np.log(low), np.log(high), points, axis=1))  # (n, points)
    rows = np.repeat(np.arange(n), points)
    with np.errstate(all="ignore"):
        values = _force_balance(gle.take(rows), grid.ravel(), lam[rows]).reshape(n, points)
    change = np.sign(values[:, :-1]) * np.sign(values[:, 1:]) < 0
    middle = np.sqrt(grid[:, :-1] * grid[:, 1:])
    distance = np.where(change, np.abs(np.log(middle / guess[:, np.newaxis])), np.inf)
    cell = np.argmin(distance, axis=1)
    found = np.isfinite(distance[np.arange(n), cell])
    a = grid[np.arange(n), cell]
    b = grid[np.arange(n), cell + 1]
    value_a = values[np.arange(n), cell]
    for _ in range(_BISECTIONS):
        mid = 0.5 * (a + b)
        with np.errstate(all="ignore"):
            value = _force_balance(gle, mid, lam)
        same = np.sign(value) == np.sign(value_a)
        a, value_a = np.where(same, mid, a), np.where(same, value, value_a)
        b = np.where(same, b, mid)
    return np.where(found, 0.5 * (a + b), np.nan)


def _moment_balance(gle: _Gle, fos: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """The moment residual of :class:`_GleState` at (F, lambda) (NaN where F is NaN)."""
    with np.errstate(all="ignore"):
        return gle.state(np.where(np.isfinite(fos), fos, 1.0), lam).moment + 0.0 * fos


def _gle_trace(gle: _Gle, start: np.ndarray, floor: np.ndarray, tolerance: float,
               max_iterations: int):
    """(F, lambda, bracketed, steps) of the crossing of the force and moment equilibrium
    curves, found by tracing (Fredlund and Krahn 1977).

    F_f(lambda), the force-equilibrium F, is followed from lambda = 0 (the root of
    :func:`_force_balance` above the m_alpha floor F* nearest to ``start``) in steps of
    TRACE_LAMBDA_STEP each way up to TRACE_LAMBDA_MAX, each root taken as the one nearest to the
    previous within a factor of 2 (the same branch: along it no Phi_i changes sign). Moment
    equilibrium holds where the moment residual along that curve changes sign: where the
    force and moment curves F_f(lambda) and F_m(lambda) of Fredlund and Krahn cross. The
    bracket nearest to lambda = 0 is then halved until it is narrower than tolerance / 1000.
    Each step in |lambda| and each halving counts as one of ``max_iterations``.
    """
    n = start.shape[0]
    steps = min(int(round(TRACE_LAMBDA_MAX / TRACE_LAMBDA_STEP)), max_iterations)
    zero = np.zeros(n)
    low = np.maximum(floor * (1 + 1e-9), 1e-3)
    f0 = _force_root(gle, zero, low, np.maximum(100.0 * start, 10.0), start, points=201)
    m0 = _moment_balance(gle, f0, zero)
    best = np.full((n, 4), np.nan)  # lambda_a, F_a, lambda_b, F_b of the chosen bracket
    branches = {direction: (f0.copy(), m0.copy(), zero.copy(), np.isfinite(f0))
                for direction in (1.0, -1.0)}
    bracketed = np.zeros(n, dtype=bool)
    levels = np.zeros(n, dtype=int)  # steps in |lambda| taken by each surface
    for _ in range(steps):
        levels += ~bracketed
        # Both directions at each |lambda|: the bracket nearest to lambda = 0 wins.
        for direction, (fos, moment, lam, alive) in branches.items():
            index = np.flatnonzero(alive & ~bracketed)
            if index.size == 0:
                continue
            sub = gle.take(index)
            new_lam = lam[index] + direction * TRACE_LAMBDA_STEP
            new_fos = _force_root(sub, new_lam, fos[index] / 2, fos[index] * 2, fos[index])
            new_moment = _moment_balance(sub, new_fos, new_lam)
            crossed = np.isfinite(new_moment) & (np.sign(new_moment) != np.sign(moment[index]))
            take = index[crossed]
            best[take] = np.column_stack([lam[take], fos[take], new_lam[crossed],
                                          new_fos[crossed]])
            bracketed[take] = True
            lam[index], fos[index], moment[index] = new_lam, new_fos, new_moment
            alive[index] = np.isfinite(new_moment)
    lam_a, fos_a, lam_b, fos_b = best.T
    moment_a = _moment_balance(gle, fos_a, lam_a)
    bisections = np.zeros(n, dtype=int)
    for _ in range(max(max_iterations - int(levels.min(initial=0)), 0)):
        mid = 0.5 * (lam_a + lam_b)
        guess = 0.5 * (fos_a + fos_b)
        fos_mid = _force_root(gle, mid, np.minimum(fos_a, fos_b) / 1.5,
                              np.maximum(fos_a, fos_b) * 1.5, guess, points=9)
        moment_mid = _moment_balance(gle, fos_mid, mid)
        same = np.sign(moment_mid) == np.sign(moment_a)
        lost = ~np.isfinite(moment_mid)
        bracketed &= ~lost
        moving = (bracketed & (np.abs(lam_b - lam_a) > 1e-3 * tolerance)
                  & (levels + bisections < max_iterations))
        if not moving.any():
            break
        bisections += moving
        lam_a = np.where(moving & same, mid, lam_a)
        fos_a = np.where(moving & same, fos_mid, fos_a)
        moment_a = np.where(moving & same, moment_mid, moment_a)
        lam_b = np.where(moving & ~same, mid, lam_b)
        fos_b = np.where(moving & ~same, fos_mid, fos_b)
    lam = 0.5 * (lam_a + lam_b)
    fos = _force_root(gle, lam, np.minimum(fos_a, fos_b) / 1.01, np.maximum(fos_a, fos_b) * 1.01,
                      0.5 * (fos_a + fos_b), points=5)
    return (np.where(bracketed, fos, np.nan), np.where(bracketed, lam, np.nan), bracketed,
            levels + bisections)


def _inclined_m_alpha(s: _Arrays, fos, lam, f_boundary) -> np.ndarray:
    r"""m_alpha of Spencer's and Morgenstern-Price's slices: Bishop's m_alpha with the base
    inclination measured from the interslice force, theta = atan(lambda f) [-]:

        m_alpha = cos(alpha - theta) + sin(alpha - theta) tan(phi') / F
                = Phi_i(f) cos(theta) / F,

    the smaller of its values at the two sides of the slice (Phi_i of
    :func:`morgenstern_price`). It is Bishop's m_alpha where lambda f = 0 and vanishes where
    the base reaction at full mobilisation is parallel to the interslice force, at a pole of
    the force recursion; next to it the interslice forces grow without bound and F rests on
    that one slice. Our extension of the m_alpha criterion of Whitman and Bailey (1967) to
    inclined interslice forces (Bishop's m_alpha follows from it with theta = 0); on the kinked
    surfaces of the tests F of Spencer's method is far above Bishop's and Morgenstern-Price's
    (half-sine) wherever it falls below M_ALPHA_MIN.
    """
    left, right = _phi_terms(s, fos, lam, f_boundary)
    lf = lam[:, np.newaxis] * f_boundary
    cos_theta = 1.0 / np.sqrt(1.0 + lf**2)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.minimum(left * cos_theta[:, :-1], right * cos_theta[:, 1:]) / fos[:, np.newaxis]


def _retrace(gle: _Gle, index, start, progress: "_Progress", lam, messages, tolerance,
             max_iterations):
    """Solve the surfaces ``index`` by :func:`_gle_trace`; write F, lambda, the flags and the
    messages of those it solves (in place) and say why for those it does not."""
    sub = gle.take(index)
    fos, lam_traced, bracketed, steps = _gle_trace(sub, start[index], _m_alpha_floor(sub.s),
                                                   tolerance, max_iterations)
    with np.errstate(all="ignore"):
        force = _force_balance(sub, np.where(bracketed, fos, 1.0),
                               np.where(bracketed, lam_traced, 0.0))
        moment = _moment_balance(sub, fos, lam_traced)
    balanced = bracketed & (np.abs(force) <= tolerance) & (np.abs(moment) <= tolerance)
    solved = index[balanced]
    progress.fos[solved] = fos[balanced]
    lam[solved] = lam_traced[balanced]
    progress.converged[solved] = True
    progress.iterations[index] += steps
    progress.residual[solved] = np.maximum(np.abs(force), np.abs(moment))[balanced]
    for k in np.flatnonzero(~balanced):
        i = index[k]
        why = (f"equilibrium residuals {force[k]:.3g} (force) and {moment[k]:.3g} (moment) "
               "at the bracketed crossing" if bracketed[k] else
               "the force and moment equilibrium curves do not cross for |lambda| <= "
               f"{steps[k] * TRACE_LAMBDA_STEP:.3g} on the branch where every Phi_i > 0")
        messages[i] = _join(messages[i], f"traced over lambda: {why}")
    for i in solved:
        messages[i] = ""


def _general_limit_equilibrium(
    slices: Slices,
    name: str,
    method: str,
    interslice_force: str,
    tolerance: float,
    max_iterations: int,
) -> SafetyResult:
    _validate_settings(tolerance, max_iterations)
    if interslice_force not in INTERSLICE_FORCES:
        raise MethodError(
            f"interslice_force must be one of {', '.join(INTERSLICE_FORCES)}, "
            f"got {interslice_force!r}"
        )
    s = _prepare(slices)
    f_boundary = _interslice_function(s, name)
    gle = _Gle(s, f_boundary, effective=interslice_force == "effective")
    # Bishop's F is close to the solution on most surfaces (Fredlund and Krahn 1977).
    moment = _moment_terms(s, *_moment_centre(slices))
    bishop = _bishop_iteration(s, moment, tolerance, MAX_ITERATIONS).fos
    start = np.where(np.isfinite(bishop), bishop, _starting_fos(s, moment))
    start = np.where(s.any_active, start, np.nan)
    progress, lam = _gle_solve(gle, start, tolerance, max_iterations)
    # A small Newton step is not enough: where the step dropped the moment equation (lambda
    # indeterminate) force and moment equilibrium must both hold at the final (F, lambda).
    with np.errstate(all="ignore"):
        final = gle.state(np.where(np.isfinite(progress.fos), progress.fos, 1.0), lam)
    unbalanced = progress.converged & ~(
        (np.abs(final.force) <= tolerance) & (np.abs(final.moment) <= tolerance)
    )
    progress.converged = progress.converged & ~unbalanced
    messages = _iteration_messages(progress, progress.fos, max_iterations)
    for i in np.flatnonzero(unbalanced):
        messages[i] = (
            "equilibrium not satisfied at the final (F, lambda): force residual "
            f"{final.force[i]:.3g}, moment residual {final.moment[i]:.3g} of load x length "
            "(lambda could not be determined)"
        )
    # Where the Newton iteration failed (typically a pole of the recursion next to a steep
    # end of the surface, which its steps may not cross), trace the force-equilibrium curve
    # over lambda and bracket its crossing with the moment curve (Fredlund and Krahn 1977).
    retry = np.flatnonzero(s.any_active & ~progress.converged & np.isfinite(start))
    if retry.size:
        _retrace(gle, retry, start, progress, lam, messages, tolerance, max_iterations)
    fos = progress.fos
    # Per-slice forces at the final (F, lambda); E_n is left as computed so that it shows the
    # remaining force imbalance. X = lambda f E on the total interslice force, or on the
    # effective one E' = E - U; the total E is reported either way, and its line of thrust
    # checked.
    recursion_e = gle.interslice_normal(fos, lam)
    x_shear = lam[:, np.newaxis] * f_boundary * recursion_e
    e = gle.total_interslice_normal(recursion_e)
    normal, effective, capacity, _ = _base_forces(s, fos, x_shear[:, 1:] - x_shear[:, :-1])
    y_thrust, outside = _thrust_line(s, e, x_shear)
    m_alpha = _inclined_m_alpha(s, fos, lam, f_boundary)
    return _finish(
        method, s, fos, progress.converged, progress.iterations, progress.residual,
        messages,
        normal=normal, effective=effective, capacity=capacity, shear_fos=fos, m_alpha=m_alpha,
        interslice_normal=e, interslice_shear=x_shear,
        lambda_=np.where(np.isfinite(fos), lam, np.nan),
        thrust_line_y=y_thrust, thrust_outside=outside & progress.converged,
    )


def spencer(
    slices: Slices,
    *,
    interslice_force: str = "total",
    tolerance: float = FOS_TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> SafetyResult:
    r"""Spencer's method (Spencer 1967): force and moment equilibrium, parallel interslice forces.

    The interslice forces all have the inclination theta, X = lambda E with
    lambda = tan(theta) and E the total interslice normal force, as Spencer (1967) defined
    and tabulated the method (pore pressure as ru; Fredlund and Krahn 1977, Table 2, with ru
    and with a piezometric line). ``interslice_force="effective"`` applies the inclination
    to the effective force E' = E - U instead (see :func:`morgenstern_price`).
    F and lambda satisfy force equilibrium of every slice and moment equilibrium of the whole
    mass; they are found as in :func:`morgenstern_price` with f(x) = 1.

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    interslice_force : {"total", "effective"}
        The interslice force the inclination applies to (see :func:`morgenstern_price`).
    tolerance : float
        Convergence tolerance on the changes of F and lambda between iterations [-].
    max_iterations : int
        Iteration limit.

    Returns
    -------
    SafetyResult
        With ``lambda_`` and the line of thrust; flags a line of thrust outside the sliding mass,
        m_alpha <= M_ALPHA_MIN and negative N' at frictional bases.

    References
    ----------
    Spencer, E. (1967). A method of analysis of the stability of embankments assuming parallel
    inter-slice forces. Geotechnique 17(1), 11-26. doi:10.1680/geot.1967.17.1.11
    Fredlund, D.G. and Krahn, J. (1977). Comparison of slope stability methods of analysis.
    Canadian Geotechnical Journal 14(3), 429-439. doi:10.1139/t77-045
    Zhu, D.Y., Lee, C.F. et al. (2005). A concise algorithm for computing the factor of safety
    using the Morgenstern-Price method. Canadian Geotechnical Journal 42(1), 272-278.
    """
    return _general_limit_equilibrium(
        slices, "constant", "spencer", interslice_force, tolerance, max_iterations
    )


def morgenstern_price(
    slices: Slices,
    *,
    interslice: str = "half_sine",
    interslice_force: str = "total",
    tolerance: float = FOS_TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> SafetyResult:
    r"""Morgenstern and Price's method (1965): force and moment equilibrium, X = lambda f(x) E.

    Slice equilibrium normal and parallel to the base gives the recursion (Zhu et al. 2005)

    .. math::

        E_{i+1}\Phi_i(f_{i+1}) = E_i \Phi_i(f_i) + F T_i - R_i,

        \Phi_i(f) = (\sin\alpha_i - \lambda f \cos\alpha_i)\tan\phi'_i
                    + (\cos\alpha_i + \lambda f \sin\alpha_i) F

    with T_i the loads along the base and R_i = c' l - u l tan(phi') + (loads normal to the
    base) tan(phi'). E_0 = E_n = 0 gives F = sum R_i prod psi / sum T_i prod psi
    (psi_i = Phi_i(f_i) / Phi_{i-1}(f_i)); moment equilibrium of the whole mass gives lambda.
    Both residuals (F minus that force-equilibrium F, and the moment imbalance) are driven to
    zero together by Newton iteration with a forward-difference Jacobian, started from Bishop's
    F and lambda = 0; each step is halved until the residuals fall without a Phi_i changing
    sign (a pole of the recursion). Zhu et al. alternate the two updates instead; the joint
    step converged on far more steep, kinked surfaces in our trials. Converged when the Newton
    step changes F and lambda by less than ``tolerance``.

    Where the Newton iteration fails (its steps may not cross a pole of the recursion, where
    some Phi_i = 0 next to a steep end of the surface; or the sums above change sign under
    deep water), the force-equilibrium factor of safety F_f(lambda) is traced over lambda from
    0 on the branch where every Phi_i > 0, and the crossing with moment equilibrium bracketed
    and halved, as in the F-lambda plots of Fredlund and Krahn (1977); converged when both
    residuals are below ``tolerance`` there. Near such a pole F rests on one end slice and can
    lie far above the other methods: the m_alpha of these methods is measured from the
    interslice force inclination (``_inclined_m_alpha``), so that the ``low_m_alpha`` flag
    catches it.

    Interslice force. By default (``interslice_force="total"``) the function applies to the
    total interslice normal force E, as the method is defined (Morgenstern and Price 1965;
    Spencer 1967) and as Fredlund and Krahn (1977) tabulate it with pore pressure. With
    ``interslice_force="effective"`` it applies to the effective force, X = lambda f E' with
    E' = E - U and U the water force on the boundary (hydrostatic from the neighbouring base
    pore pressures, see ``_Arrays.side_water``); the recursion above is then written for E',
    with U_i - U_{i+1} among the loads of slice i. The reason for that form: water carries no
    shear, and with total forces the assumed inclination acts on the water force too, so the
    F of a submerged slope depends slightly on the depth of water standing over it, where it
    should be the F of the buoyant slope (Duncan, Wright and Brandon 2014, ch. 6, on the side
    force assumptions with external water). With pore pressure in the slope it gives higher F
    than the published total-force method (about 2% on circles at ru = 0.5, found in review),
    which is why it is not the default.

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    interslice : {"half_sine", "constant"}
        Interslice force function f(x) over the length of the surface; "constant" is Spencer's
        method.
    interslice_force : {"total", "effective"}
        The interslice normal force the function applies to: total E (default) or E - U.
    tolerance : float
        Convergence tolerance on the changes of F and lambda between iterations [-].
    max_iterations : int
        Iteration limit.

    Returns
    -------
    SafetyResult
        As for :func:`spencer`.

    References
    ----------
    Morgenstern, N.R. and Price, V.E. (1965). The analysis of the stability of general slip
    surfaces. Geotechnique 15(1), 79-93. doi:10.1680/geot.1965.15.1.79
    Spencer, E. (1967). A method of analysis of the stability of embankments assuming parallel
    inter-slice forces. Geotechnique 17(1), 11-26. doi:10.1680/geot.1967.17.1.11
    Fredlund, D.G. and Krahn, J. (1977). Comparison of slope stability methods of analysis.
    Canadian Geotechnical Journal 14(3), 429-439. doi:10.1139/t77-045
    Zhu, D.Y., Lee, C.F. et al. (2005). A concise algorithm for computing the factor of safety
    using the Morgenstern-Price method. Canadian Geotechnical Journal 42(1), 272-278.
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
    2nd ed. Wiley, ch. 6.
    """
    if interslice not in INTERSLICE_FUNCTIONS:
        raise MethodError(
            f"unknown interslice function {interslice!r}; valid: "
            + ", ".join(sorted(INTERSLICE_FUNCTIONS))
        )
    return _general_limit_equilibrium(
        slices, interslice, "morgenstern_price", interslice_force, tolerance, max_iterations
    )


# --------------------------------------------------------------------------------------------
# Dispatcher

_METHODS = {
    "ordinary": ordinary,
    "bishop_simplified": bishop_simplified,
    "janbu_simplified": janbu_simplified,
    "spencer": spencer,
    "morgenstern_price": morgenstern_price,
}

#: Names accepted by :func:`factor_of_safety`.
METHOD_NAMES = tuple(_METHODS)


def factor_of_safety(
    slices: Slices, method: str = "bishop_simplified", **options
) -> SafetyResult:
    """Factor of safety of every surface in ``slices`` by the named method.

    Parameters
    ----------
    slices : Slices
        Slice table (units in :mod:`solver.slices`).
    method : str
        One of :data:`METHOD_NAMES`.
    **options
        Keyword options of that method (``tolerance``, ``max_iterations``, ``correction``,
        ``interslice``).

    Returns
    -------
    SafetyResult

    Raises
    ------
    MethodError
        Unknown method (the message lists the valid names) or an option the method does not
        take.
    """
    try:
        function = _METHODS[method]
    except (KeyError, TypeError):
        raise MethodError(
            f"unknown method {method!r}; valid methods: {', '.join(METHOD_NAMES)}"
        ) from None
    accepted = [
        name
        for name, parameter in inspect.signature(function).parameters.items()
        if parameter.kind is inspect.Parameter.KEYWORD_ONLY
    ]
    unknown = sorted(set(options) - set(accepted))
    if unknown:
        raise MethodError(
            f"method {method!r} takes no option {', '.join(map(repr, unknown))}; "
            f"its options: {', '.join(accepted) or 'none'}"
        )
    return function(slices, **options)
