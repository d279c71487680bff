"""The water lines of a section at a time, as the site file configures them, and their record.

This is the service side of :mod:`watch.groundwater`: it reads the site file's settings of each
water line (``[[section.water_line]]``: side rules, maximum reading age), the piezometers of
the section and their stored readings, draws every line through the latest good heads, and
stores each line with the readings it came from (``water_lines`` table, migration 2), so that
any factor of safety traces back to the feed rows (file and line).

Fallback order when a line's instruments are missing, stale or flagged (issue 5): the remaining
instruments; when none is left, the heads a calibrated rainfall-response model estimates for
them (:func:`watch.forecast.estimate_heads_from_store`); then the section's design line. The
line records which fallback it used and why.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import timedelta

import numpy as np
import pandas as pd

from solver.section import Section
from watch.config import Piezometer, SiteConfig, WaterLineSettings
from watch.errors import ConfigError
from watch.groundwater import (
    DEFAULT_SIDE_RULE,
    SOURCE_INSTRUMENTS,
    SOURCE_RAINFALL_MODEL,
    WaterLineEstimate,
    build_water_line,
    latest_heads,
)
from watch.store import TIME_FORMAT, Store, utc_text

__all__ = [
    "section_with_lines",
    "section_with_stored_lines",
    "ModelHeads",
    "HeadEstimator",
    "water_lines_for",
    "water_lines_through",
    "water_lines_from_store",
    "load_readings",
    "store_water_lines",
    "stored_water_lines",
]

#: Columns of the readings frame that :func:`load_readings` returns.
READING_COLUMNS = (
    "instrument_id", "time_utc", "head_m", "quality", "source_file_id", "source_line",
    "source_file",
)  # fmt: skip


@dataclass(frozen=True)
class ModelHeads:
    """Heads [m] a rainfall-response model estimates for some instruments at one time.

    Attributes
    ----------
    heads : dict of str to float
        Estimated head of each instrument the model could estimate.
    basis : dict of str to dict
        Per instrument, what the estimate rests on (model id, NSE, the last good reading it
        started from, the rain since), stored with the line.
    notes : tuple of str
        Why other instruments have no estimate (no model, poor fit, no reading to start from).
    """

    heads: dict[str, float] = field(default_factory=dict)
    basis: dict[str, dict] = field(default_factory=dict)
    notes: tuple[str, ...] = ()


#: ``estimate(instrument_ids, at) -> ModelHeads``: rainfall-model heads for a line whose
#: instruments all failed. Called only then.
HeadEstimator = Callable[[Sequence[str], pd.Timestamp], ModelHeads]


def water_lines_for(
    section: Section,
    config: SiteConfig,
    readings: pd.DataFrame,
    at,
    *,
    estimate_heads: HeadEstimator | None = None,
) -> dict[str, WaterLineEstimate]:
    """Every water line of ``section`` at ``at``, drawn as the site file configures it.

    Each line passes through the latest good head (at or before ``at``, no older than the
    maximum age) of the piezometers that inform it, and continues beyond the outermost ones by
    the side rules of its ``[[section.water_line]]`` entry (default: parallel to the design
    line on both sides). It is clipped to the ground unless the section lets water pond
    (``[ground] pond``) or the line is confined (``confined = true`` on the section file's
    ``[[water_line]]``: a piezometric level in a confined layer may stand above the ground).
    With ponding the line is drawn as read; the solver then applies the one ponding rule
    (solver.slicing): water ponds at the level of the line of the material at the ground
    surface, and an unconfined line's head counts up to that free water surface only.

    Maximum reading age of an instrument: its own ``max_age_hours``, else its line's
    ``max_age_hours``, else ``[ingest] stale_hours``.

    Parameters
    ----------
    section : solver.section.Section
        The section in force; its water lines' points are the design lines.
    config : SiteConfig
        The site file; must list ``section.id``.
    readings : pandas.DataFrame
        Stored readings (:func:`load_readings`): ``instrument_id``, ``time_utc``, ``head_m``
        [m], ``quality``, and ``source_file_id``, ``source_line`` for the record.
    at : time
        Assessment time (naive = UTC).
    estimate_heads : HeadEstimator, optional
        Rainfall-model heads for lines whose instruments all failed
        (:func:`watch.forecast.model_head_estimator`); without it such lines fall back to the
        design line.

    Returns
    -------
    dict of str to WaterLineEstimate
        By line name, in the section's order; each carries the readings it came from.

    Raises
    ------
    ConfigError
        The site file does not list the section, configures a water line the section file
        does not have, or a piezometer names a water line the section does not have.
    """
    ref = config.section(section.id)
    return water_lines_through(
        section,
        config.piezometers_of(section.id),
        readings,
        at,
        default_max_age=timedelta(hours=config.ingest.stale_hours),
        settings=ref.water_lines,
        estimate_heads=estimate_heads,
        where=f"site file [[section]] {section.id!r}",
    )


def water_lines_through(
    section: Section,
    piezometers: Sequence[Piezometer],
    readings: pd.DataFrame,
    at,
    *,
    default_max_age: timedelta,
    settings: Sequence[WaterLineSettings] = (),
    estimate_heads: HeadEstimator | None = None,
    heads: Mapping[str, float] | None = None,
    where: str = "site file",
) -> dict[str, WaterLineEstimate]:
    """:func:`water_lines_for` from explicit piezometers and line settings.

    ``heads`` replaces the measured heads (instrument -> head [m]) when given, for forecasts:
    the readings then only name the instruments' last readings for the record.
    """
    at = pd.Timestamp(at)
    at = at.tz_localize("UTC") if at.tzinfo is None else at.tz_convert("UTC")
    known = {line.name for line in section.water_lines}
    for item in settings:
        if item.name not in known:
            raise ConfigError(
                f"{where} water_line {item.name!r}: the section file has no [[water_line]] "
                f"of that name (it has: {', '.join(sorted(known)) or 'none'})"
            )
    ours = [p for p in piezometers if p.section == section.id]
    for p in ours:
        if p.water_line not in known:
            raise ConfigError(
                f"site file [[piezometer]] {p.id!r} key 'water_line' {p.water_line!r} is not a "
                f"[[water_line]] of section {section.id!r} (it has: {', '.join(sorted(known))})"
            )
    by_name = {item.name: item for item in settings}
    max_age = {}
    for p in ours:
        line_age = getattr(by_name.get(p.water_line), "max_age_hours", None)
        hours = p.max_age_hours or line_age
        max_age[p.id] = timedelta(hours=hours) if hours else default_max_age
    snapshot = latest_heads(readings, at, max_age, instruments=[p.id for p in ours])
    if heads is None:
        usable = snapshot.head_by_instrument
        reasons = snapshot.reasons
    else:
        usable = {str(k): float(v) for k, v in heads.items()}
        reasons = {p.id: "no forecast head" for p in ours if p.id not in usable}

    lines = {}
    for line in section.water_lines:
        item = by_name.get(line.name)
        on_line = {p.id: p.offset for p in ours if p.water_line == line.name}
        line_heads = {i: h for i, h in usable.items() if i in on_line}
        model = ModelHeads()
        if on_line and not line_heads and estimate_heads is not None:
            model = estimate_heads(sorted(on_line), at)
        estimate = build_water_line(
            on_line,
            line_heads,
            section.ground,
            item.left if item else DEFAULT_SIDE_RULE,
            item.right if item else DEFAULT_SIDE_RULE,
            design_points=line.points,
            allow_ponding=section.pond or line.confined,
            model_heads={i: h for i, h in model.heads.items() if i in on_line},
            exclusions={i: r for i, r in reasons.items() if i in on_line},
        )
        lines[line.name] = _with_record(estimate, snapshot.heads, model, forecast=heads is not None)
    return lines


def _with_record(
    estimate: WaterLineEstimate, chosen: pd.DataFrame, model: ModelHeads, forecast: bool
) -> WaterLineEstimate:
    """The line with the readings (or model estimates) it came from, and why a model could
    not help when it was asked."""
    if estimate.source == SOURCE_RAINFALL_MODEL:
        record = tuple(
            {"instrument_id": i, "head_m": estimate.heads_used[i], "estimated_by": "rainfall model",
             **model.basis.get(i, {})}  # fmt: skip
            for i in estimate.instruments_used
        )
        return replace(estimate, readings=record)
    if estimate.source != SOURCE_INSTRUMENTS:
        if model.notes:
            reason = f"{estimate.fallback_reason}; rainfall model: {'; '.join(model.notes)}"
            return replace(estimate, fallback_reason=reason)
        return estimate
    record = []
    for instrument in estimate.instruments_used:
        entry = {"instrument_id": instrument, "head_m": estimate.heads_used[instrument]}
        if forecast:
            entry["estimated_by"] = "rainfall-response forecast"
        if instrument in chosen.index:
            row = chosen.loc[instrument]
            reading = {
                "time_utc": row["time_utc"].strftime(TIME_FORMAT),
                "head_m": float(row["head_m"]),
            }
            for key in ("source_file_id", "source_line"):
                if key in row.index and pd.notna(row[key]):
                    reading[key] = int(row[key])
            if "source_file" in row.index and isinstance(row["source_file"], str):
                reading["source_file"] = row["source_file"]
            if forecast:
                entry["last_reading"] = reading
            else:
                entry.update(reading)
        record.append(entry)
    return replace(estimate, readings=tuple(record))


def section_with_lines(section: Section, lines: Mapping[str, WaterLineEstimate]) -> Section:
    """The section with the water lines drawn at a time in place of its design lines.

    A line through piezometer heads (measured, or estimated for the instruments by a
    rainfall-response model) is a piezometric line: each head is the pressure head at a tip,
    u = gamma_w (h - y), so the inclination correction u = gamma_w h cos^2(theta) is switched
    off for it whatever the section file says. That correction belongs to a phreatic line drawn
    as the water table with seepage parallel to the slope, where the equipotentials are normal
    to the flow and the pressure head at depth is h_w cos^2(theta) (Skempton and DeLory 1957;
    Duncan, Wright and Brandon 2014, infinite slope with seepage parallel to the slope): a
    design-line fallback keeps the section file's setting.
    """
    return _with_lines(section, {n: (line.points, line.source) for n, line in lines.items()})


def section_with_stored_lines(section: Section, rows: Sequence[dict]) -> Section:
    """The section with the water lines stored with an assessment (rows of
    :func:`stored_water_lines`), each piezometric one without the inclination correction, as
    :func:`section_with_lines` drew them."""
    return _with_lines(section, {r["line_name"]: (r["points"], r["source"]) for r in rows})


def _with_lines(section: Section, lines: Mapping[str, tuple]) -> Section:
    """``lines``: {name: (points, source)}; the correction is off for piezometric sources."""
    piezometric = {name: False for name, (_, source) in lines.items()
                   if source in (SOURCE_INSTRUMENTS, SOURCE_RAINFALL_MODEL)}
    return section.with_water_lines({n: points for n, (points, _) in lines.items()}, piezometric)


# --------------------------------------------------------------------------------------------
# Readings in, lines out
# --------------------------------------------------------------------------------------------


def load_readings(store: Store, instrument_ids: Sequence[str], start=None, end=None) -> pd.DataFrame:
    """Stored piezometer readings of ``instrument_ids`` with ``start <= time_utc <= end``.

    Parameters
    ----------
    store : Store
    instrument_ids : sequence of str
    start, end : time, optional
        Bounds (naive = UTC); None for no bound.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`READING_COLUMNS` (``time_utc`` as UTC timestamps, ``head_m`` [m] NaN
        where the reading gave none), sorted by instrument and time.
    """
    start_text = None if start is None else utc_text(_utc(start).to_pydatetime())
    end_text = None if end is None else utc_text(_utc(end).to_pydatetime())
    rows = [r for i in instrument_ids for r in store.readings(i, start_text, end_text)]
    return _frame(rows)


def _frame(rows: list[dict]) -> pd.DataFrame:
    # Column by column: much cheaper than a frame of dicts for the few rows of a section.
    columns = {c: [r.get(c) for r in rows] for c in READING_COLUMNS}
    columns["time_utc"] = pd.to_datetime(columns["time_utc"], format=TIME_FORMAT, utc=True)
    columns["head_m"] = pd.to_numeric(pd.Series(columns["head_m"], dtype=object),
                                      errors="coerce").to_numpy(dtype=float)
    return pd.DataFrame(columns)


def _utc(time) -> pd.Timestamp:
    stamp = pd.Timestamp(time)
    return stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")


def water_lines_from_store(
    store: Store,
    section: Section,
    config: SiteConfig,
    at,
    *,
    use_rainfall_models: bool = True,
) -> dict[str, WaterLineEstimate]:
    """:func:`water_lines_for` with the readings loaded from the store: the readings within
    each instrument's maximum age before ``at``, plus each instrument's last reading before
    that (so an instrument that fell silent is reported stale with its last time, not
    missing), and the stored rainfall-response models as the second fallback."""
    at = _utc(at)
    ref = config.section(section.id)
    ours = config.piezometers_of(section.id)
    line_age = {w.name: w.max_age_hours for w in ref.water_lines}
    hours = [p.max_age_hours or line_age.get(p.water_line) or config.ingest.stale_hours
             for p in ours]  # fmt: skip
    start = at - pd.Timedelta(hours=max(hours, default=config.ingest.stale_hours))
    frame = load_readings(store, [p.id for p in ours], start, at)
    earlier = [
        row for p in ours
        if (row := store.latest_reading_before(p.id, utc_text(start.to_pydatetime())))
    ]  # fmt: skip
    if earlier:
        frame = pd.concat([_frame(earlier), frame], ignore_index=True) if len(frame) else _frame(earlier)
    estimator = None
    if use_rainfall_models:
        from watch.forecast import model_head_estimator  # forecast builds on this module

        estimator = model_head_estimator(store, config)
    return water_lines_for(section, config, frame, at, estimate_heads=estimator)


def store_water_lines(
    store: Store,
    assessment_id: int | None,
    section_id: str,
    at,
    lines: Mapping[str, WaterLineEstimate],
    created_utc: str | None = None,
) -> list[int]:
    """Record the water lines an assessment used, each with the readings it came from.

    Call inside ``store.atomic()`` (the assessment cycle's transaction), so that an
    assessment and its lines are written together or not at all.

    Parameters
    ----------
    store : Store
    assessment_id : int or None
        The ``assessments`` row the lines belong to; None for lines stored on their own.
    section_id : str
    at : time
        Time the lines describe (naive = UTC).
    lines : mapping of str to WaterLineEstimate
    created_utc : str, optional
        When the record is written (store text); default ``at``. Pass the clock's now.

    Returns
    -------
    list of int
        The ``water_lines`` row ids, in the order of ``lines``.
    """
    time_text = utc_text(_utc(at).to_pydatetime())
    ids = []
    for name, line in lines.items():
        details = {
            "left_rule": line.left_rule,
            "right_rule": line.right_rule,
            "instruments_used": list(line.instruments_used),
            "heads_used_m": line.heads_used,
            "excluded": line.excluded,
            "warnings": list(line.warnings),
        }
        ids.append(store.insert_water_line({
            "assessment_id": assessment_id,
            "section_id": section_id,
            "line_name": name,
            "time_utc": time_text,
            "points_json": json.dumps(np.asarray(line.points, dtype=float).tolist()),
            "source": line.source,
            "fallback": line.fallback,
            "fallback_reason": line.fallback_reason,
            "readings_json": json.dumps(list(line.readings), default=_plain),
            "details_json": json.dumps(details, default=_plain),
            "created_utc": created_utc or time_text,
        }))
    return ids


def stored_water_lines(
    store: Store, *, assessment_id: int | None = None, section_id: str | None = None
) -> list[dict]:
    """Stored water lines, JSON columns decoded: ``points`` (k x 2 array [m]), ``readings``
    (list of dict), ``details`` (dict)."""
    rows = store.water_line_rows(assessment_id=assessment_id, section_id=section_id)
    for row in rows:
        row["points"] = np.array(json.loads(row.pop("points_json")), dtype=float)
        row["readings"] = json.loads(row.pop("readings_json"))
        row["details"] = json.loads(row.pop("details_json"))
    return rows


def _plain(value):
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if hasattr(value, "item"):
        return value.item()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")
