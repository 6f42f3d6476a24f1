"""Error ellipse -> bivariate normal -> probabilities, checked against scipy and Monte Carlo."""

from __future__ import annotations

import math
import zlib

import numpy as np
import pandas as pd
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scipy import integrate, stats
from scipy.special import ndtr

from debrief import uncertainty as U
from debrief.errors import InputError


def _mvn_box_dblquad(mean, cov, x_lo, x_hi, y_lo_fn, y_hi_fn):
    """scipy.integrate (nquad, the engine of dblquad; epsabs 1e-9) of
    scipy.stats.multivariate_normal's pdf over {x_lo < x < x_hi, y_lo(x) < y < y_hi(x)}."""
    f = stats.multivariate_normal(mean=mean, cov=cov).pdf
    val, _ = integrate.nquad(
        lambda y, x: f([x, y]), [lambda x: (y_lo_fn(x), y_hi_fn(x)), (x_lo, x_hi)],
        opts=[{"epsabs": 1e-10, "epsrel": 1e-10, "limit": 200}, {"epsabs": 1e-9, "epsrel": 1e-9, "limit": 200}],
    )
    return val


def _disc_dblquad(m, cov, r):
    """P(|T| <= r), T ~ N(m, cov), by adaptive quadrature of multivariate_normal.pdf over the disc.

    The disc is invariant under rotation, so the problem is first rotated (numpy eigh) to the
    error's principal axes (outer variable the minor axis); the region is clipped to 10 standard
    deviations about the mean (omitted mass < 1e-20) so the adaptive rule sees the peak.
    """
    vals, vecs = np.linalg.eigh(np.asarray(cov, dtype=float))
    mm = vecs.T @ np.asarray(m, dtype=float)  # coordinates along (minor, major)
    s_min, s_maj = math.sqrt(vals[0]), math.sqrt(vals[1])
    x_lo, x_hi = max(-r, mm[0] - 10 * s_min), min(r, mm[0] + 10 * s_min)
    if x_hi <= x_lo:
        return 0.0
    w = lambda x: math.sqrt(max(r * r - x * x, 0.0))  # noqa: E731
    lo = lambda x: max(-w(x), mm[1] - 10 * s_maj)  # noqa: E731
    hi = lambda x: max(min(w(x), mm[1] + 10 * s_maj), lo(x))  # noqa: E731
    return _mvn_box_dblquad(list(mm), np.diag(vals), x_lo, x_hi, lo, hi)


# --- scale factors and covariance -------------------------------------------------------------

@pytest.mark.parametrize("p, k", [(0.5, 1.177410), (0.9, 2.145966), (0.95, 2.447747), (0.99, 3.034854)])
def test_sigma_scale_is_chi_square_quantile(p, k):
    # scipy.stats.chi2.ppf(p, 2): 2-D normal contour holding p [Johnson1994]; values computed with scipy (X).
    assert U.sigma_scale(p) == pytest.approx(math.sqrt(stats.chi2.ppf(p, 2)), rel=1e-12)
    assert U.sigma_scale(p) == pytest.approx(k, abs=5e-7)
    # The 1-D factor (normal quantile 0.674490 for 50 %) must not be used.
    assert abs(U.sigma_scale(0.5) - stats.norm.ppf(0.75)) > 0.5


def test_one_sigma_ellipse_holds_39_percent():
    # 1 - exp(-1/2) = 0.3935 (chi-square 2 df [Johnson1994]; computed from the formula).
    assert stats.chi2.cdf(1.0, 2) == pytest.approx(0.393469, abs=1e-6)
    k = U.sigma_scale(stats.chi2.cdf(1.0, 2))
    assert k == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("p", [0.0, 1.0, -0.1, 1.5, float("nan")])
def test_sigma_scale_rejects_bad_confidence(p):
    with pytest.raises(InputError):
        U.sigma_scale(p)


def test_covariance_check_case():
    # Check case constructed here, computed from S = sa^2 u u' + sb^2 v v' with numpy (X):
    # 0.5 x 0.25 km 50 % ellipse at 30 deg.
    sxx, syy, sxy = U.ellipse_covariance(0.5, 0.25, 30.0, 0.5)
    assert float(sxx) == pytest.approx(0.078897, abs=1e-6)
    assert float(syy) == pytest.approx(0.146524, abs=1e-6)
    assert float(sxy) == pytest.approx(0.058566, abs=1e-6)
    s1, s2, _ = U.principal_axes(sxx, syy, sxy)
    assert float(s1) == pytest.approx(0.424661, abs=1e-6)
    assert float(s2) == pytest.approx(0.212330, abs=1e-6)


def test_covariance_orientation_north_and_east():
    # Bearing 0 = major axis north (y), 90 = east (x): common practice for ellipse bearings.
    sxx, syy, sxy = U.ellipse_covariance(2.0, 1.0, 0.0, 0.5)
    k = U.sigma_scale(0.5)
    assert (float(sxx), float(syy)) == pytest.approx(((1 / k) ** 2, (2 / k) ** 2))
    assert float(sxy) == pytest.approx(0.0, abs=1e-15)
    sxx, syy, _ = U.ellipse_covariance(2.0, 1.0, 90.0, 0.5)
    assert float(sxx) == pytest.approx((2 / k) ** 2)


