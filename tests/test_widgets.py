"""The explore widgets driven from Python: traits set as a user would, layers and state checked.

Scenario tables are invented here (their truth is what we constructed); every expected count is
computed independently with pandas on the same table, or taken from the core function the widget
must call. Geometry is checked against geographiclib (Karney 2013) and pyproj.
"""

from __future__ import annotations

import html
import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

with warnings.catch_warnings():  # bqscales sets trait metadata the pre-4.1 traitlets way at import
    warnings.simplefilter("ignore", DeprecationWarning)
    import bqplot  # noqa: F401

from debrief.config import from_dict
from debrief.continuing_current import flag_continuing_current
from debrief.event import Event, load_optional_inputs
from debrief.flashes import group_flashes, select_window
from debrief.geodesy import LocalPlane
from debrief.polarity import multiplicity_table
from debrief.uncertainty import ellipse_outline_xy
from debrief.widgets import CCFlagger, Dashboard, ExploreState, MultiplicityTable, PolarityHistogram, StrokeMap, TimeWindow
from debrief.widgets.geometry import circle_outline, ellipse_outlines, fit_view, graticule

T0 = pd.Timestamp("2026-07-14T19:00:00Z")
ROOT = Path(__file__).resolve().parents[1]


# -- scenario tables ------------------------------------------------------------------------------
def raw_strokes(rows):
    """Canonical stroke table from (seconds after T0, lat, lon, kA, type[, a, b, bearing]) tuples."""
    cols = ["t_s", "latitude", "longitude", "peak_current_ka", "type", "semi_major_km", "semi_minor_km", "major_bearing_deg"]
    df = pd.DataFrame([tuple(r) + (np.nan,) * (8 - len(r)) for r in rows], columns=cols)
    df.insert(0, "time", (T0 + pd.to_timedelta(df.pop("t_s"), unit="s")).dt.as_unit("ns"))
    df["type"] = pd.Categorical(df["type"], categories=["CG", "IC"])
    for c in ("semi_major_km", "semi_minor_km", "major_bearing_deg"):
        df[c] = df[c].astype(float)
    df = df.sort_values("time", kind="stable").reset_index(drop=True)
    df["source_row"] = np.arange(2, len(df) + 2, dtype=np.int64)
    return df


def make_event(raw, settings=None, name="scenario"):
    cfg = from_dict({"name": name, "time_zone": "America/Chicago", **(settings or {})})
    strokes, flashes = group_flashes(raw, cfg)
    flashes = flag_continuing_current(strokes, flashes, cfg)
    return Event(config=cfg, strokes=strokes, flashes=flashes, ledger=None,
                 start=strokes["time"].min(), end=strokes["time"].max())


def random_raw(seed=7, n_flashes=300, hours=1.0):
    """Invented storm: flashes of 1-6 strokes spread over `hours` in a 0.4 deg box."""
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n_flashes):
        t = rng.uniform(0, hours * 3600)
        lat, lon = 45.3 + rng.uniform(0, 0.4), -93.4 + rng.uniform(0, 0.4)
        kind = "IC" if rng.random() < 0.3 else "CG"
        sign = 1 if rng.random() < 0.15 else -1
        for j in range(int(rng.integers(1, 7))):
            rows.append((t + 0.06 * j, lat + rng.normal(0, 0.002), lon + rng.normal(0, 0.002),
                         sign * float(rng.uniform(4, 120)), kind, float(rng.uniform(0.2, 1.5)), 0.2, float(rng.uniform(0, 180))))
    return raw_strokes(rows)


@pytest.fixture(scope="module")
def event():
    return make_event(random_raw())


def pandas_window(ev, start, end):
    """Strokes of the flashes whose first stroke is in [start, end] (the documented window rule)."""
    fl = ev.flashes[(ev.flashes["time"] >= start) & (ev.flashes["time"] <= end)]
    return ev.strokes[ev.strokes["flash_id"].isin(fl["flash_id"])], fl


# -- state ----------------------------------------------------------------------------------------
def test_state_window_is_utc_and_ordered(event):
    st_ = ExploreState(event)
    st_.window = ("2026-07-14T14:10:00-05:00", "2026-07-14T19:20:00")  # offset, and naive = UTC
    assert st_.start == pd.Timestamp("2026-07-14T19:10:00Z") and st_.end == pd.Timestamp("2026-07-14T19:20:00Z")
    assert str(st_.start.tz) == "UTC" and st_.start.unit == "ns"
    from traitlets import TraitError

    with pytest.raises(TraitError):
        st_.window = (T0 + pd.Timedelta("1h"), T0)


