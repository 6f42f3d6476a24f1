"""The stroke map (ipyleaflet): strokes of the window, error ellipses, sites, lines and their corridors.

Works offline: the map has no tile layer unless `tile_url` is given; a graticule and a plain
background stand in for it. Raw stroke arrays stay in the kernel; only what is drawn is sent.
Below `max_points` strokes in view they are drawn one by one (one GeoJSON layer per colour class);
above it, as counts on a grid (numpy.histogram2d) that turns back into points as the window
narrows or the map zooms in.
"""

from __future__ import annotations

import html
import json

import ipywidgets as W
import numpy as np
import pandas as pd
from ipyleaflet import GeoJSON, Map, ScaleControl, TileLayer, WidgetControl

from .. import palette
from ..outages import corridor_geojson
from .geometry import circle_outline, ellipse_outlines, fit_view, graticule
from .state import ExploreState, ensure_state, filter_mask_codes, load_sites

#: Colour classes in drawing order: (type, polarity).
CLASSES = (("IC", "negative"), ("IC", "positive"), ("CG", "negative"), ("CG", "positive"))

_CSS = """<style>
.debrief-map.leaflet-container, .debrief-map .leaflet-container { background: %s; }
.debrief-legend { font: 12px/1.35 sans-serif; background: rgba(255,255,255,0.92); padding: 4px 8px; }
.debrief-legend .sw { display: inline-block; width: 10px; height: 10px; border-radius: 50%%;
  margin-right: 5px; vertical-align: -1px; }
</style>""" % palette.BACKGROUND


def _point_style(stroke_type: str, polarity: str) -> dict:
    colour = palette.stroke_colour(stroke_type, polarity)
    if stroke_type == "CG":  # ground strokes dark and filled, cloud pulses light and hollow (palette.py)
        return {"radius": 4, "color": colour, "weight": 1, "opacity": 0.9, "fillColor": colour, "fillOpacity": 0.75}
    return {"radius": 4, "color": colour, "weight": 1.5, "opacity": 0.9, "fillOpacity": 0.0}


#: How the line corridors are drawn: faint, so strokes inside them stay readable.
CORRIDOR_STYLE = {"color": palette.LINE, "weight": 1, "opacity": 0.25, "fillColor": palette.LINE, "fillOpacity": 0.06}


def legend_html(ellipse_confidence: float, extra: str = "", *, corridor_km: float | None = None) -> str:
    """The map legend: colour classes, ellipses, sites, lines and their corridors, density cells.

    `corridor_km` (the ``[lines] search_km`` half-width) adds the corridor row when given.
    """
    rows = []
    for cls in reversed(CLASSES):
        c = palette.stroke_colour(*cls)
        fill = c if cls[0] == "CG" else "transparent"
        rows.append(f'<div><span class="sw" style="background:{fill};border:2px solid {c}"></span>'
                    f"{html.escape(palette.STROKE_LABELS[cls])}</div>")
    rows.append(f'<div><span class="sw" style="border:2px solid {palette.ELLIPSE};border-radius:40%"></span>'
                f"error ellipse ({ellipse_confidence:.0%} confidence, as reported)</div>")
    rows.append(f'<div><span class="sw" style="border:2px solid {palette.SITE}"></span>site and radius</div>')
    rows.append(f'<div><span class="sw" style="background:{palette.LINE};height:3px;border-radius:0;vertical-align:3px"></span>'
                "power line</div>")
    if corridor_km is not None:
        rows.append(f'<div><span class="sw" style="background:{palette.LINE};opacity:{CORRIDOR_STYLE["fillOpacity"] * 3:.2f};'
                    f'border:1px solid {palette.LINE};border-radius:0"></span>'
                    f"line corridor ({corridor_km:g} km each side: the outage search distance)</div>")
    rows.append(f'<div><span class="sw" style="background:{palette.LINE};opacity:.5;border-radius:0"></span>'
                "stroke count per cell (too many to draw)</div>")
    rows.append(f'<div><span class="sw" style="background:{palette.HIGHLIGHT};border:1px solid {palette.LINE}"></span>selected</div>')
    return '<div class="debrief-legend">' + "".join(rows) + extra + "</div>"


_ELLIPSE_STYLE = {"color": palette.ELLIPSE, "weight": 1.5, "fillOpacity": 0.08, "fillColor": palette.ELLIPSE}


def _fc(features: list) -> dict:
    return {"type": "FeatureCollection", "features": features}


