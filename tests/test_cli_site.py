"""``debrief site``, ``sites`` and ``alerts`` as a user runs them: outputs, exit codes, messages."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from scipy import stats

from debrief.cli import main

ROOT = Path(__file__).resolve().parents[1]
K50 = math.sqrt(-2 * math.log(0.5))  # chi-square 2 df, 50 % ([Johnson1994]; computed from the formula)
SITE = (45.5, -93.2)


def _pt(d_km, az):
    g = Geodesic.WGS84.Direct(SITE[0], SITE[1], az, d_km * 1000.0)  # GeographicLib (Karney 2013)
    return g["lat2"], g["lon2"]


@pytest.fixture
def stroke_file(tmp_path):
    rows = []
    for t, d, az, ka, kind, a in [
        ("2026-07-14T19:30:00Z", 0.4, 45.0, -24.0, "CG", 0.3),
        ("2026-07-14T19:45:00Z", 1.6, 200.0, -18.0, "CG", 0.5),
        ("2026-07-14T20:40:00Z", 6.0, 300.0, -30.0, "CG", 0.3),
        ("2026-07-14T21:30:00Z", 0.2, 90.0, 8.0, "IC", 0.3),
    ]:
        la, lo = _pt(d, az)
        rows.append(f"{t},{la:.7f},{lo:.7f},{ka},{kind},{a},{a},0")
    p = tmp_path / "strokes.csv"
    p.write_text("time,latitude,longitude,peak_current_ka,type,semi_major_km,semi_minor_km,major_bearing_deg\n" + "\n".join(rows) + "\n")
    return p


def run_in(capsys, *args):
    code = main([str(a) for a in args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_site_writes_candidates_and_json(stroke_file, tmp_path, capsys):
    out = tmp_path / "cand.csv"
    gj = tmp_path / "cand.geojson"
    code, text, err = run_in(capsys, "site", stroke_file, "--lat", SITE[0], "--lon", SITE[1], "--radius-km", 1.0,
                             "--out", out, "--geojson", gj, "--json", "--tz", "America/Chicago",
                             "--detection-efficiency", 0.9, "--de-source", "test figure", "--name", "Tollgate Farm")
    assert code == 0, err
    summary = json.loads(text)
    c = pd.read_csv(out)
    for col in ("time", "latitude", "longitude", "peak_current_ka", "type", "distance_km", "bearing_deg", "p_within",
                "flash_id", "ground_contact"):
        assert col in c.columns
    assert c["time"].iloc[0].endswith("Z")
    first = c.iloc[0]
    s = 0.3 / K50
    d = first["distance_km"]
    assert first["p_within"] == pytest.approx(stats.ncx2.cdf((1 / s) ** 2, 2, (d / s) ** 2), abs=1e-6)  # scipy.stats.ncx2
    # the file carries 7 decimals of a degree (about 1 cm): distances to 1e-5 km, bearings to 1e-3 deg
    assert first["distance_km"] == pytest.approx(0.4, abs=1e-5) and first["bearing_deg"] == pytest.approx(45.0, abs=1e-3)
    assert summary["n_ground_within"] == 1 and summary["nearest_km"] == pytest.approx(0.4, abs=1e-5)
    assert set(summary) >= {"n_candidates", "nearest_km", "max_p_within", "p_any_within", "sentence", "residual", "cautions"}
    assert summary["residual"]["de_source"] == "test figure" and len(summary["cautions"]) == 5
    assert "14:30:00 CDT" in summary["sentence"]
    g = json.loads(gj.read_text())
    assert g["type"] == "FeatureCollection" and "crs" not in g


def test_site_human_output_has_cautions(stroke_file, capsys):
    code, text, _ = run_in(capsys, "site", stroke_file, "--lat", SITE[0], "--lon", SITE[1], "--radius-km", 0.5)
    assert code == 0
    assert "Cautions:" in text and "qualified people" in text and "not stated" in text


@pytest.mark.parametrize("extra, msg", [
    (["--lat", "95", "--lon", "-93.2", "--radius-km", "1"], "latitude"),
    (["--lat", "45", "--lon", "-193.2", "--radius-km", "1"], "longitude"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "0"], "radius"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "1", "--ellipse-confidence", "1.5"], "ellipse_confidence"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "1", "--ellipse-confidence", "1"], "confidence"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "1", "--start", "2026-07-14T21:00Z", "--end", "2026-07-14T20:00Z"], "not after"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "1", "--detection-efficiency", "0.9"], "de-source"),
    (["--lat", "45", "--lon", "-93.2", "--radius-km", "1", "--start", "2026-07-14 14:00"], "time zone"),
])
def test_site_bad_input_is_one_line_and_exit_2(stroke_file, capsys, extra, msg):
    code, _, err = run_in(capsys, "site", stroke_file, *extra)
    assert code == 2
    lines = [x for x in err.strip().splitlines() if x]
    assert len(lines) == 1 and msg in lines[0] and "Traceback" not in err


def test_unclosed_parcel_is_rejected(stroke_file, tmp_path, capsys):
    bad = tmp_path / "parcel.geojson"
    bad.write_text(json.dumps({"type": "Polygon", "coordinates": [[[-93.2, 45.5], [-93.19, 45.5], [-93.19, 45.51], [-93.2, 45.51]]]}))
    code, _, err = run_in(capsys, "site", stroke_file, "--parcel", bad, "--radius-km", 1)
    assert code == 2 and "not closed" in err


def test_sites_reports_bad_rows_and_checks_the_rest(stroke_file, tmp_path, capsys):
    sites = tmp_path / "sites.csv"
    sites.write_text("name,latitude,longitude,radius_km,stop_km\n"
                     f"Near,{SITE[0]},{SITE[1]},1.0,\n"
                     "Broken,abc,-93.2,1.0,\n"
                     "Far,46.5,-93.2,1.0,\n"
                     f"Crew,{SITE[0]},{SITE[1]},,10\n")
    out = tmp_path / "res.csv"
    code, text, err = run_in(capsys, "sites", stroke_file, "--sites", sites, "--out", out)
    assert code == 0
    assert "line 3" in err and "Broken" in err
    res = pd.read_csv(out, keep_default_na=False)
    # every row of the sites file has a result row, in file order; the unreadable one says why
    assert res["source_row"].tolist() == [2, 3, 4]
    assert res["name"].tolist() == ["Near", "Broken", "Far"]
    assert res["coverage"].tolist() == ["inside", "not_checked", "outside"]
    assert "Broken" in res["problem"].iloc[1] and res["sentence"].iloc[1].startswith("Not checked")
    assert res["n_ground_within"].iloc[0] == "1"
    # "Far" is 110 km from every stroke of the file: outside the data's extent, no count at all
    assert res["n_ground_within"].iloc[2] == ""
    assert "Cautions:" in text
    missing = tmp_path / "m.csv"
    missing.write_text("name,lat,lon\nA,1,2\n")
    code, _, err = run_in(capsys, "sites", stroke_file, "--sites", missing, "--out", out)
    assert code == 2 and "missing column" in err


def test_alerts_with_crew_log(stroke_file, tmp_path, capsys):
    sites = tmp_path / "sites.csv"
    sites.write_text(f"name,latitude,longitude,stop_km\nDepot,{SITE[0]},{SITE[1]},10\n")
    log = tmp_path / "crew.csv"
    log.write_text("site,stopped,resumed\nDepot,2026-07-14T19:35Z,2026-07-14T20:15Z\n")
    out = tmp_path / "periods.csv"
    code, text, err = run_in(capsys, "alerts", stroke_file, "--sites", sites, "--crew-log", log, "--out", out,
                             "--end", "2026-07-14T23:00Z")
    assert code == 0, err
    per = pd.read_csv(out)
    # Constructed: ground strokes at 19:30, 19:45 (1.6 km) and 20:40 (6 km): 19:30-20:15, 20:40-21:10.
    assert per["start"].tolist() == ["2026-07-14T19:30:00Z", "2026-07-14T20:40:00Z"]
    assert per["all_clear"].tolist() == ["2026-07-14T20:15:00Z", "2026-07-14T21:10:00Z"]
    assert "worked during stop period" in text and "not a live warning" in text


def test_subprocess_example_event_sites_and_no_traceback(tmp_path):
    # The example event: Tollgate Farm has a clear hit, 17 Alder Row none (scenario constructed).
    ev = ROOT / "example_event"
    out = tmp_path / "res.csv"
    r = subprocess.run([sys.executable, "-m", "debrief", "sites", str(ev / "strokes.csv"), "--event", str(ev), "--out", str(out)],
                       cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    res = pd.read_csv(out).set_index("name")
    assert res.loc["Tollgate Farm", "n_ground_within"] >= 1 and res.loc["Tollgate Farm", "max_p_within"] > 0.99
    assert res.loc["17 Alder Row", "n_ground_within"] == 0 and res.loc["17 Alder Row", "p_any_within"] < 1e-3
    assert res.loc["17 Alder Row", "p_unrecorded"] > 0
    bad = subprocess.run([sys.executable, "-m", "debrief", "site", str(ev / "strokes.csv"), "--lat", "95", "--lon", "0",
                          "--radius-km", "1"], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr and len(bad.stderr.strip().splitlines()) == 1