def test_state_filter_mask_matches_pandas(event):
    st_ = ExploreState(event)
    s = event.strokes
    st_.types, st_.polarities, st_.abs_ka_range = ("CG",), ("negative",), (20.0, 60.0)
    want = (s["type"] == "CG") & (s["peak_current_ka"] < 0) & s["peak_current_ka"].abs().between(20, 60)
    assert np.array_equal(st_.filter_mask(s["type"].astype(str), s["peak_current_ka"]), want.to_numpy())
    st_.types = ()
    assert not st_.filter_mask(s["type"].astype(str), s["peak_current_ka"]).any()


# -- map and time window --------------------------------------------------------------------------
def test_slider_moves_window_and_map_draws_the_pandas_count(event):
    st_ = ExploreState(event)
    tw = TimeWindow(st_, width_min=10)
    m = StrokeMap(st_)
    seen = set()
    for i in (0, 2, 4):
        tw.slider.value = i
        s, e = st_.window
        assert s == event.start + pd.Timedelta(minutes=10) / 3 * i
        assert e == min(s + pd.Timedelta(minutes=10), event.end)
        want, fl = pandas_window(event, s, e)
        assert m.mode == "points"
        assert sorted(m.drawn_stroke_ids()) == sorted(want.index.tolist())
        assert f"{len(want):,} strokes in window ({len(fl):,} flashes)" in tw.label.value
        seen.add(len(want))
    assert len(seen) > 1  # the windows differ, so the check can fail


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(a=st.floats(0, 3600), length=st.floats(0, 1800), ic_only=st.booleans())
def test_map_window_equals_select_window(event, a, length, ic_only):
    # Invariant: whatever the window, the map draws exactly select_window's strokes (filtered).
    st_ = ExploreState(event)
    m = StrokeMap(st_)
    s, e = T0 + pd.Timedelta(seconds=a), T0 + pd.Timedelta(seconds=a + length)
    st_.window = (s, e)
    if ic_only:
        st_.types = ("IC",)
    ws, _ = select_window(event.strokes, event.flashes, s, e)
    if ic_only:
        ws = ws[ws["type"] == "IC"]
    assert sorted(event.strokes.loc[m.drawn_stroke_ids(), "source_row"]) == sorted(ws["source_row"])
    assert m.n_window == len(ws)


def test_step_buttons_and_whole_event(event):
    st_ = ExploreState(event)
    tw = TimeWindow(st_, width_min=15)
    tw.forward.click()
    tw.forward.click()
    tw.back.click()
    assert tw.slider.value == 1
    tw.slider.value = tw.slider.max
    tw.forward.click()
    assert tw.slider.value == tw.slider.max  # clipped at the end
    assert st_.end == event.end
    tw.width.value = 0
    assert st_.window == (event.start, event.end) and tw.slider.disabled


def test_time_label_shows_utc_and_zone(event):
    tw = TimeWindow(ExploreState(event), width_min=30)
    # 19:00 UTC is 14:00 CDT (UTC-5 in July, IANA tz database America/Chicago).
    assert "UTC (2026-07-14 14:" in tw.label.value and "CDT" in tw.label.value


def test_filters_reduce_drawn_strokes_to_pandas_counts(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_)
    s = event.strokes
    st_.types = ("IC",)
    assert sorted(m.drawn_stroke_ids()) == sorted(s.index[s["type"] == "IC"].tolist())
    assert all(len(m.point_layers[c].data["features"]) == 0 for c in m.point_layers if c[0] == "CG")
    st_.types = ("CG", "IC")
    st_.polarities = ("positive",)
    st_.abs_ka_range = (30.0, 80.0)
    want = s.index[(s["peak_current_ka"] >= 30) & (s["peak_current_ka"] <= 80)]
    assert sorted(m.drawn_stroke_ids()) == sorted(want.tolist())
    for cls, layer in m.point_layers.items():  # each class layer holds only its class
        for f in layer.data["features"]:
            row = s.loc[f["properties"]["id"]]
            assert (str(row["type"]), "negative" if row["peak_current_ka"] < 0 else "positive") == cls


