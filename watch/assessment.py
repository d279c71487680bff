"""Assessment of a section at given times: water lines from the stored readings, then the factor
of safety by warm re-evaluation of the cached critical surfaces, with a full search when the
warm result says the critical surface may have moved.

This is the calculation at the heart of the watch cycle; the service issue adds the stored
assessment records, triggers and notifications around it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import timedelta

import numpy as np
import pandas as pd

from solver.errors import SearchError
from solver.search import SearchResult, warm_reevaluate
from solver.section import Section
from watch.analysis import AnalysisResult, analyse
from watch.config import Piezometer, SiteConfig, WaterLineSettings
from watch.groundwater import DEFAULT_SIDE_RULE, WaterLineEstimate
from watch.waterlines import water_lines_for, water_lines_through

__all__ = [
    "DEFAULT_SIDE_RULE",
    "SectionAssessment",
    "water_lines_at",
    "assess_through_time",
]


@dataclass(frozen=True)
class SectionAssessment:
    """Factor of safety of one section at one time, and what it rests on."""

    section_id: str
    at: pd.Timestamp
    fos: float
    method: str
    evaluation: str  # "full search" or "warm re-evaluation"
    water_lines: dict[str, WaterLineEstimate]
    search: SearchResult
    reasons: tuple[str, ...] = field(default_factory=tuple)  # why a full search was run


def water_lines_at(
    section: Section,
    piezometers: tuple[Piezometer, ...] | list[Piezometer],
    readings: pd.DataFrame,
    at,
    default_max_age: timedelta,
    settings: Sequence[WaterLineSettings] = (),
) -> dict[str, WaterLineEstimate]:
    """Every water line of ``section`` at time ``at``, rebuilt from the stored heads.

    Kept for callers without a site configuration at hand; it delegates to
    :func:`watch.waterlines.water_lines_through`. With the site file, use
    :func:`watch.waterlines.water_lines_for`, which applies the configured side rules.

    Parameters
    ----------
    section : Section
        Its water lines' points are the design lines (fallback and shape).
    piezometers : sequence of Piezometer
        The site's piezometers on this section.
    readings : DataFrame
        Stored readings with ``instrument_id``, ``time_utc``, ``head_m`` [m], ``quality``.
    at : time (UTC)
    default_max_age : timedelta
        Oldest usable reading for piezometers without their own ``max_age_hours``.
    settings : sequence of WaterLineSettings
        Side rules and maximum ages per line (default: parallel to the design line).
    """
    return water_lines_through(
        section, piezometers, readings, at, default_max_age=default_max_age, settings=settings
    )


def assess_through_time(
    section: Section,
    config: SiteConfig,
    readings: pd.DataFrame,
    times,
    method: str | None = None,
) -> list[SectionAssessment]:
    """Factor of safety of ``section`` at each of ``times`` (UTC, increasing).

    The first time gets a full critical-surface search; each later time re-evaluates the
    cached best surfaces of the latest search with the new water lines, and runs a new full
    search whenever the warm result advises one (the factor of safety moved beyond the
    tolerance, or another cached surface became critical).
    """
    results: list[SectionAssessment] = []
    last_search: SearchResult | None = None
    for at in pd.DatetimeIndex(times):
        lines = water_lines_for(section, config, readings, at)
        current = section.with_water_lines({name: est.points for name, est in lines.items()})
        reasons: tuple[str, ...] = ()
        if last_search is not None:
            try:
                warm = warm_reevaluate(current, last_search, method=method)
            except SearchError as error:
                reasons = (f"warm re-evaluation impossible: {error}",)
            else:
                if not warm.full_search_advised:
                    results.append(SectionAssessment(
                        section.id, at, warm.fos, warm.method, "warm re-evaluation", lines,
                        last_search,
                    ))
                    continue
                reasons = tuple(warm.reasons)
        analysis: AnalysisResult = analyse(current, method)
        last_search = analysis.search
        results.append(SectionAssessment(
            section.id, at, analysis.fos, analysis.method, "full search", lines, last_search,
            reasons,
        ))
    return results


def readings_frame(rows) -> pd.DataFrame:
    """Stored reading rows (dicts) as the frame :func:`water_lines_at` expects."""
    frame = pd.DataFrame(list(rows))
    if frame.empty:
        return pd.DataFrame(columns=["instrument_id", "time_utc", "head_m", "quality"])
    frame["time_utc"] = pd.to_datetime(frame["time_utc"], utc=True)
    frame["head_m"] = frame["head_m"].astype(float)
    return frame.assign(head_m=np.where(frame["head_m"].notna(), frame["head_m"], np.nan))
