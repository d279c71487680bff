"""Feed readers on clean and deliberately broken samples, and local-time handling against
Python's zoneinfo."""

from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from watch.config import FeedSpec
from watch.errors import FeedError
from watch.feeds import FeedReader


def wide_spec(**changes) -> FeedSpec:
    base = dict(
        name="north", pattern="*.csv", layout="wide", time_column="Date/Time",
        time_format="%d/%m/%Y %H:%M", time_zone="UTC", missing=("", "-9999", "NAN"),
        columns={"P1 (kPa)": "P1", "Rain (mm)": "RG"},
    )  # fmt: skip
    base.update(changes)
    return FeedSpec(**base)


def read_all(path, spec, block_bytes=1 << 20):
    reader = FeedReader(path, spec, block_bytes=block_bytes)
    chunks = list(reader.chunks())
    readings = pd.concat([c.readings for c in chunks], ignore_index=True)
    problems = [p for c in chunks for p in c.problems]
    return readings, problems, sum(c.missing for c in chunks), reader


def write(tmp_path, text, name="north_1.csv", encoding="utf-8"):
    path = tmp_path / name
    path.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return path


def test_clean_wide_sample(tmp_path):
    path = write(
        tmp_path,
        "Logger 7 export\n"
        "Date/Time,P1 (kPa),Rain (mm),Battery (V)\n"
        "01/10/2026 00:00,35.2,0.0,12.8\n"
        "01/10/2026 00:15,35.4,1.2,12.8\n",
    )
    readings, problems, missing, reader = read_all(path, wide_spec(skip_rows=1))
    assert problems == []
    assert missing == 0
    p1 = readings[readings.instrument_id == "P1"].sort_values("time_utc")
    np.testing.assert_allclose(p1.raw_value, [35.2, 35.4], rtol=0)
    assert p1.line.tolist() == [3, 4]  # file lines, 1-based, after the preamble and header
    assert str(p1.time_utc.iloc[1]) == "2026-10-01 00:15:00"
    assert reader.header_notes == ["columns not mapped (ignored): Battery (V)"]


def test_broken_wide_sample_reports_every_bad_row(tmp_path):
    path = write(
        tmp_path,
        "Date/Time,P1 (kPa),Rain (mm)\n"
        "01/10/2026 00:00,35.2,0.0\n"  # 2 good
        "01/10/2026 00:15,35.x,1.0\n"  # 3 P1 garbage, rain good
        "01/10/2026 00:30,35.4\n"  # 4 too few fields
        "01/10/2026 00:45,35.5,0.2,9\n"  # 5 too many fields
        "\n"  # 6 blank: nothing
        "31/09/2026 01:00,35.6,0.2\n"  # 7 no such date
        "01/10/2026 01:15,-9999,NAN\n"  # 8 both missing
        '"01/10/2026 01:30","35.7",0.3\n'  # 9 quoted: good
        "01/10/2026 01:45,1e999,0.1\n"  # 10 overflow -> not finite
        "01/10/2026 02:00,35.9,0",  # 11 no line end: cut short
    )
    readings, problems, missing, _ = read_all(path, wide_spec())
    by_line = {}
    for p in problems:
        by_line.setdefault(p.line, []).append(p.reason)
    assert sorted(by_line) == [3, 4, 5, 7, 10, 11]
    assert "is not a number" in by_line[3][0]
    assert by_line[4] == ["expected 3 fields as in the header, found 2"]
    assert by_line[5] == ["expected 3 fields as in the header, found 4"]
    assert "does not match the format" in by_line[7][0]
    assert "not a number" in by_line[10][0]
    assert by_line[11] == ["last line has no line end (file cut short?)"]
    assert missing == 2
    stored = sorted(zip(readings.line, readings.instrument_id))
    assert stored == [(2, "P1"), (2, "RG"), (3, "RG"), (9, "P1"), (9, "RG"), (10, "RG")]
    bad = next(p for p in problems if p.line == 4)
    assert bad.raw_text == "01/10/2026 00:30,35.4"


