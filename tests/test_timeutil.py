"""Typed times: offsets honoured, zone applied when none, and a question when neither is given.

Only ISO 8601 (ISO 8601-1:2019, extended format; a space for T as RFC 3339 section 5.6 allows)
or the pattern the user states is read; day-first and month-first writings are refused.
Expected instants are written out by hand (constructed here) or come from Python's datetime.
"""

from datetime import datetime, timedelta, timezone

import pandas as pd
import pytest

from debrief.config import from_dict, with_overrides
from debrief.errors import InputError
from debrief.timeutil import TYPED_TIME_FIX, check_time_format, format_times, iso_utc, parse_user_time, read_typed_time


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
    with pytest.raises(InputError, match="is not an ISO 8601 time"):
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


@pytest.mark.parametrize("text, utc", [
    ("2026-11-01", "2026-11-01T00:00:00Z"),
    ("2026-11-01T14:02", "2026-11-01T14:02:00Z"),
    ("2026-11-01 14:02", "2026-11-01T14:02:00Z"),
    ("2026-11-01T14:02:05", "2026-11-01T14:02:05Z"),
    ("2026-07-14 14:02:53.654", "2026-07-14T14:02:53.654Z"),  # the example event's form
    ("2026-07-14T14:02:53,5", "2026-07-14T14:02:53.5Z"),      # ISO 8601 allows a decimal comma
    ("2026-11-01T14:02Z", "2026-11-01T14:02:00Z"),
    ("2026-11-01T14:02+01:00", "2026-11-01T13:02:00Z"),
    ("2026-11-01T14:02-0500", "2026-11-01T19:02:00Z"),
    ("2026-11-01T14:02+01", "2026-11-01T13:02:00Z"),
])
def test_iso_forms_accepted(text, utc):
    assert parse_user_time(text, "UTC") == pd.Timestamp(utc)


@pytest.mark.parametrize("text", ["01/11/2026", "01.11.2026", "11-01-2026 14:00", "July 14 2026", "2026/11/01",
                                  "20261101", "1.11.2026 14:00", "2026-11-01Z", "14:02"])
def test_other_forms_refused_with_the_fix(text):
    with pytest.raises(InputError) as e:
        parse_user_time(text, "UTC", what="--start")
    msg = str(e.value)
    assert msg == f"--start: {text!r} is not an ISO 8601 time; {TYPED_TIME_FIX}"
    assert "typed_time_format" in msg and "--typed-time-format" in msg and "'%d/%m/%Y %H:%M'" in msg


def test_impossible_iso_date_is_refused():
    with pytest.raises(InputError, match="'2026-02-30' is not a valid date"):
        parse_user_time("2026-02-30", "UTC")


@pytest.mark.parametrize("text, fmt", [("01/11/2026", "%d/%m/%Y"), ("01.11.2026", "%d.%m.%Y"),
                                       ("01/11/2026 14:02", "%d/%m/%Y %H:%M"), ("11/01/2026", "%m/%d/%Y")])
def test_stated_format_reads_the_first_of_november(text, fmt):
    ts = parse_user_time(text, "UTC", time_format=fmt)
    assert ts.date() == datetime(2026, 11, 1).date()
    # The zone still applies to a time without offset: Europe/Vienna is UTC+1 on 1 November
    # (CET; IANA tz database).
    assert parse_user_time(text, "Europe/Vienna", time_format=fmt) == ts - timedelta(hours=1)


def test_stated_format_with_offset_and_iso_still_read():
    fmt = "%d/%m/%Y %H:%M %z"
    expected = datetime(2026, 11, 1, 13, 2, tzinfo=timezone.utc)  # 14:02 at +01:00
    assert parse_user_time("01/11/2026 14:02 +0100", None, time_format=fmt) == pd.Timestamp(expected)
    assert parse_user_time("2026-11-01T14:02+01:00", None, time_format=fmt) == pd.Timestamp(expected)


def test_stated_format_decides_text_both_could_read():
    # "%Y-%d-%m" (year, day, month) read first: 2026-01-11 is 1 November, not 11 January.
    assert read_typed_time("2026-01-11", time_format="%Y-%d-%m") == pd.Timestamp("2026-11-01")


def test_text_matching_neither_names_both():
    with pytest.raises(InputError) as e:
        parse_user_time("01.11.2026", "UTC", what="start", time_format="%d/%m/%Y")
    assert str(e.value) == ("start: '01.11.2026' matches neither typed_time_format '%d/%m/%Y' (e.g. '01/11/2026') "
                            "nor ISO 8601 (e.g. 2026-11-01T14:02)")


@pytest.mark.parametrize("fmt", ["%d/%m/%Y", "%d/%m/%Y %H:%M", "%m/%d/%y %I:%M %p", "%d.%m.%Y %H:%M:%S"])
def test_usable_patterns(fmt):
    assert check_time_format(fmt) == fmt


@pytest.mark.parametrize("fmt", ["%d/%m %H:%M", "%H:%M", "%I:%M %d/%m/%Y", "day first", "%m/%Y"])
def test_unusable_patterns_refused(fmt):
    with pytest.raises(InputError, match="is not a usable strptime pattern"):
        check_time_format(fmt, what="--typed-time-format")


def test_config_key_checked_and_default_none():
    assert from_dict({}).get("typed_time_format") is None
    assert from_dict({"typed_time_format": "%d/%m/%Y"}).get("typed_time_format") == "%d/%m/%Y"
    with pytest.raises(InputError, match="key 'typed_time_format'.*not a usable strptime pattern"):
        from_dict({"typed_time_format": "%d/%m"})
    with pytest.raises(InputError, match="expected a string"):
        with_overrides(from_dict({}), {"typed_time_format": 5})
    # The stroke reader's time_format stays a separate key with its own choices.
    assert from_dict({}).get("time_format") == "auto"
