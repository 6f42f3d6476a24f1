"""Power lines across the antimeridian: distances against GeographicLib, RFC 7946 cut lines read as
one line, corridors split at 180 degrees (areas by pyproj.Geod), and the box prefilter."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import shapely
from geographiclib.geodesic import Geodesic
from pyproj import Geod
from scipy.optimize import brentq, minimize_scalar

from debrief.io.lines import read_lines
from debrief.outages import _line_geo, corridor_geojson, line_exposure, match_outages, stroke_line_physics

T0 = pd.Timestamp("2026-07-14T20:00:00Z")
G = Geodesic.WGS84


def _line(lid, geometry):
    return {"line_id": lid, "name": lid, "height_m": 10.0, "cfo_kv": 150.0, "spacing_m": 0.0, "shielded": False,
            "height_defaulted": False, "cfo_defaulted": False, "length_km": 20.0, "feature": 1, "geometry": geometry}


def _strokes(points, semi_major_km=0.2):
    df = pd.DataFrame([{"time": T0, "latitude": la, "longitude": lo, "peak_current_ka": -30.0, "type": "CG",
                        "semi_major_km": semi_major_km, "semi_minor_km": semi_major_km / 2, "major_bearing_deg": 30.0}
                       for la, lo in points])
    df["time"] = df["time"].astype("datetime64[ns, UTC]")
    df["type"] = df["type"].astype(pd.CategoricalDtype(["CG", "IC"]))
    df["source_row"] = np.arange(len(df)) + 2
    return df


def _outage(lid):
    return pd.DataFrame([{"outage_id": "O1", "time": T0, "line_id": lid, "fault_latitude": np.nan,
                          "fault_longitude": np.nan, "device": "", "clock_tolerance_s": np.nan, "reclose_times": (),
                          "source_row": 2, "problem": ""}]).astype({"time": "datetime64[ns, UTC]"})


def _crossing(lat):
    """A 21-23 km geodesic from 179.9 E to 179.9 W near `lat`, where it crosses 180 (GeographicLib)."""
    lat2 = lat + 0.05
    inv = G.Inverse(lat, 179.9, lat2, -179.9)
    gl = G.InverseLine(lat, 179.9, lat2, -179.9)
    # the distance along it at which the longitude is 180 (GeographicLib unrolls longitudes)
    s = brentq(lambda s: gl.Position(s, Geodesic.STANDARD | Geodesic.LONG_UNROLL)["lon2"] - 180.0, 0.0, inv["s12"], xtol=1e-9)
    c = gl.Position(s)
    return (179.9, lat), (-179.9, lat2), (c["lat2"], s, c["azi2"]), inv["s12"], gl


def _distance_to_geodesic_m(gl, s12, la, lo):
    """GeographicLib: the shortest geodesic from a point to a geodesic segment, m."""
    f = minimize_scalar(lambda s: G.Inverse(la, lo, gl.Position(s)["lat2"], gl.Position(s)["lon2"])["s12"],
                        bounds=(0.0, s12), method="bounded", options={"xatol": 1e-6})
    return f.fun


@pytest.mark.parametrize("lat", [-17.0, 52.0])
def test_distance_across_180_vs_geographiclib(lat):
    # A stroke 50 m from the line (GeographicLib Direct, perpendicular to the geodesic at 40 %
    # of its length and at its 180-degree crossing). The code measures to the line's straight
    # segment in its plane; that segment and the geodesic differ by < 1 cm here, and the plane's
    # scale error within 10 km of its centre is < 1e-6: tolerance 0.5 m (Karney 2013, via
    # GeographicLib). Before the plane was centred on the line, these came out 30 m and 51.3 m.
    a, b, (lat_c, s_c, azi_c), s12, gl = _crossing(lat)
    p = gl.Position(0.4 * s12)
    st40 = G.Direct(p["lat2"], p["lon2"], p["azi2"] + 90.0, 50.0)
    st180 = G.Direct(lat_c, 180.0, azi_c - 90.0, 50.0)
    pts = [(st40["lat2"], st40["lon2"]), (st180["lat2"], st180["lon2"])]
    assert pts[1][1] == pytest.approx(180.0, abs=1e-3) or pts[1][1] == pytest.approx(-180.0, abs=1e-3)
    ref = [_distance_to_geodesic_m(gl, s12, la, lo) for la, lo in pts]
    assert ref == pytest.approx([50.0, 50.0], abs=1e-3)
    strokes = _strokes(pts)
    # one LineString whose longitude jumps 179.9 -> -179.9 (the short way), and the RFC 7946
    # cut form: parts meeting at +180 / -180 at the geodesic's crossing latitude
    single = pd.Series(_line("S", shapely.LineString([a, b])))
    cut = pd.Series(_line("C", shapely.MultiLineString([[a, (180.0, lat_c)], [(-180.0, lat_c), b]])))
    joined = pd.Series(_line("J", shapely.LineString([a, (180.0, lat_c), b])))
    d_single = stroke_line_physics(strokes, single)["distance_m"]
    r_cut = stroke_line_physics(strokes, cut)
    r_joined = stroke_line_physics(strokes, joined)
    np.testing.assert_allclose(d_single, ref, atol=0.5)
    np.testing.assert_allclose(r_cut["distance_m"], ref, atol=0.5)
    # the cut line is the joined line: same distances and probabilities (one part, one integral)
    for key in ("distance_m", "p_direct", "p_induced_fo", "p_within_corridor"):
        np.testing.assert_allclose(r_cut[key], r_joined[key], rtol=0, atol=1e-12)
    assert len(_line_geo(cut["geometry"]).parts) == 1
    # match_outages reports the same distance (and finds the strokes through its box prefilter)
    r = match_outages(strokes, _outage("C"), pd.DataFrame([cut.to_dict()]))
    assert len(r.candidates) == 2
    got = r.candidates.sort_values("latitude")["distance_m"].to_numpy()
    np.testing.assert_allclose(got, np.array(ref)[np.argsort([p[0] for p in pts])], atol=0.5)


def test_box_prefilter_wraps_at_180():
    # A line ending 0.005 deg west of 180 and a stroke 300 m east of its end, across 180 (at
    # -179.99x). The lon/lat box test must compare longitudes modulo 360: the stroke is a
    # candidate, and line_exposure counts it. Distance by GeographicLib Inverse to the end.
    lat = -17.0
    line = pd.DataFrame([_line("E", shapely.LineString([(179.9, lat), (179.995, lat)]))])
    inv = G.Inverse(lat, 179.9, lat, 179.995)
    st = G.Direct(lat, 179.995, inv["azi2"], 800.0)
    assert st["lon2"] < -179.99
    strokes = _strokes([(st["lat2"], st["lon2"])])
    r = match_outages(strokes, _outage("E"), line)
    assert len(r.candidates) == 1
    assert r.candidates.loc[0, "distance_m"] == pytest.approx(G.Inverse(lat, 179.995, st["lat2"], st["lon2"])["s12"], abs=0.05)
    ex = line_exposure(strokes, line)
    assert int(ex.loc[0, "strokes_within_search"]) == 1


@pytest.mark.parametrize("lat", [-17.0, 52.0])
def test_corridor_across_180_is_split(lat):
    # RFC 7946 section 3.1.9: a MultiPolygon cut at 180, every longitude in [-180, 180], one part
    # on each side; exterior rings counter-clockwise (section 3.1.6), so pyproj.Geod's signed
    # areas are positive. Their sum equals the buffer's area in the line's plane to 1e-4: the
    # plane's areal scale within 15 km of its centre is 1 + < 1e-5, vertices are rounded to
    # 1e-7 deg (<= 1.1 cm on a 55 km outline: < 1e-5 of 100 km^2).
    a, b, (lat_c, _, _), s12, _ = _crossing(lat)
    geom = shapely.MultiLineString([[a, (180.0, lat_c)], [(-180.0, lat_c), b]])
    fc = corridor_geojson(pd.DataFrame([_line("C", geom)]), 2.0)
    g = fc["features"][0]["geometry"]
    assert g["type"] == "MultiPolygon" and len(g["coordinates"]) == 2
    lons = np.concatenate([np.asarray(ring)[:, 0] for poly in g["coordinates"] for ring in poly])
    assert lons.min() >= -180.0 and lons.max() <= 180.0
    sides = sorted(np.sign(np.mean(np.asarray(poly[0])[:, 0])) for poly in g["coordinates"])
    assert sides == [-1.0, 1.0]
    geod = Geod(ellps="WGS84")
    areas = [geod.geometry_area_perimeter(shapely.geometry.shape({"type": "Polygon", "coordinates": poly}))[0]
             for poly in g["coordinates"]]
    assert min(areas) > 0.0
    geo = _line_geo(geom)
    plane_km2 = shapely.buffer(geo.whole, 2.0, quad_segs=16).area
    assert sum(areas) / 1e6 == pytest.approx(plane_km2, rel=1e-4)
    # a stadium: 2 w L + pi w^2 (its round ends inscribed with 16 segments a quarter: -0.2 %)
    assert plane_km2 == pytest.approx(2 * 2.0 * s12 / 1000.0 + np.pi * 2.0**2, rel=3e-3)
    # a line that does not cross gives one Polygon, as before
    g2 = corridor_geojson(pd.DataFrame([_line("W", shapely.LineString([(170.0, lat), (170.1, lat)]))]), 2.0)
    assert g2["features"][0]["geometry"]["type"] == "Polygon"


def test_reader_notes_an_uncut_crossing(tmp_path):
    # A LineString stepping from 179.9 to -179.9 is read (taken the short way) with a note; the
    # RFC 7946 cut form has no note. Lengths: GeographicLib Inverse, the short way (21-23 km here).
    lat = -17.0
    a, b, (lat_c, _, _), s12, _ = _crossing(lat)
    feats = [
        {"type": "Feature", "properties": {"id": "S", "height_m": 10, "cfo_kv": 150},
         "geometry": {"type": "LineString", "coordinates": [list(a), list(b)]}},
        {"type": "Feature", "properties": {"id": "C", "height_m": 10, "cfo_kv": 150},
         "geometry": {"type": "MultiLineString", "coordinates": [[list(a), [180.0, lat_c]], [[-180.0, lat_c], list(b)]]}},
    ]
    p = tmp_path / "lines.geojson"
    p.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    lines, problems = read_lines(p)
    assert list(lines["line_id"]) == ["S", "C"]
    assert [(q.item_id, q.severity) for q in problems] == [("S", "note")]
    assert "positions 1 and 2" in problems[0].message and "short way across 180" in problems[0].message
    assert lines.loc[0, "length_km"] == pytest.approx(s12 / 1000.0, rel=1e-9)
    # the cut line's length: the two geodesic pieces to the crossing point (on the geodesic)
    assert lines.loc[1, "length_km"] == pytest.approx(s12 / 1000.0, abs=1e-6)