def test_decimal_comma_semicolon_and_latin1(tmp_path):
    text = "Zeit;P1 (kPa);Temp °C\n01.10.2026 00:00;35,25;11,5\n01.10.2026 00:15;35,50;11,4\n"
    path = write(tmp_path, text, encoding="latin-1")
    spec = wide_spec(
        time_column="Zeit", time_format="%d.%m.%Y %H:%M", delimiter=";", decimal=",",
        encoding="latin-1", columns={"P1 (kPa)": "P1"}, temperature_columns={"Temp °C": "P1"},
    )  # fmt: skip
    readings, problems, _, _ = read_all(path, spec)
    assert problems == []
    np.testing.assert_allclose(readings.raw_value, [35.25, 35.50], rtol=0)
    np.testing.assert_allclose(readings.temperature_c, [11.5, 11.4], rtol=0)


def test_long_layout(tmp_path):
    path = write(
        tmp_path,
        "Sensor,Stamp,Value,Temp\n"
        "P1,2026-10-01T00:00:00+01:00,8120,11.0\n"
        "RG,2026-10-01T00:00:00+01:00,3,\n"
        ",2026-10-01T00:15:00+01:00,1,\n"
        "P1,2026-10-01T00:15:00+01:00,oops,11.0\n",
    )
    spec = FeedSpec(
        name="long", pattern="*.csv", layout="long", time_column="Stamp",
        time_format="%Y-%m-%dT%H:%M:%S%z", time_zone="UTC", instrument_column="Sensor",
        value_column="Value", temperature_column="Temp",
    )  # fmt: skip
    readings, problems, _, _ = read_all(path, spec)
    assert readings.instrument_id.tolist() == ["P1", "RG"]
    # The offset in the text wins: 00:00+01:00 is 23:00 UTC the day before.
    assert str(readings.time_utc.iloc[0]) == "2026-09-30 23:00:00"
    assert readings.temperature_c.iloc[0] == 11.0 and np.isnan(readings.temperature_c.iloc[1])
    assert [(p.line, p.reason) for p in problems] == [(4, "no instrument id"), (5, "value 'oops' is not a number")]


def test_header_faults_are_feed_errors(tmp_path):
    with pytest.raises(FeedError, match="no header line"):
        read_all(write(tmp_path, ""), wide_spec())
    with pytest.raises(FeedError, match=r"the header has no column 'Date/Time' \(time_column\)"):
        read_all(write(tmp_path, "Time,P1 (kPa)\n"), wide_spec())
    with pytest.raises(FeedError, match=r"none of the columns in \[feed.columns\] is in the header"):
        read_all(write(tmp_path, "Date/Time,P2\n"), wide_spec())


def test_small_blocks_give_the_same_result(tmp_path):
    rows = "".join(f"01/10/2026 {h:02d}:{m:02d},{30 + h + m / 100:.2f},0.{m}\n" for h in range(24) for m in range(0, 60, 5))
    path = write(tmp_path, "Date/Time,P1 (kPa),Rain (mm)\n" + rows)
    whole, _, _, _ = read_all(path, wide_spec())
    pieces, problems, _, _ = read_all(path, wide_spec(), block_bytes=97)
    assert problems == []
    key = ["instrument_id", "line"]
    pd.testing.assert_frame_equal(
        whole.sort_values(key).reset_index(drop=True), pieces.sort_values(key).reset_index(drop=True)
    )


# --- local time against zoneinfo ------------------------------------------------------------------


def _local_feed(tmp_path, instants, zone):
    """A wide feed whose times are the given UTC instants written in local time of ``zone``."""
    lines = ["Date/Time,P1 (kPa),Rain (mm)"]
    for i, instant in enumerate(instants):
        local = instant.astimezone(ZoneInfo(zone))
        lines.append(f"{local:%d/%m/%Y %H:%M},{i},0")
    return write(tmp_path, "\n".join(lines) + "\n")


def test_autumn_change_resolved_from_row_order(tmp_path):
    # Europe/London, 25 Oct 2026: 01:00-01:59 local happens twice (BST then GMT).
    start = datetime(2026, 10, 24, 23, 30, tzinfo=timezone.utc)
    instants = [start + timedelta(minutes=30 * k) for k in range(6)]  # 23:30Z ... 02:00Z
    path = _local_feed(tmp_path, instants, "Europe/London")
    readings, problems, _, _ = read_all(path, wide_spec(time_zone="Europe/London", columns={"P1 (kPa)": "P1"}))
    assert problems == []
    got = readings.sort_values("line").time_utc.astype("datetime64[s]").tolist()
    assert got == [i.replace(tzinfo=None) for i in instants]


