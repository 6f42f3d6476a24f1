"""Distances, bearings and local planes on the WGS84 ellipsoid.

Long distances and bearings are geodesics (pyproj.Geod, Karney's algorithm); planar math is done
in a local azimuthal equidistant projection centred on the site, asset or event, where distances
and bearings from the centre are exact and nearby distances nearly so.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Karney2013] Geodesics on the ellipsoid (as implemented by GeographicLib and pyproj).
"""

from __future__ import annotations

import numpy as np
from pyproj import CRS, Geod, Transformer

WGS84 = Geod(ellps="WGS84")

#: Mean Earth radius (IUGG), km: only for quick pre-filters, never for reported distances.
MEAN_EARTH_RADIUS_KM = 6371.0088


def inverse_km(lat1_deg, lon1_deg, lat2_deg, lon2_deg):
    """Geodesic distance and bearing from point 1 to point 2 (vectorised).

    Parameters
    ----------
    lat1_deg, lon1_deg, lat2_deg, lon2_deg : array_like
        WGS84 latitudes and longitudes, degrees. Broadcast against each other.

    Returns
    -------
    distance_km : ndarray
        Geodesic distance, km.
    bearing_deg : ndarray
        Forward azimuth at point 1, degrees clockwise from north in [0, 360).

    References
    ----------
    [Karney2013], via pyproj.Geod.inv.
    """
    a = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (lat1_deg, lon1_deg, lat2_deg, lon2_deg)))
    shape = a[0].shape
    az, _, dist_m = WGS84.inv(a[1].ravel(), a[0].ravel(), a[3].ravel(), a[2].ravel())
    bearing = np.mod(np.asarray(az, dtype=float), 360.0)
    bearing = np.where(bearing >= 360.0, 0.0, bearing)  # mod can round up to exactly 360
    return (np.asarray(dist_m, dtype=float) / 1000.0).reshape(shape), bearing.reshape(shape)


def haversine_km(lat1_deg, lon1_deg, lat2_deg, lon2_deg):
    """Great-circle distance on the mean sphere, km: a fast pre-filter, off by up to ~0.5%."""
    p1, p2 = np.radians(lat1_deg), np.radians(lat2_deg)
    dphi = p2 - p1
    dlmb = np.radians(np.asarray(lon2_deg) - np.asarray(lon1_deg))
    h = np.sin(dphi / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dlmb / 2) ** 2
    return 2 * MEAN_EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))


class LocalPlane:
    """Azimuthal equidistant plane about (lat0, lon0): x east, y north, km.

    Exact for distance and bearing from the centre; use it for ellipse and corridor math within
    a few hundred km of the centre.
    """

    def __init__(self, lat0_deg: float, lon0_deg: float):
        self.lat0_deg = float(lat0_deg)
        self.lon0_deg = float(lon0_deg)
        crs = CRS.from_proj4(f"+proj=aeqd +lat_0={self.lat0_deg} +lon_0={self.lon0_deg} +datum=WGS84 +units=m +no_defs")
        self._fwd = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
        self._inv = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)

    def to_xy_km(self, lat_deg, lon_deg):
        """Project WGS84 latitude/longitude (degrees) to plane x (east), y (north), km."""
        x, y = self._fwd.transform(np.asarray(lon_deg, dtype=float), np.asarray(lat_deg, dtype=float))
        return np.asarray(x) / 1000.0, np.asarray(y) / 1000.0

    def to_latlon(self, x_km, y_km):
        """Back from the plane (km) to WGS84 latitude, longitude (degrees)."""
        lon, lat = self._inv.transform(np.asarray(x_km, dtype=float) * 1000.0, np.asarray(y_km, dtype=float) * 1000.0)
        return np.asarray(lat), np.asarray(lon)


def centre_of(lat_deg, lon_deg) -> tuple[float, float]:
    """A centre for a local plane over points that may straddle the antimeridian."""
    lat = np.asarray(lat_deg, dtype=float)
    lon = np.radians(np.asarray(lon_deg, dtype=float))
    lon0 = np.degrees(np.arctan2(np.nanmean(np.sin(lon)), np.nanmean(np.cos(lon))))
    return float(np.nanmean(lat)), float(lon0)


def lon_near_deg(lon_deg, ref_deg):
    """Longitudes shifted by whole turns to lie within 180 degrees of `ref_deg` (vectorised).

    ``lon + 360 k`` with k the nearest integer to ``(ref - lon) / 360``: a line or box that
    crosses the antimeridian becomes continuous about `ref_deg` (values may leave [-180, 180]).
    Longitudes already within 180 degrees of `ref_deg` come back unchanged, bit for bit.
    """
    lon = np.asarray(lon_deg, dtype=float)
    return lon + 360.0 * np.round((np.asarray(ref_deg, dtype=float) - lon) / 360.0)


def normalise_lon_deg(lon_deg):
    """Longitudes in [-180, 180) (vectorised); values already there come back unchanged."""
    lon = np.asarray(lon_deg, dtype=float)
    return np.where((lon >= -180.0) & (lon < 180.0), lon, np.mod(lon + 180.0, 360.0) - 180.0)
