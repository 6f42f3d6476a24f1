"""The site check: search, geodesics, probabilities, the sentence, the residual chance, parcels."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from debrief import sites as S
from debrief.config import from_dict
from debrief.errors import InputError
from debrief.geodesy import LocalPlane
from debrief.io.sites import read_parcel, read_sites
from debrief.uncertainty import ellipse_covariance

K50 = math.sqrt(-2 * math.log(0.5))  # 1.177410 (chi-square 2 df [Johnson1994]; computed from the formula)
GEOD = Geodesic.WGS84  # GeographicLib, Karney (2013)


def table(rows):
    """A grouped stroke table (DEVELOPERS.md contract) from dicts with sensible defaults."""
    base = {"peak_current_ka": -20.0, "type": "CG", "semi_major_km": 0.3, "semi_minor_km": 0.3,
            "major_bearing_deg": 0.0, "ground_contact": 1, "likely_ic": False, "time": "2026-07-14T20:00:00Z"}
    recs = []
    for i, r in enumerate(rows):
        rec = dict(base, flash_id=i + 1, source_row=i + 2)
        rec.update(r)
        recs.append(rec)
    df = pd.DataFrame(recs)
    df["time"] = pd.to_datetime(df["time"], utc=True, format="ISO8601").astype("datetime64[ns, UTC]")
    df["type"] = pd.Categorical(df["type"], categories=["CG", "IC"])
    return df.sort_values("time", kind="stable").reset_index(drop=True)


def at(lat0, lon0, dist_km, az_deg, **kw):
    """A stroke row `dist_km` from (lat0, lon0) along azimuth `az_deg` (GeographicLib Direct)."""
    g = GEOD.Direct(lat0, lon0, az_deg, dist_km * 1000.0)
    return dict(latitude=g["lat2"], longitude=g["lon2"], **kw)


CFG = from_dict({"time_zone": "America/Chicago"})


# --- geodesics against GeographicLib ----------------------------------------------------------

PAIRS = [  # short pairs constructed here, Vincenty's pair [Vincenty1975], antimeridian and near-pole pairs
    ((35.0, -97.0), (35.01, -97.01)),
    ((45.0, 10.0), (45.0, 10.12734)),
    ((-(37 + 57 / 60 + 3.72030 / 3600), 144 + 25 / 60 + 29.52440 / 3600),
     (-(37 + 39 / 60 + 10.15610 / 3600), 143 + 55 / 60 + 35.38390 / 3600)),  # Flinders Peak - Buninyong (Vincenty 1975)
    ((-16.5, 179.97), (-16.52, -179.96)),  # across the antimeridian
    ((89.95, 0.0), (89.96, 120.0)),  # near the North Pole
]


@pytest.mark.parametrize("p1, p2", PAIRS)
def test_distance_and_bearing_match_geographiclib(p1, p2):
    # GeographicLib Geodesic.WGS84.Inverse (Karney 2013): distance to 1 mm, azimuth to 1e-6 deg.
    ref = GEOD.Inverse(p1[0], p1[1], p2[0], p2[1])
    strokes = table([dict(latitude=p2[0], longitude=p2[1], semi_major_km=0.2, semi_minor_km=0.2)])
    res = S.check_site(strokes, p1[0], p1[1], ref["s12"] / 1000.0 + 1.0, config=CFG)
    assert len(res.candidates) == 1
    row = res.candidates.iloc[0]
    assert row["distance_km"] == pytest.approx(ref["s12"] / 1000.0, abs=1e-6)
    assert row["bearing_deg"] == pytest.approx(ref["azi1"] % 360.0, abs=1e-6)
    assert 0.0 <= row["bearing_deg"] < 360.0


def test_flinders_buninyong_published_distance():
    # Vincenty (1975) [Vincenty1975]: 54972.271 m (from memory; GeographicLib agrees to 1 mm above).
    p1, p2 = PAIRS[2]
    strokes = table([dict(latitude=p2[0], longitude=p2[1])])
    d = S.check_site(strokes, *p1, 60.0).candidates["distance_km"].iloc[0]
    assert d == pytest.approx(54.972271, abs=1e-5)


def test_site_at_the_antimeridian_finds_strokes_on_both_sides():
    # Strokes 0.4 km east and west of a site on 180 deg; distances checked with GeographicLib.
    lat0, lon0 = -17.0, 180.0
    rows = [at(lat0, lon0, 0.4, 90.0, time="2026-07-14T20:00:00Z"), at(lat0, lon0, 0.4, 270.0, time="2026-07-14T20:00:01Z"),
            at(lat0, lon0, 30.0, 90.0, time="2026-07-14T20:00:02Z")]
    lons = [r["longitude"] for r in rows[:2]]
    assert min(lons) < 0 < max(lons) or max(abs(x) for x in lons) > 179.99  # truly on both sides
    res = S.check_site(table(rows), lat0, -180.0, 1.0)
    c = res.candidates
    assert len(c) == 2 and res.summary["n_ground_within"] == 2
    for _, row in c.iterrows():
        ref = GEOD.Inverse(lat0, lon0, row["latitude"], row["longitude"])
        assert row["distance_km"] == pytest.approx(ref["s12"] / 1000.0, abs=1e-6)
    assert sorted(np.round(c["bearing_deg"]).tolist()) == [90.0, 270.0]


def test_plane_offsets_are_the_local_plane():
    # dx = d sin(az), dy = d cos(az) is the azimuthal equidistant plane of geodesy.LocalPlane (pyproj aeqd).
    rows = [at(45.5, -93.2, d, az, time=f"2026-07-14T20:00:0{i}Z") for i, (d, az) in enumerate([(0.5, 30), (2.0, 200), (4.0, 300)])]
    res = S.check_site(table(rows), 45.5, -93.2, 5.0)
    x, y = LocalPlane(45.5, -93.2).to_xy_km(res.candidates["latitude"], res.candidates["longitude"])
    np.testing.assert_allclose(res.candidates["dx_km"], x, atol=1e-6)
    np.testing.assert_allclose(res.candidates["dy_km"], y, atol=1e-6)


# --- probabilities ----------------------------------------------------------------------------

def test_p_within_circular_matches_ncx2_and_p_any_combines_contacts():
    # Circular ellipses: p = ncx2.cdf((R/s)^2, 2, (d/s)^2) (scipy.stats.ncx2); contacts independent.
    lat0, lon0, r = 45.5, -93.2, 1.0
    rows = [
        at(lat0, lon0, 0.8, 45.0, semi_major_km=0.5, semi_minor_km=0.5, flash_id=1, ground_contact=1, time="2026-07-14T20:00:00Z"),
        at(lat0, lon0, 1.3, 120.0, semi_major_km=0.4, semi_minor_km=0.4, flash_id=1, ground_contact=1, time="2026-07-14T20:00:00.05Z"),
        at(lat0, lon0, 1.5, 250.0, semi_major_km=0.6, semi_minor_km=0.6, flash_id=2, ground_contact=1, time="2026-07-14T20:05:00Z"),
        at(lat0, lon0, 0.2, 0.0, flash_id=3, peak_current_ka=8.0, likely_ic=True, time="2026-07-14T20:06:00Z"),
        at(lat0, lon0, 0.1, 0.0, flash_id=4, type="IC", time="2026-07-14T20:07:00Z"),
    ]
    res = S.check_site(table(rows), lat0, lon0, r)
    c = res.candidates.set_index("flash_id")
    def ncx(d, a):
        s = a / K50
        return stats.ncx2.cdf((r / s) ** 2, 2, (d / s) ** 2)
    p1, p1b, p2 = ncx(0.8, 0.5), ncx(1.3, 0.4), ncx(1.5, 0.6)
    got = res.candidates["p_within"].to_numpy()
    assert got[0] == pytest.approx(p1, abs=1e-6) and got[1] == pytest.approx(p1b, abs=1e-6) and got[2] == pytest.approx(p2, abs=1e-6)
    # One contact = one fix: two circular errors combine by inverse-variance weighting (the product
    # of two normal densities, computed here by hand), then ncx2 on the combined circle; contacts
    # independent; likely_ic and IC left out.
    xy = [0.8 * np.array([np.sin(np.radians(45.0)), np.cos(np.radians(45.0))]),
          1.3 * np.array([np.sin(np.radians(120.0)), np.cos(np.radians(120.0))])]
    w1, w2 = (K50 / 0.5) ** 2, (K50 / 0.4) ** 2
    m = (w1 * xy[0] + w2 * xy[1]) / (w1 + w2)
    s_c = math.sqrt(1.0 / (w1 + w2))
    p_contact = stats.ncx2.cdf((r / s_c) ** 2, 2, float(m @ m) / s_c**2)
    # The contact's fix is combined in its own plane, the hand value in the site's: the two differ
    # by terms of order d^2/R (about 1 cm here), worth a few 1e-5 in p.
    assert res.summary["p_any_within"] == pytest.approx(1 - (1 - p_contact) * (1 - p2), abs=5e-5)
    assert res.summary["max_p_within"] == pytest.approx(max(p_contact, p2), abs=5e-5)
    assert res.summary["max_p_within_stroke"] == pytest.approx(max(p1, p1b, p2), abs=1e-6)
    assert res.contacts["n_strokes"].max() == 2
    assert res.summary["n_contacts"] == 2
    assert res.summary["n_ground_within"] == 1
    assert res.summary["nearest_km"] == pytest.approx(0.8, abs=1e-6)
    assert len(c) == 5  # every candidate is listed, whatever its type
    with_ic = S.check_site(table(rows), lat0, lon0, r, include_likely_ic=True)
    assert with_ic.summary["n_contacts"] == 3 and with_ic.summary["n_ground_within"] == 2


def test_search_distance_follows_each_strokes_own_ellipse():
    # A stroke 3 km out with a 2 km ellipse can reach a 1 km circle; one with a 0.1 km ellipse cannot.
    lat0, lon0 = 45.5, -93.2
    rows = [at(lat0, lon0, 3.0, 10.0, semi_major_km=2.0, semi_minor_km=2.0, time="2026-07-14T20:00:00Z"),
            at(lat0, lon0, 3.0, 190.0, semi_major_km=0.1, semi_minor_km=0.1, time="2026-07-14T20:00:01Z")]
    res = S.check_site(table(rows), lat0, lon0, 1.0)
    assert len(res.candidates) == 1 and res.candidates["semi_major_km"].iloc[0] == 2.0
    # what the search leaves out is below its stated tail (ncx2, scipy.stats)
    s = 0.1 / K50
    assert stats.ncx2.cdf((1.0 / s) ** 2, 2, (3.0 / s) ** 2) < S.SEARCH_TAIL


def test_one_huge_ellipse_is_found_without_widening_the_tree_search():
    # 2000 strokes with 0.2 km ellipses, one 40 km away with a 25 km ellipse (50 %): it can reach
    # a 1 km circle (ncx2, scipy.stats: p > 1e-6) and must be a candidate; the tree keeps a small radius.
    rng = np.random.default_rng(8)
    rows = [at(45.5, -93.2, float(d), float(az), semi_major_km=0.2, semi_minor_km=0.2) for d, az in
            zip(rng.uniform(5, 30, 2000), rng.uniform(0, 360, 2000))]
    rows.append(at(45.5, -93.2, 40.0, 77.0, semi_major_km=25.0, semi_minor_km=25.0))
    strokes = table(rows)
    idx = S.StrokeIndex(strokes)
    assert idx.tree_reach_km < 1.0 and idx.wide.size == 1
    s = 25.0 / K50
    assert stats.ncx2.cdf((1.0 / s) ** 2, 2, (40.0 / s) ** 2) > S.SEARCH_TAIL
    res = S.check_site(strokes, 45.5, -93.2, 1.0, index=idx)
    assert (res.candidates["semi_major_km"] == 25.0).sum() == 1


def test_brute_force_agrees_with_the_index_for_many_sites():
    # check_sites (k-d tree) finds exactly the strokes a brute-force geodesic scan finds.
    rng = np.random.default_rng(3)
    n = 1200
    lat = 45.5 + rng.uniform(-0.3, 0.3, n)
    lon = -93.2 + rng.uniform(-0.4, 0.4, n)
    a = rng.uniform(0.1, 1.5, n)
    strokes = table([dict(latitude=la, longitude=lo, semi_major_km=aa, semi_minor_km=aa * 0.5, major_bearing_deg=30.0,
                          time="2026-07-14T20:00:00Z") for la, lo, aa in zip(lat, lon, a)])
    sites = pd.DataFrame({"name": [f"s{i}" for i in range(10)], "latitude": 45.5 + rng.uniform(-0.25, 0.25, 10),
                          "longitude": -93.2 + rng.uniform(-0.3, 0.3, 10), "radius_km": rng.uniform(0.5, 3.0, 10)})
    summary, cand = S.check_sites(strokes, sites, sentences=False, return_candidates=True)
    s1 = strokes["semi_major_km"].to_numpy() / K50
    reach = s1 * math.sqrt(-2 * math.log(S.SEARCH_TAIL))
    total = 0
    for i, srow in sites.iterrows():
        d = np.array([GEOD.Inverse(srow.latitude, srow.longitude, la, lo)["s12"] / 1000 for la, lo in zip(strokes.latitude, strokes.longitude)])
        expect = set(strokes["source_row"][d <= srow.radius_km + reach])
        assert set(cand.loc[cand["site"] == srow["name"], "source_row"]) == expect
        assert summary.loc[i, "n_candidates"] == len(expect)
        total += len(expect)
    assert total > 20  # the scan found something to compare


def test_check_sites_equals_check_site():
    # One number, one implementation: the bulk path gives the single-site figures.
    rows = [at(45.5, -93.2, d, az, semi_major_km=0.5, semi_minor_km=0.2, major_bearing_deg=az, flash_id=i + 1,
               time=f"2026-07-14T20:{i:02d}:00Z") for i, (d, az) in enumerate([(0.3, 10), (0.9, 100), (1.4, 200), (2.5, 300)])]
    strokes = table(rows)
    sites = pd.DataFrame({"name": ["A", "B"], "latitude": [45.5, 45.51], "longitude": [-93.2, -93.19], "radius_km": [1.0, 0.5]})
    bulk = S.check_sites(strokes, sites, CFG)
    for i, srow in sites.iterrows():
        one = S.check_site(strokes, srow.latitude, srow.longitude, srow.radius_km, config=CFG, name=srow["name"])
        assert bulk.loc[i, "p_any_within"] == pytest.approx(one.summary["p_any_within"], abs=1e-12)
        assert bulk.loc[i, "n_candidates"] == one.summary["n_candidates"]
        assert bulk.loc[i, "sentence"] == one.sentence


def test_time_window_and_bad_input():
    rows = [at(45.5, -93.2, 0.2, 0, time="2026-07-14T19:59:59Z"), at(45.5, -93.2, 0.2, 0, time="2026-07-14T20:10:00Z")]
    res = S.check_site(table(rows), 45.5, -93.2, 1.0, start="2026-07-14T20:00:00Z", end="2026-07-14T21:00:00Z")
    assert len(res.candidates) == 1
    with pytest.raises(InputError, match="not after"):
        S.check_site(table(rows), 45.5, -93.2, 1.0, start="2026-07-14T21:00:00Z", end="2026-07-14T20:00:00Z")
    for lat, lon, r in [(95.0, 0.0, 1.0), (45.0, 181.0, 1.0), (45.0, 0.0, 0.0), (45.0, 0.0, -1.0)]:
        with pytest.raises(InputError):
            S.check_site(table(rows), lat, lon, r)
    with pytest.raises(InputError, match="group"):
        S.check_site(table(rows).drop(columns=["flash_id"]), 45.5, -93.2, 1.0)
    with pytest.raises(InputError, match="source"):
        S.check_site(table(rows), 45.5, -93.2, 1.0, detection_efficiency=0.9)
    no_ellipse = table([dict(rows[0], semi_major_km=np.nan, semi_minor_km=np.nan, major_bearing_deg=np.nan)])
    with pytest.raises(InputError, match="default_uncertainty_km"):
        S.check_site(no_ellipse, 45.5, -93.2, 1.0)


# --- sentence and residual --------------------------------------------------------------------

def test_sentence_reads_like_a_claim_letter():
    lat0, lon0 = 45.5, -93.2
    rows = [at(lat0, lon0, 0.35, 45.0, peak_current_ka=-24.0, semi_major_km=0.3, semi_minor_km=0.3, time="2026-07-14T19:32:05Z")]
    res = S.check_site(table(rows), lat0, lon0, 1.0, config=CFG, name="Tollgate Farm",
                       start="2026-07-14T19:00:00Z", end="2026-07-14T20:00:00Z")
    s = res.sentence
    p = stats.ncx2.cdf((1.0 / (0.3 / K50)) ** 2, 2, (0.35 / (0.3 / K50)) ** 2)  # scipy.stats.ncx2
    assert s.startswith("1 ground stroke was located within 1 km of Tollgate Farm between 2026-07-14 14:00 and 15:00 CDT")
    assert "a ground contact of \u221224.0 kA at 14:32:05 CDT (19:32:05 UTC) (a single stroke), 0.35 km to the NE" in s
    assert "error ellipses at 50% confidence" in s  # the assumption is stated
    assert S.percent(p) in s and "not stated" in s
    none = S.check_site(table(rows), 45.9, -93.2, 1.0, config=CFG, name="17 Alder Row")
    assert none.sentence.startswith("No ground stroke was located within 1 km of 17 Alder Row")
    assert none.summary["n_candidates"] == 0 and math.isnan(none.summary["nearest_km"])


@pytest.mark.parametrize("bearing, word", [(0, "N"), (22.4, "N"), (22.6, "NE"), (90, "E"), (200, "S"), (337.6, "N"), (300, "NW")])
def test_compass_points(bearing, word):
    # 8-point compass, 45 deg sectors centred on the points (common practice).
    assert S.compass_point(bearing) == word


def test_residual_chance_of_an_unrecorded_flash():
    # lambda = density x area x (1 - DE)/DE; P(at least one) = 1 - exp(-lambda) = Poisson sf
    # (scipy.stats.poisson). 40 recorded ground flashes in the 1-10 km ring, none in the circle.
    lat0, lon0 = 45.5, -93.2
    rng = np.random.default_rng(0)
    rows = [at(lat0, lon0, float(d), float(az), flash_id=i + 1, time="2026-07-14T20:00:00Z")
            for i, (d, az) in enumerate(zip(rng.uniform(1.5, 9.5, 40), rng.uniform(0, 360, 40)))]
    rows.append(at(lat0, lon0, 12.0, 0.0, flash_id=99, time="2026-07-14T20:00:00Z"))  # outside the ring
    rows.append(at(lat0, lon0, 5.0, 0.0, flash_id=98, type="IC", time="2026-07-14T20:00:00Z"))  # not a ground flash
    res = S.check_site(table(rows), lat0, lon0, 1.0, detection_efficiency=0.8, de_source="test value")
    r = res.residual
    assert r["n_ground_flashes_in_ring"] == 40
    assert r["ring_inner_km"] == 1.0 and r["ring_outer_km"] == S.DENSITY_RING_KM
    lam = 40 / (math.pi * (10**2 - 1**2)) * math.pi * 1.0**2 * (0.2 / 0.8)
    assert r["expected_unrecorded"] == pytest.approx(lam, rel=1e-12)
    assert r["p_unrecorded"] == pytest.approx(stats.poisson.sf(0, lam), rel=1e-12)
    assert "test value" in res.sentence and "unrecorded" in res.sentence
    cfg = from_dict({"flash_detection_efficiency": 0.8, "flash_detection_efficiency_source": "event file"})
    assert S.check_site(table(rows), lat0, lon0, 1.0, config=cfg).residual["p_unrecorded"] == pytest.approx(r["p_unrecorded"])


@settings(max_examples=25, deadline=None)
@given(st.lists(st.tuples(st.floats(0.0, 3.0), st.floats(0, 359.9), st.floats(0.05, 1.0), st.integers(1, 4)), min_size=1, max_size=8))
def test_p_any_bounds(strokes):
    # Invariants: max contact p <= p_any <= min(1, sum of contact p); p_any in [0, 1]; a combined
    # fix is never less certain than its best stroke (its covariance is the smaller).
    rows = [at(45.5, -93.2, d, az, semi_major_km=a, semi_minor_km=a * 0.6, major_bearing_deg=az, flash_id=f,
               time=f"2026-07-14T20:00:{i:02d}Z") for i, (d, az, a, f) in enumerate(strokes)]
    res = S.check_site(table(rows), 45.5, -93.2, 1.0)
    per = res.contacts["p_within"] if len(res.contacts) else pd.Series(dtype=float)
    p_any = res.summary["p_any_within"]
    assert 0.0 <= p_any <= 1.0
    assert res.summary["max_p_within"] <= p_any + 1e-12
    assert p_any <= min(1.0, per.sum()) + 1e-12
    if len(res.contacts):
        c, k = res.contacts, res.candidates
        for (fid, gc), g in k.groupby(["flash_id", "ground_contact"]):
            row = c[(c["flash_id"] == fid) & (c["ground_contact"] == gc)]
            if len(row) and len(g) == row["n_strokes"].iloc[0]:
                assert row["semi_major_km"].iloc[0] <= g["semi_major_km"].min() + 1e-9


# --- parcels and the sites table --------------------------------------------------------------

def _write(tmp_path, name, obj):
    p = tmp_path / name
    p.write_text(json.dumps(obj) if not isinstance(obj, str) else obj)
    return p


def test_parcel_probability_vs_monte_carlo(tmp_path):
    # Seeded Monte Carlo in the site's plane (shapely contains_xy); tolerance 5 binomial SE.
    import shapely

    lat0, lon0 = 45.5, -93.2
    plane = LocalPlane(lat0, lon0)
    xs, ys = np.array([-0.1, 0.3, 0.3, -0.1]), np.array([-0.1, -0.1, 0.2, 0.2])
    la, lo = plane.to_latlon(xs, ys)
    ring = np.column_stack([lo, la]).tolist()
    path = _write(tmp_path, "p.geojson", {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring + [ring[0]]]}})
    parcel = read_parcel(path)
    rows = [at(lat0, lon0, 0.25, 60.0, semi_major_km=0.3, semi_minor_km=0.15, major_bearing_deg=20.0)]
    res = S.check_site(table(rows), lat0, lon0, 0.5, parcel=parcel)
    got = res.candidates["p_within_parcel"].iloc[0]
    sxx, syy, sxy = (float(v) for v in ellipse_covariance(0.3, 0.15, 20.0, 0.5))
    rng = np.random.default_rng(1)
    cx, cy = res.candidates["dx_km"].iloc[0], res.candidates["dy_km"].iloc[0]
    pts = rng.multivariate_normal([cx, cy], [[sxx, sxy], [sxy, syy]], size=200_000)
    poly_xy = shapely.Polygon(np.column_stack(plane.to_xy_km(la, lo)))
    mc = np.mean(shapely.contains_xy(poly_xy, pts[:, 0], pts[:, 1]))
    assert abs(got - mc) < 5 * math.sqrt(mc * (1 - mc) / 200_000)
    assert res.summary["p_any_within_parcel"] == pytest.approx(got)
    assert res.summary["parcel_area_km2"] == pytest.approx(0.4 * 0.3, rel=1e-3)
    gj = S.candidates_geojson(res, parcel)
    kinds = [f["properties"]["kind"] for f in gj["features"]]
    assert kinds.count("error_ellipse") == 1 and "parcel" in kinds and "site_circle" in kinds
    ell = [f for f in gj["features"] if f["properties"]["kind"] == "error_ellipse"][0]["geometry"]["coordinates"][0]
    assert ell[0] == ell[-1]  # RFC 7946: closed ring
    # RFC 7946 section 3.1.6: exterior rings counter-clockwise (positive shoelace area)
    for f in gj["features"]:
        if f["geometry"]["type"] == "Polygon":
            xy = np.asarray(f["geometry"]["coordinates"][0])
            assert np.sum(xy[:-1, 0] * xy[1:, 1] - xy[1:, 0] * xy[:-1, 1]) > 0, f["properties"]["kind"]


@pytest.mark.parametrize("doc, msg", [
    ({"type": "Polygon", "crs": {"type": "name"}, "coordinates": [[[0, 0], [1, 0], [1, 1], [0, 0]]]}, "crs"),
    ({"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 1], [0, 1]]]}, "not closed"),
    ({"type": "Polygon", "coordinates": [[[0, 0], [1, 1], [1, 0], [0, 1], [0, 0]]]}, "intersects itself"),
    ({"type": "Point", "coordinates": [0, 0]}, "Polygon"),
    ({"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 95], [0, 0]]]}, "outside"),
])
def test_bad_parcels(tmp_path, doc, msg):
    with pytest.raises(InputError, match=msg):
        read_parcel(_write(tmp_path, "bad.geojson", doc))


def test_sites_table_bad_rows_and_missing_columns(tmp_path):
    p = _write(tmp_path, "sites.csv",
               "name,latitude,longitude,radius_km,start,end\n"
               "Good,45.5,-93.2,1.0,2026-07-14 14:00,2026-07-14 15:00\n"
               "Bad lat,95,-93.2,1.0,,\n"
               "Backwards,45.5,-93.2,1.0,2026-07-14 15:00,2026-07-14 14:00\n"
               "Zero,45.5,-93.2,0,,\n")
    sites, problems = read_sites(p, time_zone="America/Chicago")
    assert sites["name"].tolist() == ["Good"]
    assert [pr.line for pr in problems] == [3, 4, 5]
    assert "latitude" in problems[0].reason and "not after" in problems[1].reason
    assert sites["start"].iloc[0] == pd.Timestamp("2026-07-14T19:00:00Z")  # CDT = UTC-5
    with pytest.raises(InputError, match="missing column"):
        read_sites(_write(tmp_path, "s2.csv", "name,lat,lon\nA,1,2\n"))


def test_sentence_says_what_it_set_aside_and_what_is_near():
    # A +11.2 kA ground report 48 m from the address is a likely cloud pulse (positive, below
    # 15 kA): left out, but the sentence names it with its own probability; the nearest counted
    # ground stroke (3 km NW) and the largest |Ip| within 10 km (62 kA at 8 km) are stated.
    lat0, lon0 = 45.5, -93.2
    rows = [at(lat0, lon0, 0.048, 10.0, peak_current_ka=11.2, likely_ic=True, semi_major_km=0.3, semi_minor_km=0.3,
               time="2026-07-14T19:10:00Z"),
            at(lat0, lon0, 3.0, 315.0, peak_current_ka=-18.0, time="2026-07-14T19:12:00Z"),
            at(lat0, lon0, 8.0, 90.0, peak_current_ka=-62.0, time="2026-07-14T19:14:00Z"),
            at(lat0, lon0, 12.0, 90.0, peak_current_ka=-150.0, time="2026-07-14T19:15:00Z")]
    res = S.check_site(table(rows), lat0, lon0, 0.5, config=CFG, name="12 Heron Lane")
    s, sm = res.sentence, res.summary
    p_aside = stats.ncx2.cdf((0.5 / (0.3 / K50)) ** 2, 2, (0.048 / (0.3 / K50)) ** 2)  # scipy.stats.ncx2
    assert sm["n_ground_within"] == 0 and sm["n_set_aside_within"] == 1
    assert sm["set_aside_p_within"] == pytest.approx(p_aside, abs=1e-6)
    assert s.startswith("No ground stroke was located within 0.5 km of 12 Heron Lane")
    assert "1 ground report within 0.5 km was set aside as likely cloud pulse" in s
    assert "+11.2 kA at 0.05 km" in s and S.percent(p_aside) in s
    assert sm["nearest_ground_km"] == pytest.approx(3.0, abs=1e-6) and sm["max_abs_peak_ka_context"] == 62.0
    assert "3.00 km to the NW (\u221218.0 kA)" in s and "within 10 km was 62 kA" in s


def test_residual_with_no_flash_in_the_ring_is_an_upper_bound():
    # No ground flash in the 1-10 km ring: the density cannot be estimated, only bounded. The
    # exact one-sided 95 % Poisson limit after zero events is -ln(0.05) = 2.996 (Garwood 1936;
    # the "rule of three", Hanley & Lippman-Hand 1983), from scipy.stats.chi2.ppf(0.95, 2) / 2.
    lat0, lon0 = 45.5, -93.2
    rows = [at(lat0, lon0, 20.0, 0.0, time="2026-07-14T20:00:00Z")]
    res = S.check_site(table(rows), lat0, lon0, 1.0, detection_efficiency=0.9, de_source="test value")
    r = res.residual
    assert r["n_ground_flashes_in_ring"] == 0 and r["p_unrecorded"] == 0.0
    mu = stats.chi2.ppf(0.95, 2) / 2.0
    assert mu == pytest.approx(-math.log(0.05), rel=1e-12)
    lam = mu / (math.pi * (10**2 - 1)) * math.pi * (1 - 0.9) / 0.9
    assert r["p_unrecorded_upper"] == pytest.approx(-math.expm1(-lam), rel=1e-12)
    assert "at most " + S.percent(-math.expm1(-lam)) in res.sentence and "95% upper bound" in res.sentence
    assert "less than 0.1%" not in res.sentence


@pytest.mark.parametrize("centre", [(45.5, -93.2), (-17.0, 180.0), (88.5, 20.0)])
def test_neighbourhood_figures_equal_a_plain_scan(centre):
    # The compiled grid search (count, nearest and largest |Ip| within CONTEXT_KM in each site's
    # window) equals a plain scan of every stroke with pyproj's geodesic (Karney 2013); across
    # the antimeridian and near a pole too. Strokes and sites constructed here.
    from debrief.geodesy import inverse_km

    rng = np.random.default_rng(3)
    lat0, lon0 = centre
    n = 600
    rows = []
    for i in range(n):
        g = GEOD.Direct(lat0, lon0, float(rng.uniform(0, 360)), float(rng.uniform(0, 25_000)))
        rows.append({"latitude": g["lat2"], "longitude": g["lon2"], "flash_id": i + 1,
                     "peak_current_ka": float(rng.choice([-1, 1]) * rng.uniform(5, 90)),
                     "type": "CG" if rng.random() < 0.8 else "IC", "likely_ic": bool(rng.random() < 0.05),
                     "time": (pd.Timestamp("2026-07-14T19:00:00Z") + pd.Timedelta(seconds=float(rng.uniform(0, 7200)))).isoformat()})
    st_ = table(rows)
    idx = S.StrokeIndex(st_)
    m = 40
    sl, so = [], []
    for _ in range(m):
        g = GEOD.Direct(lat0, lon0, float(rng.uniform(0, 360)), float(rng.uniform(0, 15_000)))
        sl.append(g["lat2"]); so.append(g["lon2"])
    lat, lon = np.array(sl), np.array(so)
    t0 = pd.Timestamp("2026-07-14T19:00:00Z").value + rng.integers(0, 3600, m) * 1_000_000_000
    t1 = t0 + 3600 * 1_000_000_000
    got = S._context(idx, lat, lon, t0, t1, False)
    ok = idx.is_cg & ~idx.likely_ic
    for s in range(m):
        w = ok & (idx.t_ns >= t0[s]) & (idx.t_ns <= t1[s])
        d, b = inverse_km(np.full(w.sum(), lat[s]), np.full(w.sum(), lon[s]), idx.lat[w], idx.lon[w])
        inn = d <= S.CONTEXT_KM
        assert got["n_ground_within_context"][s] == int(inn.sum())
        if inn.any():
            k = np.argmin(np.where(inn, d, np.inf))
            assert got["nearest_ground_km"][s] == pytest.approx(d[k], abs=1e-9)
            assert got["nearest_ground_bearing_deg"][s] == pytest.approx(b[k], abs=1e-6)
            assert got["max_abs_peak_ka_context"][s] == pytest.approx(np.abs(idx.peak_ka[w][inn]).max())
        else:
            assert math.isnan(got["nearest_ground_km"][s]) and math.isnan(got["max_abs_peak_ka_context"][s])
