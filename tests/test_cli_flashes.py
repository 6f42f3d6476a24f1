"""``debrief flashes`` as a user runs it: a subprocess, exit codes, file contents, no tracebacks."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from debrief.geodesy import LocalPlane

ROOT = Path(__file__).resolve().parents[1]

# Worked example constructed here, grouped by the classic rule of Cummins et al. 1998 [Cummins1998] (from memory):
# (t s, x km, y km, Ip kA) -> flash 1,1,1,1,2,3,4,5,4
WORKED = [
    (0.000, 0.0, 0.0, -25), (0.055, 0.6, 0.3, -12), (0.140, 4.0, 0.0, -9), (0.600, 0.2, 0.1, -11),
    (1.050, 0.3, 0.0, -10), (1.100, 12.0, 0.0, -30), (1.700, 0.4, 0.2, -8), (1.750, 12.5, 0.5, +45),
    (1.760, 0.5, 0.2, -14),
]
WORKED_IDS = [1, 1, 1, 1, 2, 3, 4, 5, 4]


def run(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "debrief", "flashes", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=120)


@pytest.fixture
def strokes_csv(tmp_path):
    a = np.array(WORKED, dtype=float)
    lat, lon = LocalPlane(45.5, -93.2).to_latlon(a[:, 1], a[:, 2])
    t = pd.Timestamp("2026-07-14T19:00:00Z") + pd.to_timedelta(np.round(a[:, 0] * 1e3).astype(int), unit="ms")
    df = pd.DataFrame({
        "time": [x.strftime("%Y-%m-%dT%H:%M:%S.%f") + "Z" for x in t],
        "latitude": np.round(lat, 6), "longitude": np.round(lon, 6), "peak_current_ka": a[:, 3],
        "type": "CG", "semi_major_km": 0.4, "semi_minor_km": 0.2, "major_bearing_deg": 45.0,
        "sensors": np.arange(5, 14),
        "note": ["gust front, hail"] + [""] * 7 + ['said "close"'],
    })
    # rows out of time order in the file: the command sorts them
    path = tmp_path / "strokes.csv"
    df.iloc[::-1].to_csv(path, index=False)
    return path


def one_error_line(r):
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr
    lines = [x for x in r.stderr.splitlines() if x.strip()]
    return lines[-1]


def test_worked_example_end_to_end(strokes_csv, tmp_path):
    out, sout = tmp_path / "flashes.csv", tmp_path / "grouped.csv"
    r = run(strokes_csv, "--out", out, "--strokes-out", sout)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == f"5 flashes from 9 strokes -> {out} (strokes -> {sout})"
    f = pd.read_csv(out, keep_default_na=False)
    assert f["flash_id"].tolist() == [1, 2, 3, 4, 5]
    assert f["multiplicity"].tolist() == [4, 1, 1, 2, 1]
    assert f["interstroke_ms"].astype(str).tolist() == ["55.0;85.0;460.0", "", "", "60.0", ""]
    assert f["time"].tolist()[:2] == ["2026-07-14T19:00:00Z", "2026-07-14T19:00:01.05Z"]
    # continuing-current flags filled: a single-stroke positive ground flash with Ip >= 20 kA is a
    # suspect (our heuristic after Saba et al. 2010 [Saba2010]: 75 % of positive flashes carry
    # long continuing current)
    assert f["cc_suspect"].tolist() == [False, False, False, False, True]
    assert f["cc_reasons"].astype(str).str.len().tolist()[4] > 0
    s = pd.read_csv(sout)
    assert list(s.columns) == ["time", "latitude", "longitude", "peak_current_ka", "type", "semi_major_km",
                               "semi_minor_km", "major_bearing_deg", "source_row", "sensors", "note",
                               "flash_id", "stroke_order", "ground_contact", "likely_ic"]
    assert s["flash_id"].tolist() == WORKED_IDS
    assert s["sensors"].tolist() == list(range(5, 14))  # kept, and sorted back into time order
    assert s["note"].fillna("").tolist() == ["gust front, hail"] + [""] * 7 + ['said "close"']  # quoted
    assert s["time"].str.endswith("Z").all()


def test_criteria_from_event_and_options(strokes_csv, tmp_path):
    ev = tmp_path / "ev"
    ev.mkdir()
    (ev / "event.toml").write_text("[grouping]\nmax_distance_km = 3.0\n")
    out = tmp_path / "f.csv"
    r = run(strokes_csv, "--out", out, "--event", ev)
    assert r.returncode == 0, r.stderr
    # 3 km (constructed truth): the stroke at x=4 km starts flash 2, so flash 1 ends at 55 ms and
    # the stroke at 0.6 s (545 ms later) starts flash 3, which the one at 1.05 s joins
    assert pd.read_csv(out)["multiplicity"].tolist() == [2, 1, 2, 1, 2, 1]
    r = run(strokes_csv, "--out", out, "--event", ev, "--max-distance-km", "10", "--max-strokes", "2")
    assert r.returncode == 0, r.stderr  # the options win over the file
    assert pd.read_csv(out)["multiplicity"].tolist() == [2, 2, 1, 1, 2, 1]
    # 15 km (constructed truth): the +45 kA stroke at 1.75 s is 12.1 km from the flash opened at
    # 1.7 s; the file's polarity rule would keep it apart ([4, 2, 2, 1], as in test_flashes),
    # the option turns the rule off and it joins
    (ev / "event.toml").write_text("[grouping]\nsame_polarity = true\nmax_distance_km = 15.0\n")
    r = run(strokes_csv, "--out", out, "--event", ev, "--no-same-polarity")
    assert r.returncode == 0, r.stderr
    assert pd.read_csv(out)["multiplicity"].tolist() == [4, 2, 3]


def test_window_selects_flashes_by_first_stroke(strokes_csv, tmp_path):
    out, sout = tmp_path / "f.csv", tmp_path / "s.csv"
    r = run(strokes_csv, "--out", out, "--strokes-out", sout,
            "--start", "2026-07-14T19:00:00.050Z", "--end", "2026-07-14T14:00:01.700-05:00")
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith("3 flashes from 4 strokes")
    assert pd.read_csv(out)["flash_id"].tolist() == [2, 3, 4]
    assert pd.read_csv(sout)["flash_id"].tolist() == [2, 3, 4, 4]


def test_parquet_output_keeps_types(strokes_csv, tmp_path):
    out = tmp_path / "f.parquet"
    assert run(strokes_csv, "--out", out).returncode == 0
    f = pd.read_parquet(out)
    assert str(f["time"].dtype).startswith("datetime64") and f["multiplicity"].tolist() == [4, 1, 1, 2, 1]


def test_rejected_rows_counted_and_strict_is_fatal(strokes_csv, tmp_path):
    text = strokes_csv.read_text().splitlines()
    text.append("not a time,45.5,-93.2,-10,CG,0.4,0.2,45.0,1")
    strokes_csv.write_text("\n".join(text) + "\n")
    out = tmp_path / "f.csv"
    r = run(strokes_csv, "--out", out)
    assert r.returncode == 0 and "1 " in r.stderr and r.stdout.startswith("5 flashes from 9 strokes")
    out.unlink()
    r = run(strokes_csv, "--out", out, "--strict")
    one_error_line(r)
    assert not out.exists()


@pytest.mark.parametrize("args, words", [
    (["missing.csv", "--out", "{tmp}/f.csv"], "not found"),
    (["{src}", "--out", "{tmp}/nodir/f.csv"], "does not exist"),
    (["{src}", "--out", "{src}"], "input"),
    (["{src}", "--out", "{tmp}/f.txt"], ".csv or .parquet"),
    (["{src}", "--out", "{tmp}/f.csv", "--max-strokes", "many"], "invalid int"),
    (["{src}", "--out", "{tmp}/f.csv", "--max-distance-km", "-1"], "--max-distance-km"),
    (["{src}", "--out", "{tmp}/f.csv", "--start", "2026-07-14T20:00"], "no UTC offset"),
    (["{src}", "--out", "{tmp}/f.csv", "--start", "2026-07-14T20:00Z", "--end", "2026-07-14T19:00Z"], "not after"),
])
def test_user_mistakes_exit_2_with_one_line(strokes_csv, tmp_path, args, words):
    before = strokes_csv.read_bytes()
    r = run(*[a.format(tmp=tmp_path, src=strokes_csv) for a in args])
    assert words in one_error_line(r)
    assert strokes_csv.read_bytes() == before  # the input is never touched
    assert not (tmp_path / "f.csv").exists()


def test_iso_times_match_the_single_time_formatter():
    from debrief.timeutil import iso_utc_many as iso_utc_array
    from debrief.timeutil import iso_utc

    rng = np.random.default_rng(5)
    us = pd.Timestamp("2026-07-14T19:00:00Z").value // 1000 + rng.integers(0, 4 * 3600 * 10**6, 300)
    us[:3] = us[:3] // 10**6 * 10**6  # whole seconds
    us[3:6] = us[3:6] // 1000 * 1000  # whole milliseconds
    times = pd.Series(pd.DatetimeIndex((us * 1000).astype("datetime64[ns]"), tz="UTC"))
    assert iso_utc_array(times).tolist() == [iso_utc(t) for t in times]
    ns = pd.Series(pd.DatetimeIndex(np.array([1784055600123456789, 1784055600000000010], dtype="datetime64[ns]"), tz="UTC"))
    # nanoseconds kept (iso_utc stops at microseconds)
    assert iso_utc_array(ns).tolist() == ["2026-07-14T19:00:00.123456789Z", "2026-07-14T19:00:00.00000001Z"]
    assert iso_utc_array(pd.Series([pd.NaT], dtype="datetime64[ns, UTC]")).tolist() == [""]
