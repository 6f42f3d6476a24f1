"""Static, deterministic SVG figures for the incident report, drawn from core results.

Every function takes tables the core modules return and gives a :class:`matplotlib.figure.Figure`
built without pyplot (no global figure state); :func:`to_svg` turns it into SVG text with a fixed
hash salt and no date, so the same inputs give byte-identical figures. Colours come from
:mod:`debrief.palette` only. Maps are drawn in a local azimuthal equidistant plane
(:class:`debrief.geodesy.LocalPlane`) about the event or site, in km, with a km grid, a scale bar
and a north arrow (grid north is true north at the plane's centre).

A static figure cannot show 100,000 markers: above ``max_points`` ground strokes the event map
draws their density on a 2 km grid instead, and marker layers above ``RASTER_ABOVE`` points are
rasterised inside the SVG, so the report stays small.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Snyder1987] Azimuthal equidistant projection: true distance and direction from the centre.
.. [Okabe2008] The colour-blind-safe palette of :mod:`debrief.palette`.
"""

from __future__ import annotations

import io
import math

import matplotlib
import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Circle, Ellipse, FancyArrow
from matplotlib.scale import SymmetricalLogTransform
from matplotlib.ticker import FuncFormatter, NullLocator

from . import palette
from .geodesy import LocalPlane

#: Same salt everywhere: SVG element ids stay the same from run to run.
SVG_HASH_SALT = "debrief"

MAP_SIZE_IN = (7.5, 6.6)
WIDE_SIZE_IN = (7.5, 3.2)
SITE_MAP_SIZE_IN = (6.6, 4.6)
#: The per-outage map and timeline, shown side by side in the report: legend below the axes.
OUTAGE_SIZE_IN = (5.0, 5.8)
#: The outage timeline's axis is linear within this many seconds of the trip, logarithmic beyond.
TIMELINE_LINEAR_S = 1.0

#: Above this many markers in one layer, the layer is rasterised (an image inside the SVG).
RASTER_ABOVE = 1500
RASTER_DPI = 150

#: Above this many ground strokes the event map draws their density instead of markers.
EVENT_MAP_MAX_POINTS = 20000

_RC = {
    "svg.hashsalt": SVG_HASH_SALT,
    "svg.fonttype": "path",  # glyphs as paths: the file needs no font from anywhere
    "font.size": 8.5,
    "axes.edgecolor": palette.LINE,
    "axes.labelcolor": palette.LINE,
    "xtick.color": palette.LINE,
    "ytick.color": palette.LINE,
    "axes.facecolor": palette.BACKGROUND,
    "figure.facecolor": palette.BACKGROUND,
    "path.simplify": True,
}

_DENSITY_CMAP = LinearSegmentedColormap.from_list(
    "debrief_density", [palette.BACKGROUND, palette.NEGATIVE_IC, palette.NEGATIVE_CG]
)


def to_svg(fig: Figure) -> str:
    """SVG text of `fig`, deterministic: fixed hash salt, no date in the metadata.

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    str
        The SVG document (without the XML prolog, so it can be embedded in HTML).
    """
    buf = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": SVG_HASH_SALT}):
        # dpi only sets the resolution of rasterised layers (dense markers); the rest stays vector.
        fig.savefig(buf, format="svg", metadata={"Date": None}, bbox_inches=None, dpi=RASTER_DPI)
    text = buf.getvalue()
    start = text.find("<svg")
    return text[start:] if start > 0 else text


def _figure(size_in) -> Figure:
    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=size_in, dpi=100)
    return fig


def _nice_step(span_km: float, target: int = 8) -> float:
    """A 1-2-5 step giving about `target` grid lines over `span_km`."""
    raw = max(span_km, 1e-6) / target
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 5, 10):
        if raw <= m * mag:
            return m * mag
    return 10 * mag


def _polarity(peak_current_ka) -> np.ndarray:
    return np.where(np.asarray(peak_current_ka, dtype=float) > 0, "positive", "negative")


def _map_decorations(ax, xlim, ylim):
    """km grid, scale bar (lower left) and north arrow (upper right) on a plane map."""
    span = max(xlim[1] - xlim[0], ylim[1] - ylim[0])
    step = _nice_step(span)
    ax.set_xticks(np.arange(math.ceil(xlim[0] / step) * step, xlim[1] + 1e-9, step))
    ax.set_yticks(np.arange(math.ceil(ylim[0] / step) * step, ylim[1] + 1e-9, step))
    ax.grid(True, color=palette.GRID, linewidth=0.6, zorder=0)
    ax.set_axisbelow(True)
    ax.set_xlim(*xlim)
    ax.set_ylim(*ylim)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("km east of centre")
    ax.set_ylabel("km north of centre")
    # Scale bar: a 1-2-5 length near a fifth of the width.
    bar = _nice_step(xlim[1] - xlim[0], target=5)
    w, h = xlim[1] - xlim[0], ylim[1] - ylim[0]
    x0, y0 = xlim[0] + 0.05 * w, ylim[0] + 0.05 * h
    ax.plot([x0, x0 + bar], [y0, y0], color=palette.LINE, linewidth=2.5, solid_capstyle="butt", zorder=6)
    for xe in (x0, x0 + bar):
        ax.plot([xe, xe], [y0 - 0.012 * h, y0 + 0.012 * h], color=palette.LINE, linewidth=1, zorder=6)
    ax.text(x0 + bar / 2, y0 + 0.025 * h, f"{bar:g} km", ha="center", va="bottom", color=palette.LINE, zorder=6)
    # North arrow: the plane is azimuthal about its centre, so +y is true north there.
    xa, ya = xlim[1] - 0.06 * w, ylim[1] - 0.16 * h
    ax.add_patch(FancyArrow(xa, ya, 0, 0.09 * h, width=0.012 * w, head_width=0.035 * w,
                            head_length=0.035 * h, length_includes_head=True,
                            color=palette.LINE, zorder=6))
    ax.text(xa, ya + 0.10 * h, "N", ha="center", va="bottom", fontweight="bold", color=palette.LINE, zorder=6)


