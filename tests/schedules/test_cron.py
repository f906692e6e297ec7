"""The cron parser against next firing times worked out by hand from a calendar.

Calendar facts used (checked against `date.strftime('%A')`): 2026-12-04 is a Friday; in
Europe/Berlin summer time starts on Sunday 2026-03-29 at 02:00 CET (clocks jump to 03:00 CEST,
01:00 UTC) and ends on Sunday 2026-10-25 at 03:00 CEST (clocks fall back to 02:00 CET, 01:00 UTC),
the EU rule of the last Sunday of March and of October (Directive 2000/84/EC).
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from service.errors import BadInput
from service.schedules.cron import next_after, parse_cron, zone

UTC_ZONE = zone("UTC")
BERLIN = zone("Europe/Berlin")


def at(*parts: int) -> datetime:
    return datetime(*parts, tzinfo=UTC)


@pytest.mark.parametrize(
    ("expression", "after", "expected"),
    [
        # every day at 03:00: later the same day, then the next day once it has passed
        ("0 3 * * *", at(2026, 12, 1, 2, 59), at(2026, 12, 1, 3, 0)),
        ("0 3 * * *", at(2026, 12, 1, 3, 0), at(2026, 12, 2, 3, 0)),
        # every 15 minutes in office hours on weekdays: Friday 17:50 -> Monday 09:00
        ("*/15 9-17 * * 1-5", at(2026, 12, 4, 17, 50), at(2026, 12, 7, 9, 0)),
        ("*/15 9-17 * * 1-5", at(2026, 12, 4, 9, 1), at(2026, 12, 4, 9, 15)),
        # lists and a stepped range: minutes 5 and 35, hours 1, 3 and 5
        ("5,35 1-5/2 * * *", at(2026, 12, 1, 3, 36), at(2026, 12, 1, 5, 5)),
        # "a/s": from a to the end of the field in steps of s
        ("10/20 0 * * *", at(2026, 12, 1, 0, 31), at(2026, 12, 1, 0, 50)),
        # day of week 7 is Sunday like 0: 2026-12-06 is a Sunday
        ("0 0 * * 7", at(2026, 12, 1), at(2026, 12, 6)),
        # both day fields restricted: either may match (the 13th, or a Friday: 2026-12-11)
        ("0 12 13 * 5", at(2026, 12, 4, 18, 0), at(2026, 12, 11, 12, 0)),
        # 29 February: the next leap year is 2028
        ("0 0 29 2 *", at(2026, 12, 1), at(2028, 2, 29)),
        # end of year rolls into January
        ("0 0 1 1 *", at(2026, 12, 31, 23, 59), at(2027, 1, 1)),
        # a one-value stepped range is that value: July only, so July 2027 (cronsim alone
        # reads "7-7/4" as July and November)
        ("0 0 1 7-7/4 *", at(2026, 7, 2), at(2027, 7, 1)),
        # "*/2" restricts the day of month, so either day field may match: Saturday the 5th
        # (cronsim alone treats a field starting with "*" as unrestricted: Friday the 11th)
        ("0 12 */2 * 5", at(2026, 12, 4, 12, 0), at(2026, 12, 5, 12, 0)),
    ],
)
def test_next_time_in_utc(expression: str, after: datetime, expected: datetime) -> None:
    assert next_after(parse_cron(expression), after, UTC_ZONE) == expected


def test_wall_clock_in_a_named_zone_follows_its_offset() -> None:
    # 03:00 in Berlin is 02:00 UTC in winter (CET, +01:00) and 01:00 UTC in summer (CEST, +02:00)
    cron = parse_cron("0 3 * * *")
    assert next_after(cron, at(2026, 12, 1), BERLIN) == at(2026, 12, 1, 2, 0)
    assert next_after(cron, at(2026, 7, 1), BERLIN) == at(2026, 7, 1, 1, 0)


def test_spring_gap_fires_once_when_the_gap_ends() -> None:
    # 02:30 does not exist in Berlin on 2026-03-29; it fires at 03:00 CEST (01:00 UTC), then
    # at 02:30 CEST (00:30 UTC) on the next day
    cron = parse_cron("30 2 * * *")
    first = next_after(cron, at(2026, 3, 28, 12, 0), BERLIN)
    assert first == at(2026, 3, 29, 1, 0)
    assert next_after(cron, first, BERLIN) == at(2026, 3, 30, 0, 30)


def test_repeated_autumn_hour_fires_once_at_its_first_occurrence() -> None:
    # 02:30 occurs twice in Berlin on 2026-10-25: 00:30 UTC (CEST) and 01:30 UTC (CET)
    cron = parse_cron("30 2 * * *")
    first = next_after(cron, at(2026, 10, 24, 12, 0), BERLIN)
    assert first == at(2026, 10, 25, 0, 30)
    # the second occurrence is skipped: next is the 26th at 02:30 CET = 01:30 UTC
    assert next_after(cron, first, BERLIN) == at(2026, 10, 26, 1, 30)
    # asked from inside the repeated hour, it does not fire again that night
    assert next_after(cron, at(2026, 10, 25, 1, 10), BERLIN) == at(2026, 10, 26, 1, 30)


def test_hourly_schedule_across_the_spring_gap_skips_no_instant_twice() -> None:
    # hourly at :00 across 00:00-04:00 CET/CEST on 2026-03-29: 23:00, 00:00 UTC, then 02:00 and
    # 03:00 local both land on 01:00 UTC (the gap's end) and fire once, then 02:00 UTC
    cron = parse_cron("0 * * * *")
    moment, seen = at(2026, 3, 28, 22, 30), []
    for _ in range(4):
        moment = next_after(cron, moment, BERLIN)
        seen.append(moment)
    assert seen == [at(2026, 3, 28, 23), at(2026, 3, 29, 0), at(2026, 3, 29, 1), at(2026, 3, 29, 2)]


def test_half_hourly_schedule_fires_when_the_spring_gap_ends() -> None:
    # 02:30 is skipped in Berlin on 2026-03-29 and fires at the gap's end, 03:00 CEST (01:00
    # UTC), then 03:30 CEST; Debian's cron, and cronsim's zone mode, skip it for a "*" hour
    cron = parse_cron("30 * * * *")
    first = next_after(cron, at(2026, 3, 29, 0, 45), BERLIN)
    assert first == at(2026, 3, 29, 1, 0)
    assert next_after(cron, first, BERLIN) == at(2026, 3, 29, 1, 30)


def test_hourly_schedule_across_the_autumn_repeat_fires_each_wall_hour_once() -> None:
    # 02:00 occurs at 00:00 UTC (CEST) and 01:00 UTC (CET) in Berlin on 2026-10-25: it fires at
    # the first only, then 03:00 CET (02:00 UTC); Debian's cron fires a "*" hour in both passes
    cron = parse_cron("0 * * * *")
    assert next_after(cron, at(2026, 10, 24, 23, 30), BERLIN) == at(2026, 10, 25, 0, 0)
    assert next_after(cron, at(2026, 10, 25, 0, 0), BERLIN) == at(2026, 10, 25, 2, 0)


@pytest.mark.parametrize(
    ("expression", "words"),
    [
        ("0 3 * *", "five fields"),
        ("60 * * * *", "minute field allows 0-59, not 60"),
        ("0 24 * * *", "hour field allows 0-23"),
        ("0 0 0 * *", "day of month field allows 1-31"),
        ("0 0 * 13 *", "month field allows 1-12"),
        ("0 0 * * 8", "day of week field allows 0-7"),
        ("0 0 * * mon", "'mon' where a number is needed"),
        # the cron library's extensions are not part of the accepted grammar
        ("0 0 L * *", "'L' where a number is needed"),
        ("0 0 * * 5#2", "'5#2' where a number is needed"),
        ("0 0 0 * * *", "not 6"),
        ("5-1 * * * *", "backwards range"),
        ("*/0 * * * *", "allows 1-60, not 0"),
        ("0 0 31 2 *", "never fires"),
    ],
)
def test_bad_expressions_name_the_field(expression: str, words: str) -> None:
    with pytest.raises(BadInput) as caught:
        parse_cron(expression)
    assert caught.value.field == "cron"
    assert words in caught.value.message


def test_unknown_zone_is_refused() -> None:
    with pytest.raises(BadInput, match="not an IANA time zone"):
        zone("Mars/Olympus_Mons")