# --- circle -----------------------------------------------------------------------------------

@pytest.mark.parametrize("r_over_s, d_over_s", [(0.01, 0.0), (0.5, 0.3), (1.0, 1.0), (3.0, 2.5), (20.0, 19.0), (100.0, 101.0), (2.0, 8.0)])
def test_circular_quadrature_matches_ncx2(r_over_s, d_over_s):
    # Circular error: P = ncx2.cdf((R/s)^2, 2, (d/s)^2) (scipy.stats.ncx2; [Johnson1994]).
    # The quadrature path (the one used for ellipses) is checked against it.
    s = 0.3
    exact = stats.ncx2.cdf(r_over_s**2, 2, d_over_s**2)
    got = U._circle_quadrature(np.array([0.6 * d_over_s * s]), np.array([0.8 * d_over_s * s]),
                               np.array([s]), np.array([s]), np.array([r_over_s * s]))[0]
    assert got == pytest.approx(exact, abs=1e-6)
    pub = U.p_within_circle(0.6 * d_over_s * s, 0.8 * d_over_s * s, s * s, s * s, 0.0, r_over_s * s)
    assert float(pub) == pytest.approx(exact, abs=1e-6)


def _grid_sample(seed, n):
    """A seeded sample of the stated accuracy grid: R/sigma 0.01-100, axis ratio 1-100,
    offsets up to 50 major semi-axes; three in four placed within about one standard deviation
    (in the offset's direction) of the circle's edge, where the probability is neither 0 nor 1."""
    rng = np.random.default_rng(seed)
    k = U.sigma_scale(0.5)
    cases = []
    for i in range(n):
        a = 0.5
        ratio = 10 ** rng.uniform(0, 2)
        b = a / ratio
        r = (a / k) * 10 ** rng.uniform(-2, 2)
        bearing = rng.uniform(0, 180)
        ang = rng.uniform(0, 2 * math.pi)
        if i % 4:
            sxx, syy, sxy = U.ellipse_covariance(a, b, bearing, 0.5)
            u = (math.cos(ang), math.sin(ang))
            s_dir = math.sqrt(u[0] ** 2 * sxx + u[1] ** 2 * syy + 2 * u[0] * u[1] * sxy)
            off = max(0.0, r + rng.normal(0, 1) * s_dir)
        else:
            off = rng.uniform(0, 1) ** 2 * 50 * a
        cases.append((off * math.cos(ang), off * math.sin(ang), a, b, bearing, r))
    return cases


@pytest.mark.parametrize("case", _grid_sample(2026, 16))
def test_elliptical_circle_vs_dblquad(case):
    # scipy.integrate.dblquad of scipy.stats.multivariate_normal.pdf (epsabs 1e-9); target < 1e-4.
    dx, dy, a, b, bearing, r = case
    sxx, syy, sxy = U.ellipse_covariance(a, b, bearing, 0.5)
    got = float(U.p_within_circle(dx, dy, sxx, syy, sxy, r))
    ref = _disc_dblquad([dx, dy], [[float(sxx), float(sxy)], [float(sxy), float(syy)]], r)
    assert got == pytest.approx(ref, abs=1e-4)


def test_elliptical_circle_vs_monte_carlo():
    # Seeded Monte Carlo, 400,000 draws per case; tolerance 5 binomial standard errors + 1e-4.
    rng = np.random.default_rng(7)
    n = 400_000
    for dx, dy, a, b, br, r in [(0.3, 0.2, 0.5, 0.1, 30.0, 0.4), (1.0, -0.5, 2.0, 0.5, 120.0, 1.0), (0.0, 0.0, 1.0, 0.2, 0.0, 0.3)]:
        sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(a, b, br, 0.5))
        pts = rng.multivariate_normal([dx, dy], [[sxx, sxy], [sxy, syy]], size=n)
        mc = np.mean(np.hypot(pts[:, 0], pts[:, 1]) <= r)
        got = float(U.p_within_circle(dx, dy, sxx, syy, sxy, r))
        assert abs(got - mc) < 5 * math.sqrt(mc * (1 - mc) / n) + 1e-4


def test_circle_far_and_deep_and_nan():
    sxx, syy, sxy = U.ellipse_covariance(0.5, 0.2, 45.0, 0.5)
    p = U.p_within_circle([100.0, 0.0, np.nan], [0.0, 0.0, 0.0], sxx, syy, sxy, 50.0)
    assert p[0] == 0.0 and p[1] == 1.0 and np.isnan(p[2])
    with pytest.raises(InputError):
        U.p_within_circle(0.0, 0.0, sxx, syy, sxy, 0.0)