def test_many_strokes_are_aggregated_then_points_when_narrowed(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_, max_points=200, grid_cells=10)
    assert m.mode == "cells"
    assert all(len(l.data["features"]) == 0 for l in m.point_layers.values())
    cells = m.cells_layer.data["features"]
    assert sum(f["properties"]["n"] for f in cells) == len(event.strokes)  # every stroke in one cell
    st_.window = (event.start, event.start + pd.Timedelta(minutes=5))
    want, _ = pandas_window(event, *st_.window)
    assert len(want) <= 200 and m.mode == "points" and len(m.drawn_stroke_ids()) == len(want)
    assert m.cells_layer.data["features"] == []


def test_cells_are_numpy_histogram2d_counts(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_, max_points=10, grid_cells=8)
    s, w, n, e = m._extent
    counts, _, _ = np.histogram2d(event.strokes["latitude"], event.strokes["longitude"], bins=8, range=[[s, n], [w, e]])
    got = sorted(f["properties"]["n"] for f in m.cells_layer.data["features"])
    assert got == sorted(int(c) for c in counts.ravel() if c > 0)


def test_zooming_in_draws_only_strokes_in_view(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_, max_points=100_000, view_margin=0.0)
    # What the browser reports when the user zooms: the view's edges (front-end state update).
    m.map.set_state({"south": 45.4, "north": 45.5, "west": -93.3, "east": -93.2})
    s = event.strokes
    inside = s.index[s["latitude"].between(45.4, 45.5) & s["longitude"].between(-93.3, -93.2)]
    assert 0 < len(inside) < len(s)
    assert sorted(m.drawn_stroke_ids()) == sorted(inside.tolist())
    assert f"of {len(s):,} in the window" in m.status.value
    m.view_margin = 0.5  # half the view's size beyond each edge is drawn too
    m.map.set_state({"south": 45.41, "north": 45.5, "west": -93.3, "east": -93.2})
    inside = s.index[s["latitude"].between(45.365, 45.545) & s["longitude"].between(-93.35, -93.15)]
    assert sorted(m.drawn_stroke_ids()) == sorted(inside.tolist())


def test_map_has_no_tile_layer_by_default_and_a_graticule(event):
    m = StrokeMap(ExploreState(event))
    from ipyleaflet import TileLayer

    assert not any(isinstance(layer, TileLayer) for layer in m.map.layers)
    step = m.graticule_layer.data["features"][0]["properties"]["step_deg"]
    assert step == 0.1  # about 0.45 deg of data: lines every 0.1 deg
    m2 = StrokeMap(ExploreState(event), tile_url="http://127.0.0.1:1/{z}/{x}/{y}.png")
    assert sum(isinstance(layer, TileLayer) for layer in m2.map.layers) == 1


def test_selection_draws_ellipses_and_zooms(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_, near_ellipses=0)
    fid = int(event.flashes["flash_id"].iloc[5])
    members = event.strokes.index[event.strokes["flash_id"] == fid]
    st_.select(flash_ids=(fid,))
    assert sorted(f["properties"]["id"] for f in m.ellipse_layer.data["features"]) == sorted(members.tolist())
    assert sorted(f["properties"]["id"] for f in m.highlight_layer.data["features"]) == sorted(members.tolist())
    lat0 = float(event.flashes["latitude"].iloc[5])
    assert abs(m.map.center[0] - lat0) < 0.05 and m.map.zoom >= 10
    st_.select()
    assert m.ellipse_layer.data["features"] == [] and m.highlight_layer.data["features"] == []


def test_clicking_a_point_selects_its_flash_without_moving_the_map(event):
    st_ = ExploreState(event)
    m = StrokeMap(st_)
    centre = list(m.map.center)
    layer = m.point_layers[("CG", "negative")]
    f = layer.data["features"][0]
    m._on_point_click(event="click", feature=f, properties=f["properties"])
    assert st_.selected_stroke_ids == (f["properties"]["id"],)
    assert st_.selected_flash_ids == (int(event.strokes.loc[f["properties"]["id"], "flash_id"]),)
    assert list(m.map.center) == centre


def test_map_draws_sites_and_lines_from_the_folder(tmp_path, event):
    (tmp_path / "sites.csv").write_text("name,latitude,longitude,radius_km\nBarn,45.45,-93.25,3\n", encoding="utf-8")
    line = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"id": "F1"},
            "geometry": {"type": "LineString", "coordinates": [[-93.3, 45.4], [-93.1, 45.6]]}}]}
    (tmp_path / "lines.geojson").write_text(json.dumps(line), encoding="utf-8")
    cfg = from_dict({"name": "x"}, event_dir=tmp_path)
    ev = Event(config=cfg, strokes=event.strokes, flashes=event.flashes, ledger=None, start=event.start, end=event.end)
    load_optional_inputs(ev)  # what load_event does for a folder
    m = StrokeMap(ExploreState(ev))
    assert m.lines_layer.data["features"][0]["geometry"]["coordinates"] == [[-93.3, 45.4], [-93.1, 45.6]]
    ring = [f for f in m.sites_layer.data["features"] if f["geometry"]["type"] == "LineString"][0]
    g = Geodesic.WGS84  # Karney (2013): each ring vertex 3 km from the site
    for lon, lat in ring["geometry"]["coordinates"][::9]:
        assert g.Inverse(45.45, -93.25, lat, lon)["s12"] == pytest.approx(3000.0, abs=1.0)


