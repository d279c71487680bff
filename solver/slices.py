"""The slice table: the one data structure that connects slicing (geometry) to the methods.

Every array has shape ``(n_surfaces, n_slices)`` so that many trial surfaces are solved at once;
per-surface quantities have shape ``(n_surfaces,)``. Surfaces with fewer real slices than
``n_slices`` are padded with zero-width slices whose ``active`` flag is False and whose weight,
strength and loads are zero, so they add nothing to any sum.

Frame of reference ("movement frame"): x increases in the direction the sliding mass moves, so
the crest is at small x and the toe at large x. Slicing mirrors a section whose slope faces the
other way and reports ``mirrored=True``; callers mirror x back for display. The base inclination
``alpha`` is positive where the base descends in the direction of movement (under the crest),
negative near the toe, so ``W sin(alpha)`` is the driving component of the weight
(Fredlund and Krahn 1977, Fig. 1 sign convention).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Slices:
    """Vertical slices of one or many trial slip surfaces.

    Attributes
    ----------
    x_left, x_right : ndarray (n_surfaces, n_slices)
        Slice boundaries [m], movement frame.
    alpha : ndarray
        Inclination of the slice base [rad], positive where the base descends in the
        direction of movement.
    y_base : ndarray
        Elevation of the slice base at the slice mid-point [m].
    y_top : ndarray
        Elevation of the ground surface at the slice mid-point [m].
    weight : ndarray
        Total vertical gravity load of the slice [kN/m], acting at the slice mid-point: soil of
        every stratum (moist above its water line, saturated below) plus the vertical part of
        the pressure of water ponded on the ground above it (gamma_w times the water area).
    y_weight : ndarray
        Elevation of the centroid of the soil weight (``seismic_weight``) [m]; the line of
        action of the pseudo-static force kh * W.
    cohesion : ndarray
        Cohesion at the base [kPa]: c' of a drained material, Su of an undrained one.
    tan_phi : ndarray
        tan(phi') at the base [-]; 0 for undrained materials.
    pore_pressure : ndarray
        Pore-water pressure at the base mid-point [kPa]; 0 for undrained (total stress)
        materials.
    surcharge : ndarray
        Resultant vertical external load on the top of the slice [kN/m] (strip surcharges and
        ponded water are included here or in ``weight``, never in both: ponded water is in
        ``weight``, strip surcharges here), acting at the slice mid-point.
    seismic_weight : ndarray
        Weight of the soil alone [kN/m] (``weight`` without ponded water), on which the
        pseudo-static force kh * W acts: free water above the ground moves with no inertial
        thrust on the slope in this model. Defaults to ``weight`` (hand-built tables without
        ponded water).
    top_water_horizontal : ndarray
        Horizontal part of the pressure of ponded water on the slice top [kN/m], positive in
        the direction of movement: gamma_w * (mean water depth) * (rise of the ground across
        the slice in the direction of movement). Negative on a face that descends in the
        direction of movement, where the water pushes the slope back. Defaults to 0.
    y_top_water : ndarray
        Elevation [m] at which the line of action of the water force on the slice top (normal
        to the ground, through the centroid of the water pressure along it) crosses the
        vertical through the slice mid-point: the vertical part (in ``weight``, at the
        mid-point) and the horizontal part at this elevation are together statically
        equivalent to the water pressure on the slice top. Defaults to ``y_top``.
    base_material : ndarray of int
        Index of the material at the slice base into ``Section.materials``; -1 when inactive.
    active : ndarray of bool
        False for padding slices of zero width.
    kh : float
        Pseudo-static horizontal seismic coefficient [-], force kh * ``seismic_weight`` in the
        direction of movement, at ``y_weight``.
    crack_water_force : ndarray (n_surfaces,)
        Horizontal thrust of water in the tension crack [kN/m], 0.5 * gamma_w * z_w**2, pushing
        the mass in the direction of movement; 0 when the crack is dry or absent.
    crack_water_y : ndarray (n_surfaces,)
        Elevation of that thrust's line of action [m] (one third of the water depth above the
        crack bottom).
    centre_x, centre_y, radius : ndarray (n_surfaces,)
        Circle centre [m] and radius [m] of circular surfaces, movement frame; NaN for
        non-circular surfaces. Moment methods on non-circular surfaces take their moment centre
        from ``moment_x, moment_y``.
    moment_x, moment_y : ndarray (n_surfaces,)
        Point about which moment equilibrium is taken [m]: the circle centre for circles, and a
        point above the surface (chosen by slicing) for polylines.
    mirrored : bool
        True when the section was mirrored (x -> -x) to put it into the movement frame.
    """

    x_left: np.ndarray
    x_right: np.ndarray
    alpha: np.ndarray
    y_base: np.ndarray
    y_top: np.ndarray
    weight: np.ndarray
    y_weight: np.ndarray
    cohesion: np.ndarray
    tan_phi: np.ndarray
    pore_pressure: np.ndarray
    surcharge: np.ndarray
    base_material: np.ndarray
    active: np.ndarray
    kh: float = 0.0
    seismic_weight: np.ndarray = field(default=None)  # type: ignore[assignment]
    top_water_horizontal: np.ndarray = field(default=None)  # type: ignore[assignment]
    y_top_water: np.ndarray = field(default=None)  # type: ignore[assignment]
    crack_water_force: np.ndarray = field(default=None)  # type: ignore[assignment]
    crack_water_y: np.ndarray = field(default=None)  # type: ignore[assignment]
    centre_x: np.ndarray = field(default=None)  # type: ignore[assignment]
    centre_y: np.ndarray = field(default=None)  # type: ignore[assignment]
    radius: np.ndarray = field(default=None)  # type: ignore[assignment]
    moment_x: np.ndarray = field(default=None)  # type: ignore[assignment]
    moment_y: np.ndarray = field(default=None)  # type: ignore[assignment]
    mirrored: bool = False

    def __post_init__(self) -> None:
        # Per-surface fields default to "no crack water" and "non-circular" so that hand-built
        # slice tables (tests, infinite-slope checks) need only the per-slice arrays.
        n = self.x_left.shape[0]
        nan = np.full(n, np.nan)
        for name, default in (
            ("crack_water_force", np.zeros(n)),
            ("crack_water_y", np.zeros(n)),
            ("centre_x", nan),
            ("centre_y", nan),
            ("radius", nan),
            ("moment_x", nan),
            ("moment_y", nan),
        ):
            if getattr(self, name) is None:
                object.__setattr__(self, name, default.copy())
        # Per-slice fields of ponded water default to "no ponded water".
        for name, default in (
            ("seismic_weight", self.weight),
            ("top_water_horizontal", np.zeros(np.shape(self.x_left))),
            ("y_top_water", self.y_top),
        ):
            if getattr(self, name) is None:
                object.__setattr__(self, name, np.array(default, dtype=float))

    @property
    def n_surfaces(self) -> int:
        return self.x_left.shape[0]

    @property
    def n_slices(self) -> int:
        return self.x_left.shape[1]

    @property
    def width(self) -> np.ndarray:
        """Slice width b [m]."""
        return self.x_right - self.x_left

    @property
    def x_mid(self) -> np.ndarray:
        """Slice mid-point [m]."""
        return 0.5 * (self.x_left + self.x_right)

    @property
    def base_length(self) -> np.ndarray:
        """Base length l = b / cos(alpha) [m]."""
        return self.width / np.cos(self.alpha)

    def select(self, index) -> "Slices":
        """The slice table of a subset of surfaces (any numpy index over the first axis)."""
        values = {}
        for name in self.__dataclass_fields__:
            value = getattr(self, name)
            if isinstance(value, np.ndarray):
                value = np.atleast_1d(value[index])
                if value.ndim == 1 and getattr(self, name).ndim == 2:
                    value = value[np.newaxis, :]
            values[name] = value
        return Slices(**values)