@settings(max_examples=40, deadline=None)
@given(
    st.floats(-5, 5), st.floats(-5, 5), st.floats(0.05, 3), st.floats(0.01, 1), st.floats(0, 180),
    st.floats(0.05, 5), st.floats(0.05, 5),
)
def test_circle_probability_is_a_probability_and_grows_with_radius(dx, dy, a, ratio, br, r1, r2):
    # Invariants: 0 <= P <= 1; P is non-decreasing in the radius.
    sxx, syy, sxy = U.ellipse_covariance(a, a * ratio, br, 0.5)
    p1, p2 = U.p_within_circle(dx, dy, sxx, syy, sxy, np.array([min(r1, r2), max(r1, r2)]))
    assert 0.0 <= p1 <= p2 + 1e-9 <= 1.0 + 1e-9


@settings(max_examples=30, deadline=None)
@given(st.floats(0, 180), st.floats(-3, 3), st.floats(-3, 3))
def test_circle_probability_is_rotation_invariant(rot_deg, dx, dy):
    # Rotating the offset and the ellipse together leaves P unchanged (the circle is symmetric).
    sxx, syy, sxy = U.ellipse_covariance(1.0, 0.3, 20.0, 0.5)
    p0 = float(U.p_within_circle(dx, dy, sxx, syy, sxy, 1.2))
    t = math.radians(rot_deg)  # bearing +t rotates clockwise: (x, y) -> (x cos + y sin, -x sin + y cos)
    rx, ry = dx * math.cos(t) + dy * math.sin(t), -dx * math.sin(t) + dy * math.cos(t)
    sxx2, syy2, sxy2 = U.ellipse_covariance(1.0, 0.3, 20.0 + rot_deg, 0.5)
    assert float(U.p_within_circle(rx, ry, sxx2, syy2, sxy2, 1.2)) == pytest.approx(p0, abs=1e-8)


# --- polygon ----------------------------------------------------------------------------------

def test_rectangle_with_axis_aligned_error_is_product_of_normal_cdfs():
    # Independent normal coordinates: P(rectangle) = [Phi] x [Phi] (textbook; scipy.special.ndtr).
    sx, sy = 0.4, 0.15
    dx, dy = 0.2, -0.1
    xs, ys = [-0.5, 1.0, 1.0, -0.5], [-0.3, -0.3, 0.2, 0.2]
    exact = (ndtr((1.0 - dx) / sx) - ndtr((-0.5 - dx) / sx)) * (ndtr((0.2 - dy) / sy) - ndtr((-0.3 - dy) / sy))
    got = float(U.p_within_polygon(dx, dy, sx**2, sy**2, 0.0, xs, ys))
    assert got == pytest.approx(exact, abs=1e-12)
    # Clockwise and closed rings give the same answer.
    got_cw = float(U.p_within_polygon(dx, dy, sx**2, sy**2, 0.0, xs[::-1] + [xs[-1]], ys[::-1] + [ys[-1]]))
    assert got_cw == pytest.approx(exact, abs=1e-12)
    # A mean exactly on an edge, and one far outside / deep inside (early exits).
    for mx, my in [(-0.5, 0.0), (1.0, -0.1), (0.3, 0.2), (5.0, 5.0), (0.25, -0.05)]:
        ex = (ndtr((1.0 - mx) / sx) - ndtr((-0.5 - mx) / sx)) * (ndtr((0.2 - my) / sy) - ndtr((-0.3 - my) / sy))
        assert float(U.p_within_polygon(mx, my, sx**2, sy**2, 0.0, xs, ys)) == pytest.approx(ex, abs=1e-12)
    tiny = 1e-4  # a small error deep inside: early exit to 1
    assert float(U.p_within_polygon(0.25, -0.05, tiny**2, tiny**2, 0.0, xs, ys)) == 1.0


def _concave():
    # An L-shaped (concave) parcel, km.
    return np.array([0.0, 2.0, 2.0, 0.8, 0.8, 0.0]), np.array([0.0, 0.0, 0.7, 0.7, 1.6, 1.6])


@pytest.mark.parametrize("dx, dy, a, b, br", [(0.5, 0.5, 0.6, 0.2, 30.0), (1.5, 1.2, 0.5, 0.5, 0.0), (-0.4, 0.8, 1.0, 0.1, 100.0), (3.0, 3.0, 0.5, 0.3, 45.0)])
def test_polygon_vs_dblquad(dx, dy, a, b, br):
    # scipy dblquad of multivariate_normal.pdf over the L shape (split into two rectangles).
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(a, b, br, 0.5))
    cov = [[sxx, sxy], [sxy, syy]]
    ref = _mvn_box_dblquad([dx, dy], cov, 0.0, 2.0, lambda x: 0.0, lambda x: 0.7)
    ref += _mvn_box_dblquad([dx, dy], cov, 0.0, 0.8, lambda x: 0.7, lambda x: 1.6)
    xs, ys = _concave()
    assert float(U.p_within_polygon(dx, dy, sxx, syy, sxy, xs, ys)) == pytest.approx(ref, abs=1e-7)


