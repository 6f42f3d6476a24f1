"""Geodesics and local planes against GeographicLib (Karney 2013) and published examples."""

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from debrief.geodesy import LocalPlane, centre_of, haversine_km, inverse_km

# Pairs: the GeographicLib documentation's Berkeley - Port Moresby example (10700471.955233702 m;
# GeographicLib implements [Karney2013]), Vincenty (1975) [Vincenty1975] Flinders Peak - Buninyong
# (54972.271 m, from memory), the equator degree (a * pi / 180), and short pairs of the kind a site
# check sees (constructed here).
PAIRS = [
    ((0.0, 0.0), (0.0, 1.0)),
    ((37.87622, -122.23558), (-9.4047, 147.1597)),
    ((-(37 + 57 / 60 + 3.72030 / 3600), 144 + 25 / 60 + 29.52440 / 3600),
     (-(37 + 39 / 60 + 10.15610 / 3600), 143 + 55 / 60 + 35.38390 / 3600)),
    ((35.0, -97.0), (35.01, -97.01)),
    ((45.0, 10.0), (45.0, 10.12734)),
    ((-16.5, 179.95), (-16.49, -179.97)),  # across the antimeridian
    ((89.95, 10.0), (89.97, -150.0)),      # near the pole
]


@pytest.mark.parametrize("p1,p2", PAIRS)
def test_inverse_matches_geographiclib(p1, p2):
    # Reference: GeographicLib (Karney 2013, "Algorithms for geodesics", J. Geodesy 87).
    g = Geodesic.WGS84.Inverse(p1[0], p1[1], p2[0], p2[1])
    d_km, bearing = inverse_km(p1[0], p1[1], p2[0], p2[1])
    assert d_km == pytest.approx(g["s12"] / 1000.0, abs=1e-9)
    assert bearing == pytest.approx(g["azi1"] % 360.0, abs=1e-7)
    assert 0.0 <= bearing < 360.0


def test_published_distances():
    # GeographicLib documentation example: Berkeley to Port Moresby, 10700471.955233702 m.
    d_km, _ = inverse_km(37.87622, -122.23558, -9.4047, 147.1597)
    assert d_km * 1000 == pytest.approx(10700471.955233702, abs=1e-4)
    # Vincenty (1975) Flinders Peak - Buninyong: 54972.271 m (from memory); 306 52 05.4 azimuth.
    p1, p2 = PAIRS[2]
    d_km, bearing = inverse_km(*p1, *p2)
    assert d_km * 1000 == pytest.approx(54972.271, abs=1e-3)
    assert bearing == pytest.approx(306 + 52 / 60 + 5.37 / 3600, abs=1e-4)
    # One degree of longitude on the equator is a * pi / 180 with a = 6378137 m (WGS84).
    d_km, _ = inverse_km(0, 0, 0, 1)
    assert d_km * 1000 == pytest.approx(6378137 * np.pi / 180, abs=1e-6)


def test_inverse_broadcasts():
    lat = np.array([45.0, 45.1, 44.9])
    lon = np.array([10.0, 10.0, 10.1])
    d, b = inverse_km(45.0, 10.0, lat, lon)
    assert d.shape == (3,) and d[0] == 0.0
    assert b[1] == pytest.approx(0.0, abs=1e-9)  # due north
    assert b[2] == pytest.approx(Geodesic.WGS84.Inverse(45, 10, 44.9, 10.1)["azi1"] % 360, abs=1e-7)


def test_haversine_close_to_geodesic_for_prefilter():
    # Haversine on the mean sphere is within about 0.5% of the ellipsoid (computed with GeographicLib).
    for p1, p2 in PAIRS[:5]:
        d, _ = inverse_km(*p1, *p2)
        assert haversine_km(*p1, *p2) == pytest.approx(float(d), rel=6e-3)


def test_local_plane_is_exact_from_the_centre():
    # Azimuthal equidistant: distance and azimuth from the centre equal the geodesic ones.
    plane = LocalPlane(45.5, -93.2)
    lat, lon = 45.62, -93.05
    x, y = plane.to_xy_km(lat, lon)
    g = Geodesic.WGS84.Inverse(45.5, -93.2, lat, lon)
    assert np.hypot(x, y) * 1000 == pytest.approx(g["s12"], abs=1e-3)
    assert np.degrees(np.arctan2(x, y)) == pytest.approx(g["azi1"], abs=1e-7)
    back = plane.to_latlon(x, y)
    assert back[0] == pytest.approx(lat, abs=1e-10) and back[1] == pytest.approx(lon, abs=1e-10)


def test_local_plane_across_antimeridian():
    plane = LocalPlane(-16.5, 179.99)
    x, y = plane.to_xy_km(np.array([-16.5, -16.5]), np.array([-179.99, 179.97]))
    g = Geodesic.WGS84.Inverse(-16.5, 179.99, -16.5, -179.99)
    # East of the centre by the geodesic distance, not 40,000 km west.
    assert x[0] > 0 and np.hypot(x[0], y[0]) == pytest.approx(g["s12"] / 1000, rel=1e-9)
    assert x[1] < 0


def test_centre_of_straddling_points():
    lat0, lon0 = centre_of([10.0, 10.0], [179.9, -179.9])
    assert abs(abs(lon0) - 180.0) < 1e-9 and lat0 == pytest.approx(10.0)