def test_autumn_change_without_a_step_back_is_rejected(tmp_path):
    # Only one reading in the repeated hour: nothing tells BST from GMT.
    instants = [datetime(2026, 10, 24, 23, 0, tzinfo=timezone.utc), datetime(2026, 10, 25, 0, 30, tzinfo=timezone.utc),
                datetime(2026, 10, 25, 2, 0, tzinfo=timezone.utc)]  # fmt: skip
    path = _local_feed(tmp_path, instants, "Europe/London")
    readings, problems, _, _ = read_all(path, wide_spec(time_zone="Europe/London", columns={"P1 (kPa)": "P1"}))
    assert len(readings) == 2
    assert [p.line for p in problems] == [3]
    assert "occurs twice in Europe/London (clocks went back)" in problems[0].reason


def test_spring_gap_is_rejected(tmp_path):
    # Europe/London, 29 Mar 2026: 01:00-01:59 local does not exist.
    path = write(tmp_path, "Date/Time,P1 (kPa)\n29/03/2026 00:30,1\n29/03/2026 01:30,2\n29/03/2026 02:30,3\n")
    readings, problems, _, _ = read_all(path, wide_spec(time_zone="Europe/London", columns={"P1 (kPa)": "P1"}))
    assert readings.raw_value.tolist() == [1.0, 3.0]
    assert [p.line for p in problems] == [3]
    assert "does not exist in Europe/London" in problems[0].reason
    # 02:30 BST = 01:30 UTC (zoneinfo agrees).
    expected = datetime(2026, 3, 29, 2, 30, tzinfo=ZoneInfo("Europe/London")).astimezone(timezone.utc)
    assert readings.time_utc.iloc[1] == np.datetime64(expected.replace(tzinfo=None), "s")


# Clock changes of 2026 as UTC instants (from zoneinfo itself, see the assertion below).
_CHANGES = [
    ("Europe/London", datetime(2026, 3, 29, 1, 0)), ("Europe/London", datetime(2026, 10, 25, 1, 0)),
    ("Europe/Berlin", datetime(2026, 3, 29, 1, 0)), ("Europe/Berlin", datetime(2026, 10, 25, 1, 0)),
    ("America/New_York", datetime(2026, 3, 8, 7, 0)), ("America/New_York", datetime(2026, 11, 1, 6, 0)),
    ("Australia/Sydney", datetime(2026, 4, 4, 16, 0)), ("Australia/Sydney", datetime(2026, 10, 3, 16, 0)),
]  # fmt: skip


def test_clock_change_instants_are_right():
    for zone, instant in _CHANGES:
        before = (instant - timedelta(seconds=1)).replace(tzinfo=timezone.utc).astimezone(ZoneInfo(zone))
        after = instant.replace(tzinfo=timezone.utc).astimezone(ZoneInfo(zone))
        assert before.utcoffset() != after.utcoffset(), zone


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    change=st.sampled_from(_CHANGES),
    lead_minutes=st.integers(min_value=0, max_value=150),
    steps=st.lists(st.integers(min_value=1, max_value=45), min_size=1, max_size=30),
)
def test_local_times_agree_with_zoneinfo(tmp_path, change, lead_minutes, steps):
    """Any increasing series of instants written in local time comes back as the same UTC
    instants, except rows of a repeated hour that the order cannot settle, which are rejected
    (never guessed)."""
    zone, instant = change
    first = (instant - timedelta(minutes=lead_minutes)).replace(tzinfo=timezone.utc)
    instants = [first + timedelta(minutes=sum(steps[: k + 1])) for k in range(len(steps))]
    path = _local_feed(tmp_path, instants, zone)
    readings, problems, _, _ = read_all(path, wide_spec(time_zone=zone, columns={"P1 (kPa)": "P1"}))
    expected = {i + 2: instant.replace(tzinfo=None) for i, instant in enumerate(instants)}
    for line, time in zip(readings.line, readings.time_utc.astype("datetime64[s]").tolist()):
        assert time == expected[line], (line, zone)
    for problem in problems:
        local = instants[problem.line - 2].astimezone(ZoneInfo(zone)).replace(tzinfo=None)
        # Only a local time that zoneinfo also finds ambiguous (fold changes the offset) may be refused.
        assert local.replace(fold=0).replace(tzinfo=ZoneInfo(zone)).utcoffset() != local.replace(
            fold=1, tzinfo=ZoneInfo(zone)
        ).utcoffset(), problem
    assert len(readings) + len(problems) == len(instants)
