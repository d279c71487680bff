"""Rainfall-to-head response model, forecasts and rain to threshold (watch.response).

References: the model is the discrete exponential transfer function h = h0 + G sum_k
r(t - L - k) exp(-k dt / tau) (von Asmuth et al. 2002, exponential impulse response); its
closed forms (explicit convolution, geometric series of a uniform storm) are the checks here.
NSE after Nash and Sutcliffe (1970), eq. for the efficiency R^2 = 1 - F / F0.
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.signal import lfilter

from watch.errors import ConfigError, ModelError
from watch.response import (
    ResponseModel,
    ResponseState,
    fit,
    nash_sutcliffe,
    rain_to_threshold,
    rain_to_thresholds,
)


def _storms(n, seed):
    rng = np.random.default_rng(seed)
    return np.where(rng.random(n) < 0.05, rng.gamma(2.0, 3.0, n), 0.0)


# --------------------------------------------------------------------------------------------
# Simulation
# --------------------------------------------------------------------------------------------


def test_simulation_equals_explicit_convolution_and_lfilter():
    rain = _storms(500, seed=1)
    model = ResponseModel(base_head_m=50.0, gain_m_per_mm=0.01, recession_h=36.0, lag_steps=3)
    head = model.simulate(rain).head_m
    a = np.exp(-1.0 / 36.0)
    lagged = np.r_[np.zeros(3), rain[:-3]]
    # Explicit sum over k of r(t - L - k) a^k: the model's definition.
    convolved = np.convolve(lagged, a ** np.arange(rain.size))[: rain.size]
    np.testing.assert_allclose(head, 50.0 + 0.01 * convolved, rtol=1e-12)
    # The same series through scipy.signal.lfilter as a first-order recursive filter.
    filtered = lfilter([1.0], [1.0, -a], lagged)
    np.testing.assert_allclose(head, 50.0 + 0.01 * filtered, rtol=1e-12)


def test_simulation_of_a_series_keeps_its_index_and_state_time():
    rain = pd.Series(_storms(48, seed=2), index=pd.date_range("2026-01-01", periods=48,
                                                              freq="1h", tz="UTC"))
    model = ResponseModel(50.0, 0.01, 12.0, 2)
    run = model.simulate(rain)
    assert run.head_m.index.equals(rain.index)
    assert run.state.time_utc == rain.index[-1]
    assert run.state.pending_rain_mm == tuple(rain.iloc[-2:])


@settings(max_examples=80, deadline=None)
@given(
    lag=st.integers(0, 6),
    recession_h=st.floats(0.5, 500.0),
    split=st.integers(0, 120),
    seed=st.integers(0, 1000),
)
def test_running_in_two_parts_equals_running_at_once(lag, recession_h, split, seed):
    # The state carries everything: the reservoir is linear and time-invariant.
    rain = _storms(120, seed)
    model = ResponseModel(10.0, 0.02, recession_h, lag)
    whole = model.simulate(rain).head_m
    first = model.simulate(rain[:split])
    second = model.simulate(rain[split:], first.state).head_m
    np.testing.assert_allclose(np.r_[first.head_m, second], whole, rtol=1e-12)


def test_model_settings_validated():
    with pytest.raises(ConfigError, match="recession_h is invalid: -3"):
        ResponseModel(50.0, 0.01, -3.0, 0)
    with pytest.raises(ConfigError, match="lag_steps is invalid: 1.5"):
        ResponseModel(50.0, 0.01, 3.0, 1.5)
    with pytest.raises(ConfigError, match="state holds 0 pending rain steps, the model's lag is 2"):
        ResponseModel(50.0, 0.01, 3.0, 2).simulate([1.0], ResponseState(0.0, ()))
    with pytest.raises(ModelError, match="missing"):
        ResponseModel(50.0, 0.01, 3.0, 0).simulate([1.0, np.nan])


# --------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------


def test_calibration_recovers_known_parameters_from_noisy_synthetic_heads():
    rain = _storms(3000, seed=3)
    truth = ResponseModel(base_head_m=48.5, gain_m_per_mm=0.012, recession_h=40.0, lag_steps=4)
    noise = np.random.default_rng(4).normal(0.0, 0.02, rain.size)
    observed = truth.simulate(rain).head_m + noise
    observed[::7] = np.nan  # gaps in the record
    result = fit(observed, rain, max_lag_steps=10)
    model = result.model
    assert model.lag_steps == 4
    assert model.base_head_m == pytest.approx(48.5, abs=0.02)
    assert model.gain_m_per_mm == pytest.approx(0.012, rel=0.05)
    assert model.recession_h == pytest.approx(40.0, rel=0.05)
    assert result.usable and result.converged
    # Residuals are the noise: RMSE close to its standard deviation.
    assert model.rmse_m == pytest.approx(0.02, rel=0.1)
    assert model.nse > 0.9
    assert result.n_observations == int(np.isfinite(observed).sum())
    assert result.final_state.pending_rain_mm == tuple(rain[-4:])


def test_calibration_with_heads_starting_above_base_level():
    # Rain before the record left water in the reservoir: the initial-storage term absorbs it.
    rain = _storms(2000, seed=5)
    truth = ResponseModel(30.0, 0.02, 60.0, 0)
    observed = truth.simulate(rain, truth.initial_state(storage_mm=150.0)).head_m
    result = fit(observed, rain, max_lag_steps=3)
    assert result.model.recession_h == pytest.approx(60.0, rel=1e-3)
    assert result.model.gain_m_per_mm == pytest.approx(0.02, rel=1e-3)
    assert result.final_state.storage_mm == pytest.approx(
        truth.simulate(rain, truth.initial_state(150.0)).state.storage_mm, rel=1e-3
    )


def test_poor_fit_is_not_usable_and_refuses_to_forecast():
    rain = _storms(1000, seed=6)
    unrelated = 50.0 + np.random.default_rng(7).normal(0.0, 0.3, rain.size)
    result = fit(unrelated, rain, max_lag_steps=2)
    assert not result.usable
    assert "below the minimum 0.5" in result.reason
    with pytest.raises(ModelError, match="may not forecast: calibration NSE"):
        result.model.forecast(result.final_state, 50.0, 24.0, 48.0)


def test_calibration_input_problems():
    rain = _storms(100, seed=8)
    with pytest.raises(ModelError, match="only 10 observed heads"):
        fit(np.r_[np.full(10, 50.0), np.full(90, np.nan)], rain)
    with pytest.raises(ModelError, match="never change"):
        fit(np.full(100, 50.0), rain)
    with pytest.raises(ModelError, match="99 heads but 100 rain steps"):
        fit(np.linspace(50, 51, 99), rain)
    with pytest.raises(ConfigError, match="min_nse must be a number up to 1, got 2"):
        fit(np.linspace(50, 51, 100), rain, min_nse=2)


def test_nash_sutcliffe_closed_forms():
    observed = np.array([1.0, 2.0, 3.0, np.nan])
    # Nash and Sutcliffe (1970): perfect fit 1; simulating the mean 0.
    assert nash_sutcliffe(observed, observed) == pytest.approx(1.0, rel=1e-12)
    assert nash_sutcliffe(observed, np.full(4, 2.0)) == pytest.approx(0.0, abs=1e-12)
    # F = 3 * 1^2, F0 = 2 -> 1 - 3/2.
    assert nash_sutcliffe(observed, observed + 1.0) == pytest.approx(-0.5, rel=1e-12)


# --------------------------------------------------------------------------------------------
# Forecast
# --------------------------------------------------------------------------------------------


def test_uniform_storm_peak_from_the_geometric_series():
    # From an empty reservoir, D mm over T steps (D/T each) gives at the end of the storm
    # s = (D/T) (1 - a^T) / (1 - a), felt L steps later; afterwards it only recedes.
    model = ResponseModel(50.0, 0.01, 24.0, lag_steps=2)
    forecast = model.forecast(model.initial_state(), 60.0, 12.0, 72.0)
    a = np.exp(-1.0 / 24.0)
    expected = 50.0 + 0.01 * (60.0 / 12.0) * (1 - a**12) / (1 - a)
    assert forecast.peak_head_m == pytest.approx(expected, rel=1e-12)
    assert forecast.peak_time_h == 14.0
    assert forecast.rain_mm.sum() == pytest.approx(60.0, rel=1e-12)
    assert forecast.time_h[0] == 0.0 and forecast.time_h[-1] == 72.0


def test_forecast_baseline_recedes_exponentially_and_peak_has_a_time():
    model = ResponseModel(50.0, 0.01, 10.0, 0)
    now = pd.Timestamp("2026-01-15 06:00", tz="UTC")
    state = model.initial_state(storage_mm=100.0, time_utc=now)
    forecast = model.forecast(state, 0.0, 6.0, 24.0)
    # No storm: h = h0 + G s0 exp(-t / tau) exactly at the step ends.
    np.testing.assert_allclose(
        forecast.baseline_head_m, 50.0 + 1.0 * np.exp(-forecast.time_h / 10.0), rtol=1e-12
    )
    np.testing.assert_allclose(forecast.head_m, forecast.baseline_head_m, rtol=1e-12)
    assert forecast.peak_time_h == 0.0 and forecast.peak_time_utc == now


def test_a_head_below_the_base_level_does_not_rise_without_rain():
    # The reproduction of issue 16: h0 above the last head; 72 dry hours used to give
    # 9.00 -> 9.78 m. The start storage is floored at zero (a linear reservoir holds no
    # negative content) and the base lowered to the head, so dry weather holds it.
    model = ResponseModel(base_head_m=10.0, gain_m_per_mm=0.02, recession_h=36.0, lag_steps=2)
    state = model.state_at_head(9.0)
    assert state.storage_mm == 0.0 and model.head(state) == pytest.approx(9.0, abs=1e-12)
    dry = model.forecast(state, 0.0, 24.0, 72.0)
    np.testing.assert_allclose(dry.baseline_head_m, 9.0, atol=1e-12)
    # Rain adds the response of an empty reservoir on top of the measured head: the
    # geometric series G p (1 - a^T) / (1 - a) of a uniform storm (module docstring).
    wet = model.forecast(state, 48.0, 24.0, 72.0)
    a = np.exp(-1.0 / 36.0)
    assert wet.peak_head_m == pytest.approx(9.0 + 0.02 * 2.0 * (1 - a**24) / (1 - a), rel=1e-12)
    # Above the base level the state is s = (h - h0) / G, as before.
    assert model.state_at_head(11.0).storage_mm == pytest.approx(50.0, rel=1e-12)


@settings(max_examples=100, deadline=None)
@given(
    head=st.floats(-50.0, 100.0),
    base=st.floats(-50.0, 100.0),
    gain=st.one_of(st.just(0.0), st.floats(1e-6, 0.1)),
    recession_h=st.floats(0.5, 500.0),
    lag=st.integers(0, 6),
)
def test_no_rise_without_rain_from_any_start_head(head, base, gain, recession_h, lag):
    # Invariant of a linear reservoir with non-negative content: with no rain on its way and
    # none falling, the head only recedes (towards the base) or holds.
    model = ResponseModel(base, gain, recession_h, lag)
    state = model.state_at_head(head)
    assert model.head(state) == pytest.approx(head, rel=1e-12, abs=1e-9)
    dry = model.forecast(state, 0.0, 6.0, 72.0).baseline_head_m
    assert np.all(np.diff(dry) <= 1e-12)
    assert dry.max() <= head + 1e-9


def test_a_negative_storage_is_refused():
    with pytest.raises(ConfigError, match="storage must be zero or more mm, got -1"):
        ResponseState(storage_mm=-1.0)


def test_storm_not_a_whole_number_of_steps():
    model = ResponseModel(50.0, 0.01, 10.0, 0, step_h=1.0)
    forecast = model.forecast(model.initial_state(), 10.0, 2.5, 5.0)
    np.testing.assert_allclose(forecast.rain_mm, [0, 4, 4, 2, 0, 0], rtol=1e-12)


def test_forecast_settings_validated():
    model = ResponseModel(50.0, 0.01, 10.0, 0)
    with pytest.raises(ConfigError, match="horizon \\(10 h\\) must be at least the storm"):
        model.forecast(model.initial_state(), 10.0, 24.0, 10.0)
    with pytest.raises(ConfigError, match="storm depth must be zero or more mm, got -5"):
        model.forecast(model.initial_state(), -5.0, 24.0, 48.0)


# --------------------------------------------------------------------------------------------
# Rain to threshold
# --------------------------------------------------------------------------------------------


def _fos(depth_mm):
    # Analytic monotone FoS(depth) = 1.6 exp(-depth / 100): root for trigger T is
    # depth = 100 ln(1.6 / T).
    return 1.6 * np.exp(-depth_mm / 100.0)


def test_rain_to_threshold_finds_the_known_root():
    result = rain_to_threshold(_fos, 1.3, 200.0)
    assert result.found and result.monotone
    assert result.depth_mm == pytest.approx(100.0 * np.log(1.6 / 1.3), abs=0.1)
    assert result.fos_without_rain == pytest.approx(1.6, rel=1e-12)


def test_rain_to_threshold_none_up_to_the_largest_storm():
    result = rain_to_threshold(_fos, 0.5, 100.0)
    assert not result.found and result.depth_mm is None
    assert result.message == "none up to 100 mm"


def test_rain_to_threshold_already_below():
    result = rain_to_threshold(_fos, 1.7, 100.0)
    assert result.found and result.depth_mm == 0.0
    assert "already at or below 1.7" in result.message


def test_several_triggers_share_the_grid_evaluations():
    calls = []

    def counted(depth):
        calls.append(depth)
        return _fos(depth)

    results = rain_to_thresholds(counted, [1.3, 1.0], 200.0, grid_points=11)
    assert calls[:11] == list(np.linspace(0.0, 200.0, 11))
    assert results[0].depth_mm == pytest.approx(100 * np.log(1.6 / 1.3), abs=0.1)
    assert results[1].depth_mm == pytest.approx(100 * np.log(1.6 / 1.0), abs=0.1)


def test_non_monotone_fos_is_flagged():
    def bumpy(depth):
        return 1.5 - 0.003 * depth + 0.1 * np.sin(depth / 8.0)

    result = rain_to_threshold(bumpy, 1.3, 200.0)
    assert not result.monotone
    assert "does not fall steadily" in result.message
    assert bumpy(result.depth_mm) == pytest.approx(1.3, abs=0.01)


def test_fos_not_a_number_gives_no_answer():
    result = rain_to_threshold(lambda d: np.nan if d > 50 else 1.5, 1.3, 100.0)
    assert not result.found
    assert "could not be computed" in result.message


def test_rain_to_threshold_settings_validated():
    with pytest.raises(ConfigError, match="trigger levels must be positive numbers, got \\[-1\\]"):
        rain_to_thresholds(_fos, [-1], 100.0)
    with pytest.raises(ConfigError, match="largest storm depth must be more than 0 mm, got 0"):
        rain_to_threshold(_fos, 1.3, 0.0)