def test_polygon_vs_monte_carlo_and_hole():
    # Seeded Monte Carlo with shapely point-in-polygon; tolerance 5 binomial SE.
    import shapely

    rng = np.random.default_rng(11)
    outer_x, outer_y = np.array([0.0, 3.0, 2.0, -1.0]), np.array([0.0, 0.5, 2.5, 1.5])
    hole_x, hole_y = np.array([0.8, 1.6, 1.2]), np.array([0.6, 0.8, 1.5])
    poly = shapely.Polygon(np.column_stack([outer_x, outer_y]), [np.column_stack([hole_x, hole_y])])
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(1.2, 0.5, 60.0, 0.5))
    n = 300_000
    pts = rng.multivariate_normal([1.0, 1.0], [[sxx, sxy], [sxy, syy]], size=n)
    mc = np.mean(shapely.contains_xy(poly, pts[:, 0], pts[:, 1]))
    got = float(U.p_within_polygon(1.0, 1.0, sxx, syy, sxy, outer_x, outer_y, holes=[(hole_x, hole_y)]))
    assert abs(got - mc) < 5 * math.sqrt(mc * (1 - mc) / n)


def test_polygon_brackets_circle():
    # A circle lies between its inscribed and circumscribed 720-gons: ties the two methods.
    sxx, syy, sxy = U.ellipse_covariance(0.8, 0.2, 75.0, 0.5)
    r = 0.6
    t = np.linspace(0, 2 * np.pi, 720, endpoint=False)
    pin = U.p_within_polygon(0.3, 0.4, sxx, syy, sxy, r * np.cos(t), r * np.sin(t))
    rc = r / math.cos(math.pi / 720)
    pout = U.p_within_polygon(0.3, 0.4, sxx, syy, sxy, rc * np.cos(t), rc * np.sin(t))
    pc = U.p_within_circle(0.3, 0.4, sxx, syy, sxy, r)
    assert float(pin) - 1e-9 <= float(pc) <= float(pout) + 1e-9
    assert float(pout) - float(pin) < 2e-4


@settings(max_examples=40, deadline=None)
@given(st.floats(-3, 3), st.floats(-3, 3), st.floats(0.05, 2), st.floats(0.02, 1), st.floats(0, 180), st.floats(-0.9, 1.6))
@example(0.0, 2.0, 1.0, 0.5, 0.5, 0.0)  # a mean on an edge, rotated error: once got wrong
def test_polygon_additivity(dx, dy, a, ratio, br, cut):
    # Invariant: a square cut in two (a slanted cut from (cut, -1) to (cut + 0.3, 2)) keeps its probability.
    sxx, syy, sxy = U.ellipse_covariance(a, a * ratio, br, 0.5)
    whole = U.p_within_polygon(dx, dy, sxx, syy, sxy, [-1, 2, 2, -1], [-1, -1, 2, 2])
    left = U.p_within_polygon(dx, dy, sxx, syy, sxy, [-1, cut, cut + 0.3, -1], [-1, -1, 2, 2])
    right = U.p_within_polygon(dx, dy, sxx, syy, sxy, [cut, 2, 2, cut + 0.3], [-1, -1, 2, 2])
    assert 0.0 <= float(whole) <= 1.0
    assert float(left) + float(right) == pytest.approx(float(whole), abs=1e-9)


# --- corridor ---------------------------------------------------------------------------------

def test_straight_corridor_far_from_ends_is_one_dimensional():
    # A long straight segment: P = Phi((w - d)/s_n) - Phi((-w - d)/s_n), s_n^2 = n' S n
    # (projection of a normal onto the line's normal; textbook).
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(0.6, 0.2, 40.0, 0.5))
    d = np.array([0.0, 0.1, 0.3, 0.6, 1.0])
    w = 0.25
    got = U.p_within_corridor(np.full(5, 3.0), d, sxx, syy, sxy, [-50.0, 50.0], [0.0, 0.0], w)
    sn = math.sqrt(syy)  # line along x, normal along y
    exact = ndtr((w - d) / sn) - ndtr((-w - d) / sn)
    np.testing.assert_allclose(got, exact, atol=1e-10)


def test_polyline_corridor_vs_monte_carlo_with_per_stroke_widths():
    # Seeded Monte Carlo against shapely distance to the polyline; tolerance 5 binomial SE + 3e-4.
    import shapely

    rng = np.random.default_rng(5)
    lx, ly = [0.0, 1.0, 1.2, 2.5], [0.0, 0.3, 1.5, 1.6]
    line = shapely.LineString(np.column_stack([lx, ly]))
    xs, ys = np.array([1.1, 0.0, 2.6, 1.8]), np.array([0.9, -0.2, 1.8, 0.4])
    widths = np.array([0.1, 0.2, 0.15, 0.5])
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(0.5, 0.3, 10.0, 0.5))
    got = U.p_within_corridor(xs, ys, sxx, syy, sxy, lx, ly, widths)
    n = 100_000
    for i in range(4):
        pts = rng.multivariate_normal([xs[i], ys[i]], [[sxx, sxy], [sxy, syy]], size=n)
        mc = np.mean(shapely.distance(shapely.points(pts), line) <= widths[i])
        assert abs(got[i] - mc) < 5 * math.sqrt(mc * (1 - mc) / n) + 3e-4


