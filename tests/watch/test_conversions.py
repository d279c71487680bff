"""Conversions of raw readings, checked against hand calculations of the stated formulas."""

import numpy as np
import pandas as pd
import pytest

from solver.constants import GAMMA_W
from watch.config import Piezometer, RainGauge, VibratingWireCalibration
from watch.conversions import (
    head_from_depth_to_water,
    head_from_pore_pressure,
    piezometer_values,
    pore_pressure_from_head,
    rain_from_cumulative,
    rain_from_tips,
    rain_values,
    vibrating_wire_linear,
    vibrating_wire_polynomial,
)


def _piezometer(reading, calibration=None):
    return Piezometer(
        id="P1", section="S", offset=0.0, tip_elevation=47.0, collar_elevation=57.0,
        water_line="main", reading=reading, calibration=calibration,
    )  # fmt: skip


def test_head_from_pore_pressure_hand_calculation():
    # Hydrostatic pressure at the tip: h = z_tip + u / gamma_w = 47 + 98.1 / 9.81 = 57.0 m.
    assert head_from_pore_pressure(98.1, 47.0) == pytest.approx(57.0, rel=1e-12)
    # Scalar, array and pandas inputs alike.
    np.testing.assert_allclose(head_from_pore_pressure(np.array([0.0, 19.62]), 47.0), [47.0, 49.0], rtol=1e-12)
    np.testing.assert_allclose(head_from_pore_pressure(pd.Series([9.81]), 47.0), [48.0], rtol=1e-12)


def test_pore_pressure_from_head_is_the_inverse():
    # u = gamma_w (h - z_tip) = 9.81 * (50.5 - 47) = 34.335 kPa (hand calculation).
    assert pore_pressure_from_head(50.5, 47.0) == pytest.approx(34.335, rel=1e-12)
    heads = np.linspace(40.0, 60.0, 11)
    np.testing.assert_allclose(head_from_pore_pressure(pore_pressure_from_head(heads, 47.0), 47.0), heads, rtol=1e-12)


def test_depth_to_water_hand_calculation():
    # A dip of 3.2 m below a collar at 57.0 m: h = 53.8 m; u = 9.81 * (53.8 - 47) = 66.708 kPa.
    pressure, head = piezometer_values(_piezometer("depth_to_water_m"), 3.2)
    assert head == pytest.approx(53.8, rel=1e-12)
    assert pressure == pytest.approx(66.708, rel=1e-12)
    assert head_from_depth_to_water(0.0, 57.0) == pytest.approx(57.0, rel=1e-12)


def test_head_reading_hand_calculation():
    pressure, head = piezometer_values(_piezometer("head_m"), 49.0)
    assert head == pytest.approx(49.0, rel=1e-12)
    assert pressure == pytest.approx(2 * GAMMA_W, rel=1e-12)


# Common practice: the manufacturer-neutral vibrating-wire formula of docs/formats.md, as printed
# on calibration sheets; the numbers below are a hand calculation, not a published example.
LINEAR = VibratingWireCalibration(
    type="linear", gauge_factor=-0.1432, zero_reading=8750.0, temperature_factor=0.05,
    zero_temperature=12.0, zero_barometric=101.3,
)  # fmt: skip


def test_vibrating_wire_linear_worked_calibration():
    # p = G (R1 - R0) + K (T1 - T0) - (B1 - B0)
    #   = -0.1432 (8000 - 8750) + 0.05 (8 - 12) - (100.3 - 101.3) = 107.4 - 0.2 + 1.0 = 108.2 kPa
    assert vibrating_wire_linear(8000.0, LINEAR, 8.0, 100.3) == pytest.approx(108.2, rel=1e-12)
    # At the zero conditions the pressure is zero.
    assert vibrating_wire_linear(8750.0, LINEAR, 12.0, 101.3) == pytest.approx(0.0, abs=1e-12)


def test_vibrating_wire_without_barometric_correction():
    calibration = VibratingWireCalibration(type="linear", gauge_factor=-0.1432, zero_reading=8750.0)
    # No K, no B0: p = -0.1432 * (8000 - 8750) = 107.4 kPa, whatever T and B are.
    assert vibrating_wire_linear(8000.0, calibration) == pytest.approx(107.4, rel=1e-12)


def test_vibrating_wire_polynomial_worked_calibration():
    # A = 1e-6, B = -0.15, C = -(A R0^2 + B R0) with R0 = 8750: C = -(76.5625 - 1312.5) = 1235.9375
    # R1 = 8000: p = 64 - 1200 + 1235.9375 = 99.9375 kPa; T and B at their zero values.
    calibration = VibratingWireCalibration(
        type="polynomial", polynomial=(1e-6, -0.15, 1235.9375), temperature_factor=0.05,
        zero_temperature=12.0,
    )  # fmt: skip
    assert vibrating_wire_polynomial(8000.0, calibration, 12.0) == pytest.approx(99.9375, rel=1e-12)
    assert vibrating_wire_polynomial(8750.0, calibration, 12.0) == pytest.approx(0.0, abs=1e-9)
    # Temperature term alone: +0.05 * (20 - 12) = +0.4 kPa.
    assert vibrating_wire_polynomial(8750.0, calibration, 20.0) == pytest.approx(0.4, rel=1e-9)


def test_vibrating_wire_piezometer_gives_head():
    pressure, head = piezometer_values(_piezometer("vibrating_wire", LINEAR), 8000.0, 8.0, 100.3)
    assert pressure == pytest.approx(108.2, rel=1e-12)
    assert head == pytest.approx(47.0 + 108.2 / 9.81, rel=1e-12)


def test_rain_from_tips_and_interval():
    # 7 tips of a 0.2 mm bucket = 1.4 mm.
    assert rain_from_tips(7, 0.2) == pytest.approx(1.4, rel=1e-12)
    gauge = RainGauge(id="R", location=None, reporting="interval_mm")
    np.testing.assert_allclose(rain_values(gauge, [0.0, 2.5]), [0.0, 2.5], rtol=0)


def test_rain_from_cumulative_with_reset_and_baseline():
    # Totals 10.0 (stored before), then 10.4, 11.0, reset -> 0.6, 1.0:
    # rain = 0.4, 0.6, 0.6 (fell since the reset), 0.4 (hand calculation).
    np.testing.assert_allclose(rain_from_cumulative([10.4, 11.0, 0.6, 1.0], 10.0), [0.4, 0.6, 0.6, 0.4], rtol=1e-12)


def test_rain_from_cumulative_without_baseline_is_unknown_not_zero():
    rain = rain_from_cumulative([3.0, 3.5])
    assert np.isnan(rain[0])
    assert rain[1] == pytest.approx(0.5, rel=1e-12)
