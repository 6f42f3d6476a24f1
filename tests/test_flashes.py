"""Stroke-to-flash grouping: the published rule, its boundaries, busy storms, and invariants."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from debrief.config import from_dict
from debrief.errors import InputError
from debrief.flashes import (
    FLASH_COLUMNS, TIE_KM, group_flashes, group_flashes_reference, grouping_criteria, select_window,
)
from debrief.geodesy import LocalPlane, haversine_km

CENTRE = (45.50, -93.20)
T0 = pd.Timestamp("2026-07-14T19:00:00Z")
PLANE = LocalPlane(*CENTRE)


def table(rows, *, extra=None):
    """Stroke table from (t_s, x_km, y_km, peak_ka[, type]) rows on a plane about CENTRE."""
    rows = [tuple(r) + (("CG",) if len(r) == 4 else ()) for r in rows]
    t_s = np.array([r[0] for r in rows], dtype=float)
    lat, lon = PLANE.to_latlon([r[1] for r in rows], [r[2] for r in rows])
    return latlon_table(t_s, lat, lon, [r[3] for r in rows], [r[4] for r in rows], extra=extra)


def latlon_table(t_s, lat, lon, ip, types, *, extra=None):
    n = len(t_s)
    df = pd.DataFrame({
        "time": T0 + pd.to_timedelta(np.round(np.asarray(t_s, dtype=float) * 1e9).astype(np.int64), unit="ns"),
        "latitude": np.asarray(lat, dtype=float).reshape(n),
        "longitude": np.asarray(lon, dtype=float).reshape(n),
        "peak_current_ka": np.asarray(ip, dtype=float),
        "type": pd.Categorical(list(types), categories=["CG", "IC"]),
        "semi_major_km": np.full(n, 0.3),
        "semi_minor_km": np.full(n, 0.2),
        "major_bearing_deg": np.full(n, 30.0),
        "source_row": np.arange(2, n + 2, dtype=np.int64),
    })
    df["time"] = df["time"].dt.as_unit("ns")
    for k, v in (extra or {}).items():
        df[k] = v
    return df


def ids(strokes):
    return strokes["flash_id"].tolist()


# ----------------------------------------------------------------------------------------------
# The worked example
# ----------------------------------------------------------------------------------------------

# Worked example constructed here, its flashes worked out with the classic rule of Cummins et al. 1998
# [Cummins1998] (from memory) and the same-polarity rule: (t s, x km, y km, Ip kA) -> flash.
WORKED = [
    (0.000, 0.0, 0.0, -25), (0.055, 0.6, 0.3, -12), (0.140, 4.0, 0.0, -9), (0.600, 0.2, 0.1, -11),
    (1.050, 0.3, 0.0, -10), (1.100, 12.0, 0.0, -30), (1.700, 0.4, 0.2, -8), (1.750, 12.5, 0.5, +45),
    (1.760, 0.5, 0.2, -14),
]


@pytest.mark.parametrize("impl", [group_flashes, group_flashes_reference])
def test_worked_example(impl):
    strokes, flashes = impl(table(WORKED), same_polarity=True)
    # worked example constructed here ([Cummins1998] rule, from memory)
    assert ids(strokes) == [1, 1, 1, 1, 2, 3, 4, 5, 4]
    assert flashes["multiplicity"].tolist() == [4, 1, 1, 2, 1]
    assert flashes["multiplicity"].mean() == pytest.approx(1.8)
    assert (flashes["multiplicity"] == 1).mean() == pytest.approx(0.6)
    assert flashes["interstroke_ms"].tolist() == ["55.0;85.0;460.0", "", "", "60.0", ""]
    intervals = [float(v) for s in flashes["interstroke_ms"] if s for v in s.split(";")]
    assert intervals == [55.0, 85.0, 460.0, 60.0]
    assert math.exp(np.mean(np.log(intervals))) == pytest.approx(106.58, abs=0.005)
    assert flashes["polarity"].tolist() == ["negative"] * 4 + ["positive"]
    assert flashes["duration_ms"].tolist() == [600.0, 0.0, 0.0, 60.0, 0.0]
    assert strokes["stroke_order"].tolist() == [1, 2, 3, 4, 1, 1, 1, 1, 2]
    assert flashes["max_abs_peak_ka"].tolist() == [25.0, 10.0, 30.0, 14.0, 45.0]
    # the first stroke's position is the flash's
    assert np.allclose(flashes["latitude"], strokes.loc[strokes["stroke_order"] == 1, "latitude"])


def test_worked_example_without_same_polarity_is_unchanged():
    # the +45 kA stroke is > 10 km from every open flash, so the polarity rule does not decide it
    strokes, _ = group_flashes(table(WORKED))
    assert ids(strokes) == [1, 1, 1, 1, 2, 3, 4, 5, 4]


@pytest.mark.parametrize("same, multiplicities", [(False, [4, 2, 3]), (True, [4, 2, 2, 1])])
def test_worked_example_at_15_km(same, multiplicities):
    # constructed from the worked example: at 15 km the +45 kA stroke (1.75 s) is 12.1 km from the
    # flash opened at 1.7 s, so only the same-polarity rule keeps it apart; the stroke at 1.1 s
    # joins the flash opened at 1.05 s (11.7 km)
    s, f = group_flashes(table(WORKED), max_distance_km=15, same_polarity=same)
    assert f["multiplicity"].tolist() == multiplicities


# ----------------------------------------------------------------------------------------------
# Each criterion at its boundary (classic rule, Cummins et al. 1998; inclusive bounds: our choice)
# ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("dt_s, same", [(0.499, True), (0.500, True), (0.501, False)])
def test_interval_boundary(dt_s, same):
    strokes, _ = group_flashes(table([(0, 0, 0, -20), (dt_s, 0.2, 0, -15)]))
    assert (ids(strokes) == [1, 1]) is same


@pytest.mark.parametrize("last_s, same", [(0.999, True), (1.000, True), (1.001, False)])
def test_duration_boundary(last_s, same):
    # intervals all < 500 ms, so only the 1 s flash duration can split it
    rows = [(0, 0, 0, -20), (0.4, 0.1, 0, -12), (0.8, 0.2, 0, -11), (last_s, 0.3, 0, -10)]
    strokes, flashes = group_flashes(table(rows))
    assert ids(strokes) == ([1, 1, 1, 1] if same else [1, 1, 1, 2])
    if not same:
        assert strokes["stroke_order"].tolist() == [1, 2, 3, 1]


@pytest.mark.parametrize("lat0", [0.0, 45.5, 70.0])
@pytest.mark.parametrize("azimuth", [0.0, 45.0, 90.0, 135.0, 200.0, 290.0])
@pytest.mark.parametrize("dist_km, same", [(9.9, True), (10.1, False)])
def test_distance_boundary_against_geodesic(lat0, azimuth, dist_km, same):
    # second stroke placed by the WGS84 geodesic (geographiclib, Karney 2013); our sphere is
    # within 0.6 % of it, so 1 % either side of 10 km must fall on the right side
    g = Geodesic.WGS84.Direct(lat0, 10.0, azimuth, dist_km * 1000.0)
    df = latlon_table([0.0, 0.1], [lat0, g["lat2"]], [10.0, g["lon2"]], [-20, -15], ["CG", "CG"])
    strokes, _ = group_flashes(df)
    assert (ids(strokes) == [1, 1]) is same


def test_distance_across_the_antimeridian():
    # 0.02 degrees of longitude across 180 E/W at 10 S: 2.19 km on the WGS84 geodesic
    # (geographiclib, Karney 2013), so one flash; the third stroke, 0.11 degrees (12.1 km) from
    # the first, starts another
    g = Geodesic.WGS84.Inverse(-10.0, 179.99, -10.0, -179.99)
    assert g["s12"] / 1000 == pytest.approx(2.19, abs=0.01)
    df = latlon_table([0, 0.1, 0.2], [-10.0] * 3, [179.99, -179.99, -179.9], [-20, -15, -12], ["CG"] * 3)
    for impl in (group_flashes, group_flashes_reference):
        s, _ = impl(df)
        assert ids(s) == [1, 1, 2]


def test_distance_is_to_the_first_stroke_not_the_previous():
    # steps of 6 km eastward, 50 ms apart: each within 10 km of the previous, the third 12 km
    # from the first, so it starts a new flash (no chaining)
    strokes, _ = group_flashes(table([(0, 0, 0, -20), (0.05, 6, 0, -12), (0.1, 12, 0, -11), (0.15, 18, 0, -9)]))
    assert ids(strokes) == [1, 1, 2, 2]


@pytest.mark.parametrize("n, expected", [(15, [1] * 15), (16, [1] * 15 + [2])])
def test_max_strokes_boundary(n, expected):
    # max 15 strokes per flash: Cummins et al. 1998 (from memory)
    rows = [(0.02 * k, 0.01 * k, 0, -15) for k in range(n)]
    strokes, flashes = group_flashes(table(rows))
    assert ids(strokes) == expected
    assert flashes["multiplicity"].tolist() == ([15] if n == 15 else [15, 1])


def test_criteria_are_configurable_from_event_settings_and_overrides():
    rows = [(0, 0, 0, -20), (0.3, 6, 0, -12)]
    cfg = from_dict({"grouping": {"max_distance_km": 5.0}})
    assert ids(group_flashes(table(rows), cfg)[0]) == [1, 2]
    assert ids(group_flashes(table(rows), cfg, max_distance_km=7)[0]) == [1, 1]  # keyword wins
    assert ids(group_flashes(table(rows), max_interval_ms=200)[0]) == [1, 2]
    assert grouping_criteria(cfg, max_strokes=3)["max_strokes"] == 3
    with pytest.raises(InputError, match="max_distanse_km"):
        group_flashes(table(rows), max_distanse_km=5)
    with pytest.raises(InputError, match="must be >"):
        group_flashes(table(rows), max_distance_km=-1)


# ----------------------------------------------------------------------------------------------
# Busy storms: several open flashes
# ----------------------------------------------------------------------------------------------

def test_two_simultaneous_cells_are_never_chained():
    # constructed scenario: cells 30 km apart, strokes interleaved 20 ms apart for 3 s, and a few
    # strokes in between at 14-16 km from both cells' first strokes
    rng = np.random.default_rng(7)
    rows, cell = [], []
    for k in range(150):
        c = k % 2
        x = (-15.0 if c == 0 else 15.0) + rng.normal(0, 1.0)
        rows.append((0.02 * k, x, rng.normal(0, 1.0), -10 - k % 7))
        cell.append(c)
    strokes, flashes = group_flashes(table(rows))
    for fid, grp in strokes.groupby("flash_id"):
        assert len(set(np.asarray(cell)[grp.index])) == 1, f"flash {fid} mixes the two cells"
    assert flashes["multiplicity"].max() <= 15
    # the kernel agrees with the plain loop on it
    ref, ref_f = group_flashes_reference(table(rows))
    pd.testing.assert_frame_equal(strokes, ref)
    pd.testing.assert_frame_equal(flashes, ref_f)


def test_nearest_open_flash_wins_over_the_earlier():
    # flash A first at x=0 (t=0), flash B first at x=12 (t=0.1; > 10 km from A); a stroke at x=7 is
    # within 10 km of both: it joins B, the nearer, although A is earlier
    strokes, _ = group_flashes(table([(0, 0, 0, -20), (0.1, 12, 0, -25), (0.2, 7, 0, -12)]))
    assert ids(strokes) == [1, 2, 2]


@pytest.mark.parametrize("impl", [group_flashes, group_flashes_reference])
@pytest.mark.parametrize("west_first", [True, False])
def test_tie_goes_to_the_earlier_flash(impl, west_first):
    # exact mirror images in longitude about the third stroke: equal distances (9.7 km)
    lat, lons = 45.5, [-93.25, -93.0]
    if not west_first:
        lons = lons[::-1]
    df = latlon_table([0, 0.1, 0.2], [lat] * 3, lons + [-93.125], [-20, -25, -12], ["CG"] * 3)
    strokes, _ = impl(df)
    assert ids(strokes) == [1, 2, 1]


def test_same_polarity_option():
    rows = [(0, 0, 0, -20), (0.05, 1, 0, +30), (0.1, 0.5, 0, -12)]
    s, f = group_flashes(table(rows))
    assert ids(s) == [1, 1, 1] and f["mixed_polarity"].tolist() == [True]
    s, f = group_flashes(table(rows), same_polarity=True)
    assert ids(s) == [1, 2, 1]
    assert f["polarity"].tolist() == ["negative", "positive"] and not f["mixed_polarity"].any()


def test_cloud_pulses_grouped_apart_from_ground_strokes():
    rows = [(0, 0, 0, -20, "CG"), (0.01, 0.1, 0, 5, "IC"), (0.05, 0.2, 0, -12, "CG"), (0.06, 0.3, 0, -4, "IC"),
            (0.07, 0.3, 0.1, 8, "IC")]
    s, f = group_flashes(table(rows))
    assert ids(s) == [1, 2, 1, 2, 2]
    assert f["type"].tolist() == ["CG", "IC"]
    assert f["multiplicity"].tolist() == [2, 3]
    assert f["ground_contacts"].tolist() == [1, 0]
    assert s["ground_contact"].tolist() == [1, 0, 1, 0, 0]
    assert not s.loc[s["type"] == "IC", "likely_ic"].any()
    assert f["mixed_polarity"].tolist() == [False, True]


def test_flash_ids_follow_first_stroke_time_across_types():
    rows = [(0, 0, 0, 10, "IC"), (0.1, 30, 0, -20, "CG"), (0.2, 0, 30, 5, "IC"), (0.3, 0.1, 0, 4, "IC")]
    s, f = group_flashes(table(rows))
    assert f["type"].tolist() == ["IC", "CG", "IC"]
    assert ids(s) == [1, 2, 3, 1]
    assert f["time"].is_monotonic_increasing


@pytest.mark.parametrize("ip, below, flag", [
    (10.0, 15.0, True), (14.9, 15.0, True), (15.0, 15.0, False), (40.0, 15.0, False),
    (-10.0, 15.0, False), (15.0, 20.0, True),
])
def test_likely_ic_flag(ip, below, flag):
    # low-amplitude positive ground reports: Cummins & Murphy 2009, IEEE T-EMC 51(3);
    # Biagi et al. 2007, JGR 112 (from memory); threshold strictly below
    s, f = group_flashes(table([(0, 0, 0, ip), (0.05, 0.2, 0, -12)]), likely_ic_below_ka=below)
    assert s["likely_ic"].tolist() == [flag, False]
    assert f["likely_ic"].tolist() == [flag]
    assert ids(s) == [1, 1]  # still grouped as a ground stroke


def test_ground_contact_counting():
    # constructed scenario (1 km contact radius, our default after Thottappillil et al. 1992 and
    # Poelman et al. 2021 separations): contacts at x=0, x=3 and x=1.2 (1.2 km from the first,
    # 1.8 km from the second); the others rejoin the nearest existing contact
    rows = [(0, 0, 0, -30), (0.05, 0.5, 0, -12), (0.1, 3.0, 0, -10), (0.15, 3.4, 0, -9), (0.2, 1.2, 0, -11),
            (0.25, 0.2, 0, -8), (0.3, 1.3, 0, -8)]
    for impl in (group_flashes, group_flashes_reference):
        s, f = impl(table(rows))
        assert s["ground_contact"].tolist() == [1, 1, 2, 2, 3, 1, 3]
        assert f["ground_contacts"].tolist() == [3]
    s, f = group_flashes(table([(0, 0, 0, -30), (0.05, 3.0, 0, -12), (0.1, 1.6, 0, -10)]), ground_contact_km=2.0)
    assert s["ground_contact"].tolist() == [1, 2, 2]  # 1.6 km from the first, 1.4 from the second


@pytest.mark.parametrize("impl", [group_flashes, group_flashes_reference])
def test_ground_contact_tie_goes_to_the_older_contact(impl):
    # mirror images in longitude (2**-6 degrees, 1.22 km either side): contacts 2.44 km apart, then
    # a stroke exactly between them, within 2 km of both
    d = 2.0 ** -6
    df = latlon_table([0, 0.05, 0.1], [45.5] * 3, [-93.25 - d, -93.25 + d, -93.25], [-30, -12, -10], ["CG"] * 3)
    s, f = impl(df, ground_contact_km=2.0)
    assert s["ground_contact"].tolist() == [1, 2, 1]
    assert f["ground_contacts"].tolist() == [2]


# ----------------------------------------------------------------------------------------------
# Fast kernel against the plain loop
# ----------------------------------------------------------------------------------------------

def _random_storm(seed, n=1500, cells=6, span_km=40.0, duration_s=60.0):
    # constructed data: clustered strokes in moving cells, many flashes open at once
    rng = np.random.default_rng(seed)
    centres = rng.uniform(-span_km / 2, span_km / 2, size=(cells, 2))
    cell = rng.integers(0, cells, n)
    t = np.sort(rng.uniform(0, duration_s, n))
    xy = centres[cell] + rng.normal(0, 3.0, size=(n, 2)) + 0.02 * t[:, None]
    ip = rng.choice([-1, 1], n, p=[0.85, 0.15]) * rng.lognormal(np.log(15), 0.6, n)
    types = np.where(rng.random(n) < 0.35, "IC", "CG")
    lat, lon = PLANE.to_latlon(xy[:, 0], xy[:, 1])
    return latlon_table(t, lat, lon, ip, types)


@pytest.mark.parametrize("seed, criteria", [
    (1, {}), (2, {"same_polarity": True}), (3, {"max_distance_km": 3.0, "ground_contact_km": 0.5}),
    (4, {"max_strokes": 3, "max_interval_ms": 200.0}), (5, {"max_duration_ms": 300.0}),
])
def test_fast_equals_reference_on_random_storms(seed, criteria):
    df = _random_storm(seed)
    fast = group_flashes(df, **criteria)
    ref = group_flashes_reference(df, **criteria)
    pd.testing.assert_frame_equal(fast[0], ref[0])
    pd.testing.assert_frame_equal(fast[1], ref[1])
    assert fast[1]["multiplicity"].max() > 1 and len(fast[1]) > 100  # the storm is not trivial


def test_fast_equals_reference_on_generated_storm():
    synth = pytest.importorskip("debrief.synth")
    observed, _truth = synth.generate_storm(seed=11, n_flashes=300, duration_h=0.1, region_km=40.0)
    fast = group_flashes(observed)
    ref = group_flashes_reference(observed)
    pd.testing.assert_frame_equal(fast[0], ref[0])
    pd.testing.assert_frame_equal(fast[1], ref[1])


def test_recovers_the_flashes_of_a_constructed_storm():
    # scenario whose truth we constructed (debrief.synth): the network's ground reports of each
    # true flash should mostly land in one flash, and our flashes should mostly hold one true flash
    synth = pytest.importorskip("debrief.synth")
    observed, truth = synth.generate_storm(seed=3, n_flashes=1500)
    seen = truth[truth["observed_index"] >= 0]
    true_flash = np.empty(len(observed), dtype=np.int64)
    true_flash[seen["observed_index"].to_numpy()] = seen["flash_id"].to_numpy()
    s, _ = group_flashes(observed.assign(true_flash=true_flash))
    cg = s[s["type"] == "CG"]
    assert (cg.groupby("flash_id")["true_flash"].nunique() == 1).mean() > 0.9
    assert (cg.groupby("true_flash")["flash_id"].nunique() == 1).mean() > 0.9


# ----------------------------------------------------------------------------------------------
# Invariants (hypothesis): partition, every criterion, the choice rule, row order
# ----------------------------------------------------------------------------------------------

@st.composite
def storms(draw):
    n = draw(st.integers(1, 40))
    t_ms = draw(st.lists(st.integers(0, 4000), min_size=n, max_size=n))
    xy = draw(st.lists(st.tuples(st.floats(-15, 15), st.floats(-15, 15)), min_size=n, max_size=n))
    ip = draw(st.lists(st.sampled_from([-40.0, -12.0, -5.0, 4.0, 12.0, 30.0]), min_size=n, max_size=n))
    types = draw(st.lists(st.sampled_from(["CG", "CG", "IC"]), min_size=n, max_size=n))
    lat, lon = PLANE.to_latlon([p[0] for p in xy], [p[1] for p in xy])
    return latlon_table(np.asarray(t_ms) / 1000.0, lat, lon, ip, types)


CRITERIA = st.fixed_dictionaries({
    "max_interval_ms": st.sampled_from([100.0, 500.0]),
    "max_duration_ms": st.sampled_from([400.0, 1000.0]),
    "max_distance_km": st.sampled_from([4.0, 10.0]),
    "max_strokes": st.sampled_from([2, 4, 15]),
    "same_polarity": st.booleans(),
})


def check_rule_from_output(strokes, flashes, c):
    """Every criterion and the choice rule, checked from the output tables alone."""
    n = len(strokes)
    t = strokes["time"].array.asi8
    lat, lon = strokes["latitude"].to_numpy(), strokes["longitude"].to_numpy()
    pos = strokes["peak_current_ka"].to_numpy() > 0
    typ = strokes["type"].astype(str).to_numpy()
    fid = strokes["flash_id"].to_numpy()
    assert sorted(set(fid)) == list(range(1, len(flashes) + 1))  # every stroke in one flash, ids dense
    assert flashes["multiplicity"].sum() == n
    first_of = {}
    for f, grp in strokes.groupby("flash_id"):
        idx = grp.index.to_numpy()
        assert grp["stroke_order"].tolist() == list(range(1, len(idx) + 1))
        assert len(idx) <= c["max_strokes"]
        assert len(set(typ[idx])) == 1
        s0 = idx[0]
        first_of[f] = s0
        assert (t[idx] - t[s0]).max() <= c["max_duration_ms"] * 1e6
        assert np.diff(t[idx]).max(initial=0) <= c["max_interval_ms"] * 1e6
        d = haversine_km(lat[s0], lon[s0], lat[idx], lon[idx])
        assert d.max() <= c["max_distance_km"] + 1e-9
        if c["same_polarity"]:
            assert (pos[idx] == pos[s0]).all()
    # the choice: no stroke could have joined a nearer (or equally near, earlier) open flash, and
    # a stroke that opens a flash could have joined none
    for i in range(n):
        best = None
        for f, s0 in first_of.items():
            prior = np.flatnonzero((fid == f) & (np.arange(n) < i))
            if len(prior) == 0 or typ[s0] != typ[i] or len(prior) >= c["max_strokes"]:
                continue
            if t[i] - t[s0] > c["max_duration_ms"] * 1e6 or t[i] - t[prior[-1]] > c["max_interval_ms"] * 1e6:
                continue
            if c["same_polarity"] and pos[s0] != pos[i]:
                continue
            d = float(haversine_km(lat[s0], lon[s0], lat[i], lon[i]))
            if d <= c["max_distance_km"] and (best is None or d < best[0] - TIE_KM):
                best = (d, f)
        assert fid[i] == (best[1] if best else fid[i])
        if best is None:
            assert strokes["stroke_order"].iloc[i] == 1


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(df=storms(), c=CRITERIA)
def test_property_partition_and_rule(df, c):
    strokes, flashes = group_flashes(df, **c)
    check_rule_from_output(strokes, flashes, c)
    assert len(strokes) == len(df)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(df=storms(), c=CRITERIA, seed=st.integers(0, 2**32 - 1))
def test_property_row_order_does_not_matter(df, c, seed):
    a = group_flashes(df, **c)
    shuffled = df.sample(frac=1.0, random_state=np.random.RandomState(seed)).reset_index(drop=True)
    b = group_flashes(shuffled, **c)
    pd.testing.assert_frame_equal(a[0], b[0])
    pd.testing.assert_frame_equal(a[1], b[1])


@pytest.mark.parametrize("impl", [group_flashes, group_flashes_reference])
def test_interval_text_is_exact_at_nanoseconds(impl):
    # intervals 123.456789 ms, 1 ns, 100 ms, 0.5 ms (exact decimals of the ns times)
    t0 = pd.Timestamp("2026-07-14T19:00:00Z").value
    ns = np.cumsum([0, 123_456_789, 1, 100_000_000, 500_000]) + t0
    df = latlon_table(np.zeros(5), [45.5] * 5, [-93.2] * 5, [-20, -12, -11, -10, -9], ["CG"] * 5)
    df["time"] = pd.DatetimeIndex(ns.astype("datetime64[ns]"), tz="UTC")
    s, f = impl(df)
    assert f["interstroke_ms"].tolist() == ["123.456789;0.000001;100.0;0.5"]
    assert f["duration_ms"].tolist() == [pytest.approx(223.956790)]


def test_time_ties_broken_by_source_row_then_position():
    df = table([(0, 0, 0, -20), (0, 20, 0, -30), (0, 0, 20, -25)])
    df["source_row"] = [9, 3, 5]
    s, f = group_flashes(df.iloc[::-1].reset_index(drop=True))
    assert s["source_row"].tolist() == [3, 5, 9]
    assert ids(s) == [1, 2, 3]
    no_src = df.drop(columns="source_row")
    s2, _ = group_flashes(no_src.iloc[[2, 0, 1]].reset_index(drop=True))
    s3, _ = group_flashes(no_src)
    pd.testing.assert_frame_equal(s2, s3)


# ----------------------------------------------------------------------------------------------
# Contract of the outputs, bad input, windows
# ----------------------------------------------------------------------------------------------

def test_output_contract():
    df = table(WORKED, extra={"sensors": np.arange(9, dtype=np.int64), "note": list("abcdefghi")})
    s, f = group_flashes(df)
    assert list(f.columns) == list(FLASH_COLUMNS)
    assert list(s.columns) == list(df.columns) + ["flash_id", "stroke_order", "ground_contact", "likely_ic"]
    assert s["note"].tolist() == list("abcdefghi") and s["sensors"].tolist() == list(range(9))
    assert str(s["time"].dtype) == "datetime64[ns, UTC]" and str(f["time"].dtype) == "datetime64[ns, UTC]"
    for col in ("flash_id", "stroke_order", "ground_contact"):
        assert s[col].dtype == np.int64
    assert s["likely_ic"].dtype == bool
    for col in ("flash_id", "multiplicity", "ground_contacts"):
        assert f[col].dtype == np.int64
    for col in ("mixed_polarity", "likely_ic", "cc_suspect"):
        assert f[col].dtype == bool
    assert not f["cc_suspect"].any() and (f["cc_reasons"] == "").all()
    assert s.index.tolist() == list(range(9))
    # grouping an already grouped table replaces the flash columns
    s2, f2 = group_flashes(s, max_distance_km=1.0)
    assert list(s2.columns) == list(s.columns) and len(f2) > len(f)


def test_microsecond_and_naive_times_are_read_as_utc_ns():
    # pandas 3 makes microsecond times by default; stroke times without a zone are UTC (DESIGN.md)
    df = table(WORKED)
    us = df.assign(time=df["time"].dt.as_unit("us"))
    naive = df.assign(time=df["time"].dt.tz_localize(None))
    ref_s, ref_f = group_flashes(df)
    for variant in (us, naive):
        s, f = group_flashes(variant)
        assert str(s["time"].dtype) == "datetime64[ns, UTC]"
        pd.testing.assert_frame_equal(s, ref_s)
        pd.testing.assert_frame_equal(f, ref_f)


def test_empty_table_gives_empty_outputs():
    s, f = group_flashes(table(WORKED).iloc[:0])
    assert len(s) == 0 and len(f) == 0 and list(f.columns) == list(FLASH_COLUMNS)


@pytest.mark.parametrize("mutate, message", [
    (lambda d: d.drop(columns="latitude"), "latitude"),
    (lambda d: d.assign(latitude=np.where(d.index == 2, np.nan, d["latitude"])), "latitude"),
    (lambda d: d.assign(type=["CG"] * 8 + ["X"]), "CG or IC"),
    (lambda d: d.assign(time=np.arange(9)), "date-times"),
])
def test_bad_input_is_one_clear_error(mutate, message):
    with pytest.raises(InputError, match=message):
        group_flashes(mutate(table(WORKED)))


def test_select_window_by_first_stroke_time():
    s, f = group_flashes(table(WORKED))
    start, end = T0 + pd.Timedelta("50ms"), T0 + pd.Timedelta("1.7s")
    ws, wf = select_window(s, f, start, end)
    # flash 1 starts at 0 s (before start) and is left out whole although its strokes reach 0.6 s;
    # flash 4 starts at 1.7 s (inclusive) and keeps its stroke at 1.76 s, after `end`
    assert wf["flash_id"].tolist() == [2, 3, 4]
    assert ws["flash_id"].tolist() == [2, 3, 4, 4]
    assert ws["time"].max() == T0 + pd.Timedelta("1.76s")
    assert select_window(s, f, None, None)[1]["flash_id"].tolist() == [1, 2, 3, 4, 5]
    gs, gf = select_window(s, f[f["flash_id"] != 3], start, end)  # ids no longer a run
    assert gf["flash_id"].tolist() == [2, 4] and gs["flash_id"].tolist() == [2, 4, 4]
    assert select_window(s, f, "2026-07-14T19:00:01.7Z", None)[1]["flash_id"].tolist() == [4, 5]
    with pytest.raises(InputError, match="UTC offset"):
        select_window(s, f, pd.Timestamp("2026-07-14T19:00:00"), None)