def test_adaptive_round_ends_miss_less_than_1e5():
    # Fewer cap segments where the error is wide compared with the corridor: against the
    # 256-segment buffer (shapely) the probability differs by < 1e-5 (the bound of the docstring).
    import shapely

    rng = np.random.default_rng(4)
    lx, ly = np.array([0.0, 1.0, 1.5]), np.array([0.0, 0.2, 1.0])
    n = 200
    x, y = rng.uniform(-0.5, 2.0, n), rng.uniform(-0.5, 1.5, n)
    a = rng.uniform(0.05, 0.8, n)
    sxx, syy, sxy = U.ellipse_covariance(a, a * rng.uniform(0.2, 1.0, n), rng.uniform(0, 180, n), 0.5)
    w = rng.uniform(0.01, 0.3, n)
    got = U._p_within_corridor_polygon(x, y, sxx, syy, sxy, lx, ly, w)  # the polygon reference
    exact = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, w)  # exact round parts
    q = U._corridor_quad_segs(w, *U.principal_axes(sxx, syy, sxy)[:2], 3)
    fewer = q < U.CORRIDOR_QUAD_SEGS
    assert fewer.sum() > 10
    line = shapely.LineString(np.column_stack([lx, ly]))
    ref = np.array([U.p_within_polygon(x[i], y[i], sxx[i], syy[i], sxy[i],
                                       *np.asarray(line.buffer(w[i], quad_segs=512).exterior.coords).T) for i in range(n)])
    err = np.abs(got - ref)
    assert err[fewer].max() < 1e-5  # the bound of _corridor_quad_segs
    assert err.max() < 1e-4  # the stated accuracy where the cap binds
    # the boundary integral has no inscribed polygon: within the 512-segment buffer's own miss
    assert np.abs(exact - ref).max() < 1e-5


def _corridor_sample(seed, n, lx, ly):
    """Seeded strokes about a polyline: positions within a few km, 50 % ellipses 0.05-1 km with
    axis ratio 1-50 and any bearing, per-stroke half-widths 0.01-0.8 km; a third placed within
    one error sd of a vertex, where the round joins and ends matter."""
    rng = np.random.default_rng(seed)
    lx, ly = np.asarray(lx, float), np.asarray(ly, float)
    x = rng.uniform(lx.min() - 1.5, lx.max() + 1.5, n)
    y = rng.uniform(ly.min() - 1.5, ly.max() + 1.5, n)
    a = 10 ** rng.uniform(np.log10(0.05), 0, n)
    sxx, syy, sxy = U.ellipse_covariance(a, a / 10 ** rng.uniform(0, np.log10(50), n), rng.uniform(0, 180, n), 0.5)
    w = 10 ** rng.uniform(-2, np.log10(0.8), n)
    v = rng.integers(0, lx.size, n)
    near = rng.random(n) < 1 / 3
    x = np.where(near, lx[v] + rng.normal(0, 1, n) * (w + a), x)
    y = np.where(near, ly[v] + rng.normal(0, 1, n) * (w + a), y)
    return x, y, sxx, syy, sxy, w


_LINES = {
    "three segments": ([-3.0, -1.0, 1.0, 3.0], [-2.0, 0.5, -0.5, 2.0]),
    "sharp turn": ([0.0, 2.0, 0.3], [0.0, 0.0, 0.25]),
    "short segments": ([0.0, 0.2, 0.3, 0.35, 1.0], [0.0, 0.05, -0.1, 0.2, 0.2]),
    "comes back near itself": ([0.0, 3.0, 3.0, 0.5], [0.0, 0.0, 0.4, 0.3]),
    "crosses itself": ([0.0, 2.0, 1.5, 1.0], [0.0, 1.0, -0.5, 1.5]),
    "single segment": ([0.0, 1.5], [0.0, 0.5]),
}


@pytest.mark.parametrize("name", list(_LINES))
def test_corridor_matches_polygon_reference(name):
    # Against the buffer-polygon method (shapely buffer + Owen's T triangles, Owen 1956). Its
    # round parts are inscribed polygons, so it may only be lower: by < 1e-5 where its adaptive
    # segment count is below the cap (its bound), by a little more where the cap of 128 binds
    # (errors 50-500 times narrower than the corridor; there the 2048-segment test below checks).
    lx, ly = _LINES[name]
    x, y, sxx, syy, sxy, w = _corridor_sample(zlib.crc32(name.encode()), 1500, lx, ly)
    got, paths = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, w, return_paths=True)
    ref = U._p_within_corridor_polygon(x, y, sxx, syy, sxy, lx, ly, w)
    assert np.all((got >= 0.0) & (got <= 1.0))
    diff = got - ref
    assert diff.min() > -1e-9
    s1, s2, _ = U.principal_axes(sxx, syy, sxy)
    capped = U._corridor_quad_segs(w, s1, s2, len(lx)) >= U.CORRIDOR_QUAD_SEGS
    assert diff[~capped].max() < 1e-5
    assert diff.max() < 2e-4
    assert np.count_nonzero(paths == 3) > 100  # the boundary path is exercised


