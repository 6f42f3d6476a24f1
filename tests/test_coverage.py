"""Data coverage: a place or time the data do not cover gets "no conclusion", never "no
lightning"; declared coverage, the data's extent, partial coverage, warnings for likely typing
mistakes, and the CLI's answers (example event, invented; geometry checked with GeographicLib)."""

from __future__ import annotations

import json
import math
import shutil

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic

from debrief.analysis import analyse
from debrief.cli import main
from debrief.config import from_dict
from debrief.coverage import Coverage, check_places, data_coverage
from debrief.event import load_event

GEOD = Geodesic.WGS84
MILLRACE = (45.4770, -93.2450)


@pytest.fixture(scope="module")
def example(example_event):
    return analyse(load_event(example_event))


def _cov(bbox=(-94.0, 45.0, -92.0, 46.0), start="2026-07-14T19:00:00Z", end="2026-07-14T23:00:00Z"):
    cfg = from_dict({"coverage_bbox": list(bbox), "coverage_start": start, "coverage_end": end})
    # one stroke just inside the west edge, so the declared area holds the file's strokes
    strokes = pd.DataFrame({"time": pd.to_datetime(["2026-07-14T20:00:00Z"], utc=True),
                            "latitude": [(bbox[1] + bbox[3]) / 2.0], "longitude": [bbox[0] + 0.1]})
    return data_coverage(strokes, cfg)


def test_declared_coverage_is_declared():
    c = _cov()
    assert c.source == "declared" and c.time_source == "declared" and c.area_source == "declared"
    assert c.start == pd.Timestamp("2026-07-14T19:00:00Z") and c.end == pd.Timestamp("2026-07-14T23:00:00Z")


def test_data_extent_is_said_so(example):
    cov = example.coverage
    assert cov.source == "data_extent"
    # first and last strokes, widened to whole minutes
    t = example.event.strokes["time"]
    assert cov.start == t.min().floor("min") and cov.end == t.max().ceil("min")
    assert "data's own extent" in cov.describe()


def test_circle_on_the_edge_is_half_covered():
    # A 5 km circle centred on the west edge (a meridian) of a declared box: half of it lies
    # outside (geometry; the plane's distortion at this size is far below 1 %).
    c = _cov()
    r = check_places(c, [45.5], [-94.0], [5.0])
    assert r["coverage"].iloc[0] == "partial"
    assert r["uncovered_area_share"].iloc[0] == pytest.approx(0.5, abs=0.01)
    # 4.9 km inside the edge (GeographicLib) with a 4.8 km radius: inside; 5.2 km outside: outside
    g_in = GEOD.Direct(45.5, -94.0, 90.0, 4900.0)
    g_out = GEOD.Direct(45.5, -94.0, 270.0, 5200.0)
    r = check_places(c, [g_in["lat2"], g_out["lat2"]], [g_in["lon2"], g_out["lon2"]], [4.8, 5.0])
    assert list(r["coverage"]) == ["inside", "outside"]
    assert r["outside_km"].iloc[1] == pytest.approx(5.2, abs=0.05)


def test_a_box_across_the_antimeridian():
    c = _cov(bbox=(179.0, -18.0, -179.0, -16.0))
    r = check_places(c, [-17.0, -17.0, -17.0], [179.9, -179.9, 170.0], [1.0, 1.0, 1.0])
    assert list(r["coverage"]) == ["inside", "inside", "outside"]


def test_periods_outside_and_partial():
    c = _cov()
    ns = lambda t: np.array([pd.Timestamp(t).value])  # noqa: E731
    after = check_places(c, [45.5], [-93.0], [1.0], ns("2026-07-15T00:00Z"), ns("2026-07-15T02:00Z"))
    assert after["coverage"].iloc[0] == "outside" and "after the end" in after["coverage_note"].iloc[0]
    part = check_places(c, [45.5], [-93.0], [1.0], ns("2026-07-14T22:00Z"), ns("2026-07-14T23:30Z"))
    assert part["coverage"].iloc[0] == "partial" and "30 min after" in part["coverage_note"].iloc[0]


def test_likely_mistakes_are_named():
    c = _cov()
    r = check_places(c, [45.5, 45.5, 45.5, -93.0], [93.0, -93.0, -93.0, 45.5], [1.0, 80.0, 1.0, 1.0])
    assert "longitude's sign flipped" in r["coverage_warning"].iloc[0]
    assert "metres" in r["coverage_warning"].iloc[1]
    assert r["coverage_warning"].iloc[2] == ""
    assert "swapped" in r["coverage_warning"].iloc[3]