def _extent(xs, ys, pad_frac=0.06, min_half_km=2.0):
    xs = np.concatenate([np.asarray(v, dtype=float).ravel() for v in xs]) if xs else np.array([0.0])
    ys = np.concatenate([np.asarray(v, dtype=float).ravel() for v in ys]) if ys else np.array([0.0])
    ok = np.isfinite(xs) & np.isfinite(ys)
    xs, ys = (xs[ok], ys[ok]) if ok.any() else (np.array([0.0]), np.array([0.0]))
    cx, cy = (xs.min() + xs.max()) / 2, (ys.min() + ys.max()) / 2
    half = max((xs.max() - xs.min()) / 2, (ys.max() - ys.min()) / 2, min_half_km) * (1 + pad_frac)
    return (cx - half, cx + half), (cy - half, cy + half)


def line_paths(lines) -> list[np.ndarray]:
    """Each line's vertices as ``(n, 2)`` arrays of (longitude, latitude), degrees.

    Accepts a table with a ``geometry`` column of shapely (Multi)LineStrings, a list of such
    geometries, or a list of coordinate arrays.
    """
    if lines is None:
        return []
    geoms = lines["geometry"].tolist() if isinstance(lines, pd.DataFrame) else list(lines)
    out = []
    for g in geoms:
        if g is None:
            continue
        if hasattr(g, "geoms"):
            out.extend(np.asarray(part.coords, dtype=float)[:, :2] for part in g.geoms)
        elif hasattr(g, "coords"):
            out.append(np.asarray(g.coords, dtype=float)[:, :2])
        else:
            out.append(np.asarray(g, dtype=float)[:, :2])
    return out


def density_grid(x_km, y_km, xlim, ylim, cell_km: float = 2.0):
    """Counts of points per square cell (a 2-D histogram), for maps with too many markers.

    Returns
    -------
    counts : ndarray, shape (nx, ny)
    x_edges_km, y_edges_km : ndarray
    """
    nx = max(1, int(math.ceil((xlim[1] - xlim[0]) / cell_km)))
    ny = max(1, int(math.ceil((ylim[1] - ylim[0]) / cell_km)))
    xe = xlim[0] + cell_km * np.arange(nx + 1)
    ye = ylim[0] + cell_km * np.arange(ny + 1)
    counts, xe, ye = np.histogram2d(np.asarray(x_km, float), np.asarray(y_km, float), bins=[xe, ye])
    return counts, xe, ye