def test_corridor_boundary_path_matches_fine_polygon():
    # Tighter: against the polygon method with 2048 segments per quarter circle (its miss
    # < 3e-7 here) on strokes that take the boundary path, including errors much narrower than
    # the corridor (where the polygon reference is at its 128-segment cap).
    import shapely

    lx, ly = _LINES["three segments"]
    x, y, sxx, syy, sxy, w = _corridor_sample(99, 400, lx, ly)
    got, paths = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, w, return_paths=True)
    line = shapely.LineString(np.column_stack([lx, ly]))
    idx = np.flatnonzero(paths == 3)[:60]
    for i in idx:
        poly = line.buffer(w[i], quad_segs=2048)
        ref = float(U.p_within_polygon(x[i], y[i], sxx[i], syy[i], sxy[i], *np.asarray(poly.exterior.coords).T))
        assert got[i] == pytest.approx(ref, abs=1e-6)


def _stadium_halfheight(w, length):
    def h(x):
        if x < 0.0:
            return math.sqrt(max(w * w - x * x, 0.0))
        if x > length:
            return math.sqrt(max(w * w - (x - length) ** 2, 0.0))
        return w
    return h


@pytest.mark.parametrize("mx, my, a, b, br, w", [
    (-0.05, 0.02, 0.12, 0.05, 30.0, 0.1),   # at the round end, error about the width
    (1.02, -0.08, 0.3, 0.06, 100.0, 0.06),  # beyond the other end, narrow corridor
    (0.0, 0.1, 0.05, 0.01, 80.0, 0.1),      # on the end's tangent point, elongated error
    (0.4, 0.3, 0.6, 0.3, 10.0, 0.25),       # wide error over the whole stadium
])
def test_stadium_corridor_vs_dblquad(mx, my, a, b, br, w):
    # scipy.integrate (nquad; epsabs 1e-9) of scipy.stats.multivariate_normal.pdf over one
    # segment's corridor {|y| <= h(x)}: a rectangle with two half discs.
    length = 1.0
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(a, b, br, 0.5))
    h = _stadium_halfheight(w, length)
    ref = _mvn_box_dblquad([mx, my], [[sxx, sxy], [sxy, syy]], -w, length + w, lambda x: -h(x), h)
    got, path = U.p_within_corridor(mx, my, sxx, syy, sxy, [0.0, length], [0.0, 0.0], w, return_paths=True)
    assert float(got) == pytest.approx(ref, abs=1e-7)


@pytest.mark.parametrize("mx, my, a, b, br, w", [
    (2.05, 0.05, 0.15, 0.06, 45.0, 0.1),  # at the outer corner of a right-angle turn
    (1.9, 0.1, 0.1, 0.02, 135.0, 0.08),   # in the inner corner
    (2.0, -0.1, 0.4, 0.2, 0.0, 0.15),      # wide error over the join
])
def test_right_angle_corridor_vs_dblquad(mx, my, a, b, br, w):
    # The corridor of (0,0)-(2,0)-(2,2) cut at fixed x is one interval: [-h1(x), h1(x)] left of
    # the second segment's reach, [-w or -c, 2 + c] within it (c = sqrt(w^2 - (x-2)^2));
    # scipy.integrate (nquad) of scipy.stats.multivariate_normal.pdf over it.
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(a, b, br, 0.5))
    h1 = _stadium_halfheight(w, 2.0)

    def lo(x):
        if x < 2.0 - w:
            return -h1(x)
        return -w if x <= 2.0 else -math.sqrt(max(w * w - (x - 2.0) ** 2, 0.0))

    def hi(x):
        if x < 2.0 - w:
            return h1(x)
        return 2.0 + math.sqrt(max(w * w - (x - 2.0) ** 2, 0.0))

    cov = [[sxx, sxy], [sxy, syy]]
    ref = _mvn_box_dblquad([mx, my], cov, -w, 2.0 - w, lo, hi) + _mvn_box_dblquad([mx, my], cov, 2.0 - w, 2.0 + w, lo, hi)
    got = float(U.p_within_corridor(mx, my, sxx, syy, sxy, [0.0, 2.0, 2.0], [0.0, 0.0, 2.0], w))
    assert got == pytest.approx(ref, abs=1e-7)