def test_map_draws_one_corridor_per_line_at_search_km(tmp_path, event):
    # Two invented lines (a meridian segment and a bent line) and [lines] search_km = 1.5: the
    # corridor layer holds one polygon per line, is what the core corridor function gives, and
    # the straight line's corridor vertices are 1.5 km from it (the shortest geodesic to the
    # segment by GeographicLib, Karney 2013; 2 cm for the 1e-7 deg rounding of the vertices).
    from debrief.outages import corridor_geojson

    feats = [{"type": "Feature", "properties": {"id": "F1", "name": "North feeder", "height_m": 10, "cfo_kv": 150},
              "geometry": {"type": "LineString", "coordinates": [[-93.30, 45.40], [-93.30, 45.50]]}},
             {"type": "Feature", "properties": {"id": "F2", "height_m": 12, "cfo_kv": 300},
              "geometry": {"type": "LineString", "coordinates": [[-93.20, 45.35], [-93.15, 45.40], [-93.10, 45.38]]}}]
    (tmp_path / "lines.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": feats}), encoding="utf-8")
    cfg = from_dict({"name": "x", "lines": {"search_km": 1.5}}, event_dir=tmp_path)
    ev = Event(config=cfg, strokes=event.strokes, flashes=event.flashes, ledger=None, start=event.start, end=event.end)
    load_optional_inputs(ev)  # what load_event does for a folder
    m = StrokeMap(ExploreState(ev))
    got = m.corridor_layer.data["features"]
    assert ev.problems == [] and len(ev.lines) == 2
    assert [f["properties"]["line_id"] for f in got] == ["F1", "F2"]
    assert [f["properties"]["name"] for f in got][0] == "North feeder"
    assert [f["properties"]["half_width_m"] for f in got] == [1500.0, 1500.0]
    assert [f["geometry"]["type"] for f in got] == ["Polygon", "Polygon"]
    core = corridor_geojson(ev.lines, 1.5)["features"]  # the widget draws the core's polygons
    assert [f["geometry"] for f in got] == [f["geometry"] for f in core]
    assert all(f["properties"].items() >= c["properties"].items() for f, c in zip(got, core))
    assert m.corridor_layer in m.map.layers and m.corridor_layer.name == "line corridors"
    assert m.map.layers.index(m.corridor_layer) < m.map.layers.index(m.lines_layer)  # under the lines
    from scipy.optimize import minimize_scalar

    ring = np.asarray(got[0]["geometry"]["coordinates"][0])[:-1]
    g = Geodesic.WGS84
    for lon, lat in ring[::4]:
        f = minimize_scalar(lambda phi: g.Inverse(lat, lon, phi, -93.30)["s12"], bounds=(45.40, 45.50),
                            method="bounded", options={"xatol": 1e-10})
        d = min(f.fun, g.Inverse(lat, lon, 45.40, -93.30)["s12"], g.Inverse(lat, lon, 45.50, -93.30)["s12"])
        assert d == pytest.approx(1500.0, abs=0.02)
    assert "line corridor (1.5 km each side" in m.legend.value


def test_map_without_lines_has_an_empty_corridor_layer(event):
    m = StrokeMap(ExploreState(event))
    assert m.corridor_layer.data["features"] == []
    assert "line corridor" not in m.legend.value