def event_map(strokes: pd.DataFrame, *, centre_deg=None, sites: pd.DataFrame | None = None, lines=None,
              title: str | None = None, max_points: int | None = None, density_cell_km: float = 2.0) -> Figure:
    """Map of the event's strokes by polarity and type, with sites, their radius rings and lines.

    Parameters
    ----------
    strokes : DataFrame
        Stroke table (``latitude``, ``longitude``, ``peak_current_ka``, ``type``).
    centre_deg : (lat, lon), optional
        Centre of the local plane; default the middle of the strokes' extent.
    sites : DataFrame, optional
        ``name``, ``latitude``, ``longitude`` and optionally ``radius_km`` (ring drawn).
    lines : table or list, optional
        Power lines, see :func:`line_paths`.
    max_points : int, optional
        Default :data:`EVENT_MAP_MAX_POINTS`. Above this many ground strokes, their density per ``density_cell_km`` cell is drawn
        instead of markers (cloud pulses are then left out and counted in the legend). Marker
        layers of more than ``RASTER_ABOVE`` points are rasterised to keep the SVG small.

    Returns
    -------
    Figure
    """
    max_points = EVENT_MAP_MAX_POINTS if max_points is None else max_points
    fig = _figure(MAP_SIZE_IN)
    ax = fig.add_axes([0.09, 0.08, 0.62, 0.86])
    lat = strokes["latitude"].to_numpy(float)
    lon = strokes["longitude"].to_numpy(float)
    if centre_deg is None:
        centre_deg = ((np.nanmin(lat) + np.nanmax(lat)) / 2, (np.nanmin(lon) + np.nanmax(lon)) / 2) if len(lat) else (0.0, 0.0)
    plane = LocalPlane(*centre_deg)
    x, y = plane.to_xy_km(lat, lon)
    x, y = np.atleast_1d(x), np.atleast_1d(y)
    xs, ys = [x], [y]
    site_xy = None
    if sites is not None and len(sites):
        sx, sy = plane.to_xy_km(sites["latitude"].to_numpy(float), sites["longitude"].to_numpy(float))
        site_xy = (np.atleast_1d(sx), np.atleast_1d(sy))
        xs.append(site_xy[0]); ys.append(site_xy[1])
    paths = []
    for p in line_paths(lines):
        px, py = plane.to_xy_km(p[:, 1], p[:, 0])
        paths.append((np.atleast_1d(px), np.atleast_1d(py)))
        xs.append(paths[-1][0]); ys.append(paths[-1][1])
    xlim, ylim = _extent(xs, ys)

    stype = strokes["type"].astype(str).to_numpy()
    pol = _polarity(strokes["peak_current_ka"])
    is_cg = stype == "CG"
    handles, labels = [], []
    if is_cg.sum() > max_points:
        counts, xe, ye = density_grid(x[is_cg], y[is_cg], xlim, ylim, density_cell_km)
        masked = np.ma.masked_equal(counts.T, 0)
        mesh = ax.pcolormesh(xe, ye, masked, cmap=_DENSITY_CMAP, shading="flat", zorder=1, rasterized=True)
        cb = fig.colorbar(mesh, cax=fig.add_axes([0.73, 0.16, 0.025, 0.40]))
        cb.set_label(f"ground strokes per {density_cell_km:g} km cell")
        labels.append(f"ground strokes: {int(is_cg.sum()):,}\n(density, too many to draw)")
        handles.append(ax.scatter([], [], marker="s", s=30, color=palette.NEGATIVE_CG))
        n_ic = int((~is_cg).sum())
        if n_ic:
            handles.append(ax.scatter([], [], marker="o", s=14, facecolors="none", edgecolors=palette.NEGATIVE_IC))
            labels.append(f"cloud pulses: {n_ic:,} (not drawn)")
    else:
        for (t, p), label in palette.STROKE_LABELS.items():
            m = (stype == t) & (pol == p)
            n = int(m.sum())
            colour = palette.stroke_colour(t, p)
            raster = n > RASTER_ABOVE
            if t == "CG":
                marker = "+" if p == "positive" else "_"
                h = ax.scatter(x[m], y[m], s=22 if p == "positive" else 16, marker=marker, color=colour,
                               linewidths=1.2, zorder=3 if p == "positive" else 2, rasterized=raster)
            else:
                h = ax.scatter(x[m], y[m], s=8, marker="o", facecolors="none", edgecolors=colour,
                               linewidths=0.6, zorder=1, rasterized=raster)
            handles.append(h)
            labels.append(f"{label}s ({n:,})")
    for px, py in paths:
        ax.plot(px, py, color=palette.LINE, linewidth=1.4, zorder=4)
    if paths:
        handles.append(ax.plot([], [], color=palette.LINE, linewidth=1.4)[0])
        labels.append("power lines")
    if site_xy is not None:
        ax.scatter(site_xy[0], site_xy[1], marker="^", s=40, color=palette.SITE, edgecolors=palette.LINE,
                   linewidths=0.5, zorder=5)
        if "radius_km" in sites:
            for sx, sy, r in zip(site_xy[0], site_xy[1], sites["radius_km"].to_numpy(float)):
                if np.isfinite(r) and r > 0:
                    ax.add_patch(Circle((sx, sy), r, fill=False, edgecolor=palette.SITE, linewidth=1.0, zorder=5))
        for (sx, sy), name in zip(zip(*site_xy), sites["name"].astype(str)):
            ax.annotate(name, (sx, sy), xytext=(4, 4), textcoords="offset points", color=palette.LINE,
                        fontsize=7, zorder=6,
                        path_effects=[patheffects.withStroke(linewidth=2.5, foreground=palette.BACKGROUND)])
        handles.append(ax.scatter([], [], marker="^", s=40, color=palette.SITE, edgecolors=palette.LINE, linewidths=0.5))
        labels.append("sites (ring: search radius)")
    _map_decorations(ax, xlim, ylim)
    if title:
        ax.set_title(title, loc="left", fontsize=9)
    fig.legend(handles, labels, loc="upper left", bbox_to_anchor=(0.71, 0.95), frameon=False, fontsize=7.5)
    fig.text(0.72, 0.03, f"Plane centre {centre_deg[0]:.4f}°, {centre_deg[1]:.4f}°\n"
             "(azimuthal equidistant, WGS84)", fontsize=7, color=palette.LINE, va="bottom")
    return fig


def ellipse_patch_params(x_km, y_km, semi_major_km, semi_minor_km, major_bearing_deg):
    """Matplotlib Ellipse arguments for an error ellipse given as semi-axes and a bearing.

    The bearing is of the major axis, degrees clockwise from north; matplotlib's angle is degrees
    counter-clockwise from the +x (east) axis, so ``angle = 90 - bearing``.

    Returns
    -------
    dict
        ``xy``, ``width`` (full major axis, km), ``height`` (full minor axis, km), ``angle`` (deg).
    """
    return {"xy": (float(x_km), float(y_km)), "width": 2.0 * float(semi_major_km),
            "height": 2.0 * float(semi_minor_km), "angle": 90.0 - float(major_bearing_deg)}


