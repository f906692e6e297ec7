"""Five-field cron expressions and their next firing time, evaluated in a named zone.

Fields: minute hour day-of-month month day-of-week, each `*`, a number, a range `a-b`, a step
(`*/s`, `a-b/s`, `a/s`) or a comma list of those; day-of-week 0-7 with 0 and 7 both Sunday. As in
the classic cron, when both day fields are restricted a day matches if either does.

The calendar walk (which wall times match, month lengths, leap years) is the cronsim library's.
Two parts stay ours, each because tests/schedules/test_cron.py shows the library reading a
case differently:
- the grammar: `parse_cron` reads each field into its numbers (one sentence naming the field
  when it cannot) and hands the library only `*` or plain lists, so the library's extensions
  (names, `L`, `#`, a seconds field) are never accepted and its readings of rarer forms never
  apply (the "7-7/4" and "*/2" cases of test_next_time_in_utc);
- daylight saving. cron times are wall-clock times in the schedule's zone. A wall time that does
  not exist (the hour skipped in spring) fires at the first minute after the gap, once; a wall
  time that occurs twice (the hour repeated in autumn) fires once, at its first occurrence (PEP
  495 fold=0). Both rules keep the mapping from wall time to UTC non-decreasing, so the first
  matching wall time whose UTC instant is later than `after` is the next firing. The library's
  own zone mode follows Debian's cron instead: a schedule with `*` in the minute or hour field
  skips a gap's wall times and fires in both passes of a repeated hour (the half-hourly spring
  and hourly autumn tests), and asked from inside the second pass of a repeated hour it answers
  the first pass, an instant earlier than the one it was asked from. So the library walks naive
  wall times and `wall_to_utc` places them.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from cronsim import CronSim, CronSimError

from service.errors import BadInput

_FIELDS = (
    ("minute", 0, 59),
    ("hour", 0, 23),
    ("day of month", 1, 31),
    ("month", 1, 12),
    ("day of week", 0, 7),
)
# Any fixed date serves to let the library check that some month has the named day.
_PROBE = datetime(2000, 1, 1)


@dataclass(frozen=True)
class Cron:
    """A checked expression: as written (single-spaced) and as handed to the library."""

    text: str
    spec: str


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
    """Check a five-field expression; BadInput names `field` and the cron field at fault."""
    parts = text.split()
    if len(parts) != 5:
        raise BadInput(
            field,
            f"a cron expression has five fields (minute hour day-of-month month day-of-week), "
            f"not {len(parts)}; for example '0 3 * * *' is every day at 03:00.",
        )
    # The library is handed each field as `*` or a plain list of numbers: its readings of the
    # rarer forms differ from ours ("7-7/4" as 7 to the end in steps of 4; a day field starting
    # with "*", such as "*/2", as unrestricted for the either-day rule).
    spec = " ".join(
        part if part == "*" else ",".join(map(str, sorted(_parse_field(part, *limits, field))))
        for part, limits in zip(parts, _FIELDS, strict=True)
    )
    cron = Cron(text=" ".join(parts), spec=spec)
    try:
        # every field is valid by now: the library refuses only a day none of the months has
        CronSim(cron.spec, _PROBE)
    except CronSimError:
        raise BadInput(
            field, f"{text!r} names a day that none of its months has; it never fires."
        ) from None
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
    # naive datetimes: the library walks wall times with no zone rules of its own
    for wall in CronSim(cron.spec, start):
        instant = wall_to_utc(wall, tz)
        if instant > after:
            return instant
    # the library gives up after 50 years without a match
    raise BadInput("cron", f"{cron.text!r} never fires; check the day and month fields.")