# -- drawing geometry -----------------------------------------------------------------------------
def test_ellipse_outline_matches_local_plane_and_polar_form():
    lat0, lon0, a, b, br = 45.5, -93.2, 2.0, 0.5, 30.0
    lat, lon = ellipse_outlines([lat0], [lon0], [a], [b], [br], n_vertices=24)
    x, y = ellipse_outline_xy(a, b, br, n=24)
    plat, plon = LocalPlane(lat0, lon0).to_latlon(x, y)  # pyproj aeqd about the stroke
    np.testing.assert_allclose(lat[0, :-1], plat, atol=1e-9)
    np.testing.assert_allclose(lon[0, :-1], plon, atol=1e-9)
    assert (lat[0, 0], lon[0, 0]) == (lat[0, -1], lon[0, -1])  # closed ring
    g = Geodesic.WGS84
    for la, lo in zip(lat[0, :-1], lon[0, :-1]):
        inv = g.Inverse(lat0, lon0, la, lo)
        phi = math.radians(inv["azi1"] - br)  # angle from the major axis
        # Polar form of an ellipse about its centre: r = ab / sqrt((b cos phi)^2 + (a sin phi)^2).
        r = a * b / math.hypot(b * math.cos(phi), a * math.sin(phi))
        assert inv["s12"] / 1000.0 == pytest.approx(r, rel=1e-6)


def test_major_axis_points_along_the_bearing():
    lat, lon = ellipse_outlines([45.0], [-93.0], [3.0], [1.0], [90.0], n_vertices=4)
    inv = Geodesic.WGS84.Inverse(45.0, -93.0, lat[0, 0], lon[0, 0])
    assert inv["azi1"] == pytest.approx(90.0, abs=1e-6) and inv["s12"] == pytest.approx(3000.0, rel=1e-9)


@settings(max_examples=40, deadline=None)
@given(lat=st.floats(-60, 60), lon=st.floats(-179, 179), r=st.floats(0.1, 200))
def test_circle_outline_is_geodesic_circle(lat, lon, r):
    la, lo = circle_outline(lat, lon, r, n_vertices=12)
    for a_, o_ in zip(la, lo):
        assert Geodesic.WGS84.Inverse(lat, lon, a_, o_)["s12"] == pytest.approx(r * 1000.0, rel=1e-9)


def _merc_px(lat, lon, z):
    # Web Mercator pixel coordinates, 256 px tiles (OpenStreetMap wiki "Slippy map tilenames", common practice).
    n = 256 * 2 ** z
    x = (lon + 180) / 360 * n
    y = (1 - math.asinh(math.tan(math.radians(lat))) / math.pi) / 2 * n
    return x, y


@settings(max_examples=60, deadline=None)
@given(s=st.floats(-60, 59), dlat=st.floats(0.01, 10), w=st.floats(-170, 150), dlon=st.floats(0.01, 20))
def test_fit_view_is_the_largest_zoom_that_fits(s, dlat, w, dlon):
    n, e = s + dlat, w + dlon
    (clat, clon), z = fit_view(s, w, n, e, 800, 500, max_zoom=30, min_zoom=0)
    assert clat == pytest.approx((s + n) / 2) and clon == pytest.approx((w + e) / 2)

    def size(zz):
        x0, y0 = _merc_px(n, w, zz)
        x1, y1 = _merc_px(s, e, zz)
        return x1 - x0, y1 - y0

    wpx, hpx = size(z)
    assert wpx <= 800 * (1 + 1e-9) and hpx <= 500 * (1 + 1e-9)
    wpx, hpx = size(z + 1)
    assert wpx > 800 or hpx > 500


def test_graticule_covers_box_on_round_values():
    g = graticule(45.13, -93.61, 45.87, -92.79, step_deg=0.1)
    lines = g["geometry"]["coordinates"]
    lons = sorted({round(l[0][0], 6) for l in lines if l[0][0] == l[1][0]})
    assert lons[0] == -93.7 and lons[-1] == -92.7 and len(lons) == 11


# -- histogram ------------------------------------------------------------------------------------
def test_histogram_counts_match_pandas_and_brush_sets_filter(event):
    st_ = ExploreState(event)
    h = PolarityHistogram(st_, bin_edges_ka=np.arange(0, 130, 10))
    m = StrokeMap(st_)
    s = event.strokes
    a = s["peak_current_ka"].abs()
    first = s["stroke_order"] == 1
    for col, sel in (("negative_first", (s["peak_current_ka"] < 0) & first), ("positive_subsequent", (s["peak_current_ka"] > 0) & ~first)):
        want = np.histogram(a[sel], bins=np.arange(0, 130, 10))[0]
        assert np.array_equal(h.counts[col], want)
    y = np.asarray(h.neg_bars.y)
    assert y.shape == (2, 12) and np.array_equal(y[0], h.counts["negative_first"])
    # The user drags across 20-45 kA on the chart.
    h.brush.selected = np.array([45.0, 20.0])
    assert st_.abs_ka_range == (20.0, 45.0)
    assert sorted(m.drawn_stroke_ids()) == sorted(s.index[a.between(20, 45)].tolist())
    h.brush.selected = None
    assert st_.abs_ka_range == (0.0, math.inf)


