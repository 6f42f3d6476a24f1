"""Drawing geometry for the map: ellipse outlines, radius rings, graticule, view fitting.

Nothing here is analysis: these turn already-known ellipses and radii into vertices to draw.
Outlines are built in the azimuthal equidistant plane about each centre (the
:class:`debrief.geodesy.LocalPlane` construction): a plane point at distance ``r`` and bearing
``az`` from the centre is the point reached by the geodesic of length ``r`` and initial azimuth
``az``, so one vectorised ``Geod.fwd`` call maps the outlines of many centres at once.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Snyder1987] Azimuthal equidistant projection (distance and azimuth from the centre are true).
.. [Karney2013] Geodesics on the ellipsoid.
"""

from __future__ import annotations

import math

import numpy as np

from ..geodesy import WGS84


def ellipse_outlines(lat_deg, lon_deg, semi_major_km, semi_minor_km, bearing_deg, n_vertices: int = 36):
    """Vertices of error ellipses about each centre, in WGS84.

    The outline in the plane is :func:`debrief.uncertainty.ellipse_outline_xy` (one
    implementation of the ellipse shape); this only maps it about each centre.

    Parameters
    ----------
    lat_deg, lon_deg : array_like, shape (n,)
        Ellipse centres, degrees.
    semi_major_km, semi_minor_km : array_like, shape (n,)
        Semi-axes, km.
    bearing_deg : array_like, shape (n,)
        Major-axis bearing, degrees clockwise from north.
    n_vertices : int
        Vertices per outline (the ring is closed: the first vertex is repeated at the end).

    Returns
    -------
    lat_deg, lon_deg : ndarray, shape (n, n_vertices + 1)
    """
    from ..uncertainty import ellipse_outline_xy

    lat0 = np.asarray(lat_deg, dtype=float).reshape(-1, 1)
    lon0 = np.asarray(lon_deg, dtype=float).reshape(-1, 1)
    n = lat0.shape[0]
    x = np.empty((n, n_vertices + 1))
    y = np.empty((n, n_vertices + 1))
    for k, (a, b, br) in enumerate(zip(np.ravel(semi_major_km), np.ravel(semi_minor_km), np.ravel(bearing_deg))):
        x[k, :-1], y[k, :-1] = ellipse_outline_xy(float(a), float(b), float(br), n=n_vertices)
    x[:, -1], y[:, -1] = x[:, 0], y[:, 0]
    return plane_to_latlon(lat0, lon0, x, y)


def plane_to_latlon(lat0_deg, lon0_deg, x_km, y_km):
    """Points given in the azimuthal equidistant plane about (lat0, lon0) back to WGS84.

    Same mapping as ``LocalPlane(lat0, lon0).to_latlon(x, y)``, for many centres at once.
    """
    x, y = np.broadcast_arrays(np.asarray(x_km, dtype=float), np.asarray(y_km, dtype=float))
    lat0, lon0 = (np.broadcast_to(np.asarray(v, dtype=float), x.shape) for v in (lat0_deg, lon0_deg))
    az = np.degrees(np.arctan2(x, y))
    dist_m = np.hypot(x, y) * 1000.0
    lon, lat, _ = WGS84.fwd(lon0.ravel(), lat0.ravel(), az.ravel(), dist_m.ravel())
    return np.asarray(lat).reshape(x.shape), np.asarray(lon).reshape(x.shape)


def circle_outline(lat_deg: float, lon_deg: float, radius_km: float, n_vertices: int = 72):
    """A geodesic circle (all points `radius_km` from the centre), closed; (lat, lon) arrays."""
    az = np.linspace(0.0, 360.0, n_vertices + 1)
    lon, lat, _ = WGS84.fwd(np.full(az.shape, float(lon_deg)), np.full(az.shape, float(lat_deg)), az,
                            np.full(az.shape, float(radius_km) * 1000.0))
    return np.asarray(lat), np.asarray(lon)


def graticule_step_deg(span_deg: float) -> float:
    """Graticule spacing for a span: about 5 to 20 lines across."""
    for step in (0.05, 0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0):
        if span_deg / step <= 20:
            return step
    return 30.0


def graticule(south: float, west: float, north: float, east: float, step_deg: float | None = None) -> dict:
    """A GeoJSON MultiLineString of meridians and parallels covering the box, every `step_deg`."""
    if step_deg is None:
        step_deg = graticule_step_deg(max(north - south, east - west))
    lat0, lat1 = math.floor(south / step_deg) * step_deg, math.ceil(north / step_deg) * step_deg
    lon0, lon1 = math.floor(west / step_deg) * step_deg, math.ceil(east / step_deg) * step_deg
    lats = np.round(np.arange(lat0, lat1 + step_deg / 2, step_deg), 6)
    lons = np.round(np.arange(lon0, lon1 + step_deg / 2, step_deg), 6)
    lines = [[[float(lo), float(lat0)], [float(lo), float(lat1)]] for lo in lons]
    lines += [[[float(lon0), float(la)], [float(lon1), float(la)]] for la in lats]
    return {"type": "Feature", "properties": {"step_deg": step_deg}, "geometry": {"type": "MultiLineString", "coordinates": lines}}


def _merc_y(lat_deg):
    phi = np.radians(np.clip(lat_deg, -85.0, 85.0))
    return np.log(np.tan(np.pi / 4 + phi / 2))


def fit_view(south: float, west: float, north: float, east: float, width_px: float = 800.0,
             height_px: float = 520.0, max_zoom: int = 16, min_zoom: int = 2) -> tuple[list, int]:
    """Centre and the largest whole zoom level of a Web Mercator map showing the box.

    A tile is 256 px at zoom 0 and doubles per level (common practice for slippy maps).
    """
    centre = [float((south + north) / 2), float((west + east) / 2)]
    fx = max(east - west, 1e-6) / 360.0
    fy = max(float(_merc_y(north) - _merc_y(south)), 1e-6) / (2 * np.pi)
    z = math.floor(math.log2(min(width_px / (256.0 * fx), height_px / (256.0 * fy))))
    return centre, int(min(max(z, min_zoom), max_zoom))
