"""Infinite slope: the closed form, and every method of slices against it."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.constants import GAMMA_W
from solver.errors import SectionError
from solver.infinite_slope import infinite_slope
from solver.methods import METHOD_NAMES, factor_of_safety
from tests.solver.slice_fixtures import infinite_slope_slices


def test_dry_cohesionless_slope_is_tan_phi_over_tan_beta():
    # Duncan, Wright and Brandon (2014), ch. 6: c' = 0, no water -> F = tan(phi') / tan(beta).
    fos = infinite_slope(25.0, 2.0, 18.0, 0.0, 35.0)
    assert fos == pytest.approx(np.tan(np.radians(35.0)) / np.tan(np.radians(25.0)), rel=1e-12)


def test_cohesionless_slope_with_water_table_at_surface():
    # Duncan, Wright and Brandon (2014), ch. 6: c' = 0, seepage parallel to the slope with the
    # water table at the ground -> F = (gamma' / gamma) tan(phi') / tan(beta).
    gamma = 20.0
    fos = infinite_slope(20.0, 3.0, gamma, 0.0, 32.0, water_depth=3.0)
    expected = (gamma - GAMMA_W) / gamma * np.tan(np.radians(32.0)) / np.tan(np.radians(20.0))
    assert fos == pytest.approx(expected, rel=1e-12)


def test_worked_value_with_cohesion_and_seepage():
    # Skempton and DeLory (1957) form, evaluated by hand for beta = 30, z = 3 m, gamma = 19,
    # c' = 5 kPa, phi' = 32, h_w = 1.5 m:
    #   sigma' = (19*3 - 9.81*1.5) cos^2 30 = 42.285 * 0.75 = 31.71375 kPa
    #   tau    = 19*3 sin30 cos30 = 57 * 0.4330127 = 24.681724 kPa
    #   F = (5 + 31.71375 tan 32) / 24.681724 = (5 + 19.817289) / 24.681724 = 1.005479
    assert infinite_slope(30.0, 3.0, 19.0, 5.0, 32.0, 1.5) == pytest.approx(1.005479, rel=1e-6)


def test_saturated_unit_weight_below_the_water_table():
    # With gamma above and gamma_sat below the water table the vertical stress is
    # gamma (z - h_w) + gamma_sat h_w (Duncan, Wright and Brandon 2014, ch. 6); equal unit
    # weights give back the single-weight form.
    single = infinite_slope(30.0, 3.0, 19.0, 5.0, 32.0, 1.5)
    same = infinite_slope(30.0, 3.0, 19.0, 5.0, 32.0, 1.5, unit_weight_saturated=19.0)
    heavier = infinite_slope(30.0, 3.0, 18.0, 5.0, 32.0, 1.5, unit_weight_saturated=21.0)
    sigma = 18.0 * 1.5 + 21.0 * 1.5
    beta = np.radians(30.0)
    expected = (5.0 + (sigma - GAMMA_W * 1.5) * np.cos(beta) ** 2 * np.tan(np.radians(32.0))) / (
        sigma * np.sin(beta) * np.cos(beta)
    )
    assert same == pytest.approx(single, rel=1e-12)
    assert heavier == pytest.approx(expected, rel=1e-12)


def test_array_and_pandas_inputs_broadcast():
    angles = np.array([20.0, 30.0, 40.0])
    scalar = [infinite_slope(a, 2.0, 19.0, 4.0, 33.0, 1.0) for a in angles]
    as_array = infinite_slope(angles, 2.0, 19.0, 4.0, 33.0, 1.0)
    as_series = infinite_slope(pd.Series(angles), 2.0, 19.0, 4.0, 33.0, pd.Series([1.0] * 3))
    assert isinstance(scalar[0], float)
    np.testing.assert_allclose(as_array, scalar, rtol=1e-12)
    np.testing.assert_allclose(as_series, scalar, rtol=1e-12)


def test_missing_reading_gives_nan_not_an_error():
    fos = infinite_slope(30.0, 3.0, 19.0, 5.0, 32.0, np.array([1.0, np.nan]))
    assert np.isfinite(fos[0]) and np.isnan(fos[1])


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(slope_angle=0.0), "slope_angle must be between 0 and 90 deg, got 0.0"),
        (dict(slope_angle=95.0), "slope_angle .* got 95.0"),
        (dict(depth=-1.0), "depth must be positive .* got -1.0"),
        (dict(friction_angle=90.0), "friction_angle .* got 90.0"),
        (dict(cohesion=-2.0), "cohesion must be non-negative .* got -2.0"),
        (dict(water_depth=4.0), "water_depth must be at most the depth .* got 4.0"),
    ],
)
def test_out_of_range_values_raise_with_the_value(kwargs, match):
    arguments = dict(
        slope_angle=30.0, depth=3.0, unit_weight=19.0, cohesion=5.0, friction_angle=32.0,
        water_depth=1.0,
    )
    arguments.update(kwargs)
    with pytest.raises(SectionError, match=match):
        infinite_slope(**arguments)


def _options(method):
    # The vertical end faces of these hand-built tables cut through saturated soil but carry
    # no force; by default the ordinary method keeps the water forces U on the slice sides
    # (U = 0 at the ends of a mass, which in a real section meets the ground there), so at
    # the two end faces it would see a water force missing. The conventional form (U = 0
    # everywhere) is the closed form on identical slices.
    return {"side_water": False} if method == "ordinary" else {}


@pytest.mark.parametrize("method", METHOD_NAMES)
@pytest.mark.parametrize("water_depth", [0.0, 1.2, 3.0])
def test_every_method_on_identical_slices_matches_the_closed_form(method, water_depth):
    # Issue requirement: within 2% of Skempton and DeLory (1957). Identical slices parallel to
    # the slope carry no net interslice force, so every method reproduces the closed form to
    # its iteration tolerance; the check is therefore much tighter than 2%.
    slices = infinite_slope_slices(28.0, 3.0, 19.5, 4.0, 31.0, water_depth)
    result = factor_of_safety(slices, method, **_options(method))
    expected = infinite_slope(28.0, 3.0, 19.5, 4.0, 31.0, water_depth)
    assert result.converged[0] and result.admissible[0], result.message
    assert result.fos[0] == pytest.approx(expected, rel=1e-3)


@settings(max_examples=40, deadline=None)
@given(
    slope_angle=st.floats(10.0, 40.0),
    depth=st.floats(0.5, 8.0),
    unit_weight=st.floats(16.0, 22.0),
    cohesion=st.floats(0.0, 20.0),
    friction_angle=st.floats(15.0, 42.0),
    water_fraction=st.floats(0.0, 1.0),
)
def test_methods_match_closed_form_over_parameters(
    slope_angle, depth, unit_weight, cohesion, friction_angle, water_fraction
):
    # Skempton and DeLory (1957); issue tolerance 2%.
    water_depth = water_fraction * depth
    slices = infinite_slope_slices(
        slope_angle, depth, unit_weight, cohesion, friction_angle, water_depth
    )
    expected = infinite_slope(
        slope_angle, depth, unit_weight, cohesion, friction_angle, water_depth
    )
    for method in METHOD_NAMES:
        result = factor_of_safety(slices, method, **_options(method))
        assert result.converged[0], (method, result.message)
        assert result.fos[0] == pytest.approx(expected, rel=0.02), method
