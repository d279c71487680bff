"""Conversions from what an instrument reports to the canonical quantities.

Piezometers end as ``pore_pressure_kpa`` (pore-water pressure at the tip [kPa]) and ``head_m``
(elevation of the piezometric level at the tip [m]); rain gauges as ``rain_mm`` (depth of rain
in the interval that ends at the reading time [mm]). Every function is pure and takes scalars or
numpy arrays (pandas Series work as arrays); missing inputs (NaN) give NaN.

The relation used throughout is hydrostatic pressure at the tip,

    u = gamma_w (h - z_tip)        h = z_tip + u / gamma_w

with gamma_w = 9.81 kN/m3 (``solver.constants.GAMMA_W``).
"""

from __future__ import annotations

import numpy as np

from solver.constants import GAMMA_W
from watch.config import Piezometer, RainGauge, VibratingWireCalibration

__all__ = [
    "head_from_pore_pressure",
    "pore_pressure_from_head",
    "head_from_depth_to_water",
    "vibrating_wire_linear",
    "vibrating_wire_polynomial",
    "vibrating_wire_pressure",
    "piezometer_values",
    "rain_from_interval",
    "rain_from_tips",
    "rain_from_cumulative",
    "rain_values",
]


def head_from_pore_pressure(pore_pressure_kpa, tip_elevation_m, gamma_w=GAMMA_W):
    """Piezometric level [m] from the pore pressure at the tip: h = z_tip + u / gamma_w.

    Parameters
    ----------
    pore_pressure_kpa : float or array
        Pore-water pressure at the tip [kPa].
    tip_elevation_m : float
        Elevation of the piezometer tip [m].
    gamma_w : float
        Unit weight of water [kN/m3].
    """
    return tip_elevation_m + np.asarray(pore_pressure_kpa, dtype=float) / gamma_w


def pore_pressure_from_head(head_m, tip_elevation_m, gamma_w=GAMMA_W):
    """Pore pressure at the tip [kPa] from the piezometric level: u = gamma_w (h - z_tip).

    Parameters
    ----------
    head_m : float or array
        Elevation of the piezometric level [m].
    tip_elevation_m : float
        Elevation of the piezometer tip [m].
    gamma_w : float
        Unit weight of water [kN/m3].
    """
    return gamma_w * (np.asarray(head_m, dtype=float) - tip_elevation_m)


def head_from_depth_to_water(depth_to_water_m, collar_elevation_m):
    """Piezometric level [m] from a dip below the collar: h = z_collar - d.

    Parameters
    ----------
    depth_to_water_m : float or array
        Depth of the water level below the collar (top of the standpipe) [m].
    collar_elevation_m : float
        Elevation of the collar [m].
    """
    return collar_elevation_m - np.asarray(depth_to_water_m, dtype=float)


def _corrections(temperature_c, barometric_kpa, calibration: VibratingWireCalibration):
    """K (T1 - T0) - (B1 - B0) [kPa]; a term is zero when the calibration does not use it."""
    correction = 0.0
    if calibration.needs_temperature:
        correction = calibration.temperature_factor * (
            np.asarray(temperature_c, dtype=float) - calibration.zero_temperature
        )
    if calibration.needs_barometric:
        correction = correction - (np.asarray(barometric_kpa, dtype=float) - calibration.zero_barometric)
    return correction


def vibrating_wire_linear(reading_digits, calibration, temperature_c=np.nan, barometric_kpa=np.nan):
    """Pressure [kPa] from a vibrating-wire reading with a linear calibration.

    p = G (R1 - R0) + K (T1 - T0) - (B1 - B0)

    Parameters
    ----------
    reading_digits : float or array
        Current reading R1 [digits] (digits = f^2 / 1000, f the wire frequency [Hz]).
    calibration : VibratingWireCalibration
        G [kPa/digit], R0 [digits], K [kPa/degC], T0 [degC], B0 [kPa].
    temperature_c : float or array
        Current temperature T1 [degC]; used when K is not zero.
    barometric_kpa : float or array
        Current barometric pressure B1 [kPa]; used when B0 is given.

    Notes
    -----
    Common practice: this is the manufacturer-neutral form printed on vibrating-wire
    calibration sheets; with the usual negative G the pressure rises as the wire slackens.
    """
    r1 = np.asarray(reading_digits, dtype=float)
    return calibration.gauge_factor * (r1 - calibration.zero_reading) + _corrections(
        temperature_c, barometric_kpa, calibration
    )