def test_histogram_follows_window_and_type(event):
    st_ = ExploreState(event)
    h = PolarityHistogram(st_, bin_edges_ka=np.arange(0, 130, 10))
    st_.window = (event.start, event.start + pd.Timedelta(minutes=20))
    st_.types = ("IC",)
    win, _ = pandas_window(event, *st_.window)
    ic = win[win["type"] == "IC"]
    assert sum(c.sum() for c in h.counts.values()) == len(ic) > 0
    assert "cloud pulses" in h.note.value


# -- multiplicity ---------------------------------------------------------------------------------
def test_multiplicity_cell_selects_exactly_its_flashes(event):
    st_ = ExploreState(event)
    mt = MultiplicityTable(st_)
    table = multiplicity_table(event.flashes)
    fl = event.flashes
    checked = 0
    for (label, pol), button in mt.buttons.items():
        if button.disabled:
            continue
        button.click()
        m = int(label.rstrip("+"))
        sel = fl[(fl["type"] == "CG") & (fl["polarity"] == pol) & ((fl["multiplicity"] >= m) if label.endswith("+") else (fl["multiplicity"] == m))]
        assert sorted(st_.selected_flash_ids) == sorted(sel["flash_id"].tolist())
        assert len(st_.selected_flash_ids) == table.loc[label, f"{pol}_count"]
        assert button.description.startswith(f"{len(sel):,}")
        checked += 1
    assert checked >= 4


def test_multiplicity_follows_window(event):
    st_ = ExploreState(event)
    mt = MultiplicityTable(st_)
    st_.window = (event.start, event.start + pd.Timedelta(minutes=15))
    _, fl = pandas_window(event, *st_.window)
    n1 = int(((fl["type"] == "CG") & (fl["polarity"] == "negative") & (fl["multiplicity"] == 1)).sum())
    assert mt.buttons[("1", "negative")].description.startswith(f"{n1:,}")


def test_ten_plus_row_collects_long_flashes():
    # Constructed: one negative flash of 12 strokes 50 ms apart, one of 3 strokes.
    rows = [(0.05 * k, 45.5, -93.2, -20.0, "CG") for k in range(12)] + [(60 + 0.05 * k, 45.6, -93.1, -15.0, "CG") for k in range(3)]
    ev = make_event(raw_strokes(rows))
    mt = MultiplicityTable(ExploreState(ev))
    mt.buttons[("10+", "negative")].click()
    assert mt.state.selected_flash_ids == (1,)
    mt.buttons[("3", "negative")].click()
    assert mt.state.selected_flash_ids == (2,)


# -- continuing current ---------------------------------------------------------------------------
def _cc_event():
    # Constructed truth: a single-stroke +25 kA ground flash (suspect at the 20 kA default), and
    # a negative flash whose weak (-8 kA) stroke is followed 150 ms later at the same spot.
    rows = [(10.0, 45.5, -93.2, 25.0, "CG"),
            (100.0, 45.6, -93.1, -30.0, "CG"), (100.05, 45.6, -93.1, -8.0, "CG"), (100.2, 45.6, -93.1, -12.0, "CG"),
            (300.0, 45.4, -93.3, -40.0, "CG")]
    return make_event(raw_strokes(rows))


def test_cc_threshold_change_recomputes_through_core():
    ev = _cc_event()
    st_ = ExploreState(ev)
    cc = CCFlagger(st_)
    assert cc.flagged_ids() == [1, 2]
    cc.controls["positive_min_ka"].value = 30.0  # +25 kA no longer qualifies
    assert st_.cc_rules["positive_min_ka"] == 30.0
    assert cc.flagged_ids() == [2]
    cc.controls["min_interval_ms"].value = 200.0  # the 150 ms pause no longer qualifies
    assert cc.flagged_ids() == []
    cc.reset.click()
    assert cc.flagged_ids() == [1, 2]


def test_cc_list_matches_flag_continuing_current_on_window(event):
    st_ = ExploreState(event)
    cc = CCFlagger(st_)
    st_.window = (event.start, event.start + pd.Timedelta(minutes=30))
    cc.controls["negative_max_abs_ka"].value = 40.0
    cc.controls["min_interval_ms"].value = 50.0
    ws, wf = select_window(event.strokes, event.flashes, *st_.window)
    want = flag_continuing_current(ws, wf, event.config, positive_min_ka=20.0, negative_max_abs_ka=40.0, min_interval_ms=50.0)
    assert cc.flagged_ids() == want.loc[want["cc_suspect"], "flash_id"].tolist()
    assert len(cc.flagged_ids()) > 0
    assert [v for _, v in cc.list.options] == cc.flagged_ids()


