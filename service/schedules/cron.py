"""A small five-field cron parser and the next firing time, evaluated in a named zone.

Fields: minute hour day-of-month month day-of-week, each `*`, a number, a range `a-b`, a step
(`*/s`, `a-b/s`, `a/s`) or a comma list of those; day-of-week 0-7 with 0 and 7 both Sunday. As in
the classic cron, when both day fields are restricted a day matches if either does.

Daylight saving: cron times are wall-clock times in the schedule's zone. A wall time that does not
exist (the hour skipped in spring) fires at the first minute after the gap, once; a wall time that
occurs twice (the hour repeated in autumn) fires once, at its first occurrence (PEP 495 fold=0).
Both rules keep the mapping from wall time to UTC non-decreasing, so the first matching wall time
whose UTC instant is later than `after` is the next firing.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from service.errors import BadInput

_FIELDS = (
    ("minute", 0, 59),
    ("hour", 0, 23),
    ("day of month", 1, 31),
    ("month", 1, 12),
    ("day of week", 0, 7),
)
# Far enough for the rarest expression that can fire at all (29 February on a given weekday
# recurs within 28 years); an expression that never fires (31 February) is refused at parse time.
_SEARCH_YEARS = 29


@dataclass(frozen=True)
class Cron:
    """A parsed expression: the allowed values of each field."""

    text: str
    minutes: tuple[int, ...]
    hours: tuple[int, ...]
    days: frozenset[int]
    months: frozenset[int]
    weekdays: frozenset[int]  # 0 = Sunday
    days_restricted: bool
    weekdays_restricted: bool

    def matches_day(self, day: date) -> bool:
        """Whether `day` is a firing day (the classic OR rule when both day fields are set)."""
        if day.month not in self.months:
            return False
        in_days = day.day in self.days
        in_weekdays = (day.isoweekday() % 7) in self.weekdays
        if self.days_restricted and self.weekdays_restricted:
            return in_days or in_weekdays
        return in_days and in_weekdays


def _number(text: str, name: str, low: int, high: int, field: str) -> int:
    if not text.isdigit():
        raise BadInput(field, f"the {name} field has {text!r} where a number is needed.")
    value = int(text)
    if not low <= value <= high:
        raise BadInput(field, f"the {name} field allows {low}-{high}, not {value}.")
    return value


def _parse_field(text: str, name: str, low: int, high: int, field: str) -> set[int]:
    values: set[int] = set()
    for item in text.split(","):
        base, _, step_text = item.partition("/")
        step = _number(step_text, name, 1, high - low + 1, field) if step_text else 1
        if base == "*":
            start, end = low, high
        elif "-" in base:
            first, _, last = base.partition("-")
            start = _number(first, name, low, high, field)
            end = _number(last, name, low, high, field)
            if start > end:
                raise BadInput(field, f"the {name} field has the backwards range {base!r}.")
        else:
            start = _number(base, name, low, high, field)
            # "a/s" means from a to the end in steps of s; a bare number is just itself
            end = high if step_text else start
        values.update(range(start, end + 1, step))
    return values


def parse_cron(text: str, *, field: str = "cron") -> Cron:
    """Parse a five-field expression; BadInput names `field` and the cron field at fault."""
    parts = text.split()
    if len(parts) != 5:
        raise BadInput(
            field,
            f"a cron expression has five fields (minute hour day-of-month month day-of-week), "
            f"not {len(parts)}; for example '0 3 * * *' is every day at 03:00.",
        )
    sets = [
        _parse_field(part, name, low, high, field)
        for part, (name, low, high) in zip(parts, _FIELDS, strict=True)
    ]
    weekdays = frozenset(d % 7 for d in sets[4])
    cron = Cron(
        text=" ".join(parts),
        minutes=tuple(sorted(sets[0])),
        hours=tuple(sorted(sets[1])),
        days=frozenset(sets[2]),
        months=frozenset(sets[3]),
        weekdays=weekdays,
        days_restricted=parts[2] != "*",
        weekdays_restricted=parts[4] != "*",
    )
    longest = {1: 31, 2: 29, 3: 31, 4: 30, 5: 31, 6: 30, 7: 31, 8: 31, 9: 30, 10: 31, 11: 30}
    if not cron.weekdays_restricted and all(
        min(cron.days) > longest.get(m, 31) for m in cron.months
    ):
        raise BadInput(field, f"{text!r} names a day that none of its months has; it never fires.")
    return cron


def zone(name: str, *, field: str = "timezone") -> ZoneInfo:
    """The IANA zone `name` (e.g. Europe/Berlin); BadInput if the system does not know it."""
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise BadInput(
            field, f"{name!r} is not an IANA time zone name; use e.g. 'UTC' or 'Europe/Berlin'."
        ) from None


def _exists(wall: datetime, tz: ZoneInfo) -> bool:
    there = wall.replace(tzinfo=tz)
    return there.astimezone(UTC).astimezone(tz).replace(tzinfo=None) == wall


def wall_to_utc(wall: datetime, tz: ZoneInfo) -> datetime:
    """The UTC instant of a naive wall time: first occurrence if repeated, gap end if skipped."""
    probe = wall
    while not _exists(probe, tz):  # real gaps are whole minutes and at most a few hours long
        probe += timedelta(minutes=1)
    return probe.replace(tzinfo=tz, fold=0).astimezone(UTC)


def next_after(cron: Cron, after: datetime, tz: ZoneInfo) -> datetime:
    """The first firing strictly later than `after` (aware), as an aware UTC datetime."""
    if after.tzinfo is None:
        raise ValueError("next_after needs an aware datetime")
    # Start a little before the local wall time of `after`: a time inside a spring gap maps to
    # the gap's end, which can lie after `after` even though its wall time reads earlier.
    start = after.astimezone(tz).replace(tzinfo=None, second=0, microsecond=0) - timedelta(hours=3)
    day = start.date()
    for _ in range(366 * _SEARCH_YEARS):
        if cron.matches_day(day):
            for hour in cron.hours:
                for minute in cron.minutes:
                    wall = datetime(day.year, day.month, day.day, hour, minute)
                    if wall < start:
                        continue
                    instant = wall_to_utc(wall, tz)
                    if instant > after:
                        return instant
        day += timedelta(days=1)
    raise BadInput("cron", f"{cron.text!r} never fires; check the day and month fields.")
