"""Time windows written in a named IANA time zone and turned into UTC ranges.

A window is a half-open range ``[start, end)``. Users write it in local wall-clock time (``--tz
Europe/Zurich``); the store keeps naive UTC timestamps, so every window is converted here, once. Daylight
saving time is handled by :mod:`zoneinfo`: a local time that a DST jump skips is refused, and a local
time that occurs twice (the autumn fall-back hour) takes its first occurrence (``fold=0``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from attrib.errors import UsageError

_WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")


@dataclass(frozen=True)
class Window:
    """A half-open UTC time range ``[start, end)`` and the zone it was written in.

    ``start`` and ``end`` are naive datetimes in UTC, as in the store. ``label`` is the text the user
    wrote (or a description built from it).
    """

    start: datetime
    end: datetime
    tz: str = "UTC"
    label: str = ""

    @property
    def local_start(self) -> datetime:
        """The start as an aware datetime in the window's zone."""
        return self.start.replace(tzinfo=UTC).astimezone(zone(self.tz))

    @property
    def weekday(self) -> str:
        """The local weekday of the start, e.g. ``"Monday"``."""
        return _WEEKDAYS[self.local_start.weekday()]

    @property
    def hours(self) -> float:
        """Length of the window in hours (real elapsed time, so 23 or 25 across a DST change)."""
        return (self.end - self.start).total_seconds() / 3600.0


def zone(name: str) -> ZoneInfo:
    """Return the IANA zone ``name`` or raise :class:`UsageError` naming it.

    >>> zone("Europe/Zurich").key
    'Europe/Zurich'
    """
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise UsageError(
            f"unknown time zone {name!r}; use an IANA name such as Europe/Zurich or UTC"
        ) from None


def to_utc(local: datetime, tz: str) -> datetime:
    """Convert a wall-clock time in ``tz`` (or an aware datetime) to a naive UTC datetime.

    Args:
        local: naive wall-clock time in ``tz``; an aware datetime keeps its own offset.
        tz: IANA zone name.

    Returns:
        Naive UTC datetime.

    Raises:
        UsageError: when ``local`` does not exist in ``tz`` (skipped by a spring-forward DST jump).

    >>> to_utc(datetime(2026, 11, 30, 9, 0), "Europe/Zurich")
    datetime.datetime(2026, 11, 30, 8, 0)
    >>> to_utc(datetime(2026, 7, 1, 9, 0), "Europe/Zurich")
    datetime.datetime(2026, 7, 1, 7, 0)
    """
    if local.tzinfo is not None:
        return local.astimezone(UTC).replace(tzinfo=None)
    z = zone(tz)
    aware = local.replace(tzinfo=z, fold=0)
    utc = aware.astimezone(UTC)
    # A non-existent local time does not survive the round trip back to the zone.
    if utc.astimezone(z).replace(tzinfo=None) != local:
        raise UsageError(f"{local.isoformat()} does not exist in {tz} (skipped by a DST change)")
    return utc.replace(tzinfo=None)


def _parse_point(text: str, what: str) -> datetime:
    try:
        return datetime.fromisoformat(text.strip())
    except ValueError:
        raise UsageError(
            f"{what} {text!r} is not an ISO 8601 time such as 2026-11-30T09:00"
        ) from None


def parse_window(text: str, tz: str = "UTC") -> Window:
    """Parse ``START/END`` (ISO 8601 wall-clock times in ``tz``) into a UTC :class:`Window`.

    A bare date as END means the start of that day. Times with an explicit offset keep it.

    >>> w = parse_window("2026-11-30T09:00/2026-11-30T12:00", "Europe/Zurich")
    >>> (w.start.isoformat(), w.end.isoformat(), w.weekday)
    ('2026-11-30T08:00:00', '2026-11-30T11:00:00', 'Monday')
    """
    parts = text.split("/")
    if len(parts) != 2 or not all(p.strip() for p in parts):
        raise UsageError(
            f"window {text!r} must be START/END, e.g. 2026-11-30T09:00/2026-11-30T12:00"
        )
    start = to_utc(_parse_point(parts[0], "window start"), tz)
    end = to_utc(_parse_point(parts[1], "window end"), tz)
    if end <= start:
        raise UsageError(f"window {text!r} ends before it starts")
    return Window(start, end, tz, text)