def site_map(site, strokes: pd.DataFrame, *, radius_km: float, ellipse_confidence: float | None = None,
             max_ellipses: int = 300, title: str | None = None, parcel=None) -> Figure:
    """Zoomed map about one site: its radius ring and the candidate strokes' error ellipses.

    Parameters
    ----------
    site : mapping
        ``latitude``, ``longitude`` (degrees) and ``name``.
    strokes : DataFrame
        Candidate strokes (stroke table columns; ellipses drawn where the axes are given).
    radius_km : float
        The site's search radius (ring).
    ellipse_confidence : float, optional
        Confidence level of the ellipses, for the legend.
    max_ellipses : int
        Ellipses of at most this many strokes (the largest |peak current| first) are drawn.
    parcel : shapely Polygon or MultiPolygon, optional
        Parcel outline in longitude/latitude, drawn as a hatched outline.
    """
    fig = _figure(SITE_MAP_SIZE_IN)
    ax = fig.add_axes([0.115, 0.11, 0.54, 0.80])
    plane = LocalPlane(float(site["latitude"]), float(site["longitude"]))
    n = len(strokes)
    x, y = plane.to_xy_km(strokes["latitude"].to_numpy(float), strokes["longitude"].to_numpy(float)) if n else (np.array([]), np.array([]))
    x, y = np.atleast_1d(x), np.atleast_1d(y)
    half = max(1.5 * radius_km, 1.0)
    if n:
        half = max(half, min(float(np.nanmax(np.hypot(x, y))) * 1.1, 4.0 * radius_km))
    xlim, ylim = (-half, half), (-half, half)
    stype = strokes["type"].astype(str).to_numpy() if n else np.array([], dtype=str)
    pol = _polarity(strokes["peak_current_ka"]) if n else np.array([], dtype=str)
    if n and {"semi_major_km", "semi_minor_km", "major_bearing_deg"} <= set(strokes.columns):
        a = strokes["semi_major_km"].to_numpy(float)
        b = strokes["semi_minor_km"].to_numpy(float)
        br = strokes["major_bearing_deg"].to_numpy(float)
        ok = np.isfinite(a) & np.isfinite(b) & np.isfinite(br)
        order = np.argsort(-np.abs(strokes["peak_current_ka"].to_numpy(float)), kind="stable")
        order = order[ok[order]][:max_ellipses]
        for i in np.sort(order):
            ax.add_patch(Ellipse(**ellipse_patch_params(x[i], y[i], a[i], b[i], br[i]), fill=False,
                                 edgecolor=palette.ELLIPSE, linewidth=0.7, zorder=2))
    for (t, p), label in palette.STROKE_LABELS.items():
        m = (stype == t) & (pol == p)
        if m.any():
            ax.scatter(x[m], y[m], s=26 if t == "CG" else 10, marker=("+" if p == "positive" else "_") if t == "CG" else "o",
                       color=palette.stroke_colour(t, p) if t == "CG" else None,
                       facecolors="none" if t == "IC" else None,
                       edgecolors=palette.stroke_colour(t, p) if t == "IC" else None,
                       linewidths=1.2 if t == "CG" else 0.6, zorder=3, label=f"{label} ({int(m.sum())})")
    ax.add_patch(Circle((0, 0), radius_km, fill=False, edgecolor=palette.SITE, linewidth=1.4, zorder=4,
                        label=f"search radius {radius_km:g} km"))
    if parcel is not None:
        polys = list(parcel.geoms) if hasattr(parcel, "geoms") else [parcel]
        for k, poly in enumerate(polys):
            ring = np.asarray(poly.exterior.coords, dtype=float)
            px, py = plane.to_xy_km(ring[:, 1], ring[:, 0])
            ax.fill(px, py, fill=False, hatch="////", edgecolor=palette.SITE, linewidth=1.0, zorder=4,
                    label="parcel" if k == 0 else None)
    ax.scatter([0], [0], marker="^", s=60, color=palette.SITE, edgecolors=palette.LINE, linewidths=0.6, zorder=5,
               label="site")
    ax.plot([], [], color=palette.ELLIPSE, linewidth=0.7,
            label="error ellipse" + (f" ({ellipse_confidence:.0%})" if ellipse_confidence else ""))
    _map_decorations(ax, xlim, ylim)
    ax.set_xlabel("km east of site")
    ax.set_ylabel("km north of site")
    if title:
        ax.set_title(title, loc="left", fontsize=9)
    fig.legend(loc="upper left", bbox_to_anchor=(0.66, 0.92), frameon=False, fontsize=7)
    return fig


def flash_rate_table(flashes: pd.DataFrame, start, end, *, bin_minutes: int = 5) -> pd.DataFrame:
    """Flash counts per time bin by type and polarity.

    Bins are ``bin_minutes`` wide, aligned to whole multiples of ``bin_minutes`` in UTC, covering
    [start, end]; each flash counts in the bin of its first stroke.

    Returns
    -------
    DataFrame
        ``bin_start`` (UTC) and one count column per class: ``CG negative``, ``CG positive``,
        ``IC`` (cloud flashes of either polarity).
    """
    start = pd.Timestamp(start).tz_convert("UTC").floor(f"{bin_minutes}min")
    end = pd.Timestamp(end).tz_convert("UTC")
    edges = pd.date_range(start, end.floor(f"{bin_minutes}min") + pd.Timedelta(minutes=bin_minutes),
                          freq=f"{bin_minutes}min", tz="UTC").as_unit("ns")
    t = flashes["time"].dt.tz_convert("UTC").astype("int64").to_numpy() if len(flashes) else np.array([], dtype=np.int64)
    e = edges.asi8
    ftype = flashes["type"].astype(str).to_numpy() if len(flashes) else np.array([], dtype=str)
    fpol = flashes["polarity"].astype(str).to_numpy() if len(flashes) else np.array([], dtype=str)
    out = {"bin_start": edges[:-1]}
    for name, m in (("CG negative", (ftype == "CG") & (fpol == "negative")),
                    ("CG positive", (ftype == "CG") & (fpol == "positive")),
                    ("IC", ftype == "IC")):
        out[name] = np.histogram(t[m], bins=e)[0].astype(np.int64)
    return pd.DataFrame(out)


