"""What the readers refuse to guess, as a user meets it on the command line (subprocess): the
current unit of a header without one, 0 km ellipse axes, and typed times that are not ISO 8601.

The files are constructed here; 1 kA = 1000 A (SI).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pandas as pd

from debrief.timeutil import TYPED_TIME_FIX

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "example_event"


def run(*args):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "debrief", *map(str, args)], capture_output=True, text=True,
                          env=env, cwd=ROOT, timeout=300)


def one_line_error(p):
    assert p.returncode == 2, p.stderr
    assert "Traceback" not in p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1, p.stderr
    return lines[0]


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


AMPERES = "time,lat,lon,current\n2026-07-14T19:00:00Z,45.5,-93.2,-12500\n2026-07-14T19:00:01Z,45.5,-93.2,31000\n"


def test_amperes_under_a_unitless_header_stop_with_one_line_and_are_read_when_stated(tmp_path):
    f = _write(tmp_path, "amps.csv", AMPERES)
    msg = one_line_error(run("validate", f))
    assert str(f) in msg and "'current'" in msg and "31000" in msg and "--current-unit A" in msg
    p = run("flashes", f, "--current-unit", "A", "--out", tmp_path / "fl.csv", "--strokes-out", tmp_path / "st.csv")
    assert p.returncode == 0, p.stderr
    assert pd.read_csv(tmp_path / "st.csv")["peak_current_ka"].tolist() == [-12.5, 31.0]


def test_small_values_read_as_ka_with_the_note_and_a_header_conflict_stops(tmp_path):
    f = _write(tmp_path, "small.csv", "time,lat,lon,current\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5\n")
    p = run("validate", f)
    assert p.returncode == 0, p.stderr
    assert "the peak current column 'current' states no unit: read as kA" in p.stdout
    f = _write(tmp_path, "ka.csv", "time,lat,lon,peak_current_ka\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5\n")
    msg = one_line_error(run("validate", f, "--current-unit", "A"))
    assert "current_unit is 'A'" in msg and "'peak_current_ka' says kA" in msg


def test_zero_axis_row_is_kept_and_reported(tmp_path):
    f = _write(tmp_path, "z.csv", "time,lat,lon,peak_current_ka,semi_major_km,semi_minor_km,major_bearing_deg\n"
                                  "2026-07-14T19:00:00Z,45.5,-93.2,-12.5,0.4,0.2,30\n"
                                  "2026-07-14T19:00:01Z,45.5,-93.2,-20.1,0.0,0.0,0\n")
    p = run("validate", f)
    assert p.returncode == 0, p.stderr
    assert "accepted                 2" in p.stdout and "zero_ellipse           1" in p.stdout and "(line 3)" in p.stdout
    assert "1 with a 0 km ellipse axis taken as no ellipse" in p.stderr


def test_typed_window_refused_unless_iso_or_stated(tmp_path):
    f = _write(tmp_path, "s.csv", "time,lat,lon,peak_current_ka\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5\n")
    for text in ("01/11/2026", "01.11.2026"):
        msg = one_line_error(run("flashes", f, "--out", tmp_path / "f.csv", "--tz", "UTC", "--start", text))
        assert msg == f"debrief flashes: start: '{text}' is not an ISO 8601 time; {TYPED_TIME_FIX}"
    p = run("flashes", f, "--out", tmp_path / "f.csv", "--tz", "UTC", "--start", "14/07/2026",
            "--typed-time-format", "%d/%m/%Y")
    assert p.returncode == 0, p.stderr
    assert len(pd.read_csv(tmp_path / "f.csv")) == 1  # 19:00 UTC is after 14 July 00:00 UTC
    msg = one_line_error(run("flashes", f, "--out", tmp_path / "f.csv", "--typed-time-format", "%d/%m"))
    assert "--typed-time-format '%d/%m' is not a usable strptime pattern" in msg


def test_outage_row_with_day_first_time_is_listed_with_its_line(tmp_path):
    log = _write(tmp_path, "outages.csv", "id,time,line_id,device\n"
                                          "OUT-106,2026-07-14 14:02:53.654,HB34,breaker\n"
                                          "OUT-X,14/07/2026 14:02,HB34,breaker\n")
    args = ("outages", EXAMPLE / "strokes.csv", "--lines", EXAMPLE / "lines.geojson", "--outages", log,
            "--tz", "America/Chicago", "--out", tmp_path / "m.csv")
    p = run(*args)
    assert p.returncode == 0, p.stderr
    assert f"rejected: outages.csv, line 3 (OUT-X): time '14/07/2026 14:02' is not an ISO 8601 time; {TYPED_TIME_FIX}" in p.stdout
    p = run(*args, "--typed-time-format", "%d/%m/%Y %H:%M")
    assert p.returncode == 0, p.stderr
    assert not any("OUT-X" in line and "rejected" in line for line in p.stdout.splitlines())
    assert set(pd.read_csv(tmp_path / "m.csv")["outage_id"]) == {"OUT-106", "OUT-X"}


def test_summary_takes_the_option(tmp_path):
    p = run("summary", EXAMPLE, "--start", "14/07/2026 19:30", "--end", "2026-07-14T20:00Z",
            "--typed-time-format", "%d/%m/%Y %H:%M", "--tz", "UTC")
    assert p.returncode == 0, p.stderr
    msg = one_line_error(run("summary", EXAMPLE, "--start", "14/07/2026 19:30", "--tz", "UTC"))
    assert "'14/07/2026 19:30' is not an ISO 8601 time" in msg


def test_site_row_with_day_first_window_is_skipped_with_its_line(tmp_path):
    f = _write(tmp_path, "s.csv", "time,lat,lon,peak_current_ka,semi_major_km,semi_minor_km,major_bearing_deg\n"
                                  "2026-07-14T19:00:00Z,45.5,-93.2,-12.5,0.4,0.2,30\n")
    sites = _write(tmp_path, "sites.csv", "name,latitude,longitude,radius_km,start,end\n"
                                          "Farm,45.5,-93.2,1.0,2026-07-14 13:00,2026-07-14 15:00\n"
                                          "Barn,45.5,-93.2,1.0,14/07/2026,15/07/2026\n")
    args = ("sites", f, "--sites", sites, "--out", tmp_path / "o.csv", "--tz", "America/Chicago")
    p = run(*args)
    assert p.returncode == 0, p.stderr
    assert (f"debrief sites: {sites}, line 3: site 'Barn' start: '14/07/2026' is not an ISO 8601 time; "
            f"{TYPED_TIME_FIX} (row skipped)") in p.stderr
    o = pd.read_csv(tmp_path / "o.csv", keep_default_na=False)
    assert o["name"].tolist() == ["Farm", "Barn"] and o["coverage"].tolist()[1] == "not_checked"
    assert "'14/07/2026' is not an ISO 8601 time" in o["problem"].iloc[1]  # the skipped row keeps its place
    p = run(*args, "--typed-time-format", "%d/%m/%Y")
    assert p.returncode == 0, p.stderr
    assert pd.read_csv(tmp_path / "o.csv")["name"].tolist() == ["Farm", "Barn"]