@pytest.mark.parametrize("toml, words", [
    ("coverage_bbox = [-94, 45, -92]", "coverage_bbox"),
    ("coverage_bbox = [-94, 46, -92, 45]", "south < north"),
    ("coverage_bbox = [-194, 45, -92, 46]", "within [-180, 180]"),
    ('coverage_bbox = [-94, 45, -92, 46]\ncoverage_file = "area.geojson"', "not both"),
    ('coverage_start = "2026-07-14T23:00:00Z"\ncoverage_end = "2026-07-14T19:00:00Z"', "before coverage_start"),
    ('coverage_file = "missing.geojson"', "coverage_file"),
    ("coverage_bbox = [-92.0, 44.5, -94.0, 46.5]", "west and east swapped"),  # east and west typed the wrong way
    ('coverage_start = "2026-07-15T02:00:00Z"', "the last stroke (no coverage_end)"),
])
def test_malformed_declaration_is_exit_2(tmp_path, example_event, toml, words, capsys):
    d = tmp_path / "ev"
    shutil.copytree(example_event, d)
    (d / "event.toml").write_text((d / "event.toml").read_text().replace("[lines]", toml + "\n\n[lines]"))
    code = main(["site", str(d / "strokes.csv"), "--event", str(d), "--lat", "45.5", "--lon", "-93.2", "--radius-km", "1"])
    err = capsys.readouterr().err
    mine = [ln for ln in err.splitlines() if ln.startswith("debrief site:")]
    assert code == 2 and "Traceback" not in err and len(mine) == 1 and words in mine[0], err


@pytest.mark.parametrize("args, why", [
    (["--start", "2026-07-14T23:30:00Z", "--end", "2026-07-15T01:00:00Z"], "after the end"),  # after the data end
    (["--start", "2026-07-15T19:00:00Z", "--end", "2026-07-15T23:00:00Z"], "after the end"),  # the next day
    (["--lat", str(MILLRACE[0] + 74.0 / 111.0 + 0.67)], "outside the area"),  # well north of the stroke area
    (["--lon", "93.2450"], "outside the area"),  # a dropped minus sign: a place in Asia
])
def test_site_outside_coverage_is_no_conclusion(example_event, args, why, capsys):
    base = {"--lat": str(MILLRACE[0]), "--lon": str(MILLRACE[1])}
    for k, v in zip(args[::2], args[1::2]):
        base[k] = v
    argv = ["site", str(example_event / "strokes.csv"), "--event", str(example_event), "--radius-km", "1", "--json"]
    for k, v in base.items():
        argv += [k, v]
    code = main(argv)
    out = json.loads(capsys.readouterr().out)
    assert code == 0
    assert out["coverage"] == "outside" and out["coverage_source"] == "data_extent"
    assert out["sentence"].startswith("No conclusion") and why in out["sentence"]
    assert "No ground stroke" not in out["sentence"] and "unrecorded flash struck" not in out["sentence"]
    assert out["p_any_within"] is None and out["residual"] is None


def test_dropped_minus_sign_names_the_mistake(example_event, capsys):
    code = main(["site", str(example_event / "strokes.csv"), "--event", str(example_event), "--lat", str(MILLRACE[0]),
                 "--lon", "93.245", "--radius-km", "1"])
    out = capsys.readouterr().out
    assert code == 0 and "sign flipped" in out and "OUTSIDE (no conclusion)" in out


def _sites_results(example_event, tmp_path, claims_csv: str) -> pd.DataFrame:
    """`debrief sites` on the example strokes with these claims; the results CSV as text cells."""
    sites = tmp_path / "claims.csv"
    sites.write_text(claims_csv)
    out = tmp_path / "r.csv"
    assert main(["sites", str(example_event / "strokes.csv"), "--event", str(example_event), "--sites", str(sites),
                 "--out", str(out)]) == 0
    return pd.read_csv(out, keep_default_na=False)


def test_every_sites_row_carries_coverage(example_event, tmp_path):
    r = _sites_results(example_event, tmp_path, "name,latitude,longitude,radius_km,start,end\n"
                       "Inside,45.4770,-93.2450,0.5,2026-07-14 14:00,2026-07-14 15:00\n"
                       "Next day,45.4770,-93.2450,0.5,2026-07-15 14:00,2026-07-15 15:00\n"
                       "Partial,45.4770,-93.2450,0.5,2026-07-14 17:00,2026-07-14 19:00\n"
                       "Far away,46.9,-93.2450,0.5,,\n")
    assert list(r["coverage"]) == ["inside", "outside", "partial", "outside"]
    assert set(r["coverage_source"]) == {"data_extent"}
    assert r.loc[1, "p_any_within"] == "" and r.loc[1, "sentence"].startswith("No conclusion")
    assert r.loc[2, "p_unrecorded"] == "" and "no conclusion" in r.loc[2, "sentence"]
    assert "km outside the area the data cover" in r.loc[3, "coverage_warning"]


