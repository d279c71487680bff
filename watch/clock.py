"""Injectable time: every part of the service asks a clock for "now", so that a whole season can
be replayed in a test in seconds and no code reads the system time behind the caller's back."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from typing import Protocol

__all__ = ["Clock", "SystemClock", "ManualClock"]


class Clock(Protocol):
    def now(self) -> datetime:
        """The current time, timezone-aware UTC."""


class SystemClock:
    """The machine's clock, in UTC."""

    def now(self) -> datetime:
        return datetime.now(timezone.utc)


@dataclass
class ManualClock:
    """A clock that only moves when told to (replays and tests)."""

    current: datetime = field(default_factory=lambda: datetime(2000, 1, 1, tzinfo=timezone.utc))

    def __post_init__(self) -> None:
        if self.current.tzinfo is None:
            raise ValueError(f"ManualClock needs a timezone-aware time, got {self.current!r}")
        self.current = self.current.astimezone(timezone.utc)

    def now(self) -> datetime:
        return self.current

    def advance(self, step: timedelta) -> datetime:
        if step < timedelta(0):
            raise ValueError(f"a clock does not go back: step {step}")
        self.current = self.current + step
        return self.current

    def set(self, moment: datetime) -> datetime:
        if moment.tzinfo is None:
            raise ValueError(f"naive time {moment!r}: give a time zone")
        moment = moment.astimezone(timezone.utc)
        if moment < self.current:
            raise ValueError(f"a clock does not go back: {moment} < {self.current}")
        self.current = moment
        return self.current