def flash_rate_timeline(flashes: pd.DataFrame, start, end, *, bin_minutes: int = 5, tz: str | None = None,
                        periods: pd.DataFrame | None = None) -> Figure:
    """Flash rate per `bin_minutes` by polarity (stacked ground flashes, cloud flashes as a line).

    Parameters
    ----------
    flashes : DataFrame
        Flash table (``time``, ``type``, ``polarity``).
    start, end : Timestamp
        Window (UTC).
    tz : str, optional
        Display zone: named on the axis label; times on the axis are UTC.
    """
    table = flash_rate_table(flashes, start, end, bin_minutes=bin_minutes)
    fig = _figure(WIDE_SIZE_IN)
    ax = fig.add_axes([0.08, 0.17, 0.66, 0.73])
    t0 = table["bin_start"].iloc[0] if len(table) else pd.Timestamp(start)
    mins = ((table["bin_start"] - t0).dt.total_seconds() / 60.0).to_numpy()
    neg, posv, ic = (table[c].to_numpy() for c in ("CG negative", "CG positive", "IC"))
    w = bin_minutes * 0.92
    ax.bar(mins, neg, width=w, align="edge", color=palette.NEGATIVE_CG, label="ground, negative", zorder=2)
    ax.bar(mins, posv, width=w, bottom=neg, align="edge", color=palette.POSITIVE_CG, label="ground, positive", zorder=2)
    ax.step(np.append(mins, mins[-1] + bin_minutes) if len(mins) else mins,
            np.append(ic, ic[-1]) if len(ic) else ic, where="post", color=palette.NEGATIVE_IC,
            linewidth=1.4, label="cloud flashes", zorder=3)
    span = (mins[-1] + bin_minutes) if len(mins) else 60
    step = 30 if span <= 360 else 60 if span <= 720 else 180
    ticks = np.arange(0, span + 1e-9, step)
    ax.set_xticks(ticks)
    ax.set_xticklabels([(t0 + pd.Timedelta(minutes=float(m))).strftime("%H:%M") for m in ticks])
    ax.set_xlim(0, span)
    ax.set_ylabel(f"flashes per {bin_minutes} min")
    ax.set_xlabel(f"time, UTC, from {t0.strftime('%Y-%m-%d %H:%M')}" + (f" (display zone {tz})" if tz and tz != "UTC" else ""))
    ax.grid(True, axis="y", color=palette.GRID, linewidth=0.6, zorder=0)
    ax.set_axisbelow(True)
    fig.legend(loc="upper left", bbox_to_anchor=(0.75, 0.90), frameon=False, fontsize=7.5)
    return fig


def peak_current_histogram(hist: pd.DataFrame, *, floor_ka: float | None = None, max_ka: float = 150.0) -> Figure:
    """Histogram of |peak current| of ground strokes: negative and positive panels, first vs subsequent.

    Draws the table of :func:`debrief.polarity.polarity_histogram` (the counts are not recomputed
    here). First strokes are filled bars, subsequent strokes an outlined step, so the groups stay
    apart without relying on colour. Bins above `max_ka` (and the overflow row) are added into
    the last bin drawn, so no stroke is left out of the picture.

    Parameters
    ----------
    hist : DataFrame
        ``bin_lo_ka``, ``bin_hi_ka``, ``negative_first``, ``negative_subsequent``,
        ``positive_first``, ``positive_subsequent``.
    floor_ka : float, optional
        The network's detection floor, drawn as a dotted line.
    max_ka : float
        Right end of the axis, kA.
    """
    lo = hist["bin_lo_ka"].to_numpy(float)
    hi = hist["bin_hi_ka"].to_numpy(float)
    shown = np.flatnonzero(lo < max_ka)
    last = shown[-1] if len(shown) else 0
    edges = np.append(lo[shown], min(hi[last], max_ka) if np.isfinite(hi[last]) else max_ka)
    fig = _figure((WIDE_SIZE_IN[0], 3.0))
    for k, (pol, colour) in enumerate((("negative", palette.NEGATIVE_CG), ("positive", palette.POSITIVE_CG))):
        ax = fig.add_axes([0.08 + 0.47 * k, 0.16, 0.40, 0.68])
        counts = {}
        for part in ("first", "subsequent"):
            c = hist[f"{pol}_{part}"].to_numpy(np.int64)
            shown_c = c[shown].copy()
            if len(shown_c):
                shown_c[-1] += c[last + 1:].sum()  # the open last bin
            counts[part] = shown_c
        ax.bar(edges[:-1], counts["first"], width=np.diff(edges), align="edge", color=colour, alpha=0.85,
               label=f"first strokes ({int(counts['first'].sum()):,})", zorder=2)
        ax.stairs(counts["subsequent"], edges, color=palette.LINE, linewidth=1.2, baseline=0,
                  label=f"subsequent strokes ({int(counts['subsequent'].sum()):,})", zorder=3)
        if floor_ka is not None:
            ax.axvline(floor_ka, color=palette.LINE, linestyle=":", linewidth=1, label=f"detection floor {floor_ka:g} kA")
        ax.set_xlim(edges[0], edges[-1])
        ax.set_title(f"{pol} ground strokes", loc="left", fontsize=8.5)
        ax.set_xlabel(f"|peak current|, kA (last bin: {edges[-2]:g} kA and above)")
        if k == 0:
            ax.set_ylabel("strokes per bin")
        ax.grid(True, axis="y", color=palette.GRID, linewidth=0.6, zorder=0)
        ax.set_axisbelow(True)
        ax.legend(loc="upper right", frameon=False, fontsize=7)
    return fig


