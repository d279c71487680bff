"""Rain you can trust: the stored depths of a gauge do not depend on the order or lateness of its
files (resets included), and every gauge has a physical plausibility limit by default."""

import json
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.watch.delivery_helpers import cut_into_files, delivery_orders
from watch.config import RainGauge
from watch.forecast import rainfall_state
from watch.ingest import ingest
from watch.quality import GREATEST_12_MONTH_RAINFALL_MM, RainBefore, rain_record, world_record_rainfall_mm
from watch.workspace import init_workspace

NOW = datetime(2026, 10, 30, tzinfo=timezone.utc)
START = datetime(2026, 10, 1, tzinfo=timezone.utc)

SITE = """
[site]
id = "raintest"
name = "Invented rain test site"

[[rain_gauge]]
id = "RC"
reporting = "cumulative_mm"

[[rain_gauge]]
id = "RI"
reporting = "interval_mm"

[[feed]]
name = "gauges"
pattern = "gauges_*.csv"
layout = "wide"
time_column = "Time"
time_format = "%Y-%m-%d %H:%M"
time_zone = "UTC"
[feed.columns]
"RC" = "RC"
"RI" = "RI"

[ingest]
min_file_age_seconds = 0
oldest_reading = "2020-01-01"
"""


def _workspace(folder):
    template = folder.parent / f"{folder.name}.toml"
    template.write_text(SITE)
    return init_workspace(folder, template)


def _file(rows) -> str:
    """rows: (minutes after START, cumulative total RC, interval depth RI)."""
    return "Time,RC,RI\n" + "".join(
        f"{(START + timedelta(minutes=m)):%Y-%m-%d %H:%M},{c!r},{i!r}\n" for m, c, i in rows
    )


def _stored(workspace):
    with workspace.open_store(read_only=True) as store:
        return [(r["gauge_id"], r["time_utc"], r["rain_mm"], r["quality"], r["gap_start_utc"]) for r in store.db.query(
            "SELECT * FROM rainfall ORDER BY gauge_id, time_utc")]  # fmt: skip


def _deliver(workspace, files, order):
    for k in order:
        path = workspace.root / f"gauges_{k}.csv"
        path.write_text(files[k])
        ingest(workspace, [path], now=NOW, progress=False)


@st.composite
def _gauge_record(draw):
    """A 15-minute running total with resets, cut into 3 or 4 files of consecutive rows."""
    n = draw(st.integers(8, 40))
    increments = draw(st.lists(st.sampled_from([0.0, 0.0, 0.2, 0.4, 1.2, 3.6]), min_size=n, max_size=n))
    resets = set(draw(st.lists(st.integers(1, n - 1), max_size=3)))
    total, totals = draw(st.sampled_from([0.0, 57.4, 812.2])), []
    for i, step in enumerate(increments):
        total = round((0.0 if i in resets else total) + step, 1)
        totals.append(total)
    return cut_into_files(draw, [(15 * i, totals[i], increments[i]) for i in range(n)], _file)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(files=_gauge_record(), data=st.data())
def test_every_delivery_order_of_a_cumulative_gauge_stores_identical_depths(tmp_path_factory, files, data):
    chosen = delivery_orders(data, len(files))
    results = []
    for order in chosen:
        workspace = _workspace(tmp_path_factory.mktemp("order"))
        _deliver(workspace, files, order)
        results.append(_stored(workspace))
    assert all(result == results[0] for result in results[1:]), chosen


