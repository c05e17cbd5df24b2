"""A clock the tests move by hand."""
from datetime import datetime, timedelta, timezone

from service.clock import format_time


class FakeClock:
    def __init__(self, start: str = "2026-12-01T08:00:00+00:00"):
        self.now = datetime.fromisoformat(start)

    def __call__(self) -> str:
        return format_time(self.now)

    def advance(self, **kw) -> None:
        self.now += timedelta(**kw)

    def epoch(self) -> float:
        return self.now.astimezone(timezone.utc).timestamp()
