"""Per-contact position fixes: the Gaussian product by hand, invariants, and a Monte Carlo
calibration of the probabilities they give (channels and strokes simulated here, planar)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings
from hypothesis import strategies as st

from debrief.contacts import contact_fixes
from debrief.geodesy import LocalPlane
from debrief.uncertainty import combine_fixes, ellipse_covariance, p_within_circle, p_within_corridor, sigma_scale

GEOD = Geodesic.WGS84


def test_combine_fixes_is_the_gaussian_product():
    # Two fixes with full covariances: the product of two normal densities is normal with
    # precision P1 + P2 and mean (P1 + P2)^-1 (P1 x1 + P2 x2) (computed here with numpy.linalg).
    x = np.array([[0.3, -0.1], [0.0, 0.4]])
    cov = [np.array([[0.04, 0.01], [0.01, 0.09]]), np.array([[0.16, -0.03], [-0.03, 0.02]])]
    prec = [np.linalg.inv(c) for c in cov]
    c_ref = np.linalg.inv(prec[0] + prec[1])
    m_ref = c_ref @ (prec[0] @ x[0] + prec[1] @ x[1])
    lab, mx, my, sxx, syy, sxy, n = combine_fixes(x[:, 0], x[:, 1], [c[0, 0] for c in cov], [c[1, 1] for c in cov],
                                                  [c[0, 1] for c in cov], [7, 7])
    assert lab.tolist() == [7] and n.tolist() == [2]
    np.testing.assert_allclose([mx[0], my[0]], m_ref, atol=1e-14)
    np.testing.assert_allclose([[sxx[0], sxy[0]], [sxy[0], syy[0]]], c_ref, atol=1e-15)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(-2, 2), st.floats(-2, 2), st.floats(0.05, 1.5), st.floats(0.2, 1.0),
                          st.floats(0, 180)), min_size=1, max_size=6))
def test_combined_covariance_is_never_larger(fixes):
    # Loewner order: C_combined <= C_i for every i (information only adds); a single fix is unchanged.
    x, y, a, ratio, br = (np.array(v, dtype=float) for v in zip(*fixes))
    sxx, syy, sxy = ellipse_covariance(a, a * ratio, br, 0.5)
    _, mx, my, cxx, cyy, cxy, _ = combine_fixes(x, y, sxx, syy, sxy, np.zeros(len(x), int))
    c = np.array([[cxx[0], cxy[0]], [cxy[0], cyy[0]]])
    for i in range(len(x)):
        d = np.array([[sxx[i], sxy[i]], [sxy[i], syy[i]]]) - c
        assert np.linalg.eigvalsh(d).min() >= -1e-12 * max(1.0, sxx[i] + syy[i])
    if len(x) == 1:
        assert mx[0] == pytest.approx(x[0], abs=1e-12) and my[0] == pytest.approx(y[0], abs=1e-12)


def _simulate(rng, n_channels, r_km=1.0):
    """Channels uniform in a 3 km disc about a site; 1-6 strokes each with its own ellipse."""
    rho = 3.0 * np.sqrt(rng.uniform(0, 1, n_channels))
    phi = rng.uniform(0, 2 * np.pi, n_channels)
    tx, ty = rho * np.sin(phi), rho * np.cos(phi)
    k = rng.integers(1, 7, n_channels)
    owner = np.repeat(np.arange(n_channels), k)
    m = owner.size
    a = rng.uniform(0.1, 0.8, m)
    b = a * rng.uniform(0.3, 1.0, m)
    br = rng.uniform(0, 180, m)
    sxx, syy, sxy = ellipse_covariance(a, b, br, 0.5)
    # one draw per stroke from its own error distribution (Cholesky of the 2x2)
    l11 = np.sqrt(sxx)
    l21 = sxy / l11
    l22 = np.sqrt(syy - l21**2)
    z = rng.standard_normal((2, m))
    x = tx[owner] + l11 * z[0]
    y = ty[owner] + l21 * z[0] + l22 * z[1]
    return tx, ty, owner, x, y, sxx, syy, sxy


def test_monte_carlo_calibration_of_contact_probabilities():
    # Among contacts reported with p in a bin, the share whose true point lies inside matches the
    # bin's mean p within binomial tolerance (4 sigma); seeded, 40,000 channels (constructed here).
    rng = np.random.default_rng(20261202)
    r = 1.0
    tx, ty, owner, x, y, sxx, syy, sxy = _simulate(rng, 40_000, r)
    _, cx, cy, cxx, cyy, cxy, _ = combine_fixes(x, y, sxx, syy, sxy, owner)
    p = p_within_circle(cx, cy, cxx, cyy, cxy, r)
    inside = np.hypot(tx, ty) <= r
    edges = np.linspace(0, 1, 11)
    checked = 0
    for lo, hi in zip(edges[:-1], edges[1:]):
        m = (p >= lo) & (p < hi) if hi < 1 else (p >= lo)
        if m.sum() < 200:
            continue
        mean_p, share = p[m].mean(), inside[m].mean()
        tol = 4.0 * math.sqrt(max(mean_p * (1 - mean_p), 1e-4) / m.sum()) + 0.005
        assert abs(share - mean_p) <= tol, (lo, hi, share, mean_p, int(m.sum()))
        checked += 1
    assert checked >= 8
    # The old reading (each contact given its strokes' largest p) is not calibrated: for contacts
    # it calls at least 50 % likely, far fewer than that are truly inside.
    p_stroke = p_within_circle(x, y, sxx, syy, sxy, r)
    p_max = np.zeros(tx.size)
    np.maximum.at(p_max, owner, p_stroke)
    hi_max = p_max >= 0.5
    assert inside[hi_max].mean() < p_max[hi_max].mean() - 0.1


def test_a_channel_just_outside_the_circle():
    # A channel truly 1.2 km from the site, 1 km circle, four strokes with sigma 0.3 km
    # (constructed here): combining the fixes gives a mean p near 0.16 (the exact expectation is
    # P(|N(1.2, 0.15^2 I)| <= 1) = 0.145 (scipy ncx2) averaged over the fix's scatter), while the
    # largest single-stroke p averages about 0.53.
    from scipy import stats

    rng = np.random.default_rng(7)
    n, k, s = 20_000, 4, 0.3
    x = 1.2 + s * rng.standard_normal((n, k))
    y = s * rng.standard_normal((n, k))
    var = np.full(n * k, s * s)
    owner = np.repeat(np.arange(n), k)
    _, cx, cy, cxx, cyy, cxy, _ = combine_fixes(x.ravel(), y.ravel(), var, var, np.zeros(n * k), owner)
    p_comb = p_within_circle(cx, cy, cxx, cyy, cxy, 1.0)
    p_each = p_within_circle(x.ravel(), y.ravel(), var, var, np.zeros(n * k), 1.0).reshape(n, k)
    assert p_comb.mean() == pytest.approx(0.16, abs=0.02)
    assert p_each.max(axis=1).mean() == pytest.approx(0.53, abs=0.03)
    # calibration at this one true point: the true point is outside, so p should be small on average
    sc = s / math.sqrt(k)
    assert stats.ncx2.cdf((1.0 / sc) ** 2, 2, (1.2 / sc) ** 2) < p_comb.mean() < 0.2


def test_corridor_probabilities_of_contacts_are_calibrated():
    # Channels uniform within 400 m of a straight line, 1-6 strokes each; corridor half-width 56 m.
    # Among contacts reported with p in a bin, the share truly within 56 m matches (4 sigma).
    rng = np.random.default_rng(11)
    n = 20_000
    tx = rng.uniform(-3, 3, n)
    ty = rng.uniform(-0.4, 0.4, n)
    k = rng.integers(1, 7, n)
    owner = np.repeat(np.arange(n), k)
    a = rng.uniform(0.05, 0.3, owner.size)
    sxx, syy, sxy = ellipse_covariance(a, a * rng.uniform(0.3, 1, owner.size), rng.uniform(0, 180, owner.size), 0.5)
    l11 = np.sqrt(sxx)
    l21 = sxy / l11
    l22 = np.sqrt(syy - l21**2)
    z = rng.standard_normal((2, owner.size))
    x = tx[owner] + l11 * z[0]
    y = ty[owner] + l21 * z[0] + l22 * z[1]
    _, cx, cy, cxx, cyy, cxy, _ = combine_fixes(x, y, sxx, syy, sxy, owner)
    w = 0.056
    p = p_within_corridor(cx, cy, cxx, cyy, cxy, np.array([-20.0, 20.0]), np.array([0.0, 0.0]), np.full(n, w))
    inside = np.abs(ty) <= w
    for lo, hi in ((0.0, 0.1), (0.1, 0.3), (0.3, 0.5), (0.5, 0.7), (0.7, 0.9), (0.9, 1.01)):
        m = (p >= lo) & (p < hi)
        if m.sum() < 200:
            continue
        mean_p, share = p[m].mean(), inside[m].mean()
        assert abs(share - mean_p) <= 4.0 * math.sqrt(max(mean_p * (1 - mean_p), 1e-4) / m.sum()) + 0.005, (lo, share, mean_p)


def _geo_table(rows):
    df = pd.DataFrame(rows)
    df["time"] = pd.to_datetime(df["time"], utc=True).astype("datetime64[ns, UTC]")
    df["type"] = pd.Categorical(df["type"], categories=["CG", "IC"])
    df["source_row"] = np.arange(len(df)) + 2
    return df


def test_contact_fixes_on_the_ellipsoid_match_a_local_plane():
    # Three strokes of one contact near 45.5 N: the combined fix equals combine_fixes in the
    # azimuthal equidistant plane about the first stroke (pyproj aeqd) within 1 cm.
    lat0, lon0 = 45.5, -93.2
    pts = [(0.0, 0.0), (0.35, 60.0), (0.6, 200.0)]
    rows = []
    for i, (d, az) in enumerate(pts):
        g = GEOD.Direct(lat0, lon0, az, d * 1000.0)
        rows.append({"time": f"2026-07-14T20:00:0{i}Z", "latitude": g["lat2"], "longitude": g["lon2"],
                     "peak_current_ka": -20.0, "type": "CG", "semi_major_km": 0.4 - 0.1 * i, "semi_minor_km": 0.2,
                     "major_bearing_deg": 30.0 * i, "flash_id": 1, "ground_contact": 1, "likely_ic": False})
    rows.append({**rows[0], "time": "2026-07-14T20:00:05Z", "flash_id": 2, "peak_current_ka": 9.0, "likely_ic": True})
    st_ = _geo_table(rows)
    c = contact_fixes(st_)
    assert len(c) == 1 and int(c["n_strokes"].iloc[0]) == 3  # the likely cloud pulse is left out
    plane = LocalPlane(lat0, lon0)
    x, y = plane.to_xy_km(st_["latitude"][:3], st_["longitude"][:3])
    sxx, syy, sxy = ellipse_covariance(st_["semi_major_km"][:3], st_["semi_minor_km"][:3], st_["major_bearing_deg"][:3], 0.5)
    _, mx, my, cxx, cyy, cxy, _ = combine_fixes(x, y, sxx, syy, sxy, np.zeros(3, int))
    fx, fy = plane.to_xy_km(c["latitude"].iloc[0], c["longitude"].iloc[0])
    assert math.hypot(fx - mx[0], fy - my[0]) < 1e-5
    got = ellipse_covariance(c["semi_major_km"].to_numpy(), c["semi_minor_km"].to_numpy(),
                             c["major_bearing_deg"].to_numpy(), 0.5)
    np.testing.assert_allclose([g[0] for g in got], [cxx[0], cyy[0], cxy[0]], atol=1e-9)
    assert c["semi_major_km"].iloc[0] == pytest.approx(math.sqrt(max(np.linalg.eigvalsh([[cxx[0], cxy[0]], [cxy[0], cyy[0]]]))) * sigma_scale(0.5))
    with_ic = contact_fixes(st_, include_likely_ic=True)
    assert len(with_ic) == 2 and bool(with_ic.loc[with_ic["flash_id"] == 2, "likely_ic"].iloc[0])
