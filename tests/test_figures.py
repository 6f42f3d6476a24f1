"""Static report figures: deterministic SVG, maps in a true local plane, ellipses, histograms, rates.

Tables here are small scenarios built in the test; the expected numbers come from outside
references (geographiclib, the ellipse covariance computed from the 2-D normal, numpy) or from the
scenario's construction, never from the figure code's own output.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.patches import Circle, Ellipse

from debrief import figures, palette


def _strokes(n=40, seed=3, lat0=45.5, lon0=-93.2):
    rng = np.random.default_rng(seed)
    t = pd.Timestamp("2026-07-14T19:00:00Z") + pd.to_timedelta(np.sort(rng.uniform(0, 3600, n)), unit="s")
    return pd.DataFrame({
        "time": pd.DatetimeIndex(t).as_unit("ns"),
        "latitude": lat0 + rng.uniform(-0.3, 0.3, n),
        "longitude": lon0 + rng.uniform(-0.4, 0.4, n),
        "peak_current_ka": rng.choice([-1.0, 1.0], n) * rng.uniform(5, 80, n),
        "type": pd.Categorical(rng.choice(["CG", "IC"], n), categories=["CG", "IC"]),
        "semi_major_km": rng.uniform(0.2, 1.0, n),
        "semi_minor_km": rng.uniform(0.1, 0.2, n),
        "major_bearing_deg": rng.uniform(0, 180, n),
        "stroke_order": rng.integers(1, 4, n),
    })


def test_svg_is_deterministic_and_has_no_date():
    s = _strokes()
    a = figures.to_svg(figures.event_map(s, title="t"))
    b = figures.to_svg(figures.event_map(s, title="t"))
    assert a == b
    assert a.startswith("<svg")
    assert "<dc:date>" not in a  # metadata={"Date": None}: no creation date (common practice)


def test_svg_uses_only_palette_colours():
    s = _strokes(200)
    svg = figures.to_svg(figures.event_map(s, sites=pd.DataFrame(
        {"name": ["A"], "latitude": [45.5], "longitude": [-93.2], "radius_km": [3.0]})))
    import re

    used = {c.upper() for c in re.findall(r"#[0-9a-fA-F]{6}\b", svg)}
    allowed = {getattr(palette, k).upper() for k in dir(palette) if isinstance(getattr(palette, k), str)
               and getattr(palette, k).startswith("#")}
    allowed |= {"#000000", "#FFFFFF"}  # matplotlib's own black/white (text, background)
    assert used <= allowed, used - allowed


def test_event_map_positions_are_geodesic_distances_from_centre():
    # In an azimuthal equidistant plane, a point's distance from the centre equals its geodesic
    # distance (Snyder 1987, Map Projections: A Working Manual, USGS PP 1395); the geodesic
    # reference is geographiclib (Karney 2013, Algorithms for geodesics).
    s = _strokes(30)
    s["type"] = "CG"
    centre = (45.5, -93.2)
    fig = figures.event_map(s, centre_deg=centre, max_points=10_000)
    ax = fig.axes[0]
    pts = np.concatenate([c.get_offsets() for c in ax.collections if len(c.get_offsets())])
    assert len(pts) == 30
    r_plot = np.sort(np.hypot(pts[:, 0], pts[:, 1]))
    g = Geodesic.WGS84
    r_ref = np.sort([g.Inverse(centre[0], centre[1], la, lo)["s12"] / 1000 for la, lo in zip(s.latitude, s.longitude)])
    np.testing.assert_allclose(r_plot, r_ref, rtol=0, atol=1e-6)


def test_event_map_scale_bar_matches_its_label_and_north_arrow_points_up():
    fig = figures.event_map(_strokes(50))
    ax = fig.axes[0]
    assert ax.get_aspect() == 1.0  # equal scale in x and y, so the bar holds in every direction
    labels = [t.get_text() for t in ax.texts]
    assert "N" in labels
    bar_label = next(t for t in labels if t.endswith(" km"))
    bar_km = float(bar_label.split()[0])
    thick = [ln for ln in ax.lines if ln.get_linewidth() == 2.5]
    assert len(thick) == 1
    x = thick[0].get_xdata()
    assert x[1] - x[0] == pytest.approx(bar_km)


def test_event_map_switches_to_density_above_max_points():
    s = _strokes(600)
    s["type"] = "CG"
    fig = figures.event_map(s, max_points=100, density_cell_km=5.0)
    mesh = [c for c in fig.axes[0].collections if hasattr(c, "get_array") and c.get_array() is not None
            and c.get_array().ndim == 2]
    assert mesh, "a density grid is drawn"
    # Every stroke is inside the map extent, so the grid holds all 600 (numpy.histogram2d counts).
    assert int(np.ma.filled(mesh[0].get_array(), 0).sum()) == 600
    svg = figures.to_svg(fig)
    assert "<image" in svg  # the grid is rasterised: size does not grow with the stroke count


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.floats(-30, 30), st.floats(-30, 30)), min_size=1, max_size=200),
       st.floats(0.5, 10))
def test_density_grid_conserves_points_inside_extent(points, cell):
    xy = np.array(points)
    xlim, ylim = (-30.0, 30.0), (-30.0, 30.0)
    counts, xe, ye = figures.density_grid(xy[:, 0], xy[:, 1], xlim, ylim, cell)
    inside = (xy[:, 0] <= xe[-1]) & (xy[:, 1] <= ye[-1])
    assert counts.sum() == inside.sum()
    assert np.allclose(np.diff(xe), cell) and np.allclose(np.diff(ye), cell)


def test_ellipse_matches_published_covariance():
    # Computed from the 2-D normal [Johnson1994] (X, numpy): a 0.5 x 0.25 km 50 % ellipse at bearing
    # 30 deg has Sxx 0.078897, Syy 0.146524, Sxy 0.058566 km^2, with sigma = axis / k_p and
    # k_p = sqrt(-2 ln(1 - p)) (chi-square, 2 degrees of freedom).
    sxx, syy, sxy = 0.078897, 0.146524, 0.058566
    k = math.sqrt(-2 * math.log(1 - 0.5))
    e = Ellipse(**figures.ellipse_patch_params(0.0, 0.0, 0.5, 0.25, 30.0))
    t = np.linspace(0, 2 * np.pi, 73)
    # The patch transform maps the unit circle exactly onto the drawn ellipse.
    boundary = e.get_patch_transform().transform(np.column_stack([np.cos(t), np.sin(t)]))
    inv = np.linalg.inv(np.array([[sxx, sxy], [sxy, syy]]))
    m = np.einsum("ni,ij,nj->n", boundary, inv, boundary)
    np.testing.assert_allclose(np.sqrt(m), k, rtol=2e-5)  # the published figures have 6 digits


@settings(max_examples=60, deadline=None)
@given(st.floats(0.05, 5), st.floats(0.01, 1), st.floats(0, 179.9))
def test_ellipse_major_axis_points_along_bearing(a, ratio, bearing):
    b = a * ratio
    e = Ellipse(**figures.ellipse_patch_params(0.0, 0.0, a, b, bearing))
    # A point at distance a along the bearing (clockwise from north: x = sin, y = cos) is on the edge.
    tip = np.array([a * math.sin(math.radians(bearing)), a * math.cos(math.radians(bearing))])
    inv_t = e.get_patch_transform().inverted().transform(tip[None, :])[0]
    assert np.hypot(*inv_t) == pytest.approx(1.0, abs=1e-9)


def test_site_map_ring_and_ellipses():
    s = _strokes(12, lat0=45.0, lon0=10.0)
    fig = figures.site_map({"latitude": 45.0, "longitude": 10.0, "name": "x"}, s, radius_km=2.5,
                           ellipse_confidence=0.5)
    ax = fig.axes[0]
    rings = [p for p in ax.patches if isinstance(p, Circle)]
    assert [r.get_radius() for r in rings] == [2.5]
    ells = [p for p in ax.patches if isinstance(p, Ellipse) and not isinstance(p, Circle)]
    assert len(ells) == 12
    assert sorted(e.width for e in ells) == pytest.approx(sorted(2 * s["semi_major_km"]))


def test_site_map_without_candidates():
    empty = _strokes(1).iloc[:0]
    svg = figures.to_svg(figures.site_map({"latitude": 0.0, "longitude": 0.0, "name": "x"}, empty, radius_km=1.0))
    assert svg.startswith("<svg")


def _flashes(times, types, polarities):
    return pd.DataFrame({"time": pd.DatetimeIndex(pd.to_datetime(times, utc=True, format="ISO8601")).as_unit("ns"),
                         "type": types, "polarity": polarities})


def test_flash_rate_table_counts_constructed_storm():
    # Constructed: 3 negative CG in 19:00-19:05, 1 positive CG at 19:07, 2 IC at 19:12.
    f = _flashes(["2026-07-14T19:00:00Z", "2026-07-14T19:01:00Z", "2026-07-14T19:04:59.999Z",
                  "2026-07-14T19:07:00Z", "2026-07-14T19:12:00Z", "2026-07-14T19:14:00Z"],
                 ["CG", "CG", "CG", "CG", "IC", "IC"],
                 ["negative", "negative", "negative", "positive", "negative", "positive"])
    t = figures.flash_rate_table(f, "2026-07-14T19:00:00Z", "2026-07-14T19:14:59Z", bin_minutes=5)
    assert list(t["CG negative"]) == [3, 0, 0]
    assert list(t["CG positive"]) == [0, 1, 0]
    assert list(t["IC"]) == [0, 0, 2]
    assert t["bin_start"].iloc[1] == pd.Timestamp("2026-07-14T19:05:00Z")


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(0, 4 * 3600 - 1), min_size=0, max_size=300))
def test_flash_rate_table_keeps_every_flash(seconds):
    t0 = pd.Timestamp("2026-07-14T19:00:00Z")
    n = len(seconds)
    f = _flashes([t0 + pd.Timedelta(seconds=s) for s in seconds], ["CG"] * n, ["negative"] * n)
    t = figures.flash_rate_table(f, t0, t0 + pd.Timedelta(hours=4), bin_minutes=5)
    assert t["CG negative"].sum() == n
    assert len(t) >= 48


def test_peak_current_histogram_draws_the_table_and_the_open_bin():
    hist = pd.DataFrame({"bin_lo_ka": [0.0, 5.0, 10.0, 15.0], "bin_hi_ka": [5.0, 10.0, 15.0, np.inf],
                         "negative_first": [1, 2, 3, 4], "negative_subsequent": [5, 0, 1, 0],
                         "positive_first": [0, 1, 0, 7], "positive_subsequent": [0, 0, 2, 2]})
    fig = figures.peak_current_histogram(hist, floor_ka=10.0, max_ka=10.0)
    neg, pos = fig.axes[0], fig.axes[1]
    # Bins at 10 kA and above are added into the last bin drawn (5-10 kA): 2 + 3 + 4 = 9.
    from matplotlib.patches import Rectangle

    assert [r.get_height() for r in neg.patches if isinstance(r, Rectangle)] == [1, 9]
    assert [r.get_height() for r in pos.patches if isinstance(r, Rectangle)] == [0, 8]
    steps = [p for p in neg.patches if not isinstance(p, Rectangle)]
    assert list(steps[0].get_data().values) == [5, 1]  # subsequent: 5, then 0 + 1 + 0


def test_periods_timeline_one_row_per_site():
    p = pd.DataFrame({"site": ["A", "B", "A"],
                      "start": pd.to_datetime(["2026-07-14T19:10Z", "2026-07-14T20:00Z", "2026-07-14T21:00Z"], utc=True),
                      "end": pd.to_datetime(["2026-07-14T19:50Z", "2026-07-14T20:30Z", "2026-07-14T21:40Z"], utc=True)})
    fig = figures.periods_timeline(p, "2026-07-14T19:00Z", "2026-07-14T23:00Z")
    ax = fig.axes[0]
    widths = sorted(r.get_width() for r in ax.patches)
    assert widths == pytest.approx([30.0, 40.0, 40.0])  # minutes, from the constructed periods
    assert [t.get_text() for t in ax.get_yticklabels()] == ["A", "B"]


def test_outage_map_line_at_true_distance_from_best_candidate():
    # A line through the point 1 km due east of the stroke (geographiclib Direct, Karney 2013):
    # in the azimuthal equidistant plane about the stroke that point lies at x = 1 km, y = 0.
    from shapely.geometry import LineString

    lat0, lon0 = 45.4, -93.1
    g = Geodesic.WGS84
    east = g.Direct(lat0, lon0, 90.0, 1000.0)
    north = g.Direct(east["lat2"], east["lon2"], 0.0, 2000.0)
    south = g.Direct(east["lat2"], east["lon2"], 180.0, 2000.0)
    line = LineString([(south["lon2"], south["lat2"]), (east["lon2"], east["lat2"]), (north["lon2"], north["lat2"])])
    cand = pd.DataFrame({"latitude": [lat0], "longitude": [lon0], "peak_current_ka": [-30.0], "type": ["CG"],
                         "semi_major_km": [0.3], "semi_minor_km": [0.1], "major_bearing_deg": [45.0]})
    fig = figures.outage_map(line, cand, title="t")
    ax = fig.axes[0]
    drawn = next(ln for ln in ax.lines if ln.get_linewidth() == 1.6 and len(ln.get_xdata()) == 3)
    assert drawn.get_xdata()[1] == pytest.approx(1.0, abs=1e-9)
    assert drawn.get_ydata()[1] == pytest.approx(0.0, abs=1e-9)
    assert len([p for p in ax.patches if isinstance(p, Ellipse) and not isinstance(p, Circle)]) == 1


def test_site_map_draws_the_parcel_where_it_is():
    # A 200 m square parcel centred 1 km north of the site (offsets by geographiclib Direct).
    from shapely.geometry import Polygon

    lat0, lon0 = 45.0, 10.0
    g = Geodesic.WGS84
    c = g.Direct(lat0, lon0, 0.0, 1000.0)
    corners = [g.Direct(c["lat2"], c["lon2"], az, 100.0 * math.sqrt(2)) for az in (45, 135, 225, 315)]
    parcel = Polygon([(k["lon2"], k["lat2"]) for k in corners])
    fig = figures.site_map({"latitude": lat0, "longitude": lon0, "name": "p"}, _strokes(1).iloc[:0],
                           radius_km=2.0, parcel=parcel)
    hatched = [p for p in fig.axes[0].patches if p.get_hatch()]
    assert len(hatched) == 1
    xy = hatched[0].get_xy()
    assert np.allclose(xy[0], xy[-1])  # a closed ring: the first corner is repeated at the end
    xy = xy[:-1]
    assert xy[:, 0].mean() == pytest.approx(0.0, abs=2e-3)
    assert np.median(xy[:, 1]) == pytest.approx(1.0, abs=2e-3)
    assert xy[:, 1].max() - xy[:, 1].min() == pytest.approx(0.2, abs=2e-3)


def test_outage_map_shows_the_line_when_the_best_candidate_is_far_from_it():
    # A straight north-south line through the point 1.5 km due west of the stroke (geographiclib
    # Direct, Karney 2013): in the azimuthal equidistant plane about the stroke the line's nearest
    # point (the foot of the perpendicular) is at x = -1.5 km, y = 0. The old view (±1 km about the
    # stroke) left it out; the axes must now hold it, and the line must cross the view.
    from shapely.geometry import LineString

    lat0, lon0 = 45.42, -93.25
    g = Geodesic.WGS84
    west = g.Direct(lat0, lon0, 270.0, 1500.0)
    north = g.Direct(west["lat2"], west["lon2"], 0.0, 3000.0)
    south = g.Direct(west["lat2"], west["lon2"], 180.0, 3000.0)
    line = LineString([(south["lon2"], south["lat2"]), (north["lon2"], north["lat2"])])
    cand = pd.DataFrame({"latitude": [lat0], "longitude": [lon0], "peak_current_ka": [-40.0], "type": ["CG"],
                         "semi_major_km": [0.4], "semi_minor_km": [0.2], "major_bearing_deg": [10.0],
                         "distance_m": [1500.0]})
    fig = figures.outage_map(line, cand, title="t")
    ax = fig.axes[0]
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    foot = (-1.5, 0.0)
    assert x0 < foot[0] < x1 and y0 < foot[1] < y1
    # Not at the very edge: a margin of at least a tenth of the view on the line's side.
    assert foot[0] - x0 >= 0.1 * (x1 - x0)
    assert x0 < 0.0 < x1 and y0 < 0.0 < y1  # the stroke stays in view too
    assert min(x1 - x0, y1 - y0) >= 2.0  # the minimum half-width of 1 km
    # The dotted segment drawn from the stroke to the foot point.
    seg = next(ln for ln in ax.lines if ln.get_linestyle() == ":" and len(ln.get_xdata()) == 2)
    assert np.allclose(seg.get_xdata(), [0.0, -1.5], atol=1e-3) and np.allclose(seg.get_ydata(), [0.0, 0.0], atol=1e-3)


def test_outage_map_view_holds_the_fault_location():
    # A fault logged 2.5 km due north of the stroke (geographiclib Direct): y = 2.5 km in view.
    from shapely.geometry import LineString

    lat0, lon0 = 45.42, -93.25
    f = Geodesic.WGS84.Direct(lat0, lon0, 0.0, 2500.0)
    line = LineString([(lon0 - 0.01, lat0), (lon0 + 0.01, lat0)])
    cand = pd.DataFrame({"latitude": [lat0], "longitude": [lon0], "peak_current_ka": [-40.0], "type": ["CG"]})
    ax = figures.outage_map(line, cand, fault_deg=(f["lat2"], f["lon2"])).axes[0]
    y0, y1 = ax.get_ylim()
    assert y0 < 0.0 and y1 > 2.5


def _timeline_scenario():
    # Constructed: a trip at t0 and reclosing operations 0.5 s and 15.6 s after it; four
    # candidates at chosen offsets from the trip (the dt_s that match_outages would give them).
    t0 = pd.Timestamp("2026-07-14T19:07:24.892Z")
    row = pd.Series({"outage_id": "O-1", "line_id": "L-1", "time": t0,
                     "reclose_times": (t0 + pd.Timedelta(seconds=0.5), t0 + pd.Timedelta(seconds=15.6))})
    cand = pd.DataFrame({"dt_s": [-0.031, 7.25, -4.5, 15.7], "peak_current_ka": [-35.0, 22.0, -12.0, -8.5],
                         "type": ["CG"] * 4, "rank": [1, 2, 3, 4], "p_within_corridor": [0.93, 0.2, 0.01, 0.0]})
    return row, cand


def test_outage_timeline_stems_at_dt_and_operation_lines_at_reclose_offsets():
    row, cand = _timeline_scenario()
    fig = figures.outage_timeline(row, cand, tolerance_s=10.0, tz="America/Chicago")
    ax = fig.axes[0]
    heads = next(c for c in ax.collections if c.get_gid() == "candidate-heads")
    xy = heads.get_offsets()
    assert np.allclose(xy[:, 0], cand["dt_s"]) and np.allclose(xy[:, 1], cand["peak_current_ka"].abs())
    stems = next(c for c in ax.collections if c.get_gid() == "candidate-stems")
    segs = stems.get_segments()
    assert [s[0, 0] for s in segs] == pytest.approx(list(cand["dt_s"]))
    assert [s[0, 1] for s in segs] == [0.0] * 4 and [s[1, 1] for s in segs] == pytest.approx([35.0, 22.0, 12.0, 8.5])
    ops = {ln.get_gid(): ln.get_xdata()[0] for ln in ax.lines if (ln.get_gid() or "").startswith(("trip", "operation"))}
    assert ops == pytest.approx({"trip": 0.0, "operation-1": 0.5, "operation-2": 15.6})
    best = next(c for c in ax.collections if c.get_gid() == "best-candidate").get_offsets()
    assert np.allclose(best, [[-0.031, 35.0]])
    # The candidate window: trip - 10 s to the last operation + 10 s.
    span = next(p for p in ax.patches if p.get_gid() == "candidate-window")
    assert span.get_x() == pytest.approx(-10.0) and span.get_x() + span.get_width() == pytest.approx(25.6)
    lo, hi = ax.get_xlim()
    assert lo < -10.0 and hi > 25.6
    title = ax.get_title(loc="left")
    # 19:07:24.892 UTC is 14:07:24.892 CDT (UTC-5 in July; America/Chicago, IANA tz database).
    assert "2026-07-14 19:07:24.892 UTC" in title and "14:07:24.892 CDT" in title


def test_outage_timeline_is_deterministic_and_keeps_to_the_palette():
    import re

    row, cand = _timeline_scenario()
    a = figures.to_svg(figures.outage_timeline(row, cand, tolerance_s=10.0))
    b = figures.to_svg(figures.outage_timeline(row, cand, tolerance_s=10.0))
    assert a == b
    used = {c.upper() for c in re.findall(r"#[0-9a-fA-F]{6}\b", a)}
    allowed = {getattr(palette, k).upper() for k in dir(palette) if isinstance(getattr(palette, k), str)
               and getattr(palette, k).startswith("#")} | {"#000000", "#FFFFFF"}
    assert used <= allowed, used - allowed


def test_outage_timeline_without_reclosing_or_candidates():
    t0 = pd.Timestamp("2026-07-14T20:00:00Z")
    row = {"outage_id": "O-2", "line_id": "L-2", "time": t0, "reclose_times": ()}
    ax = figures.outage_timeline(row, pd.DataFrame(columns=["dt_s", "peak_current_ka", "type"]), tolerance_s=2.0).axes[0]
    gids = [ln.get_gid() for ln in ax.lines if ln.get_gid()]
    assert gids == ["trip"]
    assert not [c for c in ax.collections if c.get_gid() == "candidate-heads"]
    lo, hi = ax.get_xlim()
    assert lo < -2.0 and hi > 2.0