def test_coverage_object_round_trip():
    c = _cov()
    d = c.to_dict()
    assert d["coverage_source"] == "declared" and d["coverage_start"] == "2026-07-14T19:00:00Z"
    w = c.with_window(pd.Timestamp("2026-07-14T20:00Z"), pd.Timestamp("2026-07-14T21:00Z"))
    assert isinstance(w, Coverage) and w.t0 == pd.Timestamp("2026-07-14T20:00Z") and w.t1 == pd.Timestamp("2026-07-14T21:00Z")
    assert math.isclose(w.area.area, c.area.area)


def test_a_period_touching_the_covered_time_is_outside():
    # 18:00-19:00Z against coverage from 19:00Z: they share one instant, no time at all.
    c = _cov()
    ns = lambda t: np.array([pd.Timestamp(t).value])  # noqa: E731
    r = check_places(c, [45.5], [-93.0], [1.0], ns("2026-07-14T18:00Z"), ns("2026-07-14T19:00Z"))
    assert r["coverage"].iloc[0] == "outside" and "before the start" in r["coverage_note"].iloc[0]


def test_outage_without_ellipse_asks_for_a_default(example_event, tmp_path, capsys):
    # A stroke file whose ellipses are blank: the outage verdicts stop and ask, as the site check does.
    src = pd.read_csv(example_event / "strokes.csv", dtype=str, keep_default_na=False)
    for c in ("semi_major_km", "semi_minor_km", "major_bearing_deg"):
        if c in src:
            src[c] = ""
    p = tmp_path / "strokes.csv"
    src.to_csv(p, index=False)
    args = ["outages", str(p), "--tz", "America/Chicago", "--outages", str(example_event / "outages.csv"),
            "--lines", str(example_event / "lines.geojson"), "--out", str(tmp_path / "m.csv")]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "default_uncertainty_km" in err and "--default-uncertainty-km" in err and "Traceback" not in err
    assert main(args + ["--default-uncertainty-km", "0.5"]) == 0
    m = pd.read_csv(tmp_path / "m.csv")
    assert set(m["location_error"].dropna()) == {"default"}


def test_a_period_cut_by_the_window_alone_says_so(example_event, tmp_path, capsys):
    # The window ends at 21:00Z while the strokes run to 23:00Z: a claim at 17:00-18:00 CDT is
    # outside this analysis, not outside the data; the sentence must not say the data cannot tell.
    d = tmp_path / "ev"
    shutil.copytree(example_event, d)
    (d / "event.toml").write_text((d / "event.toml").read_text().replace('end = "2026-07-14T23:00:00Z"',
                                                                        'end = "2026-07-14T21:00:00Z"'))
    code = main(["site", str(d / "strokes.csv"), "--event", str(d), "--lat", str(MILLRACE[0]), "--lon", str(MILLRACE[1]),
                 "--radius-km", "0.5", "--start", "2026-07-14 17:00", "--end", "2026-07-14 18:00", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["coverage"] == "outside" and out["coverage_limit"] == "window"
    assert "outside the analysis window" in out["sentence"] and "cannot show" not in out["sentence"]
    code = main(["site", str(d / "strokes.csv"), "--event", str(d), "--lat", str(MILLRACE[0]), "--lon", str(MILLRACE[1]),
                 "--radius-km", "0.5", "--start", "2026-07-14 15:00", "--end", "2026-07-14 17:00", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert out["coverage"] == "partial" and out["coverage_limit"] == "window"
    assert "inside the analysis window" in out["sentence"] and out["searched_end"] == "2026-07-14T21:00:00Z"


def test_a_site_off_its_own_parcel_is_named(example_event, capsys):
    # The example's Millrace Cottage point (sites.csv) lies about 60 m east of its parcel outline.
    code = main(["site", str(example_event / "strokes.csv"), "--event", str(example_event), "--lat", str(MILLRACE[0]),
                 "--lon", str(MILLRACE[1]), "--radius-km", "0.5", "--parcel", str(example_event / "parcel_millrace.geojson"),
                 "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and "m outside its parcel" in out["coverage_warning"]


def test_a_missing_parcel_file_is_one_unchecked_row(example_event, tmp_path):
    r = _sites_results(example_event, tmp_path, "name,latitude,longitude,radius_km,parcel_file\n"
                       "Good,45.4770,-93.2450,0.5,\n"
                       "No outline,45.4770,-93.2450,0.5,nope.geojson\n")
    assert r["name"].tolist() == ["Good", "No outline"] and r["coverage"].tolist() == ["inside", "not_checked"]
    assert "parcel file not found" in r["problem"].iloc[1]