class StrokeMap(W.VBox):
    """Map of the strokes in the state's window, with filters, selection, sites and lines.

    Parameters
    ----------
    event_or_state : Event or ExploreState
        A state shared with other widgets, or an event (a state of its own is made).
    tile_url : str, optional
        A tile URL template (``https://.../{z}/{x}/{y}.png``); default none, so the map makes
        no network request.
    max_points : int
        Most strokes drawn one by one; above it the view shows counts per grid cell.
    near_ellipses : int
        With at most this many strokes in view, every one gets its error ellipse.
    ellipse_limit : int
        Most ellipses drawn at once.
    grid_cells : int
        Cells per side of the count grid.
    view_margin : float
        Strokes this fraction of the view's size beyond its edges are drawn too (smooth panning).
    """

    def __init__(self, event_or_state, *, tile_url: str | None = None, max_points: int = 2000,
                 near_ellipses: int = 150, ellipse_limit: int = 300, grid_cells: int = 40,
                 view_margin: float = 0.25, height: str = "540px"):
        self.state: ExploreState = ensure_state(event_or_state)
        self.max_points = int(max_points)
        self.near_ellipses = int(near_ellipses)
        self.ellipse_limit = int(ellipse_limit)
        self.grid_cells = int(grid_cells)
        self.view_margin = float(view_margin)
        ev = self.state.event
        cfg = ev.config
        self._prepare(ev.strokes, ev.flashes, cfg.get("default_uncertainty_km"))

        s, w, n, e = self._extent
        centre, zoom = fit_view(s, w, n, e)
        self.map = Map(layers=(), center=centre, zoom=zoom, prefer_canvas=True, scroll_wheel_zoom=True,
                       attribution_control=tile_url is not None, layout=W.Layout(height=height, width="100%"))
        self.map.add_class("debrief-map")
        if tile_url:
            self.map.add(TileLayer(url=tile_url, base=True, name="tiles", attribution="map tiles: see tile_url"))
        self.graticule_layer = GeoJSON(data=_fc([graticule(s - 0.5, w - 0.5, n + 0.5, e + 0.5)]), name="graticule",
                                       style={"color": palette.GRID, "weight": 1, "opacity": 1.0})
        self.lines_layer = GeoJSON(data=self._lines_data(), name="lines",
                                   style={"color": palette.LINE, "weight": 2, "opacity": 0.8})
        self.corridor_km = float(cfg["lines"]["search_km"])
        self.corridor_layer = GeoJSON(data=self._corridor_data(), name="line corridors", style=dict(CORRIDOR_STYLE))
        self.cells_layer = GeoJSON(data=_fc([]), name="stroke counts")
        # Styles of often-redrawn layers go in each feature: a layer-level `style` makes
        # ipyleaflet deep-copy the whole data on every update.
        self.ellipse_layer = GeoJSON(data=_fc([]), name="error ellipses")
        self.highlight_layer = GeoJSON(data=_fc([]), name="selected", point_style={
            "radius": 8, "color": palette.LINE, "weight": 1, "fillColor": palette.HIGHLIGHT, "fillOpacity": 0.95})
        self.point_layers = {cls: GeoJSON(data=_fc([]), name=palette.STROKE_LABELS[cls], point_style=_point_style(*cls))
                             for cls in CLASSES}
        self.sites_layer = GeoJSON(data=self._sites_data(), name="sites", style={"color": palette.SITE, "weight": 2, "fill": False},
                                   point_style={"radius": 5, "color": palette.SITE, "fillColor": palette.SITE, "fillOpacity": 1.0})
        self.focus_layer = GeoJSON(data=_fc([]), name="site in focus", style={"color": palette.SITE, "weight": 3, "dashArray": "6 4", "fill": False},
                                   point_style={"radius": 6, "color": palette.LINE, "weight": 1, "fillColor": palette.SITE, "fillOpacity": 1.0})
        for layer in (self.graticule_layer, self.corridor_layer, self.cells_layer, self.lines_layer, self.ellipse_layer,
                      self.sites_layer, self.focus_layer, self.highlight_layer, *self.point_layers.values()):
            self.map.add(layer)
        for layer in self.point_layers.values():
            layer.on_click(self._on_point_click)
        self.map.add(ScaleControl(position="bottomleft", imperial=False))
        self.legend = W.HTML(legend_html(cfg.get("ellipse_confidence"),
                                         corridor_km=self.corridor_km if self.corridor_layer.data["features"] else None))
        self.map.add(WidgetControl(widget=self.legend, position="bottomright"))
        self.status = W.HTML()
        self.status.add_class("debrief-map-status")
        self.mode = "points"
        self.n_window = 0
        self.n_view = 0
        self.n_drawn = 0
        self._click_selection = False

        st = self.state
        st.observe(self._redraw, names=["window", "types", "polarities", "abs_ka_range"])
        st.observe(self._on_selection, names=["selected_flash_ids", "selected_stroke_ids"])
        st.observe(self._on_site, names=["site"])
        self.map.observe(self._on_view, names=["bounds"])
        self._fitted = False
        self.map.observe(self._on_first_size, names=["pixel_bounds"])
        super().__init__([W.HTML(_CSS), self.map, self.status], layout=W.Layout(width="100%"))
        self._redraw()
        self._draw_selection()
        if st.site:
            self._on_site()

    # -- kernel-side arrays, computed once -----------------------------------------------------
    def _prepare(self, strokes: pd.DataFrame, flashes: pd.DataFrame, default_unc_km):
        ft_ns = pd.Series(pd.DatetimeIndex(flashes["time"]).as_unit("ns").asi8, index=flashes["flash_id"].to_numpy())
        flash_time_ns = ft_ns.reindex(strokes["flash_id"].to_numpy()).to_numpy(dtype=np.int64)
        # Strokes ordered by their flash's first-stroke time: a window is then one slice (searchsorted).
        self._order = np.argsort(flash_time_ns, kind="stable")
        self._ftime_sorted = flash_time_ns[self._order]
        self._lat = strokes["latitude"].to_numpy(dtype=float)
        self._lon = strokes["longitude"].to_numpy(dtype=float)
        self._ip = strokes["peak_current_ka"].to_numpy(dtype=float)
        self._is_ic = (strokes["type"].astype(str).to_numpy() == "IC").astype(np.int8)
        self._label = strokes.index.to_numpy()
        self._pos_of_label = pd.Series(np.arange(len(strokes)), index=strokes.index)
        self._flash = strokes["flash_id"].to_numpy()
        self._a = strokes["semi_major_km"].to_numpy(dtype=float)
        self._b = strokes["semi_minor_km"].to_numpy(dtype=float)
        self._beta = strokes["major_bearing_deg"].to_numpy(dtype=float)
        if default_unc_km is not None:  # circular default where the file gives no ellipse (event.toml)
            missing = ~(np.isfinite(self._a) & np.isfinite(self._b))
            self._a = np.where(missing, default_unc_km, self._a)
            self._b = np.where(missing, default_unc_km, self._b)
            self._beta = np.where(missing | ~np.isfinite(self._beta), 0.0, self._beta)
        pad = 0.02
        self._extent = (float(np.nanmin(self._lat)) - pad, float(np.nanmin(self._lon)) - pad,
                        float(np.nanmax(self._lat)) + pad, float(np.nanmax(self._lon)) + pad)

    def _lines_data(self) -> dict:
        path = self.state.event.config.path("lines")
        if not path.exists():
            return _fc([])
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return _fc([])  # the line reader reports bad files; the map just leaves them out
        if data.get("type") == "FeatureCollection":
            return {"type": "FeatureCollection", "features": [f for f in data.get("features", []) if f.get("geometry")]}
        return _fc([])

    def _corridor_data(self) -> dict:
        """The event's line corridors at ``[lines] search_km`` (core: debrief.outages.corridor_geojson)."""
        lines = self.state.event.lines
        if lines is None or not len(lines):
            return _fc([])
        return corridor_geojson(lines, self.corridor_km)

    def _sites_data(self) -> dict:
        sites = load_sites(self.state.event)
        feats = []
        for r in sites.itertuples():
            feats.append({"type": "Feature", "properties": {"name": r.name},
                          "geometry": {"type": "Point", "coordinates": [float(r.longitude), float(r.latitude)]}})
            if np.isfinite(r.radius_km) and r.radius_km > 0:
                lat, lon = circle_outline(r.latitude, r.longitude, r.radius_km)
                feats.append({"type": "Feature", "properties": {"name": r.name, "radius_km": float(r.radius_km)},
                              "geometry": {"type": "LineString", "coordinates": np.round(np.c_[lon, lat], 5).tolist()}})
        return _fc(feats)

    # -- what is in the window ---------------------------------------------------------------
    def window_positions(self) -> np.ndarray:
        """Row positions of the window's strokes that pass the filters (time order of flashes)."""
        s, e = self.state.window
        lo = np.searchsorted(self._ftime_sorted, s.value, side="left")
        hi = np.searchsorted(self._ftime_sorted, e.value, side="right")
        pos = self._order[lo:hi]
        return pos[filter_mask_codes(self.state, self._is_ic[pos], self._ip[pos])]

    def _view_box(self):
        b = self.map.bounds
        if b and len(b) == 2 and b[0] and b[1] and b[0][0] != b[1][0]:
            (s, w), (n, e) = b
            # A quarter of the view's size around it, so a small pan shows strokes at once.
            my, mx = self.view_margin * (n - s), self.view_margin * (e - w)
            return float(s - my), float(w - mx), float(n + my), float(e + mx)
        return None

    def _redraw(self, change=None):
        pos = self.window_positions()
        self.n_window = len(pos)
        box = self._view_box()
        if box is not None:
            s, w, n, e = box
            la, lo = self._lat[pos], self._lon[pos]
            pos = pos[(la >= s) & (la <= n) & (lo >= w) & (lo <= e)]
        self.n_view = len(pos)
        self._view_pos = pos
        if self.n_view <= self.max_points:
            self.mode = "points"
            self._draw_points(pos)
            self.cells_layer.data = _fc([])
            self.n_drawn = self.n_view
        else:
            self.mode = "cells"
            for layer in self.point_layers.values():
                layer.data = _fc([])
            self._draw_cells(pos, box)
            self.n_drawn = 0
        self._draw_ellipses()
        self._update_status()

    def _draw_points(self, pos):
        ic = self._is_ic[pos]
        neg = self._ip[pos] < 0
        for (ty, pol), layer in self.point_layers.items():
            sel = pos[(ic == (1 if ty == "IC" else 0)) & (neg == (pol == "negative"))]
            layer.data = _fc(self._point_features(sel))

    def _point_features(self, sel) -> list:
        lon = np.round(self._lon[sel], 5).tolist()
        lat = np.round(self._lat[sel], 5).tolist()
        ids = self._label[sel].tolist()
        fl = self._flash[sel].tolist()
        ka = np.round(self._ip[sel], 1).tolist()
        return [{"type": "Feature", "properties": {"id": i, "flash_id": f, "ka": k},
                 "geometry": {"type": "Point", "coordinates": [x, y]}}
                for i, f, k, x, y in zip(ids, fl, ka, lon, lat)]

    def _draw_cells(self, pos, box):
        s, w, n, e = box if box is not None else self._extent
        counts, yedges, xedges = np.histogram2d(self._lat[pos], self._lon[pos], bins=self.grid_cells, range=[[s, n], [w, e]])
        iy, ix = np.nonzero(counts)
        c = counts[iy, ix]
        # Opacity by log count: a cell with one stroke stays visible beside one with thousands.
        op = 0.12 + 0.68 * np.log1p(c) / np.log1p(c.max()) if len(c) else c
        ye, xe = np.round(yedges, 5), np.round(xedges, 5)
        feats = []
        for j, i, k, o in zip(iy.tolist(), ix.tolist(), c.astype(int).tolist(), np.round(op, 3).tolist()):
            x0, x1, y0, y1 = float(xe[i]), float(xe[i + 1]), float(ye[j]), float(ye[j + 1])
            feats.append({"type": "Feature", "properties": {"n": k, "style": {"fillColor": palette.LINE, "fillOpacity": o, "weight": 0}},
                          "geometry": {"type": "Polygon", "coordinates": [[[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]]}})
        self.cells_layer.data = _fc(feats)
        self.cell_total = int(c.sum())

    # -- selection, ellipses, zoom -----------------------------------------------------------
    def selected_positions(self) -> np.ndarray:
        """Row positions of the selected strokes and of every stroke of the selected flashes."""
        st = self.state
        pos = []
        if st.selected_stroke_ids:
            pos.append(self._pos_of_label.reindex(list(st.selected_stroke_ids)).dropna().to_numpy(dtype=np.int64))
        if st.selected_flash_ids:
            pos.append(np.flatnonzero(np.isin(self._flash, np.asarray(st.selected_flash_ids))))
        return np.unique(np.concatenate(pos)) if pos else np.zeros(0, dtype=np.int64)

    def _draw_ellipses(self):
        sel = self.selected_positions()
        near = self._view_pos if self.mode == "points" and self.n_view <= self.near_ellipses else np.zeros(0, dtype=np.int64)
        pos = np.unique(np.concatenate([sel, near]))[: self.ellipse_limit] if len(sel) + len(near) else sel
        ok = pos[np.isfinite(self._a[pos]) & np.isfinite(self._b[pos]) & np.isfinite(self._beta[pos])]
        self.n_without_ellipse = int(len(pos) - len(ok))
        feats = []
        if len(ok):
            lat, lon = ellipse_outlines(self._lat[ok], self._lon[ok], self._a[ok], self._b[ok], self._beta[ok])
            rings = np.round(np.stack([lon, lat], axis=-1), 5).tolist()
            for i, ring in zip(self._label[ok].tolist(), rings):
                feats.append({"type": "Feature", "properties": {"id": i, "style": _ELLIPSE_STYLE},
                              "geometry": {"type": "Polygon", "coordinates": [ring]}})
        self.ellipse_layer.data = _fc(feats)
        self.n_ellipses = len(feats)

    def _draw_selection(self):
        sel = self.selected_positions()
        self.highlight_layer.data = _fc(self._point_features(sel))
        self._draw_ellipses()
        self._update_status()

    def _on_selection(self, change=None):
        self._draw_selection()
        if self._click_selection:
            return
        sel = self.selected_positions()
        if len(sel):
            pad_deg = np.nan_to_num(np.nanmax(self._a[sel]) if np.isfinite(self._a[sel]).any() else 0.0) / 111.0 + 0.01
            self.zoom_to(float(self._lat[sel].min()) - pad_deg, float(self._lon[sel].min()) - pad_deg,
                         float(self._lat[sel].max()) + pad_deg, float(self._lon[sel].max()) + pad_deg)

    def _on_point_click(self, event=None, feature=None, properties=None, **kwargs):
        props = properties or (feature or {}).get("properties", {})
        if "id" not in props:
            return
        self._click_selection = True  # a click selects without moving the map under the cursor
        try:
            self.state.select(flash_ids=(props["flash_id"],), stroke_ids=(props["id"],))
        finally:
            self._click_selection = False

    def _on_site(self, change=None):
        site = self.state.site
        if not site:
            self.focus_layer.data = _fc([])
            return
        lat, lon, r = float(site["latitude"]), float(site["longitude"]), float(site.get("radius_km") or 0.0)
        feats = [{"type": "Feature", "properties": {"name": site.get("name", "")},
                  "geometry": {"type": "Point", "coordinates": [lon, lat]}}]
        if r > 0:
            la, lo = circle_outline(lat, lon, r)
            feats.append({"type": "Feature", "properties": {"radius_km": r},
                          "geometry": {"type": "LineString", "coordinates": np.round(np.c_[lo, la], 5).tolist()}})
            self.zoom_to(float(la.min()), float(lo.min()), float(la.max()), float(lo.max()))
        else:
            self.zoom_to(lat - 0.05, lon - 0.05, lat + 0.05, lon + 0.05)
        self.focus_layer.data = _fc(feats)

    def zoom_to(self, south: float, west: float, north: float, east: float):
        """Centre and zoom the map on a box (computed here: no round trip to the browser)."""
        pb = self.map.pixel_bounds
        wpx, hpx = 800.0, 520.0
        if pb and len(pb) == 2 and pb[0] and pb[1]:
            wpx, hpx = max(abs(pb[1][0] - pb[0][0]), 200.0), max(abs(pb[1][1] - pb[0][1]), 200.0)
        centre, zoom = fit_view(south, west, north, east, wpx, hpx)
        with self.map.hold_sync():
            self.map.center = centre
            self.map.zoom = zoom

    def _on_first_size(self, change=None):
        # The first view the browser reports gives the map's real size: fit the data to it
        # once, unless something is already in focus.
        pb = self.map.pixel_bounds
        if self._fitted or not (pb and len(pb) == 2 and pb[0] and pb[1]):
            return
        self._fitted = True
        if not (self.state.site or self.state.selected_flash_ids or self.state.selected_stroke_ids):
            self.zoom_to(*self._extent)

    def _on_view(self, change=None):
        self._redraw()

    def _update_status(self):
        if self.mode == "points":
            txt = f"{self.n_view:,} strokes drawn"
            if self.n_view != self.n_window:
                txt += f" (of {self.n_window:,} in the window and filters; the rest are outside the view)"
        else:
            txt = (f"{self.n_view:,} strokes in view: too many to draw one by one (limit {self.max_points:,}), "
                   "shown as counts per cell; zoom in or narrow the window to see strokes")
        if getattr(self, "n_ellipses", 0):
            txt += f"; {self.n_ellipses:,} error ellipses"
        if getattr(self, "n_without_ellipse", 0):
            txt += f"; {self.n_without_ellipse:,} strokes without an ellipse (no default_uncertainty_km set)"
        self.status.value = f'<span style="font-size:12px">{html.escape(txt)}</span>'

    def drawn_stroke_ids(self) -> list:
        """Stroke ids currently drawn as points (all colour classes)."""
        return [f["properties"]["id"] for layer in self.point_layers.values() for f in layer.data["features"]]