def periods_timeline(periods: pd.DataFrame, start, end, *, label_col: str = "site", start_col: str = "start",
                     end_col: str = "end", level_col: str | None = None) -> Figure:
    """Horizontal bars: one row per site, one bar per alert period (UTC axis).

    Parameters
    ----------
    periods : DataFrame
        One row per period with `label_col`, `start_col`, `end_col` (UTC timestamps), and
        optionally `level_col` (``stop`` drawn dark, any other level light).
    """
    labels = list(dict.fromkeys(periods[label_col].astype(str))) if len(periods) else []
    height = max(1.6, 0.9 + 0.32 * len(labels))
    fig = _figure((WIDE_SIZE_IN[0], height))
    ax = fig.add_axes([0.30, 0.55 / height + 0.05, 0.66, 1 - (0.85 / height) - 0.05])
    t0 = pd.Timestamp(start).tz_convert("UTC").floor("30min")
    t1 = pd.Timestamp(end).tz_convert("UTC").ceil("30min")
    span = max((t1 - t0).total_seconds() / 60.0, 30.0)
    for i, lab in enumerate(labels):
        rows = periods[periods[label_col].astype(str) == lab]
        s = ((rows[start_col] - t0).dt.total_seconds() / 60.0).to_numpy()
        e = ((rows[end_col] - t0).dt.total_seconds() / 60.0).to_numpy()
        colours = palette.POSITIVE_CG
        if level_col is not None:
            colours = [palette.POSITIVE_CG if str(v) == "stop" else palette.POSITIVE_IC for v in rows[level_col]]
        ax.barh(np.full(len(s), i), e - s, left=s, height=0.6, color=colours, zorder=2)
    ax.set_yticks(range(len(labels)))
    ax.set_yticklabels([lab if len(lab) <= 34 else lab[:33] + "…" for lab in labels])
    ax.set_ylim(len(labels) - 0.5 if labels else 0.5, -0.5)
    step = 30 if span <= 360 else 60 if span <= 720 else 180
    ticks = np.arange(0, span + 1e-9, step)
    ax.set_xticks(ticks)
    ax.set_xticklabels([(t0 + pd.Timedelta(minutes=float(m))).strftime("%H:%M") for m in ticks])
    ax.set_xlim(0, span)
    ax.set_xlabel(f"time, UTC, from {t0.strftime('%Y-%m-%d %H:%M')}")
    ax.grid(True, axis="x", color=palette.GRID, linewidth=0.6, zorder=0)
    ax.set_axisbelow(True)
    return fig


def _legend_below(fig):
    """The figure's legend in two columns under the axes (figures shown two to a row)."""
    fig.legend(loc="upper left", bbox_to_anchor=(0.06, 0.165), ncol=2, frameon=False, fontsize=7.5,
               columnspacing=1.2, handlelength=1.8)


def _nearest_on_paths(paths_xy, x0: float, y0: float):
    """The point of the drawn line (plane km) nearest to (x0, y0), or None without a line."""
    import shapely

    parts = [shapely.LineString(np.column_stack([px, py])) for px, py in paths_xy if len(px) >= 2]
    parts += [shapely.Point(px[0], py[0]) for px, py in paths_xy if len(px) == 1]
    if not parts:
        return None
    foot = shapely.shortest_line(shapely.GeometryCollection(parts), shapely.Point(x0, y0)).coords[0]
    return float(foot[0]), float(foot[1])


def outage_map(line_geometry, candidates: pd.DataFrame, *, centre_deg=None, fault_deg=None, half_km: float | None = None,
               title: str | None = None, max_ellipses: int = 100, min_half_km: float = 1.0) -> Figure:
    """Zoomed map about an outage: the line, the candidate strokes and their error ellipses.

    The view holds every candidate and its error ellipse, the point of the line
    nearest to the best candidate (joined to it by a dotted segment, labelled with the
    candidate's ``distance_m`` when given) and the logged fault location, so the line is on the
    map however far from it the stroke was reported.

    Parameters
    ----------
    line_geometry : shapely (Multi)LineString or list
        The line in longitude/latitude (see :func:`line_paths`).
    candidates : DataFrame
        Candidate strokes (``latitude``, ``longitude``, ``peak_current_ka``, ``type``; ellipse
        columns drawn where present; ``distance_m`` from :func:`debrief.outages.match_outages`
        labelled where present), best first: the first is outlined.
    centre_deg : (lat, lon), optional
        Plane centre (default: the best candidate, else the line's first vertex).
    fault_deg : (lat, lon), optional
        Logged fault location, drawn as a cross.
    half_km : float, optional
        Half-width of a square view about the plane centre, km; default: the smallest square
        (padded by a fifth) holding what is listed above, at least `min_half_km`.
    min_half_km : float
        Smallest half-width of the default view, km.
    """
    fig = _figure(OUTAGE_SIZE_IN)
    ax = fig.add_axes([0.14, 0.27, 0.80, 0.66])
    paths = line_paths([line_geometry])
    n = len(candidates)
    if centre_deg is None:
        if n:
            centre_deg = (float(candidates["latitude"].iloc[0]), float(candidates["longitude"].iloc[0]))
        elif paths:
            centre_deg = (float(paths[0][0, 1]), float(paths[0][0, 0]))
        else:
            centre_deg = (0.0, 0.0)
    plane = LocalPlane(*centre_deg)
    x, y = (plane.to_xy_km(candidates["latitude"].to_numpy(float), candidates["longitude"].to_numpy(float))
            if n else (np.array([]), np.array([])))
    x, y = np.atleast_1d(x), np.atleast_1d(y)
    paths_xy = []
    for p in paths:
        px, py = plane.to_xy_km(p[:, 1], p[:, 0])
        paths_xy.append((np.atleast_1d(px), np.atleast_1d(py)))
        ax.plot(px, py, color=palette.LINE, linewidth=1.6, zorder=3)
    ax.plot([], [], color=palette.LINE, linewidth=1.6, label="line")
    has_ellipse = n and {"semi_major_km", "semi_minor_km", "major_bearing_deg"} <= set(candidates.columns)
    if has_ellipse:
        a = candidates["semi_major_km"].to_numpy(float)
        b = candidates["semi_minor_km"].to_numpy(float)
        br = candidates["major_bearing_deg"].to_numpy(float)
        for i in np.flatnonzero(np.isfinite(a) & np.isfinite(b) & np.isfinite(br))[:max_ellipses]:
            ax.add_patch(Ellipse(**ellipse_patch_params(x[i], y[i], a[i], b[i], br[i]), fill=False,
                                 edgecolor=palette.ELLIPSE, linewidth=0.8, zorder=2))
        ax.plot([], [], color=palette.ELLIPSE, linewidth=0.8, label="error ellipse")
    foot = _nearest_on_paths(paths_xy, float(x[0]), float(y[0])) if n else None
    if foot is not None and math.hypot(foot[0] - x[0], foot[1] - y[0]) > 1e-9:
        ax.plot([x[0], foot[0]], [y[0], foot[1]], color=palette.LINE, linewidth=1.0, linestyle=":", zorder=3,
                label="shortest way to the line")
        if "distance_m" in candidates and np.isfinite(float(candidates["distance_m"].iloc[0])):
            d_m = float(candidates["distance_m"].iloc[0])
            ax.annotate(f"{d_m:,.0f} m" if d_m < 10000 else f"{d_m / 1000:,.1f} km",
                        ((x[0] + foot[0]) / 2, (y[0] + foot[1]) / 2), xytext=(4, 4), textcoords="offset points",
                        fontsize=7, color=palette.LINE, zorder=6,
                        path_effects=[patheffects.withStroke(linewidth=2.5, foreground=palette.BACKGROUND)])
    if n:
        pol = _polarity(candidates["peak_current_ka"])
        stype = candidates["type"].astype(str).to_numpy()
        for (t, p), label in palette.STROKE_LABELS.items():
            m = (stype == t) & (pol == p)
            if m.any():
                ax.scatter(x[m], y[m], s=40, marker=("+" if p == "positive" else "_") if t == "CG" else "o",
                           color=palette.stroke_colour(t, p), linewidths=1.5, zorder=4, label=f"{label} ({int(m.sum())})")
        ax.scatter(x[:1], y[:1], s=160, facecolors="none", edgecolors=palette.LINE, linewidths=1.0, zorder=5,
                   label="best candidate")
    fault_xy = None
    if fault_deg is not None and all(np.isfinite(fault_deg)):
        fx, fy = plane.to_xy_km(fault_deg[0], fault_deg[1])
        fault_xy = (float(fx), float(fy))
        ax.scatter([fx], [fy], marker="x", s=50, color=palette.SITE, linewidths=1.5, zorder=5, label="logged fault location")
    if half_km is not None:
        xlim, ylim = (-half_km, half_km), (-half_km, half_km)
    else:
        kx, ky = [x], [y]
        if has_ellipse:  # the ellipses drawn, by their semi-major axes
            r = candidates["semi_major_km"].to_numpy(float)[:max_ellipses]
            kx += [x[:len(r)] - r, x[:len(r)] + r]
            ky += [y[:len(r)] - r, y[:len(r)] + r]
        for pt in (foot, fault_xy):
            if pt is not None:
                kx.append(np.array([pt[0]])); ky.append(np.array([pt[1]]))
        xlim, ylim = _extent(kx, ky, pad_frac=0.2, min_half_km=min_half_km)
    _map_decorations(ax, xlim, ylim)
    ax.set_xlabel("km east of the best candidate" if n else "km east")
    ax.set_ylabel("km north of the best candidate" if n else "km north")
    if title:
        ax.set_title(title, loc="left", fontsize=9)
    _legend_below(fig)
    return fig