@pytest.mark.parametrize("name", ["sharp turn", "comes back near itself", "crosses itself", "short segments"])
def test_corridor_vs_monte_carlo_awkward_lines(name):
    # Seeded Monte Carlo, 200,000 draws per stroke, shapely distance to the line; tolerance 5
    # binomial standard errors (+1e-6 where the probability is near 0 or 1).
    import shapely

    lx, ly = _LINES[name]
    line = shapely.LineString(np.column_stack([lx, ly]))
    x, y, sxx, syy, sxy, w = _corridor_sample(17, 400, lx, ly)
    got, paths = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, w, return_paths=True)
    pick = np.flatnonzero((paths == 3) & (got > 0.01) & (got < 0.99))[:6]
    assert pick.size >= 3
    rng = np.random.default_rng(23)
    n = 200_000
    for i in pick:
        pts = rng.multivariate_normal([x[i], y[i]], [[sxx[i], sxy[i]], [sxy[i], syy[i]]], size=n)
        mc = np.mean(shapely.distance(shapely.points(pts), line) <= w[i])
        assert abs(got[i] - mc) < 5 * math.sqrt(mc * (1 - mc) / n) + 1e-6


def test_corridor_paths_and_shortcut_accuracy():
    # Exits and the 1-D path are taken where their error bound is < 1e-10: against the boundary
    # integral itself (forced on the same strokes) they agree to that.
    lx, ly = [0.0, 20.0, 40.0], [0.0, 0.0, 5.0]
    rng = np.random.default_rng(3)
    n = 3000
    x, y = rng.uniform(-2, 42, n), rng.uniform(-3, 8, n)
    a = 10 ** rng.uniform(np.log10(0.02), 0, n)
    sxx, syy, sxy = U.ellipse_covariance(a, a * rng.uniform(0.1, 1, n), rng.uniform(0, 180, n), 0.5)
    w = rng.uniform(0.02, 1.0, n)
    got, paths = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, w, return_paths=True)
    assert all(np.count_nonzero(paths == c) > 20 for c in (0, 1, 2, 3)), np.bincount(paths)
    s1, s2, _ = U.principal_axes(sxx, syy, sxy)
    l11 = np.sqrt(sxx)
    l21 = sxy / l11
    l22 = np.sqrt(syy - l21**2)
    forced = np.empty(n)
    glx, glw = U._gauss_legendre(U._BOUNDARY_NODES)
    U._corridor_boundary(x, y, l11, l21, l22, s2, w, np.asarray(lx), np.asarray(ly), glx, glw, forced)
    assert np.abs(got - forced).max() < 1e-9


def test_degenerate_lines_fall_back_to_the_polygon_method():
    # A repeated vertex (closed line) or a line doubling back on itself: pieces of the corridor
    # boundary would coincide, so the polygon method answers; repeated consecutive vertices are
    # simply dropped.
    sxx, syy, sxy = (float(v) for v in U.ellipse_covariance(0.3, 0.2, 20.0, 0.5))
    x, y = np.array([0.5, 1.0, 0.1]), np.array([0.1, 0.5, 0.0])
    for lx, ly in [([0.0, 1.0, 1.0, 0.0], [0.0, 0.0, 1.0, 0.0]), ([0.0, 1.0, 0.5], [0.0, 0.0, 0.0])]:
        got = U.p_within_corridor(x, y, sxx, syy, sxy, lx, ly, 0.1)
        ref = U._p_within_corridor_polygon(x, y, sxx, syy, sxy, lx, ly, 0.1)
        np.testing.assert_allclose(got, ref, atol=1e-12)
    got = U.p_within_corridor(x, y, sxx, syy, sxy, [0.0, 1.0, 1.0, 2.0], [0.0, 0.0, 0.0, 1.0], 0.1)
    ref = U.p_within_corridor(x, y, sxx, syy, sxy, [0.0, 1.0, 2.0], [0.0, 0.0, 1.0], 0.1)
    np.testing.assert_allclose(got, ref, atol=1e-12)
    assert np.isnan(U.p_within_corridor([np.nan], [0.0], sxx, syy, sxy, [0.0, 1.0], [0.0, 0.0], 0.1)[0])


def test_corridor_bad_input():
    with pytest.raises(InputError):
        U.p_within_corridor([0.0], [0.0], 1.0, 1.0, 0.0, [0.0], [0.0], 1.0)
    with pytest.raises(InputError):
        U.p_within_corridor([0.0], [0.0], 1.0, 1.0, 0.0, [0.0, 1.0], [0.0, 0.0], 0.0)


# --- filling missing ellipses -----------------------------------------------------------------

def test_missing_ellipses_need_a_default():
    strokes = pd.DataFrame({
        "semi_major_km": [0.5, np.nan, 0.3], "semi_minor_km": [0.25, np.nan, 0.3],
        "major_bearing_deg": [30.0, np.nan, np.nan],
    })
    with pytest.raises(InputError, match="default_uncertainty_km"):
        U.stroke_covariance(strokes)
    sxx, syy, sxy, filled = U.stroke_covariance(strokes, default_uncertainty_km=0.4)
    assert filled.tolist() == [False, True, False]  # a circle needs no bearing
    k = U.sigma_scale(0.5)
    assert sxx[1] == pytest.approx((0.4 / k) ** 2) and sxy[1] == 0.0
    assert sxx[0] == pytest.approx(0.078897, abs=1e-6)  # the check case of test_covariance_check_case


