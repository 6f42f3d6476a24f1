"""Typed times: offsets honoured, zone applied when none, and a question when neither is given."""

import pandas as pd
import pytest

from debrief.errors import InputError
from debrief.timeutil import format_times, iso_utc, parse_user_time


def test_offset_and_zulu():
    assert parse_user_time("2026-07-14T14:00:00-05:00", None) == pd.Timestamp("2026-07-14T19:00:00Z")
    assert parse_user_time("2026-07-14T19:00Z", "Europe/Vienna") == pd.Timestamp("2026-07-14T19:00:00Z")
    assert parse_user_time("2026-07-14T19:00Z", None).unit == "ns"


def test_zone_applies_with_dst():
    # America/Chicago is UTC-5 in July (CDT) and UTC-6 in January (CST): IANA tz database.
    assert parse_user_time("2026-07-14 14:00", "America/Chicago") == pd.Timestamp("2026-07-14T19:00Z")
    assert parse_user_time("2026-01-14 14:00", "America/Chicago") == pd.Timestamp("2026-01-14T20:00Z")


def test_no_zone_asks():
    with pytest.raises(InputError, match="no UTC offset and no time zone"):
        parse_user_time("2026-07-14 14:00", None, what="--start")


def test_bad_text_and_nonexistent_local_time():
    with pytest.raises(InputError, match="cannot read"):
        parse_user_time("yesterday-ish", "UTC")
    # 2026-03-08 02:30 does not exist in America/Chicago (clocks jump 02:00 -> 03:00).
    with pytest.raises(InputError, match="does not exist or is ambiguous"):
        parse_user_time("2026-03-08T02:30", "America/Chicago")


def test_output_forms():
    t = pd.Timestamp("2026-07-14T19:00:05.250Z")
    assert iso_utc(t) == "2026-07-14T19:00:05.25Z"
    assert iso_utc(pd.Timestamp("2026-07-14T19:00:05Z")) == "2026-07-14T19:00:05Z"
    assert format_times(t, "America/Chicago") == "2026-07-14 19:00:05 UTC (2026-07-14 14:00:05 CDT)"
    assert format_times(t, None) == "2026-07-14 19:00:05 UTC"
