"""Piezometric lines from piezometer readings: the heads at a time, and the line through them.

Pure functions on pandas and numpy inputs (no store, no clock): the service reads the readings
from the store, calls these, and stores the line with the readings it came from.

Two steps:

1. :func:`latest_heads` picks, for each instrument, its latest good reading at or before the
   assessment time and no older than a maximum age, and says why every other instrument was
   left out (``missing``, ``stale`` or ``flagged``).
2. :func:`build_water_line` draws one water regime's piezometric line through the heads of its
   instruments, ordered along the section: linear in x between instruments, a configured rule
   beyond the outermost one on each side (:class:`SideRule`), clipped to the ground surface
   unless the section lets water pond. When instruments are excluded the line falls back, in
   this order, to the remaining instruments, to rainfall-model estimates of the heads, then to
   the section's design line, and records which fallback it used and why.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import timedelta

import numpy as np
import pandas as pd

from watch.errors import ConfigError, ModelError

#: Quality codes of a reading that may inform a water line.
GOOD_QUALITY = ("ok",)

#: Reasons an instrument is left out of a water line.
MISSING = "missing"  # no reading at all at or before the assessment time
STALE = "stale"  # no reading within the maximum age
FLAGGED = "flagged"  # readings within the maximum age, but none of good quality

#: Sources of a water line, in fallback order.
SOURCE_INSTRUMENTS = "instruments"
SOURCE_RAINFALL_MODEL = "rainfall model"
SOURCE_DESIGN_LINE = "design line"

#: Fallbacks recorded on a water line.
FALLBACK_NONE = "none"
FALLBACK_REMAINING = "remaining instruments"
FALLBACK_RAINFALL_MODEL = "rainfall model"
FALLBACK_DESIGN_LINE = "design line"

_READING_COLUMNS = ("instrument_id", "time_utc", "head_m", "quality")


# --------------------------------------------------------------------------------------------
# Heads at a time
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Exclusion:
    """Why one instrument does not inform the water line at the assessment time.

    Attributes
    ----------
    instrument_id : str
    reason : str
        ``"missing"``, ``"stale"`` or ``"flagged"``.
    detail : str
        One sentence a duty engineer can act on.
    last_time_utc : pandas.Timestamp or None
        Time of the instrument's latest reading of any quality at or before the assessment
        time (None when it has none).
    """

    instrument_id: str
    reason: str
    detail: str
    last_time_utc: pd.Timestamp | None = None


@dataclass(frozen=True)
class HeadSnapshot:
    """The heads of a set of instruments at one time, and why the others are left out.

    Attributes
    ----------
    at : pandas.Timestamp
        Assessment time (UTC).
    heads : pandas.DataFrame
        One row per instrument that informs the line, indexed by ``instrument_id``: ``head_m``
        [m], ``time_utc`` of the reading, ``age_hours`` [h], ``reading_index`` (the index label
        of the row in the readings given, so the line can be traced back to the feed row), and
        every other column of the readings (for example ``source_file``, ``source_line``).
    excluded : dict of str to Exclusion
        The instruments left out, with the reason.
    """

    at: pd.Timestamp
    heads: pd.DataFrame
    excluded: dict[str, Exclusion] = field(default_factory=dict)

    @property
    def head_by_instrument(self) -> dict[str, float]:
        """``{instrument_id: head_m}`` of the instruments that inform the line."""
        return {str(k): float(v) for k, v in self.heads["head_m"].items()}

    @property
    def reasons(self) -> dict[str, str]:
        """``{instrument_id: reason}`` of the instruments left out."""
        return {k: v.reason for k, v in self.excluded.items()}


def latest_heads(
    readings: pd.DataFrame,
    at,
    max_age: timedelta | Mapping[str, timedelta],
    instruments: Iterable[str] | None = None,
    good_quality: Iterable[str] = GOOD_QUALITY,
) -> HeadSnapshot:
    """Latest good head of each instrument at or before ``at``, no older than ``max_age``.

    Parameters
    ----------
    readings : pandas.DataFrame
        Columns ``instrument_id``, ``time_utc``, ``head_m`` [m] (elevation of the water:
        tip elevation + u / gamma_w, already converted by the ingest) and ``quality``; any other
        columns are carried into the result. Naive times are taken as UTC (the store's
        convention); aware times are converted to UTC.
    at : str, datetime or pandas.Timestamp
        Assessment time; naive means UTC.
    max_age : timedelta or mapping of instrument_id to timedelta
        Oldest reading that may still inform the line [time], one value for all instruments
        or one per instrument (the site file's ``max_age_hours``). A reading exactly
        ``max_age`` old still counts.
    instruments : iterable of str, optional
        The instruments expected to report; those without any reading at or before ``at`` are
        reported ``missing``. Default: the instruments present in ``readings``.
    good_quality : iterable of str
        Quality codes of usable readings (default ``("ok",)``). A good reading whose head is
        not a number counts as flagged.

    Returns
    -------
    HeadSnapshot

    Raises
    ------
    ConfigError
        A required column is missing, or a maximum age is negative or not given for an
        instrument.
    """
    missing_columns = [c for c in _READING_COLUMNS if c not in readings.columns]
    if missing_columns:
        raise ConfigError(
            f"readings lack the column(s) {missing_columns}; expected {list(_READING_COLUMNS)}"
        )
    at = _as_utc(at)
    # Plain arrays and a loop over the (few) instruments: the assessment cycle calls this for
    # every section, and a chain of pandas operations on frames of a few hundred rows cost
    # about ten times as much.
    ids = readings["instrument_id"].astype(str).to_numpy()
    times = pd.DatetimeIndex(pd.to_datetime(readings["time_utc"], utc=True))
    stamps = times.tz_convert(None).to_numpy()  # UTC, naive: plain comparisons
    heads = readings["head_m"].astype(float).to_numpy()
    good = readings["quality"].isin(list(good_quality)).to_numpy() & np.isfinite(heads)
    expected = sorted(set(ids)) if instruments is None else [str(i) for i in instruments]
    ages = _max_ages(max_age, expected)
    now = at.tz_convert(None).to_datetime64()

    chosen_rows: list[int] = []
    excluded = {}
    for instrument in sorted(expected):
        mine = np.flatnonzero((ids == instrument) & (stamps <= now))
        within = (now - stamps[mine]) <= ages[instrument].to_timedelta64()
        usable = mine[within & good[mine]]
        if usable.size:
            # The latest; of readings at the same time, the last one given.
            latest = stamps[usable].max()
            chosen_rows.append(int(usable[np.flatnonzero(stamps[usable] == latest)[-1]]))
            continue
        limit_h = ages[instrument] / pd.Timedelta(hours=1)
        if mine.size == 0:
            excluded[instrument] = Exclusion(
                instrument, MISSING, f"{instrument}: no reading at or before {at.isoformat()}"
            )
            continue
        last = pd.Timestamp(stamps[mine].max()).tz_localize("UTC")
        if within.any():
            excluded[instrument] = Exclusion(
                instrument,
                FLAGGED,
                f"{instrument}: every reading in the last {limit_h:g} h is flagged "
                f"(latest {last.isoformat()})",
                last,
            )
        else:
            excluded[instrument] = Exclusion(
                instrument,
                STALE,
                f"{instrument}: latest reading {last.isoformat()} is older than "
                f"{limit_h:g} h",
                last,
            )
    excluded = {i: excluded[i] for i in expected if i in excluded}

    columns = {name: readings[name].array[chosen_rows] for name in readings.columns
               if name != "instrument_id"}  # fmt: skip
    columns["time_utc"] = times[chosen_rows]
    columns["head_m"] = heads[chosen_rows]
    columns["reading_index"] = readings.index[chosen_rows]
    columns["age_hours"] = (now - stamps[chosen_rows]) / np.timedelta64(1, "h")
    chosen = pd.DataFrame(columns, index=pd.Index(ids[chosen_rows], name="instrument_id"))
    return HeadSnapshot(at=at, heads=chosen, excluded=excluded)


def _as_utc(time) -> pd.Timestamp:
    stamp = pd.Timestamp(time)
    if stamp.tzinfo is None:
        return stamp.tz_localize("UTC")
    return stamp.tz_convert("UTC")


def _max_ages(max_age, instruments: list[str]) -> dict[str, pd.Timedelta]:
    if isinstance(max_age, Mapping):
        lacking = [i for i in instruments if i not in max_age]
        if lacking:
            raise ConfigError(f"no maximum reading age given for instrument(s) {lacking}")
        ages = {i: pd.Timedelta(max_age[i]) for i in instruments}
    else:
        ages = dict.fromkeys(instruments, pd.Timedelta(max_age))
    for instrument, age in ages.items():
        if pd.isna(age) or age < pd.Timedelta(0):
            raise ConfigError(
                f"maximum reading age of {instrument} must be zero or positive, got {age}"
            )
    return ages


# --------------------------------------------------------------------------------------------
# The line through the heads
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SideRule:
    """How the piezometric line continues beyond the outermost instrument on one side.

    Build with the class methods: :meth:`hold_level`, :meth:`below_ground`,
    :meth:`fixed_level`, :meth:`design_line`.

    Attributes
    ----------
    kind : str
        ``"hold level"``, ``"below ground"``, ``"fixed level"``, ``"design line"`` or
        ``"parallel to design line"`` (the design line shifted up or down by the outermost
        instrument's departure from it, so one instrument moves the whole line).
    depth : float or None
        Depth of the line below the ground surface [m] (``below ground``).
    level : float or None
        Elevation of the water [m] (``fixed level``).
    offset : float or None
        Offset x [m] from which a fixed level holds out to the end of the section (for example
        a toe ditch); None means at the end of the section only.
    """

    kind: str
    depth: float | None = None
    level: float | None = None
    offset: float | None = None

    KINDS = ("hold level", "below ground", "fixed level", "design line", "parallel to design line")

    def __post_init__(self) -> None:
        if self.kind not in self.KINDS:
            raise ConfigError(f"unknown water-line side rule {self.kind!r}; valid: {self.KINDS}")
        if self.kind == "below ground" and not (
            self.depth is not None and np.isfinite(self.depth) and self.depth >= 0
        ):
            raise ConfigError(
                f"'below ground' rule needs a depth >= 0 m below the surface, got {self.depth}"
            )
        if self.kind == "fixed level" and not (
            self.level is not None and np.isfinite(self.level)
        ):
            raise ConfigError(f"'fixed level' rule needs a finite level [m], got {self.level}")

    @classmethod
    def hold_level(cls) -> "SideRule":
        """Keep the head of the outermost instrument out to the end of the section."""
        return cls("hold level")

    @classmethod
    def below_ground(cls, depth_m: float) -> "SideRule":
        """Follow the ground surface ``depth_m`` [m] below it."""
        return cls("below ground", depth=float(depth_m))

    @classmethod
    def fixed_level(cls, level_m: float, offset_m: float | None = None) -> "SideRule":
        """Water at elevation ``level_m`` [m] from ``offset_m`` [m] (or the section end) out."""
        return cls(
            "fixed level",
            level=float(level_m),
            offset=None if offset_m is None else float(offset_m),
        )

    @classmethod
    def design_line(cls) -> "SideRule":
        """Follow the section's design water line."""
        return cls("design line")

    @classmethod
    def parallel_to_design_line(cls) -> "SideRule":
        """Follow the design line shifted by the outermost instrument's departure from it."""
        return cls("parallel to design line")

    def describe(self) -> str:
        if self.kind == "below ground":
            return f"below ground ({self.depth:g} m)"
        if self.kind == "fixed level":
            where = "" if self.offset is None else f" from x = {self.offset:g} m"
            return f"fixed level ({self.level:g} m{where})"
        return self.kind


#: Beyond the outermost instrument of a water line, unless the site file says otherwise, the line
#: keeps the shape of the section's design line, shifted by that instrument's departure from it.
#: A design line drawn by the engineer carries the site's drainage pattern; one instrument tells
#: how far it has risen.
DEFAULT_SIDE_RULE = SideRule.parallel_to_design_line()


@dataclass(frozen=True)
class WaterLineEstimate:
    """One water regime's piezometric line at one time, and how it was drawn.

    Attributes
    ----------
    points : ndarray (k, 2)
        Vertices (x [m], y [m]), x strictly increasing, spanning the ground surface.
    source : str
        ``"instruments"``, ``"rainfall model"`` or ``"design line"``.
    instruments_used : tuple of str
        Instruments whose heads (measured, or estimated by the rainfall model when
        ``source`` says so) the line passes through, ordered along the section.
    heads_used : dict of str to float
        Their heads [m] before any clipping to the ground.
    left_rule, right_rule : str
        The rule used beyond the outermost instrument on each side ("" for a design line).
    fallback : str
        ``"none"``, ``"remaining instruments"``, ``"rainfall model"`` or ``"design line"``.
    fallback_reason : str
        Why the fallback was needed ("" when none).
    excluded : dict of str to str
        Instruments of this line left out, with the reason.
    warnings : tuple of str
        Anything a reviewer should know (heads above the ground clipped, for example).
    readings : tuple of dict
        What the heads came from, one dict per instrument used, so the line traces back to
        the feed: for measured heads ``instrument_id``, ``time_utc``, ``head_m``,
        ``source_file_id``, ``source_line`` (and ``source_file`` when known); for
        rainfall-model heads the model and the reading it started from. Filled by
        :mod:`watch.waterlines`; empty from :func:`build_water_line` alone.
    """

    points: np.ndarray
    source: str
    instruments_used: tuple[str, ...]
    heads_used: dict[str, float]
    left_rule: str
    right_rule: str
    fallback: str
    fallback_reason: str
    excluded: dict[str, str]
    warnings: tuple[str, ...] = ()
    readings: tuple[dict, ...] = ()

    def elevation_at(self, x) -> np.ndarray:
        """Elevation of the line [m] at offsets ``x`` [m] (linear between vertices)."""
        return np.interp(x, self.points[:, 0], self.points[:, 1])


def build_water_line(
    instrument_offsets: Mapping[str, float],
    heads: Mapping[str, float],
    ground_points,
    left_rule: SideRule,
    right_rule: SideRule,
    design_points=None,
    allow_ponding: bool = False,
    model_heads: Mapping[str, float] | None = None,
    exclusions: Mapping[str, str] | None = None,
) -> WaterLineEstimate:
    """Piezometric line of one water regime through the heads of its instruments.

    Between instruments the line is linear in x through the heads; beyond the outermost
    instrument on each side it follows that side's :class:`SideRule`, and it spans the whole
    ground surface. Unless ``allow_ponding``, the line is clipped to the ground,
    y = min(y_line, y_ground), with the crossing points and the ground vertices added so that
    the clipped line is drawn exactly.

    Fallback order when instruments of the line have no usable head: (1) the remaining
    instruments; (2) when none remains, rainfall-model estimates of the heads of the
    instruments (``model_heads``); (3) the design line. The choice and the reason are recorded.

    Parameters
    ----------
    instrument_offsets : mapping of str to float
        Offset x [m] along the section of every instrument that informs this line.
    heads : mapping of str to float
        Usable measured head [m] of each instrument (for example
        ``HeadSnapshot.head_by_instrument``); instruments absent or not finite are excluded.
    ground_points : array_like (n, 2)
        Ground surface (x [m], y [m]), x strictly increasing.
    left_rule, right_rule : SideRule
        How the line continues towards smaller and larger x beyond the outermost instruments.
    design_points : array_like (m, 2), optional
        The section's design water line (x [m], y [m]); held level beyond its ends.
    allow_ponding : bool
        The section lets water stand above the ground (``[ground] pond``).
    model_heads : mapping of str to float, optional
        Rainfall-response estimates of the heads [m] of the instruments.
    exclusions : mapping of str to str, optional
        Why instruments are excluded (``HeadSnapshot.reasons``), recorded on the line.

    Returns
    -------
    WaterLineEstimate

    Raises
    ------
    ConfigError
        Bad ground or design polyline, an instrument off the section or two at the same
        offset, a head for an instrument not on this line, a design-line rule without a design
        line, a fixed-level offset on the wrong side of the instruments.
    ModelError
        No instrument head, no model estimate and no design line: nothing to draw.
    """
    ground = _polyline(ground_points, "ground surface")
    design = None if design_points is None else _polyline(design_points, "design water line")
    x_start, x_end = ground[0, 0], ground[-1, 0]
    offsets = {str(k): float(v) for k, v in instrument_offsets.items()}
    _check_offsets(offsets, x_start, x_end)
    for name, given in (("head", heads), ("rainfall-model head", model_heads or {})):
        strangers = sorted(set(map(str, given)) - set(offsets))
        if strangers:
            raise ConfigError(
                f"{name} given for instrument(s) {strangers} that do not inform this water "
                f"line (its instruments: {sorted(offsets)})"
            )
    for side, rule in (("left", left_rule), ("right", right_rule)):
        if rule.kind in ("design line", "parallel to design line") and design is None:
            raise ConfigError(f"{side} side rule '{rule.kind}' needs the section's design line")

    measured = _finite_heads(heads, offsets)
    exclusions = dict(exclusions or {})
    excluded = {i: exclusions.get(i, "no head given") for i in offsets if i not in measured}
    why = "; ".join(f"{i}: {r}" for i, r in sorted(excluded.items()))

    if measured:
        source, anchors = SOURCE_INSTRUMENTS, measured
        fallback = FALLBACK_REMAINING if excluded else FALLBACK_NONE
        reason = f"left out {why}" if excluded else ""
    elif _finite_heads(model_heads or {}, offsets):
        source, anchors = SOURCE_RAINFALL_MODEL, _finite_heads(model_heads, offsets)
        fallback = FALLBACK_RAINFALL_MODEL
        reason = f"no usable instrument head ({why}); heads estimated by the rainfall model"
    elif design is not None:
        fallback = FALLBACK_DESIGN_LINE
        reason = (
            f"no usable instrument head ({why}) and no rainfall-model estimate"
            if offsets
            else "no piezometer informs this line"
        )
        points = _clip_to_ground(_design_between(design, x_start, x_end), ground, allow_ponding)
        return WaterLineEstimate(
            points, SOURCE_DESIGN_LINE, (), {}, "", "", fallback, reason, excluded
        )
    else:
        raise ModelError(
            "cannot draw the water line: no usable instrument head"
            + (f" ({why})" if why else "")
            + ", no rainfall-model estimate and no design line"
        )

    order = sorted(anchors, key=offsets.get)
    anchor_x = np.array([offsets[i] for i in order])
    anchor_y = np.array([anchors[i] for i in order])
    left = _extension(left_rule, "left", anchor_x[0], anchor_y[0], x_start, ground, design)
    right = _extension(right_rule, "right", anchor_x[-1], anchor_y[-1], x_end, ground, design)
    line = np.vstack([left, np.column_stack([anchor_x, anchor_y]), right])

    points = _clip_to_ground(line, ground, allow_ponding)
    warnings = ()
    if not allow_ponding:
        ground_at = np.interp(anchor_x, ground[:, 0], ground[:, 1])
        warnings = tuple(
            f"head of {i} ({h:.2f} m) is above the ground ({g:.2f} m) at x = {x:g} m; "
            "line clipped to the ground"
            for i, x, h, g in zip(order, anchor_x, anchor_y, ground_at)
            if h > g
        )
    return WaterLineEstimate(
        points=points,
        source=source,
        instruments_used=tuple(order),
        heads_used={i: float(anchors[i]) for i in order},
        left_rule=left_rule.describe(),
        right_rule=right_rule.describe(),
        fallback=fallback,
        fallback_reason=reason,
        excluded=excluded,
        warnings=warnings,
    )


def _polyline(points, name: str) -> np.ndarray:
    array = np.asarray(points, dtype=float)
    if array.ndim != 2 or array.shape[1] != 2 or array.shape[0] < 2:
        raise ConfigError(f"{name} must be at least two (x, y) points, got shape {array.shape}")
    if not np.all(np.isfinite(array)):
        raise ConfigError(f"{name} has a coordinate that is not a finite number: {array.tolist()}")
    if np.any(np.diff(array[:, 0]) <= 0):
        raise ConfigError(f"{name} x must increase strictly, got {array[:, 0].tolist()}")
    return array


def _check_offsets(offsets: dict[str, float], x_start: float, x_end: float) -> None:
    for instrument, x in offsets.items():
        if not (np.isfinite(x) and x_start <= x <= x_end):
            raise ConfigError(
                f"instrument {instrument} at x = {x} m is off the section "
                f"({x_start:g} to {x_end:g} m)"
            )
    by_x: dict[float, str] = {}
    for instrument, x in offsets.items():
        if x in by_x:
            raise ConfigError(
                f"instruments {by_x[x]} and {instrument} of one water line are both at "
                f"x = {x:g} m; give them separate water lines or separate offsets"
            )
        by_x[x] = instrument


def _finite_heads(heads: Mapping[str, float] | None, offsets) -> dict[str, float]:
    return {
        str(i): float(h)
        for i, h in (heads or {}).items()
        if str(i) in offsets and h is not None and np.isfinite(h)
    }


def _extension(rule, side, anchor_x, anchor_y, x_end, ground, design) -> np.ndarray:
    """Vertices of the line strictly beyond the outermost instrument, ordered by x.

    ``x_end`` is the end of the section on that side; the returned vertices lie between it
    (included) and ``anchor_x`` (excluded)."""
    beyond = (lambda x: x < anchor_x) if side == "left" else (lambda x: x > anchor_x)
    if anchor_x == x_end:
        return np.empty((0, 2))
    if rule.kind == "hold level":
        xs, ys = np.array([x_end]), np.array([anchor_y])
    elif rule.kind == "below ground":
        keep = beyond(ground[:, 0])
        xs, ys = ground[keep, 0], ground[keep, 1] - rule.depth
    elif rule.kind == "fixed level":
        if rule.offset is None:
            xs = np.array([x_end])
        elif beyond(rule.offset) and (min(x_end, anchor_x) <= rule.offset <= max(x_end, anchor_x)):
            xs = np.unique([x_end, rule.offset])
        else:
            raise ConfigError(
                f"{side} fixed level starts at x = {rule.offset:g} m, which is not between the "
                f"outermost instrument (x = {anchor_x:g} m) and the section end "
                f"(x = {x_end:g} m)"
            )
        ys = np.full(xs.shape, rule.level)
    else:  # design line, or parallel to it
        inner = design[beyond(design[:, 0]), 0]
        inner = inner[(inner > min(x_end, anchor_x)) & (inner < max(x_end, anchor_x))]
        xs = np.unique(np.concatenate([[x_end], inner]))
        ys = np.interp(xs, design[:, 0], design[:, 1])
        if rule.kind == "parallel to design line":
            ys = ys + (anchor_y - np.interp(anchor_x, design[:, 0], design[:, 1]))
    return np.column_stack([xs, ys])


def _design_between(design: np.ndarray, x_start: float, x_end: float) -> np.ndarray:
    inner = design[(design[:, 0] > x_start) & (design[:, 0] < x_end), 0]
    xs = np.concatenate([[x_start], inner, [x_end]])
    return np.column_stack([xs, np.interp(xs, design[:, 0], design[:, 1])])


def _clip_to_ground(line: np.ndarray, ground: np.ndarray, allow_ponding: bool) -> np.ndarray:
    """The line, or min(line, ground) with the ground vertices and crossings added."""
    if allow_ponding:
        return line
    xs = np.union1d(line[:, 0], ground[:, 0])
    below = np.interp(xs, line[:, 0], line[:, 1]) - np.interp(xs, ground[:, 0], ground[:, 1])
    change = np.flatnonzero(below[:-1] * below[1:] < 0)
    crossings = xs[change] + below[change] / (below[change] - below[change + 1]) * (
        xs[change + 1] - xs[change]
    )
    xs = np.union1d(xs, crossings)
    ys = np.minimum(
        np.interp(xs, line[:, 0], line[:, 1]), np.interp(xs, ground[:, 0], ground[:, 1])
    )
    return np.column_stack([xs, ys])


# --------------------------------------------------------------------------------------------
# Rate of rise
# --------------------------------------------------------------------------------------------


#: Fewest readings a rate of rise is fitted to: a line through two points has no redundancy,
#: so one spike would set the rate alone (our choice, not a published rule).
MIN_RATE_READINGS = 3


def rate_of_rise(times, heads) -> float:
    """Rate of rise of a head [m/h]: the least-squares slope of head on time.

        rate = sum (t_i - t_mean)(h_i - h_mean) / sum (t_i - t_mean)^2

    the ordinary least-squares estimate of the slope of a straight line (for example
    Montgomery, Peck and Vining 2012, Introduction to Linear Regression Analysis, 5th ed.,
    eq. 2.11; the equation number from memory). Every reading in the window counts alike, so one noisy reading at either end
    does not set the rate as it would in a difference of the first and last readings.

    Parameters
    ----------
    times : array_like of datetime-like
        Reading times (naive = UTC), any order.
    heads : array_like of float
        Heads [m], same length; readings whose head is not finite are left out.

    Returns
    -------
    float
        Slope [m/h] (negative when the head falls); NaN with fewer than
        :data:`MIN_RATE_READINGS` finite readings or when they all share one time.
    """
    stamps = pd.DatetimeIndex(pd.to_datetime(times, utc=True))
    values = np.asarray(heads, dtype=float).reshape(-1)
    if values.size != len(stamps):
        raise ConfigError(f"{len(stamps)} times but {values.size} heads for a rate of rise")
    keep = np.isfinite(values)
    if keep.sum() < MIN_RATE_READINGS:
        return float("nan")
    hours = (stamps[keep] - stamps[keep][0]) / pd.Timedelta(hours=1)
    hours = np.asarray(hours, dtype=float)
    spread = hours - hours.mean()
    denominator = float(np.sum(spread**2))
    if denominator == 0.0:
        return float("nan")
    return float(np.sum(spread * (values[keep] - values[keep].mean())) / denominator)
