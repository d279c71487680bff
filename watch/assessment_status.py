"""What a stored assessment's status means, in the words people read.

The cycle (:mod:`watch.cycle`) stores one status per assessment. Only ``ok`` is a factor of
safety of the slope as the readings show it: it alone is plotted as the series, feeds trends and
changes, and is watched by the trigger levels. ``no live data`` is a result computed on the
section's design water lines because a water line with piezometers had no live reading: a real
calculation (it converged) on assumed water, shown as such and never as "did not converge".
"""

from __future__ import annotations

__all__ = [
    "OK",
    "ON_DESIGN_LINES",
    "NOT_CONVERGED",
    "FAILED",
    "UNCHANGED",
    "FOS_BASIS_READINGS",
    "FOS_BASIS_DESIGN_LINES",
    "usable",
    "on_design_lines",
    "status_words",
    "fos_basis",
]

OK = "ok"
#: Stored status of a factor of safety computed on the design water lines (no live readings).
ON_DESIGN_LINES = "no live data"
NOT_CONVERGED = "not converged"
FAILED = "failed"
UNCHANGED = "unchanged"

#: What a factor of safety rests on (the ``fos_basis`` of JSON output).
FOS_BASIS_READINGS = "live readings"
FOS_BASIS_DESIGN_LINES = "design water lines (no live readings)"

_WORDS = {
    OK: "converged, on live readings",
    ON_DESIGN_LINES: "on the design water lines: no live readings (not a result of the readings)",
    NOT_CONVERGED: "did not converge",
    FAILED: "failed",
    UNCHANGED: "unchanged (inputs as at the last assessment)",
}


def usable(status: str | None) -> bool:
    """True for the one status whose factor of safety people may read as the slope's."""
    return status == OK


def on_design_lines(status: str | None) -> bool:
    """True for a factor of safety computed on the design water lines (no live readings)."""
    return status == ON_DESIGN_LINES


def status_words(status: str | None) -> str:
    """The status of an assessment as people read it."""
    return _WORDS.get(status or "", str(status or "unknown"))


def fos_basis(status: str | None) -> str | None:
    """What the factor of safety of an assessment rests on; None when it has none to show
    (the calculation did not converge or failed)."""
    if usable(status):
        return FOS_BASIS_READINGS
    if on_design_lines(status):
        return FOS_BASIS_DESIGN_LINES
    return None
