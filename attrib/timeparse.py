"""Timestamp parsing shared by the log readers: text or numbers in, integer µs since the epoch (UTC) out.

Supported forms:

- ISO 8601 / RFC 3339 with ``Z`` or a ``±hh:mm`` / ``±hhmm`` offset, ``T`` or space between date and
  time, any number of fraction digits (digits beyond microseconds are truncated);
- epoch numbers in seconds, milliseconds, microseconds or nanoseconds (the unit is given, or guessed
  from the magnitude, see :func:`epoch_us`);
- the NCSA Common Log Format time ``10/Oct/2000:13:55:36 -0700`` (``%d/%b/%Y:%H:%M:%S %z`` with English
  month names, read without the locale).

Naive times (no offset) are read in the caller's zone ``tz`` (in the hour repeated when clocks go
back, the first of the two readings is taken); without a zone they raise
:class:`attrib.errors.TimezoneError`, because guessing UTC silently shifts every request. Bad values
raise ``ValueError`` with a short reason that readers turn into a Reject.

Times outside 1990-01-01 .. 2200-01-01 UTC are refused as "timestamp out of range": an epoch of 0 or a
garbage year is a logging bug, not traffic (common practice, no source).
"""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta
from decimal import Decimal, InvalidOperation
from functools import lru_cache
from zoneinfo import ZoneInfo

from attrib.errors import TimezoneError

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_US = timedelta(microseconds=1)
MIN_US = 631_152_000_000_000  # 1990-01-01T00:00:00Z
MAX_US = 7_258_118_400_000_000  # 2200-01-01T00:00:00Z

_MONTHS = {
    m: i
    for i, m in enumerate(
        ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"), 1
    )
}
_NCSA = re.compile(
    r"(\d{1,2})/([A-Za-z]{3})/(\d{4}):(\d{2}):(\d{2}):(\d{2})(?:\.(\d{1,9}))? ?([+-])(\d{2}):?(\d{2})\Z"
)
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\Z")
_EPOCH_SCALE = {"s": 1_000_000, "ms": 1_000, "us": 1, "ns": Decimal("0.001")}


def check_range(us: int) -> int:
    """Return ``us`` if it lies in the accepted range, else raise ValueError.

    >>> check_range(1709647331506000)
    1709647331506000
    """
    if not MIN_US <= us < MAX_US:
        raise ValueError("timestamp out of range")
    return us


def iso_us(text: str, tz: ZoneInfo | None) -> int:
    """Parse an ISO 8601 time into µs since the epoch.

    >>> iso_us("2024-03-05T14:02:11.504113Z", None)
    1709647331504113
    >>> iso_us("2024-03-05 15:02:11+01:00", None)
    1709647331000000
    """
    try:
        dt = datetime.fromisoformat(text.strip())
    except ValueError:
        raise ValueError("bad ISO 8601 timestamp") from None
    return check_range(_aware_us(dt, tz))


def ncsa_us(text: str) -> int:
    """Parse an NCSA log time (``10/Oct/2000:13:55:36 -0700``, brackets optional) into µs.

    Results are cached: an access log repeats each second's time on many lines.

    >>> ncsa_us("[05/Mar/2024:14:02:11 +0000]")
    1709647331000000
    """
    return _ncsa_us(text)


@lru_cache(maxsize=4096)
def _ncsa_us(text: str) -> int:
    match = _NCSA.match(text.strip().strip("[]"))
    if match is None:
        raise ValueError("bad NCSA timestamp")
    day, mon, year, hh, mm, ss, frac, sign, oh, om = match.groups()
    month = _MONTHS.get(mon.capitalize())
    if month is None:
        raise ValueError("bad NCSA timestamp")
    try:
        dt = datetime(int(year), month, int(day), int(hh), int(mm), int(ss), tzinfo=UTC)
    except ValueError:
        raise ValueError("bad NCSA timestamp") from None
    offset = (int(oh) * 60 + int(om)) * 60_000_000
    us = (dt - _EPOCH) // _US - (offset if sign == "+" else -offset)
    if frac:
        us += int(frac[:6].ljust(6, "0"))
    return check_range(us)


def epoch_us(value: str | int | float, unit: str | None = None) -> int:
    """Convert an epoch number (``unit`` "s", "ms", "us" or "ns") into µs.

    Without a unit it is guessed from the magnitude: below 1e11 seconds, below 1e14 milliseconds,
    below 1e17 microseconds, else nanoseconds (common practice, no source; it holds for any time
    between 1973 and 5138). Decimal text is converted exactly, without float rounding.

    >>> epoch_us("1709647331.540")
    1709647331540000
    >>> epoch_us(1709647331540)
    1709647331540000
    >>> epoch_us("1709647331506000000", "ns")
    1709647331506000
    """
    if isinstance(value, bool):
        raise ValueError("bad epoch timestamp")
    if isinstance(value, int):
        number: Decimal = Decimal(value)
    else:
        text = str(value).strip()
        if not _NUMBER.match(text):
            raise ValueError("bad epoch timestamp")
        try:
            number = Decimal(text)
        except InvalidOperation:
            raise ValueError("bad epoch timestamp") from None
    if not number.is_finite():
        raise ValueError("bad epoch timestamp")
    if unit is None:
        size = abs(number)
        unit = "s" if size < 10**11 else "ms" if size < 10**14 else "us" if size < 10**17 else "ns"
    return check_range(int(number * _EPOCH_SCALE[unit]))


def timestamp_us(value: object, tz: ZoneInfo | None) -> int:
    """Parse any supported timestamp (number, digit string, ISO 8601 or NCSA) into µs.

    >>> timestamp_us("05/Mar/2024:14:02:11 +0000", None) == timestamp_us(1709647331, None)
    True
    """
    if isinstance(value, int | float) and not isinstance(value, bool):
        if isinstance(value, float) and value != value:
            raise ValueError("bad epoch timestamp")
        return epoch_us(value)
    if not isinstance(value, str):
        raise ValueError("timestamp is not a string or number")
    text = value.strip()
    if not text:
        raise ValueError("empty timestamp")
    first = text[0]
    if first.isdigit() and len(text) > 4 and text[4] == "-":
        return iso_us(text, tz)
    if first == "[" or (len(text) > 2 and text[2] == "/") or (len(text) > 1 and text[1] == "/"):
        return ncsa_us(text)
    if _NUMBER.match(text):
        return epoch_us(text)
    return iso_us(text, tz)


def _aware_us(dt: datetime, tz: ZoneInfo | None) -> int:
    if dt.tzinfo is None:
        if tz is None:
            raise TimezoneError(
                "the log has timestamps without a UTC offset (e.g. "
                f"{dt.isoformat()}); pass --tz with the zone they were written in"
            )
        dt = dt.replace(tzinfo=tz)
    return (dt - _EPOCH) // _US
