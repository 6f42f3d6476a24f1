"""Line physics against the formulas' published forms and values computed from them.

Values marked [X] are computed from the formulas here (numpy), not taken from a publication; the
formulas themselves are from [IEEE1410] / [IEEE1243] / [Rusck1958] / [Eriksson1987] as
remembered (from memory).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from debrief import lines as L
from debrief.config import from_dict
from debrief.errors import InputError
from debrief.io.lines import read_lines, read_outages


# --- electrogeometric model: IEEE Std 1410 / IEEE Std 1243 (from memory), values [X] -----------

def test_striking_distance_values():
    # r = 10 I^0.65 ([IEEE1410] / [IEEE1243] EGM, from memory); computed from the formula [X]
    np.testing.assert_allclose(L.striking_distance_m([10, 31, 100]), [44.668, 93.193, 199.526], atol=5e-4)
    # sign of the current is polarity only
    assert L.striking_distance_m(-31) == pytest.approx(93.193, abs=5e-4)


def test_y_min_ieee1410_values():
    # y_min = sqrt(r^2 - (0.9 r - h)^2), h = 10 m (IEEE Std 1410 indirect method, from memory); §4 [X]
    np.testing.assert_allclose(L.y_min_m([10, 31, 100], 10.0), [32.911, 56.812, 105.145], atol=5e-4)


def test_y_min_when_ground_distance_below_height():
    # rg < h: the conductor's arc covers the whole width r (EGM geometry, IEEE Std 1410, from memory).
    # I = 1 kA: r = 10 m, rg = 9 m < h = 15 m -> y_min = r = 10 m (computed from the formula).
    assert float(L.y_min_m(1.0, 15.0)) == pytest.approx(10.0)
    # continuity at rg = h: the two branches meet (sqrt(r^2 - 0) = r)
    i_eq = (10.0 / 0.9 / 10.0) ** (1 / 0.65)  # 0.9 r = 10 m
    assert float(L.y_min_m(i_eq, 10.0)) == pytest.approx(float(L.striking_distance_m(i_eq)), rel=1e-9)


def test_ieee1243_ground_factor():
    # k_g = 0.36 + 0.17 ln(43 - h) (IEEE Std 1243-1997, from memory); h 10/20 -> 0.9544/0.893 §4 [X]
    np.testing.assert_allclose(L.ground_factor([10.0, 20.0], "ieee1243"), [0.9544, 0.893], atol=5e-4)
    assert float(L.ground_factor(10.0, "ieee1410")) == 0.9  # IEEE Std 1410 uses 0.9 (from memory)
    # y_min with the 1243 factor, from the same geometry: r = 93.193, rg = 0.9544 r at h = 10 m
    r = 93.193
    rg = (0.36 + 0.17 * np.log(33.0)) * r
    assert float(L.y_min_m(31.0, 10.0, "ieee1243")) == pytest.approx(np.sqrt(r**2 - (rg - 10) ** 2), rel=1e-4)


def test_eriksson_radius():
    # Ra = 0.67 h^0.6 I^0.74 (Eriksson 1987, from memory, low confidence); h 10, 31 kA -> 33.86 m [X]
    assert float(L.y_min_m(31.0, 10.0, "eriksson")) == pytest.approx(33.86, abs=5e-3)


def test_unknown_model_rejected():
    with pytest.raises(ValueError):
        L.y_min_m(30.0, 10.0, "nonsense")


# --- Rusck's formula in IEEE Std 1410's form (from memory), values [X] --------------------------

def test_rusck_factor():
    # K = 1 + (b/sqrt2)/sqrt(1 - b^2/2), b = v/c, c = 3e8 (IEEE Std 1410, from memory); §5 [X]
    assert float(L.rusck_factor(1.2e8)) == pytest.approx(1.294884, abs=5e-7)
    assert float(L.rusck_factor(1.5e8)) == pytest.approx(1.377964, abs=5e-7)
    # with c = 299792458 m/s +0.02 % (computed from the formula [X])
    assert float(L.rusck_factor(1.2e8, 299792458.0)) == pytest.approx(1.295106, abs=5e-7)


@pytest.mark.parametrize("i0, y, v, expected", [
    (10, 50, 1.2e8, 77.693), (10, 100, 1.2e8, 38.847), (10, 200, 1.2e8, 19.423),
    (10, 50, 1.5e8, 82.678), (30, 100, 1.2e8, 116.540), (30, 200, 1.5e8, 62.008),
])
def test_rusck_values(i0, y, v, expected):
    # Umax = 30 I0 h / y K, h = 10 m (Rusck 1958 / IEEE Std 1410, from memory); §5 table [X]
    assert float(L.rusck_induced_kv(i0, 10.0, y, return_stroke_speed_m_s=v)) == pytest.approx(expected, abs=1e-3)


def test_induced_kv_nan_inside_direct_zone():
    # §5: at h = 10 m, 30 kA, y = 50 m lies inside y_min (55.9 m): a direct strike, no Rusck value
    assert np.isnan(L.induced_kv(30.0, 10.0, 50.0))
    assert float(L.induced_kv(10.0, 10.0, 50.0)) == pytest.approx(77.693, abs=1e-3)  # y_min(10 kA) = 32.9 m


@pytest.mark.parametrize("cfo, currents, expected", [
    (150, [10, 30, 100], [17.27, 51.80, 172.65]),
    (300, [10, 30, 100], [8.63, 25.90, 86.33]),
])
def test_flashover_distance(cfo, currents, expected):
    # y_fo = 30 I h K / (1.5 CFO), h 10 m, v 1.2e8 (IEEE Std 1410 1.5 CFO rule, from memory); §5 [X]
    np.testing.assert_allclose(L.y_flashover_m(currents, 10.0, cfo), expected, atol=5e-3)


def test_band_only_for_strong_strokes():
    # §5 [X]: at h 10 m, CFO 150 kV only 100 kA (of 10/30/100) leaves a band (105-173 m);
    # induced flashovers need about 35 kA or more.
    ymin, yfo = L.flashover_band_m([10, 30, 100], 10.0, 150.0)
    assert list(yfo > ymin) == [False, False, True]
    assert float(ymin[2]) == pytest.approx(105.145, abs=1e-3) and float(yfo[2]) == pytest.approx(172.65, abs=5e-3)
    lo, hi = L.flashover_band_m([33.0, 37.0], 10.0, 150.0)
    assert hi[0] < lo[0] and hi[1] > lo[1]
    # 300 kV at y = 50 m needs 38.61 kA [X]
    assert float(L.rusck_induced_kv(38.61, 10.0, 50.0)) == pytest.approx(300.0, abs=0.1)


def test_direct_strike_rate():
    # N = Ng (28 h^0.6 + b)/10 per 100 km yr (Eriksson 1987; IEEE Std 1410; from memory); §4 [X]
    assert float(L.direct_strikes_per_100km_yr(1.0, 10.0)) == pytest.approx(11.1470, abs=5e-4)
    assert float(L.direct_strikes_per_100km_yr(1.0, 12.0, 3.0)) == pytest.approx(12.7356, abs=5e-4)
    assert float(L.direct_strikes_per_100km_yr(1.0, 15.0)) == pytest.approx(14.2172, abs=5e-4)
    assert float(L.direct_strikes_per_100km_yr(4.0, 10.0)) == pytest.approx(44.588, abs=5e-3)


@settings(max_examples=60, deadline=None)
@given(i=st.floats(1.0, 300.0), h=st.floats(3.0, 39.0), y=st.floats(1.0, 3000.0), cfo=st.floats(50.0, 1500.0))
def test_physics_invariants(i, h, y, cfo):
    # y_min grows with current for every model (stronger strokes are attracted from farther)
    for m in L.MODELS:
        assert float(L.y_min_m(i * 1.1, h, m)) > float(L.y_min_m(i, h, m))
        assert 0 < float(L.y_min_m(i, h, m)) <= float(L.striking_distance_m(i)) + 1e-9 or m == "eriksson"
    # Rusck: linear in I and h, inverse in y; exceeding 1.5 CFO exactly when y < y_fo
    u = float(L.rusck_induced_kv(i, h, y))
    assert float(L.rusck_induced_kv(2 * i, h, y)) == pytest.approx(2 * u, rel=1e-12)
    assert float(L.rusck_induced_kv(i, h, 2 * y)) == pytest.approx(u / 2, rel=1e-12)
    yfo = float(L.y_flashover_m(i, h, cfo))
    if abs(y - yfo) > 1e-6 * yfo:
        assert (u > 1.5 * cfo) == (y < yfo)


# --- readers --------------------------------------------------------------------------------

def _write(tmp_path, name, obj):
    p = tmp_path / name
    p.write_text(json.dumps(obj) if not isinstance(obj, str) else obj, encoding="utf-8")
    return p


def _feat(fid, coords, gtype="LineString", **props):
    base = {"id": fid, "name": fid, "height_m": 10.0, "cfo_kv": 150.0}
    base.update(props)
    base = {k: v for k, v in base.items() if v is not None}
    return {"type": "Feature", "geometry": {"type": gtype, "coordinates": coords}, "properties": base}


def test_read_lines_problems(tmp_path):
    fc = {"type": "FeatureCollection", "features": [
        _feat("A", [[-93.2, 45.5], [-93.1, 45.5]]),
        _feat("B", [[-93.2, 45.5]]),                                   # one point
        _feat("C", [-93.2, 45.5], gtype="Point"),                      # not a line
        _feat("D", [[-93.2, 45.5], [-93.1, 45.6]], height_m=None),      # no height, no default
        _feat("E", [[[-93.2, 45.5], [-93.1, 45.5]], [[-93.0, 45.5], [-92.9, 45.5]]], gtype="MultiLineString"),
        _feat("F", [[-93.2, 45.5], [-93.1, 45.5]], cfo_kv=-5),
        _feat("A", [[-93.2, 45.5], [-93.1, 45.5]]),                     # repeated id
    ]}
    lines, problems = read_lines(_write(tmp_path, "l.geojson", fc))
    assert list(lines["line_id"]) == ["A", "E"]
    by = {(p.where, p.item_id): p for p in problems}
    assert "two distinct points" in by[("feature 2", "B")].message
    assert "Point" in by[("feature 3", "C")].message
    assert "default_height_m" in by[("feature 4", "D")].message
    assert "positive" in by[("feature 6", "F")].message
    assert "repeats" in by[("feature 7", "A")].message
    # geodesic length of 0.1 deg of longitude at 45.5 N: Geod-based, ~7.8 km (a cos(lat) estimate)
    assert lines.loc[0, "length_km"] == pytest.approx(111.32 * np.cos(np.radians(45.5)) * 0.1, rel=5e-3)


def test_read_lines_default_height(tmp_path):
    fc = {"type": "FeatureCollection", "features": [_feat("D", [[-93.2, 45.5], [-93.1, 45.6]], height_m=None)]}
    cfg = from_dict({"lines": {"default_height_m": 11.0}})
    lines, problems = read_lines(_write(tmp_path, "l.geojson", fc), config=cfg)
    assert lines.loc[0, "height_m"] == 11.0 and bool(lines.loc[0, "height_defaulted"])
    assert problems[0].severity == "note" and "default_height_m = 11" in problems[0].message


def test_read_lines_rejects_crs(tmp_path):
    fc = {"type": "FeatureCollection", "crs": {"type": "name", "properties": {"name": "EPSG:3857"}},
          "features": [_feat("A", [[-93.2, 45.5], [-93.1, 45.5]])]}
    with pytest.raises(InputError, match="crs"):
        read_lines(_write(tmp_path, "l.geojson", fc))
    with pytest.raises(InputError, match="not valid JSON"):
        read_lines(_write(tmp_path, "bad.geojson", "{nope"))


def test_read_outages(tmp_path):
    text = ("id,time,line_id,latitude,longitude,device,clock_tolerance_s,reclose_times\n"
            "O1,2026-07-14 14:00:00.250,A,,,R1,,0.5;15.5\n"
            "O2,2026-07-14T19:00:01Z,A,45.5,-93.15,F2,3,\n"
            "O3,yesterday,A,,,,,\n"
            "O4,2026-07-14 14:00:00,ZZ,,,,,\n"
            "O5,2026-07-14 14:00:00,A,95,-93,,,\n")
    p = _write(tmp_path, "o.csv", text)
    out, problems = read_outages(p, tz="America/Chicago", line_ids=["A"])
    assert list(out["outage_id"]) == ["O1", "O2", "O3", "O4", "O5"]
    # 14:00 CDT = 19:00 UTC (UTC-5 in July, tz database)
    assert out.loc[0, "time"].isoformat() == "2026-07-14T19:00:00.250000+00:00"
    assert [t.isoformat() for t in out.loc[0, "reclose_times"]] == ["2026-07-14T19:00:00.750000+00:00",
                                                                    "2026-07-14T19:00:15.750000+00:00"]
    assert out.loc[1, "clock_tolerance_s"] == 3.0 and out.loc[1, "fault_latitude"] == 45.5
    assert out["problem"].iloc[:2].tolist() == ["", ""]
    assert "ISO 8601" in out.loc[2, "problem"] and "ZZ" in out.loc[3, "problem"] and "outside" in out.loc[4, "problem"]
    assert [p.where for p in problems] == ["line 4", "line 5", "line 6"]
    with pytest.raises(InputError, match="no UTC offset"):
        read_outages(p, tz=None)
    with pytest.raises(InputError, match="missing column"):
        read_outages(_write(tmp_path, "o2.csv", "id,when\n1,2\n"), tz="UTC")