def test_a_week_delivered_late_gives_the_in_order_depths_without_an_invented_burst(tmp_path):
    # Three weeks of 15-minute totals; the middle week arrives last (the W41, W43, W42).
    rows = [(15 * i, round(0.2 * (i // 3), 1), 0.0) for i in range(3 * 96)]
    files = [_file(rows[:96]), _file(rows[96:192]), _file(rows[192:])]
    in_order, late = _workspace(tmp_path / "a"), _workspace(tmp_path / "b")
    _deliver(in_order, files, (0, 1, 2))
    _deliver(late, files, (0, 2, 1))
    assert _stored(late) == _stored(in_order)
    depths = [r[2] for r in _stored(late) if r[0] == "RC" and r[3] == "ok"]
    assert max(depths) == pytest.approx(0.2, abs=1e-9)  # 0.2 mm per 45 min, never a burst
    assert sum(depths) == pytest.approx(0.2 * ((3 * 96 - 1) // 3), abs=1e-9)


def test_a_value_without_valid_range_above_every_record_is_flagged_and_feeds_no_trigger(tmp_path):
    workspace = _workspace(tmp_path / "ws")
    rows = [(15 * i, 10.0 + 0.2 * i, 0.2) for i in range(8)]
    rows[5] = (75, 1e308, 1e308)  # the reproduction: neither gauge has a valid_range
    _deliver(workspace, {0: _file(rows)}, (0,))
    stored = {(g, t[11:16]): (rain, q) for g, t, rain, q, _ in _stored(workspace)}
    assert stored[("RC", "01:15")][1] == "implausible" and stored[("RI", "01:15")][1] == "implausible"
    # The readings after the wild total keep their true depth: 0.2 mm from the last good base.
    assert stored[("RC", "01:30")] == (pytest.approx(0.4, abs=1e-9), "ok")
    with workspace.open_store(read_only=True) as store:
        for gauge in ("RC", "RI"):
            state = rainfall_state(store, gauge, START + timedelta(hours=2))
            assert not any(e.exceeded for e in state.exceedances)
            assert state.totals_mm["rain_1h_mm"] < 2.0


def test_world_record_envelope_lies_just_above_the_records():
    # Records from memory (WMO World Weather and Climate Extremes Archive): 38 mm in 1 min
    # (Barot, Guadeloupe, 1970), 305 mm in 42 min (Holt, Missouri, 1947), 1825 mm in 24 h
    # (Foc-Foc, La Reunion, 1966). Jennings (1950) drew the envelope over such records, so it
    # is above each and within a factor of two of it.
    for duration_h, record_mm in ((1 / 60, 38.0), (42 / 60, 305.0), (24.0, 1825.0)):
        envelope = float(world_record_rainfall_mm(duration_h))
        assert record_mm <= envelope <= 2.0 * record_mm
    # P = 422 D^0.475: 422 mm at 1 h exactly (the form of the source).
    assert float(world_record_rainfall_mm(1.0)) == pytest.approx(422.0, rel=1e-12)


def test_rain_record_of_a_reset_and_a_level_shift():
    gauge = RainGauge("G", None, "cumulative_mm")
    times = np.datetime64("2026-10-01T00:00", "s") + np.arange(7) * np.timedelta64(15 * 60, "s")
    raw = np.array([5.0, 5.4, 0.2, 0.6, 900.0, 900.2, 900.4])
    rain, quality, _ = rain_record(times, raw, gauge, RainBefore(times[0] - 900, 5.0, times[0] - 900, 5.0))
    # rain_i = c_i - c_base, or c_i after a reset (c_i < c_base). 900 - 0.6 mm in 15 min is above
    # the envelope (422 x 0.25^0.475 = 218 mm): a level shift, flagged; 900.2 continues from it.
    np.testing.assert_allclose(rain[[0, 1, 2, 3, 5, 6]], [0.0, 0.4, 0.2, 0.4, 0.2, 0.2], atol=1e-9)
    assert list(quality) == ["ok", "ok", "ok", "ok", "implausible", "ok", "ok"]
    # A running total above the world's greatest 12-month rainfall cannot be a season's rain.
    _, quality, _ = rain_record(times[:1], [GREATEST_12_MONTH_RAINFALL_MM + 1], gauge)
    assert list(quality) == ["implausible"]


def test_the_first_reading_after_a_missing_week_is_marked_until_the_week_lands(tmp_path):
    # W41 and W43 of a 15-minute running total; W42 missing: the first reading of W43 carries
    # the missing week's rain in one step, and is marked as following a gap since the last
    # reading of W41 (a 1-week increment is far above GAP_FACTOR x 15 min).
    rows = [(15 * i, round(0.2 * (i // 3), 1), 0.0) for i in range(3 * 96)]
    files = [_file(rows[:96]), _file(rows[96:192]), _file(rows[192:])]
    workspace = _workspace(tmp_path / "late")
    _deliver(workspace, files, (0, 2))
    marked = [(t, rain, gap) for g, t, rain, q, gap in _stored(workspace) if g == "RC" and gap is not None]
    first_of_w43 = (START + timedelta(minutes=15 * 192)).strftime("%Y-%m-%dT%H:%M:%SZ")
    last_of_w41 = (START + timedelta(minutes=15 * 95)).strftime("%Y-%m-%dT%H:%M:%SZ")
    # 0.2 mm per 3 readings: 12.8 at reading 192, 6.2 at reading 95 -> 6.6 mm over the gap.
    assert marked == [(first_of_w43, pytest.approx(6.6, abs=1e-9), last_of_w41)]
    # The interval gauge reports per interval: its readings after the gap carry no gap's rain.
    assert all(gap is None for g, *_, gap in _stored(workspace) if g == "RI")
    # The missing week lands: the increments are derived again and nothing is marked; the
    # store equals that of in-order delivery.
    _deliver(workspace, files, (1,))
    in_order = _workspace(tmp_path / "in_order")
    _deliver(in_order, files, (0, 1, 2))
    assert _stored(workspace) == _stored(in_order)
    assert all(gap is None for *_, gap in _stored(workspace))


def test_a_gap_then_a_jump_triggers_no_1_hour_rain_rule(tmp_path):
    # The demo site with a rule on 1-hour rain; its cumulative gauge RG-FE reports every 15
    # minutes, stops for three days, and its first reading after the gap is 40 mm higher.
    from tests.watch.cycle_helpers import make_workspace
    from watch.clock import ManualClock
    from watch.cycle import SectionResult, run_cycle

    workspace = make_workspace(tmp_path / "ws", """
[[trigger]]
name = "test-rain-1h"
quantity = "rain_mm"
level = "watch"
window_hours = 1
trigger = 10.0
clear = 1.0
on_delay_hours = 0
off_delay_hours = 0
""")  # fmt: skip
    start = datetime(2026, 1, 5, tzinfo=timezone.utc)

    def feed(name, readings):
        path = tmp_path / name
        path.write_text("timestamp_utc;channel;value\n" + "".join(
            f"{(start + timedelta(minutes=m)):%Y-%m-%dT%H:%M:%SZ};RG-FE;{str(total).replace('.', ',')}\n"
            for m, total in readings))  # fmt: skip
        return path

    def cycle(at):
        clock = ManualClock(at)
        return run_cycle(workspace, clock, sections=["FE-210"], ingest_waiting=False,
                         compute=lambda task: SectionResult(task.section_id, "failed", message="not calculated"))

    def fired(report):
        return [c for s in report.sections for c in s.changes if c.startswith("test-rain-1h") and "firing" in c]

    before = [(15 * i, 100.0) for i in range(96)]  # a dry day
    gap_end = 15 * 95 + 3 * 24 * 60
    after = [(gap_end, 140.0)]
    at = start + timedelta(minutes=gap_end)
    ingest(workspace, [feed("fellhollow_a.csv", before), feed("fellhollow_b.csv", after)], now=at, progress=False)
    with workspace.open_store(read_only=True) as store:
        (row,) = store.readings("RG-FE", at.strftime("%Y-%m-%dT%H:%M:%SZ"))
    assert (row["rain_mm"], row["quality"]) == (pytest.approx(40.0), "ok") and row["gap_start_utc"] is not None
    assert fired(cycle(at)) == []  # 40 mm over three days, not in the hour
    # The rule itself works: 15 mm in the 15 minutes before the end of the next hour fires it.
    later = [(gap_end + 15 * k, 140.0) for k in range(1, 4)] + [(gap_end + 60, 155.0), (gap_end + 75, 155.0)]
    at = start + timedelta(minutes=gap_end + 75)
    ingest(workspace, [feed("fellhollow_c.csv", later)], now=at, progress=False)
    assert fired(cycle(at)) != []


def test_readings_and_rain_show_the_reading_after_a_gap(tmp_path):
    from click.testing import CliRunner

    from watch.cli import main

    rows = [(15 * i, round(0.2 * (i // 3), 1), 0.0) for i in range(3 * 96)]
    workspace = _workspace(tmp_path / "ws")
    _deliver(workspace, [_file(rows[:96]), None, _file(rows[192:])], (0, 2))
    first_of_w43 = (START + timedelta(minutes=15 * 192)).strftime("%Y-%m-%dT%H:%M:%SZ")
    last_of_w41 = (START + timedelta(minutes=15 * 95)).strftime("%Y-%m-%dT%H:%M:%SZ")
    runner = CliRunner()
    result = runner.invoke(main, ["readings", "RC", "-w", str(workspace.root), "--json"])
    assert result.exit_code == 0, result.output
    marked = {r["time_utc"]: r["gap_start_utc"] for r in json.loads(result.output) if r["gap_start_utc"]}
    assert marked == {first_of_w43: last_of_w41}
    result = runner.invoke(main, ["readings", "RC", "-w", str(workspace.root), "--csv"])
    assert f"{first_of_w43}," in result.output and "gap_start_utc" in result.output.splitlines()[0]
    result = runner.invoke(main, ["rain", "RC", "-w", str(workspace.root), "--at", first_of_w43])
    assert result.exit_code == 0, result.output
    assert "1 h n/a" in result.output
    assert f"6.6 mm reported at {first_of_w43} after a gap in the record since {last_of_w41}" in result.output
    result = runner.invoke(main, ["rain", "RC", "-w", str(workspace.root), "--at", first_of_w43, "--json"])
    state = json.loads(result.output)
    assert state["totals_mm"]["rain_1h_mm"] is None
    assert state["reports_after_gap"] == [{"time_utc": first_of_w43, "gap_start_utc": last_of_w41,
                                           "rain_mm": pytest.approx(6.6, abs=1e-9)}]  # fmt: skip