def _operation_offsets_s(outage_row) -> np.ndarray:
    """Seconds from the logged trip to each later operation (``reclose_times``), in order."""
    t0 = pd.Timestamp(outage_row["time"])
    ops = outage_row.get("reclose_times") if hasattr(outage_row, "get") else None
    if ops is None or (not isinstance(ops, (tuple, list, np.ndarray, pd.Index)) and pd.isna(ops)):
        ops = ()
    return np.sort(np.array([(pd.Timestamp(t) - t0).total_seconds() for t in ops], dtype=float))


def outage_timeline(outage_row, candidates: pd.DataFrame, *, tolerance_s: float, tz: str | None = None,
                    title: str | None = None) -> Figure:
    """Timeline of one outage: the candidate strokes as stems against the trip and reclose times.

    The x axis is seconds from the logged trip (the candidates' ``dt_s``), linear within
    :data:`TIMELINE_LINEAR_S` of the trip and logarithmic beyond (matplotlib's ``symlog``), so
    strokes a tenth of a second apart near the trip and a reclose many seconds later both show.
    The trip is a solid vertical line at 0 and each later operation a dashed one, numbered as in
    the candidates' ``operation`` column (0 the trip). The shaded span is the time window in which
    strokes were candidates: from the trip minus the clock tolerance to the last operation plus
    it. Each stem is
    as tall as the stroke's |peak current| and coloured by polarity and type; the best candidate
    (``rank`` 1) is circled and labelled with its ``p_within_corridor``.

    Parameters
    ----------
    outage_row : mapping
        ``time`` (the logged trip, UTC Timestamp) and optionally ``reclose_times`` (UTC
        Timestamps of the later operations), ``outage_id``, ``line_id``; a row of
        :func:`debrief.io.lines.read_outages`.
    candidates : DataFrame
        This outage's candidates from :func:`debrief.outages.match_outages`: ``dt_s`` (s after
        the trip), ``peak_current_ka``, ``type``, and optionally ``rank`` (1 = best; default the
        first row) and ``p_within_corridor``.
    tolerance_s : float
        The clock tolerance the match used, s.
    tz : str, optional
        Display zone: the trip's local time is given beside UTC.
    title : str, optional
        Default: the outage and line ids.

    Returns
    -------
    Figure
    """
    from .timeutil import zone

    fig = _figure(OUTAGE_SIZE_IN)
    ax = fig.add_axes([0.14, 0.27, 0.80, 0.58])
    t0 = pd.Timestamp(outage_row["time"]).tz_convert("UTC")
    ops_s = _operation_offsets_s(outage_row)
    tol = float(tolerance_s)
    lo, hi = -tol, (float(ops_s.max()) if len(ops_s) else 0.0) + tol
    n = len(candidates)
    dt = candidates["dt_s"].to_numpy(float) if n else np.zeros(0)
    h = np.abs(candidates["peak_current_ka"].to_numpy(float)) if n else np.zeros(0)
    span_lo = min(lo, float(dt.min()) if n else lo)
    span_hi = max(hi, float(dt.max()) if n else hi)
    # Linear within ±1 s of the trip, logarithmic beyond: a stroke 0.1 s before the trip and a
    # reclose 0.5 s after it stay apart on the same axis as a reclose 15 s later.
    scale = SymmetricalLogTransform(10, TIMELINE_LINEAR_S, 1.0)
    a, b = scale.transform(np.array([span_lo, span_hi], dtype=float))
    w = max(b - a, 0.5)
    xlim = tuple(float(v) for v in scale.inverted().transform(np.array([a - 0.06 * w, b + 0.06 * w])))
    ax.set_xscale("symlog", linthresh=TIMELINE_LINEAR_S, linscale=1.0)
    ax.set_xlim(*xlim)

    def frac(v):
        return (scale.transform(np.atleast_1d(float(v)))[0] - scale.transform(np.atleast_1d(xlim[0]))[0]) / \
            (scale.transform(np.atleast_1d(xlim[1]))[0] - scale.transform(np.atleast_1d(xlim[0]))[0])
    top = max(float(h.max()) if n else 0.0, 1.0) * 1.3
    ax.axvspan(lo, hi, color=palette.GRID, alpha=0.6, linewidth=0, zorder=0, gid="candidate-window",
               label=f"candidate window\n(±{tol:g} s clock tolerance)")
    ax.axvline(0.0, color=palette.LINE, linewidth=1.6, zorder=2, gid="trip", label="logged trip (operation 0)")
    for k, off in enumerate(ops_s, start=1):
        ax.axvline(off, color=palette.LINE, linewidth=1.0, linestyle="--", zorder=2, gid=f"operation-{k}",
                   label="later operations (reclosing)" if k == 1 else None)
    # Operation numbers along the top; numbers closer than 4 % of the axis are written together.
    groups = []
    for k, off in enumerate(np.concatenate([[0.0], ops_s])):
        if groups and frac(off) - frac(groups[-1][1]) < 0.035:
            groups[-1][0].append(k)
        else:
            groups.append([[k], off])
    for ks, off in groups:
        ax.text(off, 1.01, ",".join(str(k) for k in ks), transform=ax.get_xaxis_transform(), ha="center",
                va="bottom", fontsize=7, color=palette.LINE)
    if n:
        stype = candidates["type"].astype(str).to_numpy() if "type" in candidates else np.full(n, "CG")
        pol = _polarity(candidates["peak_current_ka"])
        colours = [palette.stroke_colour(t if t in ("CG", "IC") else "CG", p) for t, p in zip(stype, pol)]
        ax.vlines(dt, 0.0, h, colors=colours, linewidth=1.3, zorder=3, gid="candidate-stems")
        ax.scatter(dt, h, s=18, c=colours, zorder=4, gid="candidate-heads")
        for (t, p), label in palette.STROKE_LABELS.items():
            m = (stype == t) & (pol == p)
            if m.any():
                ax.scatter([], [], s=18, color=palette.stroke_colour(t, p), label=f"{label} ({int(m.sum())})")
        ranks = candidates["rank"].to_numpy() if "rank" in candidates else np.arange(1, n + 1)
        b = int(np.flatnonzero(ranks == ranks.min())[0])
        ax.scatter([dt[b]], [h[b]], s=150, facecolors="none", edgecolors=palette.LINE, linewidths=1.0, zorder=5,
                   gid="best-candidate", label="best candidate")
        text = f"best: {float(candidates['peak_current_ka'].iloc[b]):+.0f} kA, {dt[b]:+.2f} s"
        if "p_within_corridor" in candidates:
            text += f"\nP(in corridor) {float(candidates['p_within_corridor'].iloc[b]):.2f}"
        right = frac(dt[b]) > 0.5
        ax.annotate(text, (dt[b], h[b]), xytext=(-9 if right else 9, 2), textcoords="offset points",
                    ha="right" if right else "left", va="bottom", fontsize=7, color=palette.LINE, zorder=6,
                    path_effects=[patheffects.withStroke(linewidth=2.5, foreground=palette.BACKGROUND)])
    else:
        ax.text(0.5, 0.5, "no candidate stroke", transform=ax.transAxes, ha="center", va="center", color=palette.LINE)
    ax.axhline(0.0, color=palette.LINE, linewidth=0.8, zorder=2)
    ax.set_ylim(0.0, top)
    steps = np.array([0.5, 1, 10, 100, 1000, 10000])
    ticks = np.concatenate([-steps[::-1], [0.0], steps])
    ax.set_xticks(ticks[(ticks >= xlim[0]) & (ticks <= xlim[1])])
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}".replace("-", "\u2212")))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.set_xlim(*xlim)
    ax.grid(True, color=palette.GRID, linewidth=0.6, zorder=0)
    ax.set_axisbelow(True)
    ax.set_ylabel("|peak current| of the candidate stroke, kA")
    ax.set_xlabel(f"s from the logged trip (linear to ±{TIMELINE_LINEAR_S:g} s, then logarithmic)")
    when = "trip at " + t0.strftime("%Y-%m-%d %H:%M:%S.%f")[:-3] + " UTC"
    z = zone(tz) if tz else None
    if z is not None and tz != "UTC":
        lt = t0.tz_convert(z)
        when += f" ({lt.strftime('%H:%M:%S.%f')[:-3]} {lt.strftime('%Z')})"
    if title is None:
        oid, lid = outage_row.get("outage_id", ""), outage_row.get("line_id", "")
        title = f"{oid} on {lid}" if oid or lid else ""
    ax.set_title(f"{title}\n{when}" if title else when, loc="left", fontsize=9, pad=12)
    _legend_below(fig)
    return fig
