"""The sites and crew-log readers' typed times: ISO 8601 or the stated pattern, nothing guessed.

Expected instants are written out by hand (constructed here); zone offsets are from the IANA tz
database (Europe/Vienna is UTC+1 on 1 November, CET; America/Chicago is UTC-5 in July, CDT).
"""

from __future__ import annotations

import pandas as pd
import pytest

from debrief.io.sites import read_crew_log, read_sites
from debrief.timeutil import TYPED_TIME_FIX


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


SITES = ("name,latitude,longitude,radius_km,start,end\n"
         "Iso,45.5,-93.2,1.0,2026-11-01 14:00,2026-11-01T16:30\n"
         "Slash,45.5,-93.2,1.0,01/11/2026,02/11/2026\n"
         "Dots,45.5,-93.2,1.0,01.11.2026,\n")


def test_day_month_text_refused_with_line_value_and_fix(tmp_path):
    p = _write(tmp_path, "sites.csv", SITES)
    sites, problems = read_sites(p, time_zone="Europe/Vienna")
    assert sites["name"].tolist() == ["Iso"]
    assert sites["start"].iloc[0] == pd.Timestamp("2026-11-01T13:00:00Z")
    assert [pr.line for pr in problems] == [3, 4]
    assert problems[0].text() == (f"{p}, line 3: site 'Slash' start: '01/11/2026' is not an ISO 8601 time; "
                                  f"{TYPED_TIME_FIX}")
    assert "'01.11.2026'" in problems[1].text() and "line 4" in problems[1].text()


def test_stated_format_reads_day_first(tmp_path):
    p = _write(tmp_path, "sites.csv", SITES)
    sites, problems = read_sites(p, time_zone="Europe/Vienna", time_format="%d/%m/%Y")
    assert sites["name"].tolist() == ["Iso", "Slash"]
    # 1 November 00:00 CET = 31 October 23:00 UTC; ISO rows are still read.
    assert sites["start"].tolist() == [pd.Timestamp("2026-11-01T13:00:00Z"), pd.Timestamp("2026-10-31T23:00:00Z")]
    assert sites["end"].iloc[1] == pd.Timestamp("2026-11-01T23:00:00Z")
    assert [pr.line for pr in problems] == [4]
    assert "matches neither typed_time_format '%d/%m/%Y'" in problems[0].text()


def test_crew_log_typed_times(tmp_path):
    p = _write(tmp_path, "crew.csv",
               "site,stopped,resumed\n"
               "Depot,2026-07-14 14:12,2026-07-14 15:16\n"
               "Depot,14/07/2026 15:19,14/07/2026 16:40\n"
               "Depot,2026-07-14 17:00,07/14/2026 18:00\n")
    log, problems = read_crew_log(p, time_zone="America/Chicago")
    assert log["source_row"].tolist() == [2]
    assert [pr.line for pr in problems] == [3, 4]
    assert problems[0].text() == (f"{p}, line 3: site 'Depot' stopped: '14/07/2026 15:19' is not an ISO 8601 time; "
                                  f"{TYPED_TIME_FIX}")
    assert "resumed: '07/14/2026 18:00'" in problems[1].text()
    log, problems = read_crew_log(p, time_zone="America/Chicago", time_format="%d/%m/%Y %H:%M")
    assert log["source_row"].tolist() == [2, 3]
    assert log["stopped"].iloc[1] == pd.Timestamp("2026-07-14T20:19:00Z")  # 15:19 CDT
    assert [pr.line for pr in problems] == [4]


@pytest.mark.parametrize("name", ["sites.csv", "crew_log.csv"])
def test_example_event_still_reads(name):
    from pathlib import Path

    p = Path(__file__).resolve().parents[1] / "example_event" / name
    reader = read_sites if name == "sites.csv" else read_crew_log
    table, problems = reader(p, time_zone="America/Chicago")
    assert problems == [] and len(table) > 0
