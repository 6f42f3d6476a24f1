"""The outage-log reader's typed times: ISO 8601 or the stated pattern, nothing guessed.

Expected instants are written out by hand (constructed here); America/Chicago is UTC-6 on
1 November 2026 (CST after the change on that day at 02:00; IANA tz database).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from debrief.io.lines import read_outages
from debrief.timeutil import TYPED_TIME_FIX

OUTAGES = ("id,time,line_id,reclose_times\n"
           "O1,2026-11-01 14:02:53.654,A,0.5\n"
           "O2,01/11/2026 14:02,A,\n"
           "O3,01.11.2026 14:02,A,\n"
           "O4,2026-11-01T14:05Z,A,01/11/2026 14:06\n")


def _write(tmp_path, text):
    p = tmp_path / "outages.csv"
    p.write_text(text, encoding="utf-8")
    return p


def test_day_month_times_refused_with_line_value_and_fix(tmp_path):
    out, problems = read_outages(_write(tmp_path, OUTAGES), tz="America/Chicago", line_ids=["A"])
    # Every row is kept (the report lists it) and the refused ones carry their problem.
    assert out["outage_id"].tolist() == ["O1", "O2", "O3", "O4"]
    assert out.loc[0, "time"] == pd.Timestamp("2026-11-01T20:02:53.654Z")
    assert out.loc[0, "problem"] == "" and out["time"].iloc[1:3].isna().all()
    assert [(p.where, p.item_id) for p in problems] == [("line 3", "O2"), ("line 4", "O3"), ("line 5", "O4")]
    assert problems[0].text() == f"outages.csv, line 3 (O2): time '01/11/2026 14:02' is not an ISO 8601 time; {TYPED_TIME_FIX}"
    assert "'01.11.2026 14:02'" in problems[1].text()
    assert problems[2].text().startswith("outages.csv, line 5 (O4): reclose time '01/11/2026 14:06' is not an ISO 8601")


def test_stated_format_reads_the_first_of_november(tmp_path):
    out, problems = read_outages(_write(tmp_path, OUTAGES), tz="America/Chicago", line_ids=["A"],
                                 time_format="%d/%m/%Y %H:%M")
    assert out.loc[1, "time"] == pd.Timestamp("2026-11-01T20:02:00Z")  # 14:02 CST = 20:02 UTC
    assert out.loc[3, "reclose_times"] == (pd.Timestamp("2026-11-01T20:06:00Z"),)
    assert [(p.where, p.item_id) for p in problems] == [("line 4", "O3")]
    assert "matches neither typed_time_format '%d/%m/%Y %H:%M'" in problems[0].message


def test_example_event_outages_still_read():
    p = Path(__file__).resolve().parents[1] / "example_event" / "outages.csv"
    out, problems = read_outages(p, tz="America/Chicago")
    assert problems == [] and len(out) > 0 and out["time"].notna().all()