def test_cc_pick_selects_flash_and_map_zooms():
    ev = _cc_event()
    st_ = ExploreState(ev)
    cc = CCFlagger(st_)
    m = StrokeMap(st_)
    cc.list.value = 2
    assert st_.selected_flash_ids == (2,)
    assert m.map.center == pytest.approx([45.6, -93.1], abs=1e-3)
    assert "long_gap_after_weak" in cc.list.options[1][0]


# -- dashboard, notebook --------------------------------------------------------------------------
def test_dashboard_shares_one_state(event):
    d = Dashboard(event, sites=False)
    assert d.map.state is d.state and d.histogram.state is d.state and d.cc.state is d.state
    d.time.slider.value = 1
    want, fl = pandas_window(event, *d.state.window)
    assert len(d.map.drawn_stroke_ids()) == len(want)
    assert "not a warning" in d.children[1].value and "qualified people" in d.children[1].value
    d.multiplicity.buttons[("1", "negative")].click()
    n1 = int(((event.flashes["type"] == "CG") & (event.flashes["polarity"] == "negative")
              & (event.flashes["multiplicity"] == 1) & event.flashes["flash_id"].isin(fl["flash_id"])).sum())
    assert len(d.state.selected_flash_ids) == n1 and f"selected: {n1:,} flash" in d.selection_label.value
    assert len(d.map.highlight_layer.data["features"]) == n1  # single-stroke flashes: one stroke each
    d.clear_selection.click()
    assert d.state.selected_flash_ids == () and "nothing" in d.selection_label.value
    alone = PolarityHistogram(event)  # a widget used alone makes its own state
    assert alone.state is not d.state and alone.state.event is event


def _notebook():
    return json.loads((ROOT / "templates" / "explore.ipynb").read_text(encoding="utf-8"))


def test_notebook_template_is_clean_and_parametrised():
    nb = _notebook()
    code = [c for c in nb["cells"] if c["cell_type"] == "code"]
    assert all(c["outputs"] == [] and c["execution_count"] is None for c in code)
    assert "widgets" not in nb["metadata"]
    assert 'event_dir = "../example_event"' in "".join(code[0]["source"])
    assert "DEBRIEF_EVENT" in "".join("".join(c["source"]) for c in code)


def test_notebook_code_loads_the_folder_named_by_debrief_event(tmp_path, monkeypatch):
    # The cells run as written (in this process: the real-kernel run is the browser test).
    ev_dir = tmp_path / "ev"
    ev_dir.mkdir()
    out = random_raw(seed=3, n_flashes=40)
    out["time"] = out["time"].dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    out.drop(columns="source_row").to_csv(ev_dir / "strokes.csv", index=False)
    (ev_dir / "event.toml").write_text('name = "nb test"\ntime_zone = "UTC"\n', encoding="utf-8")
    monkeypatch.setenv("DEBRIEF_EVENT", str(ev_dir))
    monkeypatch.chdir(ROOT / "templates")
    shown = []
    monkeypatch.setattr("IPython.display.display", lambda *objs, **kw: shown.extend(objs))
    ns = {}
    for c in _notebook()["cells"]:
        if c["cell_type"] == "code":
            exec("".join(c["source"]), ns)
    assert ns["event"].name == "nb test" and len(ns["event"].strokes) == len(out)
    assert shown == [ns["dashboard"]] and isinstance(ns["dashboard"], Dashboard)
    monkeypatch.delenv("DEBRIEF_EVENT")
    ns2 = {}
    exec("".join(_notebook()["cells"][0]["source"]), ns2)
    assert (Path.cwd() / ns2["event_dir"]).resolve() == (ROOT / "example_event").resolve()