def test_zero_axis_handed_in_directly_names_the_row():
    # The reader turns a 0 km axis into NaN (no ellipse); a table built another way is refused
    # with the stroke's source_row, not with a message that names no row.
    strokes = pd.DataFrame({"semi_major_km": [0.5, 0.3], "semi_minor_km": [0.25, 0.0],
                            "major_bearing_deg": [30.0, 0.0], "source_row": [7, 9]})
    with pytest.raises(InputError, match=r"^stroke at source_row 9: error-ellipse semi-axes must be positive, got 0.3 and 0 km"):
        U.stroke_covariance(strokes, default_uncertainty_km=0.4)


def test_reach_bound_holds():
    # P(|e| > reach) <= tail for a 2-D normal (chi-square 2 df bound); checked with ncx2 (circular, worst case).
    sxx, syy, sxy = U.ellipse_covariance(1.0, 1.0, 0.0, 0.5)
    t = float(U.reach_km(sxx, syy, sxy, 1e-6))
    s = math.sqrt(float(sxx))
    assert stats.chi2.sf((t / s) ** 2, 2) == pytest.approx(1e-6, rel=1e-9)


@pytest.mark.parametrize("kink_m", [0.001, 0.01, 0.03, 0.3])
@pytest.mark.parametrize("half_length_km", [0.5, 10.0])
def test_corridor_at_nearly_straight_vertex_matches_polygon_reference(kink_m, half_length_km):
    # A straight line with its middle vertex raised by 1 mm ... 30 cm (turns of 2e-7 to 1.2e-3
    # rad). Against the buffer-polygon method (Owen's T triangles, Owen 1956): for strokes whose
    # error keeps 7 sd clear of the round ends, its only approximation is the outer join, an arc
    # of the turn angle whose inscribed chord misses a sliver < w * turn^2 / 8 <= 1e-7 m deep,
    # so it is exact to ~1e-10 there. The boundary integral used to keep the inner join arc
    # (inside by w * turn^2 / 8, below its distance tolerance) and was off by up to 1.4e-4.
    L, d = half_length_km, kink_m / 1000.0
    lx, ly = np.array([-L, 0.0, L]), np.array([0.0, d, 0.0])
    rng = np.random.default_rng(int(kink_m * 1e4) + int(L))
    n = 1500
    a = 10 ** rng.uniform(np.log10(0.05), np.log10(2.0), n)
    sxx, syy, sxy = U.ellipse_covariance(a, a / 10 ** rng.uniform(0, 1, n), rng.uniform(0, 180, n), 0.5)
    w = 10 ** rng.uniform(-2, np.log10(0.5), n)
    x, y = rng.normal(0, 0.5, n) * (a + w), rng.normal(0, 1, n) * (a + w)
    s1, _, _ = U.principal_axes(sxx, syy, sxy)
    use = (L - np.abs(x)) > w + 7 * s1
    got, paths = U.p_within_corridor(x[use], y[use], sxx[use], syy[use], sxy[use], lx, ly, w[use], return_paths=True)
    ref = U._p_within_corridor_polygon(x[use], y[use], sxx[use], syy[use], sxy[use], lx, ly, w[use])
    assert np.count_nonzero(paths == 3) > 50
    assert np.abs(got - ref).max() < 3e-8


def test_corridor_merges_vertices_within_a_micrometre():
    # A vertex inserted on the line, or 1e-4 mm off it, is merged (U._CORRIDOR_MERGE_KM = 1
    # micrometre): the result equals the straight line's to 1e-9. One 1 mm off is kept; against
    # the straight line it then differs by the displacement's own effect, at most
    # 0.4 * d / s_n (d the displacement, s_n the error sd across the line; the 1-D normal density
    # is at most 1 / sqrt(2 pi) = 0.4, common practice), and here by more than 1e-9.
    rng = np.random.default_rng(5)
    n = 400
    a = 10 ** rng.uniform(np.log10(0.05), 0.0, n)
    sxx, syy, sxy = U.ellipse_covariance(a, a / 2, rng.uniform(0, 180, n), 0.5)
    w = 10 ** rng.uniform(-2, np.log10(0.5), n)
    x, y = rng.uniform(-1.5, 1.5, n), rng.normal(0, 1, n) * (a + w)
    straight = U.p_within_corridor(x, y, sxx, syy, sxy, [-2.0, 2.0], [0.0, 0.0], w)
    for d_km in (0.0, 1e-10):
        got = U.p_within_corridor(x, y, sxx, syy, sxy, [-2.0, 0.3, 2.0], [0.0, d_km, 0.0], w)
        assert np.abs(got - straight).max() < 1e-9
    d_km = 1e-6
    got = U.p_within_corridor(x, y, sxx, syy, sxy, [-2.0, 0.3, 2.0], [0.0, d_km, 0.0], w)
    _, s2, _ = U.principal_axes(sxx, syy, sxy)
    diff = np.abs(got - straight)
    assert np.all(diff <= 0.4 * d_km / s2 + 1e-8) and diff.max() > 1e-9
