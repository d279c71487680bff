from datetime import datetime, timedelta, timezone

import pytest

from watch.clock import ManualClock, SystemClock


def test_system_clock_is_aware_utc():
    assert SystemClock().now().utcoffset() == timedelta(0)


def test_manual_clock_moves_only_forward():
    clock = ManualClock(datetime(2026, 1, 15, tzinfo=timezone.utc))
    assert clock.advance(timedelta(minutes=15)) == datetime(2026, 1, 15, 0, 15, tzinfo=timezone.utc)
    with pytest.raises(ValueError, match="does not go back"):
        clock.advance(timedelta(minutes=-1))
    with pytest.raises(ValueError, match="does not go back"):
        clock.set(datetime(2026, 1, 14, tzinfo=timezone.utc))
    with pytest.raises(ValueError, match="timezone-aware"):
        ManualClock(datetime(2026, 1, 1))
