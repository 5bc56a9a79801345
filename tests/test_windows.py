"""Time windows in named zones.

DST dates come from Directive 2000/84/EC (summer time starts at 01:00 UTC on the last Sunday of March and
ends at 01:00 UTC on the last Sunday of October): in 2026 those are 29 March and 25 October. Europe/Zurich
follows the EU rule (UTC+1 in winter, UTC+2 in summer).
"""

from __future__ import annotations

from datetime import datetime, time

import pytest

from attrib.errors import UsageError
from attrib.windows import parse_hours, parse_window, same_hours, to_utc


def test_to_utc_winter_time_subtracts_one_hour():
    assert to_utc(datetime(2026, 11, 30, 9, 0), "Europe/Zurich") == datetime(2026, 11, 30, 8, 0)


def test_to_utc_summer_time_subtracts_two_hours():
    assert to_utc(datetime(2026, 7, 1, 9, 0), "Europe/Zurich") == datetime(2026, 7, 1, 7, 0)


def test_to_utc_skipped_local_time_is_refused():
    # 2026-03-29 02:00-03:00 local does not exist in Europe/Zurich (clocks jump at 01:00 UTC).
    with pytest.raises(UsageError, match="does not exist"):
        to_utc(datetime(2026, 3, 29, 2, 30), "Europe/Zurich")


def test_to_utc_repeated_local_time_takes_first_occurrence():
    # 2026-10-25 02:30 local happens twice; the first is still summer time (UTC+2).
    assert to_utc(datetime(2026, 10, 25, 2, 30), "Europe/Zurich") == datetime(2026, 10, 25, 0, 30)


def test_to_utc_aware_time_keeps_its_offset():
    aware = datetime.fromisoformat("2026-11-30T09:00+05:30")
    assert to_utc(aware, "Europe/Zurich") == datetime(2026, 11, 30, 3, 30)


def test_parse_window_converts_both_ends_and_records_weekday():
    w = parse_window("2026-11-30T09:00/2026-11-30T12:00", "Europe/Zurich")
    assert (w.start, w.end) == (datetime(2026, 11, 30, 8), datetime(2026, 11, 30, 11))
    assert w.weekday == "Monday"
    assert w.hours == 3.0


def test_parse_window_across_spring_forward_is_one_hour_shorter():
    w = parse_window("2026-03-29T00:00/2026-03-30T00:00", "Europe/Zurich")
    assert w.hours == 23.0


@pytest.mark.parametrize(
    "text",
    ["2026-11-30T09:00", "2026-11-30T12:00/2026-11-30T09:00", "noon/2026-11-30T12:00", "/"],
)
def test_parse_window_bad_text_raises_usage_error(text):
    with pytest.raises(UsageError):
        parse_window(text, "UTC")


def test_parse_window_unknown_zone_raises_usage_error():
    with pytest.raises(UsageError, match="unknown time zone"):
        parse_window("2026-11-30T09:00/2026-11-30T12:00", "Europe/Atlantis")


def test_same_hours_across_dst_change_covers_the_same_local_hours():
    # 2026-10-19 is summer time (UTC+2), 2026-10-26 winter time (UTC+1): same local morning,
    # different UTC ranges, equal length.
    before = same_hours("09:00-12:00", "2026-10-19", "Europe/Zurich")
    after = same_hours("09:00-12:00", "2026-10-26", "Europe/Zurich")
    assert (before.start, before.end) == (datetime(2026, 10, 19, 7), datetime(2026, 10, 19, 10))
    assert (after.start, after.end) == (datetime(2026, 10, 26, 8), datetime(2026, 10, 26, 11))
    assert before.weekday == after.weekday == "Monday"


def test_same_hours_past_midnight_ends_next_day():
    w = same_hours("22:00-02:00", "2026-11-30", "UTC")
    assert (w.start, w.end) == (datetime(2026, 11, 30, 22), datetime(2026, 12, 1, 2))


@pytest.mark.parametrize("text", ["9-12", "25:00-26:00", "09:00-12:61"])
def test_parse_hours_bad_text_raises_usage_error(text):
    with pytest.raises(UsageError):
        parse_hours(text)


def test_parse_hours_24_00_means_midnight():
    assert parse_hours("18:00-24:00") == (time(18, 0), time(0, 0))
