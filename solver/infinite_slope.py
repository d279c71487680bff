"""Infinite-slope analysis of shallow translational slides (closed form)."""

from __future__ import annotations

import numpy as np

from solver.constants import GAMMA_W
from solver.errors import SectionError

__all__ = ["infinite_slope"]


def _check(name: str, values: np.ndarray, ok: np.ndarray, requirement: str) -> None:
    """Raise for values out of range; NaN (a missing data point) passes and gives NaN."""
    values, ok = np.broadcast_arrays(values, ok | np.isnan(values))
    if not ok.all():
        raise SectionError(f"{name} must be {requirement}, got {float(values[~ok][0])!r}")


def infinite_slope(
    slope_angle,
    depth,
    unit_weight,
    cohesion,
    friction_angle,
    water_depth=0.0,
    *,
    unit_weight_saturated=None,
    unit_weight_water: float = GAMMA_W,
):
    r"""Factor of safety of an infinite slope with seepage parallel to the slope.

    For a slip plane at vertical depth z parallel to a slope of inclination beta, with the
    water table at vertical height h_w above the plane and flow parallel to the slope, so that
    u = gamma_w h_w cos^2(beta) (Skempton and DeLory 1957; Duncan, Wright and Brandon 2014,
    ch. 6):

    .. math::

        F = \frac{c' + (\gamma z - \gamma_w h_w)\cos^2\beta\,\tan\phi'}
                 {\gamma z \sin\beta \cos\beta}

    With ``unit_weight_saturated`` the soil below the water table weighs gamma_sat and
    gamma z becomes gamma (z - h_w) + gamma_sat h_w in both places.

    Parameters
    ----------
    slope_angle : float or array_like
        beta, inclination of the slope and of the slip plane [deg], 0 < beta < 90.
    depth : float or array_like
        z, vertical depth of the slip plane below the ground [m], > 0.
    unit_weight : float or array_like
        gamma, total unit weight of the soil [kN/m3] (above the water table when
        ``unit_weight_saturated`` is given), > 0.
    cohesion : float or array_like
        c', effective cohesion on the slip plane [kPa], >= 0.
    friction_angle : float or array_like
        phi', effective angle of friction [deg], 0 <= phi' < 90.
    water_depth : float or array_like
        h_w, vertical height of the water table above the slip plane [m], 0 <= h_w <= z.
    unit_weight_saturated : float or array_like, optional
        gamma_sat, unit weight below the water table [kN/m3]; default ``unit_weight``.
    unit_weight_water : float
        gamma_w [kN/m3]; default :data:`solver.constants.GAMMA_W`.

    Returns
    -------
    float or ndarray
        F [-], a float for scalar inputs, an array (broadcast shape) otherwise.

    Raises
    ------
    SectionError
        A value out of range (the message gives it).

    References
    ----------
    Skempton, A.W. and DeLory, F.A. (1957). Stability of natural slopes in London Clay.
    Proceedings of the 4th International Conference on Soil Mechanics and Foundation
    Engineering, London, 2, 378-381.
    Duncan, J.M., Wright, S.G. and Brandon, T.L. (2014). Soil Strength and Slope Stability,
    2nd ed. Wiley, Hoboken, ch. 6.
    """
    beta_deg = np.asarray(slope_angle, dtype=float)
    z = np.asarray(depth, dtype=float)
    gamma = np.asarray(unit_weight, dtype=float)
    c = np.asarray(cohesion, dtype=float)
    phi_deg = np.asarray(friction_angle, dtype=float)
    h_w = np.asarray(water_depth, dtype=float)
    gamma_sat = gamma if unit_weight_saturated is None else np.asarray(
        unit_weight_saturated, dtype=float
    )
    _check("slope_angle", beta_deg, (beta_deg > 0) & (beta_deg < 90), "between 0 and 90 deg")
    _check("depth", z, z > 0, "positive [m]")
    _check("unit_weight", gamma, gamma > 0, "positive [kN/m3]")
    _check("unit_weight_saturated", gamma_sat, gamma_sat > 0, "positive [kN/m3]")
    _check("cohesion", c, c >= 0, "non-negative [kPa]")
    _check("friction_angle", phi_deg, (phi_deg >= 0) & (phi_deg < 90), "in [0, 90) deg")
    _check("water_depth", h_w, h_w >= 0, "non-negative [m]")
    _check("water_depth", h_w, (h_w <= z) | np.isnan(z), "at most the depth of the slip plane")

    beta = np.radians(beta_deg)
    vertical_stress = gamma * (z - h_w) + gamma_sat * h_w  # gamma z for one unit weight
    pore_pressure = unit_weight_water * h_w * np.cos(beta) ** 2
    normal_effective = vertical_stress * np.cos(beta) ** 2 - pore_pressure
    fos = (c + normal_effective * np.tan(np.radians(phi_deg))) / (
        vertical_stress * np.sin(beta) * np.cos(beta)
    )
    return fos if fos.ndim else float(fos)
