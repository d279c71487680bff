"""Numbers and times as people read them: on the board, in the PDF report and in CSV exports.

One place decides how many digits a quantity is shown with, so that a page never prints
``c' 1.32806`` beside ``FoS 1.2``: strength to 0.1 kPa and 0.1 deg, unit weights to 0.1 kN/m3,
the factor of safety to 0.01 (the precision the inputs carry; common practice), heads to the
centimetre, rain to 0.1 mm (a tipping bucket's resolution is 0.2 mm or so).
"""

from __future__ import annotations

import math
import re

__all__ = ["DIGITS", "number_text", "plain_number", "short_time"]

_UTC_TEXT = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}(:\d{2}(\.\d+)?)?Z")

#: Decimals shown per canonical quantity name (also the keys the store's JSON uses).
DIGITS = {
    "fos": 2,
    "cohesion": 1,
    "cohesion_kpa": 1,
    "friction_angle": 1,
    "friction_angle_deg": 1,
    "undrained_strength": 1,
    "undrained_strength_kpa": 1,
    "unit_weight": 1,
    "unit_weight_saturated": 1,
    "head_m": 2,
    "rain_mm": 1,
    "pore_pressure_kpa": 1,
    "ru": 2,
}


def number_text(value, quantity: str | None = None, *, significant: int = 4) -> str:
    """``value`` with the decimals of ``quantity`` (see :data:`DIGITS`), else to
    ``significant`` figures; "" for None and "n/a" for NaN or infinity (never a sentinel)."""
    if value is None:
        return ""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    if not math.isfinite(value):
        return "n/a"
    if quantity in DIGITS:
        return f"{value:.{DIGITS[quantity]}f}"
    if isinstance(value, int):
        return str(value)
    return f"{value:.{significant}g}"


def plain_number(value):
    """A stored number for a CSV file: the shortest text that reads back as the value to 12
    significant figures, so that binary float noise (1.4000000000000001) never shows; other
    values unchanged."""
    if isinstance(value, float) and math.isfinite(value):
        text = f"{value:.12g}"
        return text if "e" in text or "." in text else text + ".0"
    return value


def short_time(text) -> str:
    """A stored UTC time ("2026-11-09T09:00:00Z") as "2026-11-09 09:00" for tables whose
    heading says UTC; anything else unchanged."""
    if not isinstance(text, str) or not _UTC_TEXT.fullmatch(text):
        return "" if text is None else str(text)
    return f"{text[:10]} {text[11:16]}"
