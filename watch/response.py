"""Rainfall-to-head response of a piezometer, storm forecasts, and the rain that takes a slope
to a trigger level.

The model is a discrete exponential transfer function (a linear reservoir) on a regular time
step dt:

    h(t) = h0 + G * sum_(k >= 0) r(t - L - k dt) * exp(-k dt / tau)

with h0 the base head [m] (the level heads recede to in a long dry spell), G the gain
[m of head per mm of rain], tau the recession time [h], L the lag [whole steps] and r the rain
of each step [mm]. The sum is the first-order recursive filter s_n = exp(-dt/tau) s_(n-1) + u_n
(u the lagged rain), computed with ``scipy.signal.lfilter``. It is the exponential impulse
response of the transfer-function approach of von Asmuth et al. (2002), fitted here by ordinary
least squares without their noise model, so the reported fit statistics are optimistic when
the residuals are strongly autocorrelated.

References
----------
von Asmuth, J. R., Bierkens, M. F. P. and Maas, K. (2002). Transfer function-noise modeling in
continuous time using predefined impulse response functions. Water Resources Research 38(12),
1287. doi:10.1029/2001WR001136.

Besbes, M. and de Marsily, G. (1984). From infiltration to recharge: use of a parametric
transfer function. Journal of Hydrology 74(3-4), 271-293.

Nash, J. E. and Sutcliffe, J. V. (1970). River flow forecasting through conceptual models,
part I: a discussion of principles. Journal of Hydrology 10(3), 282-290.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import brentq, least_squares
from scipy.signal import lfilter

from watch.errors import ConfigError, ModelError

#: Smallest Nash-Sutcliffe efficiency of a model that may forecast [-]. 0.5 is a common-practice
#: "satisfactory" floor in hydrological model evaluation, not a published rule for piezometers.
DEFAULT_MIN_NSE = 0.5

#: Longest lag tried when fitting [steps].
DEFAULT_MAX_LAG_STEPS = 24

#: Fewest observed heads a fit accepts. Four parameters plus the lag need far more than five
#: points to say anything; 24 is a day of hourly heads (common practice, not a published rule).
MIN_OBSERVATIONS = 24

#: Recession times tried [count] on a logarithmic grid to start the least-squares fit.
RECESSION_GRID_POINTS = 25

#: Depth grid of rain_to_threshold: points from 0 to the largest depth considered.
DEFAULT_DEPTH_GRID_POINTS = 21

#: Tolerance of the storm depth found by rain_to_threshold [mm].
DEFAULT_DEPTH_TOLERANCE_MM = 0.1

#: Rise of FoS with more rain that rain_to_threshold still treats as no rise [-]: ten times the
#: solver's default iteration tolerance (solver.constants.FOS_TOLERANCE), so iteration noise is
#: not read as a trend.
MONOTONE_FOS_TOLERANCE = 1e-3


@dataclass(frozen=True)
class ResponseState:
    """State of the reservoir at the end of a step.

    Attributes
    ----------
    storage_mm : float
        Reservoir content s [mm of rain equivalent]; the head is h0 + G * s.
    pending_rain_mm : tuple of float
        Rain of the last L steps [mm], oldest first, that has fallen but not yet reached the
        reservoir.
    time_utc : pandas.Timestamp or None
        End of the step this state belongs to, when known.
    base_shift_m : float
        How far [m] the base level of this state stands from the model's h0 (below it when
        negative): the head is h0 + base_shift_m + G * s. Set by
        :meth:`ResponseModel.state_at_head` when a measured head lies at or below h0 (see
        there); zero otherwise.
    """

    storage_mm: float = 0.0
    pending_rain_mm: tuple[float, ...] = ()
    time_utc: pd.Timestamp | None = None
    base_shift_m: float = 0.0

    def __post_init__(self) -> None:
        # A linear reservoir holds no negative content: below its base level the model has no
        # state, and a negative storage would recede upwards, a rise with no rain.
        if not (np.isfinite(self.storage_mm) and self.storage_mm >= 0.0):
            raise ConfigError(
                f"reservoir storage must be zero or more mm, got {self.storage_mm}; start "
                "from a head with ResponseModel.state_at_head, which floors it"
            )
        if not np.isfinite(self.base_shift_m):
            raise ConfigError(f"base shift must be a finite number of m, got {self.base_shift_m}")


@dataclass(frozen=True)
class Simulation:
    """Heads simulated over a rain series.

    Attributes
    ----------
    head_m : ndarray or pandas.Series
        Head at the end of each step [m] (a Series when the rain was one).
    storage_mm : ndarray
        Reservoir content at the end of each step [mm].
    state : ResponseState
        State after the last step.
    """

    head_m: np.ndarray | pd.Series
    storage_mm: np.ndarray
    state: ResponseState


@dataclass(frozen=True)
class Forecast:
    """Heads after now with and without a uniform storm.

    Attributes
    ----------
    time_h : ndarray
        Hours after now [h]; 0 is now.
    rain_mm : ndarray
        Storm rain of the step ending at each time [mm] (0 at time 0).
    head_m : ndarray
        Head with the storm [m].
    baseline_head_m : ndarray
        Head with no more rain [m].
    peak_head_m : float
        Highest head with the storm [m].
    peak_time_h : float
        When it comes [h after now].
    peak_time_utc : pandas.Timestamp or None
        The same as a UTC time, when the state's time is known.
    """

    time_h: np.ndarray
    rain_mm: np.ndarray
    head_m: np.ndarray
    baseline_head_m: np.ndarray
    peak_head_m: float
    peak_time_h: float
    peak_time_utc: pd.Timestamp | None


@dataclass(frozen=True)
class ResponseModel:
    """Exponential rainfall-to-head transfer function of one piezometer (see module docstring).

    Attributes
    ----------
    base_head_m : float
        h0 [m].
    gain_m_per_mm : float
        G [m/mm], >= 0.
    recession_h : float
        tau [h], > 0.
    lag_steps : int
        L [steps], >= 0.
    step_h : float
        dt [h], > 0.
    nse : float or None
        Nash-Sutcliffe efficiency of the calibration [-]; None for parameters set by hand.
    rmse_m : float or None
        Root-mean-square error of the calibration [m].
    min_nse : float
        Smallest NSE that lets the model forecast [-].
    """

    base_head_m: float
    gain_m_per_mm: float
    recession_h: float
    lag_steps: int
    step_h: float = 1.0
    nse: float | None = None
    rmse_m: float | None = None
    min_nse: float = DEFAULT_MIN_NSE

    def __post_init__(self) -> None:
        checks = (
            ("base_head_m", np.isfinite(self.base_head_m)),
            ("gain_m_per_mm", np.isfinite(self.gain_m_per_mm) and self.gain_m_per_mm >= 0),
            ("recession_h", np.isfinite(self.recession_h) and self.recession_h > 0),
            ("lag_steps", int(self.lag_steps) == self.lag_steps and self.lag_steps >= 0),
            ("step_h", np.isfinite(self.step_h) and self.step_h > 0),
        )
        for name, ok in checks:
            if not ok:
                raise ConfigError(f"response model {name} is invalid: {getattr(self, name)}")

    @property
    def decay(self) -> float:
        """exp(-dt / tau) [-]: the share of the reservoir content kept from one step to the
        next."""
        return float(np.exp(-self.step_h / self.recession_h))

    @property
    def usable(self) -> bool:
        """False when the calibration fit is too poor to forecast with."""
        return self.nse is None or self.nse >= self.min_nse

    @property
    def reason(self) -> str:
        """Why the model may or may not forecast."""
        if self.nse is None:
            return "parameters set by hand, not calibrated"
        verdict = "at least" if self.usable else "below"
        return f"calibration NSE {self.nse:.3f} is {verdict} the minimum {self.min_nse:g}"

    def head(self, state: ResponseState) -> float:
        """Head [m] of a state: h0 + shift + G s."""
        return self.base_head_m + state.base_shift_m + self.gain_m_per_mm * state.storage_mm

    def initial_state(self, storage_mm: float = 0.0, time_utc=None) -> ResponseState:
        """A state with the given storage [mm] and no rain on its way."""
        return ResponseState(float(storage_mm), (0.0,) * self.lag_steps, time_utc)

    def state_at_head(self, head_m: float, pending_rain_mm=None, time_utc=None) -> ResponseState:
        """The state whose head is a measured ``head_m`` [m], with the start storage floored.

        Above the base level, s = (h - h0) / G. At or below it the reservoir is empty (s = 0,
        its floor: a linear reservoir holds no negative content) and the base level of this
        state is lowered to the measured head (``base_shift_m = h - h0``). Without that floor
        s < 0 would recede towards h0, so the model would predict a rise with no rain; with
        it, dry weather holds the head and new rain adds its response on top. A head below h0
        says the base level has fallen since the calibration (a seasonal drift the model does
        not know); holding it is our choice, the model says nothing about how far it falls.
        A model with no gain (G = 0) takes the measured head as its base likewise.

        Parameters
        ----------
        head_m : float
            Measured head [m].
        pending_rain_mm : sequence of float, optional
            Rain of the last L steps [mm], oldest first (default none on its way).
        time_utc : pandas.Timestamp, optional
        """
        if not np.isfinite(head_m):
            raise ModelError(f"cannot start the response model from a head of {head_m} m")
        pending = (0.0,) * self.lag_steps if pending_rain_mm is None else tuple(
            float(v) for v in pending_rain_mm)
        excess = float(head_m) - self.base_head_m
        if excess > 0.0 and self.gain_m_per_mm > 0.0:
            storage = excess / self.gain_m_per_mm
            if not np.isfinite(storage):
                raise ModelError(f"a head {excess:g} m above the base level needs more storage "
                                 f"than a gain of {self.gain_m_per_mm:g} m/mm can hold")
            return ResponseState(storage, pending, time_utc)
        return ResponseState(0.0, pending, time_utc, base_shift_m=excess)

    def simulate(self, rain, initial_state: ResponseState | None = None) -> Simulation:
        """Heads over a rain series, from ``initial_state`` (default: empty reservoir).

        s_n = exp(-dt/tau) s_(n-1) + r_(n-L);  h_n = h0 + shift + G s_n

        (shift: the state's ``base_shift_m``, zero unless it started from a head below h0).

        Parameters
        ----------
        rain : array_like or pandas.Series
            Rain of each step [mm], no NaN; a Series indexed by step-end times (UTC) gives a
            Series of heads and a state with its time.
        initial_state : ResponseState, optional
            State at the end of the step before the first one.
        """
        state = self.initial_state() if initial_state is None else initial_state
        if len(state.pending_rain_mm) != self.lag_steps:
            raise ConfigError(
                f"state holds {len(state.pending_rain_mm)} pending rain steps, the model's lag "
                f"is {self.lag_steps}"
            )
        values = _rain_values(rain)
        n = values.size
        inflow = np.concatenate([np.asarray(state.pending_rain_mm, dtype=float), values])
        a = self.decay
        storage = lfilter([1.0], [1.0, -a], inflow[:n], zi=[a * state.storage_mm])[0]
        if isinstance(rain, pd.Series) and isinstance(rain.index, pd.DatetimeIndex) and n:
            time = rain.index[-1]
        elif state.time_utc is not None:
            time = state.time_utc + pd.Timedelta(hours=self.step_h * n)
        else:
            time = None
        final = ResponseState(
            float(storage[-1]) if n else state.storage_mm,
            tuple(float(v) for v in inflow[n:]),
            time,
            state.base_shift_m,
        )
        head = self.base_head_m + state.base_shift_m + self.gain_m_per_mm * storage
        if isinstance(rain, pd.Series):
            head = pd.Series(head, index=rain.index, name="head_m")
        return Simulation(head, storage, final)

    def forecast(
        self,
        state: ResponseState,
        storm_depth_mm: float,
        duration_h: float,
        horizon_h: float,
    ) -> Forecast:
        """Heads over the next ``horizon_h`` with a uniform storm starting now.

        The storm drops ``storm_depth_mm`` evenly over ``duration_h``; a step partly covered by
        it gets its share.

        Parameters
        ----------
        state : ResponseState
            State now (for example ``fit.final_state`` or ``simulate(history).state``).
        storm_depth_mm : float
            Total depth of the storm [mm], >= 0.
        duration_h : float
            Storm duration [h], > 0.
        horizon_h : float
            How far ahead to look [h], >= duration_h.

        Raises
        ------
        ModelError
            The calibration fit is too poor (``usable`` is False).
        ConfigError
            Negative depth, non-positive duration, horizon shorter than the storm.
        """
        if not self.usable:
            raise ModelError(f"the rainfall-response model may not forecast: {self.reason}")
        if not (np.isfinite(storm_depth_mm) and storm_depth_mm >= 0):
            raise ConfigError(f"storm depth must be zero or more mm, got {storm_depth_mm}")
        if not (np.isfinite(duration_h) and duration_h > 0):
            raise ConfigError(f"storm duration must be more than 0 h, got {duration_h}")
        if not (np.isfinite(horizon_h) and horizon_h >= duration_h):
            raise ConfigError(
                f"forecast horizon ({horizon_h:g} h) must be at least the storm duration "
                f"({duration_h:g} h)"
            )
        steps = int(np.ceil(horizon_h / self.step_h - 1e-9))
        time_h = self.step_h * np.arange(steps + 1)
        fallen = storm_depth_mm * np.minimum(time_h, duration_h) / duration_h
        rain = np.diff(fallen)
        now = self.head(state)
        head = np.concatenate([[now], self.simulate(rain, state).head_m])
        baseline = np.concatenate([[now], self.simulate(np.zeros(steps), state).head_m])
        peak = int(np.argmax(head))
        peak_time_utc = (
            None
            if state.time_utc is None
            else state.time_utc + pd.Timedelta(hours=float(time_h[peak]))
        )
        return Forecast(
            time_h=time_h,
            rain_mm=np.concatenate([[0.0], rain]),
            head_m=head,
            baseline_head_m=baseline,
            peak_head_m=float(head[peak]),
            peak_time_h=float(time_h[peak]),
            peak_time_utc=peak_time_utc,
        )


def _rain_values(rain) -> np.ndarray:
    values = np.asarray(rain, dtype=float).reshape(-1)
    if not np.all(np.isfinite(values)):
        raise ModelError("rain has missing (NaN) or infinite steps; fill or drop them first")
    if np.any(values < 0):
        raise ModelError(f"rain has a negative depth: {values[values < 0][0]} mm")
    return values


# --------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ResponseFit:
    """The result of calibrating a response model on a record.

    Attributes
    ----------
    model : ResponseModel
        Fitted parameters with their NSE and RMSE (always given, for diagnosis and plots; it
        refuses to forecast when ``usable`` is False).
    usable : bool
        The optimiser converged and NSE >= the minimum.
    reason : str
        Why the model is or is not usable.
    n_observations : int
        Observed heads used.
    converged : bool
        The least-squares optimiser reported convergence.
    message : str
        The optimiser's message.
    simulated_head_m : ndarray
        Simulated head at every step of the record [m].
    final_state : ResponseState
        State at the end of the record (start of a forecast from there).
    lag_costs : ndarray
        Sum of squared residuals [m2] for each lag tried (index = lag in steps).
    """

    model: ResponseModel
    usable: bool
    reason: str
    n_observations: int
    converged: bool
    message: str
    simulated_head_m: np.ndarray
    final_state: ResponseState
    lag_costs: np.ndarray


def nash_sutcliffe(observed, simulated) -> float:
    """Nash-Sutcliffe efficiency [-] (Nash and Sutcliffe 1970):

    NSE = 1 - sum (h_obs - h_sim)^2 / sum (h_obs - mean(h_obs))^2

    NaN observations are left out. 1 is a perfect fit; 0 is no better than the mean."""
    observed, simulated = np.asarray(observed, float), np.asarray(simulated, float)
    keep = np.isfinite(observed)
    spread = np.sum((observed[keep] - observed[keep].mean()) ** 2)
    if spread == 0:
        return float("nan")
    return float(1.0 - np.sum((observed[keep] - simulated[keep]) ** 2) / spread)


def root_mean_square_error(observed, simulated) -> float:
    """RMSE [unit of the heads] over the finite observations."""
    observed, simulated = np.asarray(observed, float), np.asarray(simulated, float)
    keep = np.isfinite(observed)
    return float(np.sqrt(np.mean((observed[keep] - simulated[keep]) ** 2)))


def fit(
    head_m,
    rain_mm,
    step_h: float = 1.0,
    max_lag_steps: int = DEFAULT_MAX_LAG_STEPS,
    min_nse: float = DEFAULT_MIN_NSE,
    recession_bounds_h: tuple[float, float] | None = None,
) -> ResponseFit:
    """Calibrate the response model on a record of heads and rain on one regular time grid.

    For each lag L = 0..max_lag_steps, the recession time tau, base head h0, gain G and an
    initial-storage term c (the effect of rain before the record, decaying as
    exp(-(n+1) dt/tau)) are fitted by ``scipy.optimize.least_squares`` on the residuals
    h_sim - h_obs, started from the best point of a logarithmic grid of tau on which h0, G and c
    are linear; the lag with the smallest sum of squares wins (ties to the shorter lag). Rain
    before the record is taken as zero apart from c.

    Parameters
    ----------
    head_m : array_like or pandas.Series
        Observed head at the end of each step [m]; NaN where there is no observation.
    rain_mm : array_like or pandas.Series
        Rain of each step [mm], no NaN, same length (and index, for Series).
    step_h : float
        dt [h].
    max_lag_steps : int
        Longest lag tried [steps].
    min_nse : float
        Smallest NSE of a usable model [-] (default 0.5, common practice).
    recession_bounds_h : (float, float), optional
        Bounds on tau [h]; default from 0.1 dt to the record length (a longer recession cannot
        be told apart from a drift of the base head).

    Returns
    -------
    ResponseFit
        ``usable`` False, with the reason, when NSE < min_nse or the optimiser did not
        converge.

    Raises
    ------
    ModelError
        Fewer than MIN_OBSERVATIONS heads, heads that never vary, no rain at all.
    ConfigError
        Bad settings (step, lag, bounds, min_nse).
    """
    if not (np.isfinite(step_h) and step_h > 0):
        raise ConfigError(f"time step must be more than 0 h, got {step_h}")
    if int(max_lag_steps) != max_lag_steps or max_lag_steps < 0:
        raise ConfigError(f"max_lag_steps must be a whole number >= 0, got {max_lag_steps}")
    if not np.isfinite(min_nse) or min_nse > 1:
        raise ConfigError(f"min_nse must be a number up to 1, got {min_nse}")
    if isinstance(head_m, pd.Series) and isinstance(rain_mm, pd.Series):
        if not head_m.index.equals(rain_mm.index):
            raise ModelError("heads and rain must be on the same time steps (align them first)")
    observed = np.asarray(head_m, dtype=float).reshape(-1)
    rain = _rain_values(rain_mm)
    if observed.size != rain.size:
        raise ModelError(f"{observed.size} heads but {rain.size} rain steps; align them first")
    keep = np.isfinite(observed)
    n_obs = int(keep.sum())
    if n_obs < MIN_OBSERVATIONS:
        raise ModelError(
            f"only {n_obs} observed heads; at least {MIN_OBSERVATIONS} are needed to calibrate"
        )
    if np.ptp(observed[keep]) == 0:
        raise ModelError("the observed heads never change; there is no response to fit")
    if not np.any(rain > 0):
        raise ModelError("no rain fell in the record; there is no response to fit")
    max_lag = min(int(max_lag_steps), rain.size - 1)
    low, high = recession_bounds_h or (0.1 * step_h, rain.size * step_h)
    if not (0 < low < high < np.inf):
        raise ConfigError(f"recession bounds must satisfy 0 < low < high, got ({low}, {high})")

    steps = np.arange(1, rain.size + 1)

    def simulate(params, lagged):
        base, gain, log_tau, carry = params
        a = np.exp(-step_h / np.exp(log_tau))
        return base + gain * lfilter([1.0], [1.0, -a], lagged) + carry * a**steps

    best = None
    lag_costs = np.full(max_lag + 1, np.inf)
    for lag in range(max_lag + 1):
        lagged = np.concatenate([np.zeros(lag), rain[: rain.size - lag]])
        start = _grid_start(observed, keep, lagged, step_h, steps, low, high)
        result = least_squares(
            lambda p, lagged=lagged: (simulate(p, lagged) - observed)[keep],
            start,
            bounds=([-np.inf, 0.0, np.log(low), 0.0], [np.inf, np.inf, np.log(high), np.inf]),
            x_scale="jac",
        )
        lag_costs[lag] = 2.0 * result.cost
        if best is None or lag_costs[lag] < lag_costs[best[0]] * (1 - 1e-12):
            best = (lag, result, lagged)

    lag, result, lagged = best
    base, gain, log_tau, carry = result.x
    simulated = simulate(result.x, lagged)
    nse = nash_sutcliffe(observed, simulated)
    rmse = root_mean_square_error(observed, simulated)
    model = ResponseModel(
        base_head_m=float(base),
        gain_m_per_mm=float(gain),
        recession_h=float(np.exp(log_tau)),
        lag_steps=lag,
        step_h=step_h,
        nse=nse,
        rmse_m=rmse,
        min_nse=min_nse,
    )
    converged = bool(result.success)
    usable = converged and model.usable
    reason = model.reason if converged else f"least squares did not converge: {result.message}"
    # Storage at the end = filtered lagged rain plus what is left of the initial storage.
    # (Both parts are >= 0; the floor only takes off rounding below zero.)
    storage_end = max((simulated[-1] - base) / gain, 0.0) if gain > 0 else 0.0
    timed = [
        series.index[-1]
        for series in (head_m, rain_mm)
        if isinstance(series, pd.Series) and isinstance(series.index, pd.DatetimeIndex)
    ]
    final_time = timed[0] if timed else None
    final_state = ResponseState(
        float(storage_end), tuple(float(v) for v in rain[rain.size - lag :]), final_time
    )
    return ResponseFit(
        model=model,
        usable=usable,
        reason=reason,
        n_observations=n_obs,
        converged=converged,
        message=str(result.message),
        simulated_head_m=simulated,
        final_state=final_state,
        lag_costs=lag_costs,
    )


def _grid_start(observed, keep, lagged, step_h, steps, low, high) -> np.ndarray:
    """Best (h0, G, log tau, c) on a grid of tau, with h0, G, c by linear least squares."""
    best_cost, best_params = np.inf, None
    for tau in np.geomspace(low, high, RECESSION_GRID_POINTS):
        a = np.exp(-step_h / tau)
        design = np.column_stack(
            [np.ones(steps.size), lfilter([1.0], [1.0, -a], lagged), a**steps]
        )[keep]
        coef, *_ = np.linalg.lstsq(design, observed[keep], rcond=None)
        base, gain, carry = coef[0], max(coef[1], 0.0), max(coef[2], 0.0)
        cost = np.sum((design @ np.array([base, gain, carry]) - observed[keep]) ** 2)
        if cost < best_cost:
            best_cost, best_params = cost, np.array([base, gain, np.log(tau), carry])
    # least_squares needs a start strictly inside the bounds of log tau.
    best_params[2] = np.clip(best_params[2], np.log(low) + 1e-9, np.log(high) - 1e-9)
    return best_params


# --------------------------------------------------------------------------------------------
# Rain to threshold
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RainToThreshold:
    """The smallest storm that takes a slope to a trigger level.

    Attributes
    ----------
    trigger_fos : float
        The trigger level [-].
    found : bool
        A depth up to ``max_depth_mm`` takes the FoS to the trigger or below.
    depth_mm : float or None
        That smallest depth [mm] (0 when the FoS is already at or below the trigger); None
        when not found.
    max_depth_mm : float
        Largest depth considered [mm].
    fos_without_rain : float
        FoS with no storm [-].
    monotone : bool
        FoS never rose with depth on the grid (within MONOTONE_FOS_TOLERANCE). When False the
        depth is the smallest crossing the grid could see.
    message : str
        What duty staff read: for example "38.2 mm" or "none up to 200 mm".
    depths_mm, fos : ndarray
        The grid of depths [mm] and the FoS there [-].
    """

    trigger_fos: float
    found: bool
    depth_mm: float | None
    max_depth_mm: float
    fos_without_rain: float
    monotone: bool
    message: str
    depths_mm: np.ndarray
    fos: np.ndarray


def rain_to_threshold(
    fos_of_storm_depth: Callable[[float], float],
    trigger_fos: float,
    max_depth_mm: float,
    grid_points: int = DEFAULT_DEPTH_GRID_POINTS,
    depth_tolerance_mm: float = DEFAULT_DEPTH_TOLERANCE_MM,
) -> RainToThreshold:
    """Smallest storm depth [mm] whose FoS is at or below ``trigger_fos``.

    FoS(depth) is evaluated on ``grid_points`` evenly spaced depths from 0 to ``max_depth_mm``;
    the first grid interval where FoS - trigger changes sign is refined with
    ``scipy.optimize.brentq`` to ``depth_tolerance_mm``. See :func:`rain_to_thresholds`.
    """
    return rain_to_thresholds(
        fos_of_storm_depth, [trigger_fos], max_depth_mm, grid_points, depth_tolerance_mm
    )[0]


def rain_to_thresholds(
    fos_of_storm_depth: Callable[[float], float],
    trigger_levels: Sequence[float],
    max_depth_mm: float,
    grid_points: int = DEFAULT_DEPTH_GRID_POINTS,
    depth_tolerance_mm: float = DEFAULT_DEPTH_TOLERANCE_MM,
) -> tuple[RainToThreshold, ...]:
    """:func:`rain_to_threshold` for several trigger levels, sharing the FoS evaluations.

    Parameters
    ----------
    fos_of_storm_depth : callable
        depth [mm] -> FoS [-]: the service plugs in forecast -> water line -> solver here.
    trigger_levels : sequence of float
        Trigger FoS [-], each > 0.
    max_depth_mm : float
        Largest plausible storm depth for the duration [mm], > 0.
    grid_points : int
        Depths evaluated before refining, >= 2.
    depth_tolerance_mm : float
        Absolute tolerance of the depth found [mm], > 0.

    Returns
    -------
    tuple of RainToThreshold, in the order of ``trigger_levels``.

    Raises
    ------
    ConfigError
        Bad settings. FoS values that are not numbers give ``found=False`` with the depths in
        the message instead.
    """
    levels = [float(t) for t in trigger_levels]
    if not levels or not all(np.isfinite(t) and t > 0 for t in levels):
        raise ConfigError(f"trigger levels must be positive numbers, got {list(trigger_levels)}")
    if not (np.isfinite(max_depth_mm) and max_depth_mm > 0):
        raise ConfigError(f"largest storm depth must be more than 0 mm, got {max_depth_mm}")
    if int(grid_points) != grid_points or grid_points < 2:
        raise ConfigError(f"grid_points must be a whole number >= 2, got {grid_points}")
    if not (np.isfinite(depth_tolerance_mm) and depth_tolerance_mm > 0):
        raise ConfigError(f"depth tolerance must be more than 0 mm, got {depth_tolerance_mm}")

    depths = np.linspace(0.0, max_depth_mm, int(grid_points))
    fos = np.array([float(fos_of_storm_depth(float(d))) for d in depths])
    monotone = bool(np.all(np.diff(fos) <= MONOTONE_FOS_TOLERANCE))
    undefined = depths[~np.isfinite(fos)]

    results = []
    for trigger in levels:
        common = dict(
            trigger_fos=trigger,
            max_depth_mm=float(max_depth_mm),
            fos_without_rain=float(fos[0]),
            monotone=monotone,
            depths_mm=depths,
            fos=fos,
        )
        if undefined.size:
            message = (
                f"FoS could not be computed for storm depths {undefined.tolist()} mm; "
                "no answer for this section"
            )
            results.append(RainToThreshold(found=False, depth_mm=None, message=message, **common))
            continue
        at_or_below = np.flatnonzero(fos <= trigger)
        if at_or_below.size == 0:
            message = f"none up to {max_depth_mm:g} mm"
            results.append(RainToThreshold(found=False, depth_mm=None, message=message, **common))
            continue
        first = int(at_or_below[0])
        if first == 0:
            depth = 0.0
            message = f"FoS {fos[0]:.3f} is already at or below {trigger:g} without more rain"
        else:
            depth = float(
                brentq(
                    lambda d, trigger=trigger: fos_of_storm_depth(d) - trigger,
                    depths[first - 1],
                    depths[first],
                    xtol=depth_tolerance_mm,
                )
            )
            message = f"{depth:.1f} mm"
        if not monotone:
            message += (
                f" (FoS does not fall steadily with storm depth: smallest crossing seen on a "
                f"{int(grid_points)}-point grid)"
            )
        results.append(RainToThreshold(found=True, depth_mm=depth, message=message, **common))
    return tuple(results)