# -- site panel -----------------------------------------------------------------------------------
def test_site_panel_shows_core_result_and_focuses_map(tmp_path):
    from debrief.analysis import analyse
    from debrief.widgets.site_panel import SitePanel

    # Constructed: a barn at 45.5 N 93.2 W; one ground stroke about 1.1 km north of it, one 20 km east.
    rows = [(30.0, 45.51, -93.2, -25.0, "CG", 0.3, 0.2, 0.0), (90.0, 45.5, -92.944, -40.0, "CG", 0.3, 0.2, 0.0)]
    raw = raw_strokes(rows)
    (tmp_path / "sites.csv").write_text("name,latitude,longitude,radius_km,start,end\nBarn,45.5,-93.2,2,,\n"
                                        "Shed,45.5,-93.2,2,2026-07-14T19:01:00Z,2026-07-14T19:02:00Z\n", encoding="utf-8")
    cfg = from_dict({"name": "site scenario", "time_zone": "UTC"}, event_dir=tmp_path)
    strokes, flashes = group_flashes(raw, cfg)
    ev = Event(config=cfg, strokes=strokes, flashes=flag_continuing_current(strokes, flashes, cfg), ledger=None,
               start=strokes["time"].min(), end=strokes["time"].max())
    load_optional_inputs(ev)  # what load_event does for a folder
    st_ = ExploreState(ev)
    m = StrokeMap(st_, near_ellipses=0)
    panel = SitePanel(st_)
    panel.pick.value = 0
    assert (panel.lat.value, panel.lon.value, panel.radius.value) == (45.5, -93.2, 2.0)
    res = panel.check()
    # the panel shows the event analysis's check (the same call as `debrief site`)
    want = analyse(ev).check_site(45.5, -93.2, 2.0, start=ev.start, end=ev.end, name="Barn")
    assert want.summary["coverage"] == "inside"
    assert res.sentence == want.sentence and html.escape(res.sentence) in panel.output.value
    assert sorted(st_.selected_stroke_ids) == sorted(ev.strokes.index[ev.strokes["source_row"].isin(want.candidates["source_row"])].tolist())
    assert 0 in st_.selected_stroke_ids and 1 not in st_.selected_stroke_ids  # 20 km away is no candidate
    d = Geodesic.WGS84.Inverse(45.5, -93.2, 45.51, -93.2)["s12"] / 1000  # Karney (2013)
    assert want.candidates["distance_km"].iloc[0] == pytest.approx(d, rel=1e-6)
    assert st_.site["name"] == "Barn" and st_.site["radius_km"] == 2.0
    ring = [f for f in m.focus_layer.data["features"] if f["geometry"]["type"] == "LineString"][0]
    lon_, lat_ = ring["geometry"]["coordinates"][10]
    assert Geodesic.WGS84.Inverse(45.5, -93.2, lat_, lon_)["s12"] == pytest.approx(2000.0, abs=1.0)
    assert abs(m.map.center[0] - 45.5) < 1e-6 and m.map.zoom >= 11
    assert len(m.ellipse_layer.data["features"]) == 1
    assert "qualified" in panel.output.value or "licensed" in panel.output.value
    # A site with its own period is checked over it: 19:01-19:02 holds only the far stroke.
    panel.pick.value = 1
    assert panel.period.value == "site"
    res = panel.check()
    want = analyse(ev).check_site(45.5, -93.2, 2.0, start=pd.Timestamp("2026-07-14T19:01:00Z"),
                                  end=pd.Timestamp("2026-07-14T19:02:00Z"), name="Shed")
    assert res.sentence == want.sentence and res.summary["n_candidates"] == want.summary["n_candidates"]
    assert 0 not in st_.selected_stroke_ids and st_.site["name"] == "Shed"


def test_empty_window_shows_zeros_everywhere():
    # Constructed: two flashes an hour apart; the window between them holds nothing.
    rows = [(0.0, 45.5, -93.2, -20.0, "CG"), (3600.0, 45.6, -93.1, 30.0, "CG")]
    ev = make_event(raw_strokes(rows))
    d = Dashboard(ev, sites=False)
    d.state.window = (T0 + pd.Timedelta(minutes=10), T0 + pd.Timedelta(minutes=20))
    assert "0 strokes in window (0 flashes)" in d.time.label.value
    assert d.map.drawn_stroke_ids() == [] and d.map.n_window == 0
    assert sum(c.sum() for c in d.histogram.counts.values()) == 0
    assert all(b.disabled and b.description.startswith("0") for b in d.multiplicity.buttons.values())
    assert d.cc.flagged_ids() == [] and d.cc.list.options == ()


def test_site_panel_reports_input_error_in_one_line(event):
    from debrief.widgets.site_panel import SitePanel

    st_ = ExploreState(event)
    panel = SitePanel(st_)
    st_.window = (event.start, event.start)  # a window of no length: the core refuses it
    assert panel.check() is None and panel.result is None
    assert "end is not after its start" in panel.output.value
    assert st_.site == {}  # nothing put in focus