_HOURS = re.compile(r"^\s*(\d{1,2}):(\d{2})\s*-\s*(\d{1,2}):(\d{2})\s*$")


def parse_hours(text: str) -> tuple[time, time]:
    """Parse ``HH:MM-HH:MM`` into two times; an end at or before the start runs past midnight.

    >>> parse_hours("09:00-12:30")
    (datetime.time(9, 0), datetime.time(12, 30))
    """
    m = _HOURS.match(text)
    if not m:
        raise UsageError(f"hours {text!r} must look like 09:00-12:00")
    h1, m1, h2, m2 = (int(g) for g in m.groups())
    if h1 > 23 or h2 > 24 or m1 > 59 or m2 > 59 or (h2 == 24 and m2):
        raise UsageError(f"hours {text!r}: not a time of day")
    end = time(0, 0) if h2 == 24 else time(h2, m2)
    return time(h1, m1), end


def same_hours(hours: str, day: date | str, tz: str = "UTC") -> Window:
    """The window covering the wall-clock ``hours`` (``HH:MM-HH:MM``) of ``day`` in ``tz``.

    Used to compare a morning with a morning: ``same_hours("09:00-12:00", d1, tz)`` and
    ``same_hours("09:00-12:00", d2, tz)`` cover the same local hours on two dates even when a DST
    change lies between them. An end time at or before the start ends on the next day.

    >>> w = same_hours("09:00-12:00", "2026-03-30", "Europe/Zurich")  # summer time (UTC+2)
    >>> (w.start.isoformat(), w.end.isoformat())
    ('2026-03-30T07:00:00', '2026-03-30T10:00:00')
    """
    if isinstance(day, str):
        try:
            day = date.fromisoformat(day.strip())
        except ValueError:
            raise UsageError(f"date {day!r} is not an ISO 8601 date such as 2026-11-30") from None
    t1, t2 = parse_hours(hours)
    start_local = datetime.combine(day, t1)
    end_day = day if t2 > t1 else day + timedelta(days=1)
    end_local = datetime.combine(end_day, t2)
    return Window(
        to_utc(start_local, tz), to_utc(end_local, tz), tz, f"{day.isoformat()} {hours} {tz}"
    )


def resolve(
    before: str | None = None,
    after: str | None = None,
    *,
    tz: str = "UTC",
    hours: str | None = None,
    before_date: str | None = None,
    after_date: str | None = None,
) -> tuple[Window | None, Window | None]:
    """Turn the compare options into two windows (None = no window on that side).

    Either explicit windows (``before``/``after`` as START/END) or the same ``hours`` on two dates
    (``before_date``/``after_date``), not both.

    >>> b, a = resolve(hours="09:00-12:00", before_date="2026-11-23", after_date="2026-11-30",
    ...                tz="Europe/Zurich")
    >>> (b.start.isoformat(), a.start.isoformat(), b.weekday == a.weekday)
    ('2026-11-23T08:00:00', '2026-11-30T08:00:00', True)
    """
    explicit = before is not None or after is not None
    by_hours = hours is not None or before_date is not None or after_date is not None
    if explicit and by_hours:
        raise UsageError("use either --before/--after or --hours with --before-date/--after-date")
    if by_hours:
        if hours is None or before_date is None or after_date is None:
            raise UsageError("--hours needs both --before-date and --after-date")
        return same_hours(hours, before_date, tz), same_hours(hours, after_date, tz)
    return (
        parse_window(before, tz) if before is not None else None,
        parse_window(after, tz) if after is not None else None,
    )