def vibrating_wire_polynomial(reading_digits, calibration, temperature_c=np.nan, barometric_kpa=np.nan):
    """Pressure [kPa] from a vibrating-wire reading with a second-order polynomial calibration.

    p = A R1^2 + B R1 + C + K (T1 - T0) - (B1 - B0)

    Parameters
    ----------
    reading_digits : float or array
        Current reading R1 [digits].
    calibration : VibratingWireCalibration
        ``polynomial = (A, B, C)`` [kPa/digit^2, kPa/digit, kPa], K [kPa/degC], T0 [degC],
        B0 [kPa].
    temperature_c, barometric_kpa : float or array
        Current temperature T1 [degC] and barometric pressure B1 [kPa].

    Notes
    -----
    Common practice (calibration-sheet form). C is usually set so that p = 0 at the zero
    reading R0 taken on site: C = -(A R0^2 + B R0).
    """
    a, b, c = calibration.polynomial
    r1 = np.asarray(reading_digits, dtype=float)
    return a * r1**2 + b * r1 + c + _corrections(temperature_c, barometric_kpa, calibration)


def vibrating_wire_pressure(reading_digits, calibration, temperature_c=np.nan, barometric_kpa=np.nan):
    """Dispatch on ``calibration.type`` ('linear' or 'polynomial'); see those functions."""
    if calibration.type == "linear":
        return vibrating_wire_linear(reading_digits, calibration, temperature_c, barometric_kpa)
    return vibrating_wire_polynomial(reading_digits, calibration, temperature_c, barometric_kpa)


def piezometer_values(piezometer: Piezometer, raw_value, temperature_c=np.nan, barometric_kpa=np.nan):
    """(pore_pressure_kpa, head_m) at the tip from the instrument's raw readings.

    Parameters
    ----------
    piezometer : Piezometer
        Reading type, tip elevation [m], collar elevation [m] and calibration.
    raw_value : float or array
        Raw reading in the unit of ``piezometer.reading`` (kPa, m, m below collar, digits).
    temperature_c, barometric_kpa : float or array
        Vibrating wire only: temperature [degC] and barometric pressure [kPa].
    """
    raw = np.asarray(raw_value, dtype=float)
    tip = piezometer.tip_elevation
    if piezometer.reading == "pore_pressure_kpa":
        pressure = raw
        return pressure, head_from_pore_pressure(pressure, tip)
    if piezometer.reading == "vibrating_wire":
        pressure = vibrating_wire_pressure(raw, piezometer.calibration, temperature_c, barometric_kpa)
        return pressure, head_from_pore_pressure(pressure, tip)
    if piezometer.reading == "head_m":
        head = raw
    else:  # depth_to_water_m
        head = head_from_depth_to_water(raw, piezometer.collar_elevation)
    return pore_pressure_from_head(head, tip), head


def rain_from_interval(depth_mm):
    """Rain [mm] of a gauge that reports the depth fallen in each interval: the value itself."""
    return np.asarray(depth_mm, dtype=float)


def rain_from_tips(tips, bucket_mm):
    """Rain [mm] from a count of tipping-bucket tips: tips x bucket size [mm per tip]."""
    return np.asarray(tips, dtype=float) * bucket_mm


def rain_from_cumulative(cumulative_mm, previous_mm=np.nan):
    """Rain [mm] per reading from a running total that the logger may reset to zero.

    rain_i = c_i - c_(i-1)   when c_i >= c_(i-1)
    rain_i = c_i             when c_i <  c_(i-1) (the total was reset, then rain fell)

    Parameters
    ----------
    cumulative_mm : array
        Running totals [mm] of one gauge in time order.
    previous_mm : float
        The total reported just before the first value (from the store); NaN when unknown,
        which makes the first rain value NaN (no baseline), never a guessed 0.
    """
    total = np.asarray(cumulative_mm, dtype=float)
    before = np.concatenate(([previous_mm], total[:-1]))
    step = total - before
    # A NaN total leaves the next step unknown as well: no silent reset after a gap.
    return np.where(step < 0, total, step)


def rain_values(gauge: RainGauge, raw_value, previous_raw=np.nan):
    """rain_mm from the raw values of one gauge in time order (see the functions above)."""
    if gauge.reporting == "interval_mm":
        return rain_from_interval(raw_value)
    if gauge.reporting == "tips":
        return rain_from_tips(raw_value, gauge.bucket_mm)
    return rain_from_cumulative(raw_value, previous_raw)
