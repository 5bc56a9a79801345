"""Timestamp parsing: ISO 8601, epoch numbers, NCSA log times, zones and ranges."""

from __future__ import annotations

from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pytest

from attrib.errors import TimezoneError
from attrib.timeparse import epoch_us, iso_us, ncsa_us, timestamp_us

# 2024-03-05T14:02:11Z as epoch seconds, computed independently with the standard library.
T0 = int(datetime(2024, 3, 5, 14, 2, 11, tzinfo=UTC).timestamp())
US = 1_000_000


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("2024-03-05T14:02:11Z", T0 * US),
        ("2024-03-05T14:02:11.504113Z", T0 * US + 504113),
        # RFC 3339 allows more fraction digits; we keep microseconds and truncate the rest.
        ("2024-03-05T14:02:11.504113999Z", T0 * US + 504113),
        ("2024-03-05 15:02:11+01:00", T0 * US),
        ("2024-03-05T09:02:11.5-05:00", T0 * US + 500000),
        ("2024-03-05T14:02:11+0000", T0 * US),
    ],
)
def test_iso_us_with_offsets_gives_utc_microseconds(text, expected):
    assert iso_us(text, None) == expected


def test_iso_us_naive_without_tz_raises_timezone_error():
    with pytest.raises(TimezoneError, match="--tz"):
        iso_us("2024-03-05T14:02:11", None)


def test_iso_us_naive_uses_given_zone_including_dst():
    # Europe/Berlin is UTC+1 in March (before the last Sunday) and UTC+2 in July (CEST).
    berlin = ZoneInfo("Europe/Berlin")
    assert iso_us("2024-03-05T15:02:11", berlin) == T0 * US
    july = int(datetime(2024, 7, 1, 10, 0, tzinfo=UTC).timestamp()) * US
    assert iso_us("2024-07-01 12:00:00", berlin) == july


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # Apache HTTP Server docs, "Log Files" > Common Log Format example line
        # (127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] ...); grammar of the date field from the
        # Apache 1.3 mod_log_common docs: [day/month/year:hour:minute:second zone], zone = +|- 4 digits.
        (
            "[10/Oct/2000:13:55:36 -0700]",
            int(datetime(2000, 10, 10, 20, 55, 36, tzinfo=UTC).timestamp()) * US,
        ),
        ("05/Mar/2024:14:02:11 +0000", T0 * US),
        ("05/Mar/2024:15:32:11 +0130", T0 * US),
        ("5/mar/2024:14:02:11 +0000", T0 * US),
    ],
)
def test_ncsa_us_reads_clf_times(text, expected):
    assert ncsa_us(text) == expected


@pytest.mark.parametrize(
    "text", ["05/Foo/2024:14:02:11 +0000", "31/Feb/2024:14:02:11 +0000", "05/Mar/2024 14:02:11", ""]
)
def test_ncsa_us_bad_text_raises_value_error(text):
    with pytest.raises(ValueError, match="NCSA"):
        ncsa_us(text)


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        ("1709647331.540", None, 1709647331540000),  # nginx $msec, log-formats.md §6
        (1709647331, None, 1709647331000000),
        (1709647331540, None, 1709647331540000),
        (1709647331540123, None, 1709647331540123),
        ("1709647331506000000", None, 1709647331506000),  # OTLP ns, log-formats.md §5.4
        ("1709647331506000000", "ns", 1709647331506000),
        ("1709647331", "s", 1709647331000000),
        (1709647331.25, None, 1709647331250000),
    ],
)
def test_epoch_us_converts_each_unit_exactly(value, unit, expected):
    assert epoch_us(value, unit) == expected


@pytest.mark.parametrize(
    "value", ["0", "-5", "99999999999999999999999", "1e400", "nan", "abc", True]
)
def test_epoch_us_garbage_or_out_of_range_raises_value_error(value):
    with pytest.raises(ValueError):
        epoch_us(value)


@pytest.mark.parametrize(
    "value",
    [
        "2024-03-05T14:02:11Z",
        "05/Mar/2024:14:02:11 +0000",
        "[05/Mar/2024:14:02:11 +0000]",
        T0,
        float(T0),
        str(T0),
        T0 * 1000,
    ],
)
def test_timestamp_us_accepts_every_form(value):
    assert timestamp_us(value, None) == T0 * US


@pytest.mark.parametrize(
    "value",
    ["", "yesterday", None, [1], "1899-01-01T00:00:00Z", "2300-01-01T00:00:00Z", float("nan")],
)
def test_timestamp_us_bad_values_raise_value_error(value):
    with pytest.raises(ValueError):
        timestamp_us(value, None)
