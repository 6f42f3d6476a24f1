"""Location uncertainty: a reported error ellipse becomes a bivariate normal, then probabilities.

A network reports, for each stroke, an error ellipse (semi-major and semi-minor axis, bearing of
the major axis) that holds the true position with probability ``confidence`` (``ellipse_confidence``
in event.toml, 0.5 unless the network says otherwise). Under the usual bivariate-normal model of
location error the ellipse is a contour of constant density, and the fraction of a 2-D normal
inside the contour at Mahalanobis radius k is ``1 - exp(-k^2/2)`` (chi-square, 2 degrees of
freedom). So a p-ellipse has semi-axes ``k_p`` standard deviations with
``k_p = sqrt(-2 ln(1 - p))``: 1.177 for 50 %, 2.448 for 95 %. (The 1-D factor 0.674 for 50 % is
wrong here.)

All planar quantities are in a local plane in km, x east and y north. Offsets ``dx, dy`` are the
reported stroke position minus the site (or the origin of the polygon / line coordinates). The
true point is modelled as ``N((dx, dy), S)`` with ``S = [[sxx, sxy], [sxy, syy]]`` (km^2).

Methods
-------
* Circle, circular error: exact, non-central chi-square with 2 degrees of freedom.
* Circle, elliptical error: rotate to principal axes, integrate the 1-D form
  ``P = int phi((v - m2)/s2)/s2 * [Phi((w - m1)/s1) - Phi((-w - m1)/s1)] dv``,
  ``w = sqrt(R^2 - v^2)``, over the minor axis (the narrow density), with ``v = R sin(theta)`` so
  the integrand is smooth at the circle's edge, and fixed-order Gauss-Legendre on the part of
  the interval where the density is non-negligible. Absolute error < 1e-4 over R/sigma 0.01-100,
  axis ratio up to 100, offsets up to 50 major semi-axes (error study in
  ``benchmarks/bench_uncertainty.py``; tests check a seeded sample against scipy dblquad).
* Polygon: whiten (Cholesky), then the signed sum over edges of the probability of the triangle
  (mean, edge), each in closed form by Owen's T function (evaluated only for edges within 9
  whitened standard deviations; the terms left out are < 1e-18). Exact up to rounding.
* Corridor (within a distance of a polyline), per stroke and width: exits to 0 or 1 and the
  1-D normal probability across a single segment where their error bound is below 1e-10;
  otherwise the boundary integral in the whitened frame, ``P = (1/2 pi) * contour integral of
  g(|z|^2) (z x dz)``, ``g(r^2) = (1 - exp(-r^2/2)) / r^2``, over the corridor's exact boundary
  (pieces of offset lines and vertex circles), by Gauss-Legendre on short panels (compiled);
  vertices within 1 micrometre of the line through their neighbours are merged first.
  Absolute error < 1e-7 (tests: scipy dblquad, a 2048-segment buffer polygon, Monte Carlo).
  The buffer-polygon method (shapely buffer, then the polygon method; round parts inscribed,
  up to 128 segments per quarter circle) is kept as ``_p_within_corridor_polygon``.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Johnson1994] Chi-square distribution (2-D normal contours).
.. [Owen1956] The T function; triangle probabilities.
.. [CumminsMurphy2009] Error ellipses of lightning location networks (from memory).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numba import njit
from scipy.special import ndtr, owens_t
from scipy.stats import ncx2

from .errors import InputError

#: Half-width, in standard deviations, of the part of an axis that the quadrature covers; the
#: omitted normal tails beyond 6.5 sigma hold 8e-11.
_QUAD_HALF_WIDTH_SD = 6.5
#: Gauss-Legendre order of the circle integral. Error study (benchmarks/bench_uncertainty.py,
#: 100,000 seeded points of the stated grid): max abs error 9e-5 at 24 nodes, 2e-7 at 32.
_QUAD_NODES = 32
#: Early exit distance, in major-axis standard deviations: beyond it the probability left out is
#: below exp(-6^2/2) = 1.5e-8 (chi-square bound, see :func:`reach_km`).
_EXIT_SD = 6.0
#: Relative eigenvalue difference below which an ellipse is treated as a circle.
_CIRCULAR_RTOL = 1e-9
#: Whitened edge distance beyond which Owen's T is below 1e-18 and is left out.
_OWENS_T_MAX_H = 9.0
#: Elements per block when broadcasting strokes x nodes (bounds memory; blocks that fit in
#: cache run about twice as fast as larger ones).
_BLOCK = 256_000


def sigma_scale(p):
    """Standard deviations per ellipse semi-axis for a bivariate-normal ellipse of confidence `p`.

    Parameters
    ----------
    p : float or array_like
        Confidence level of the ellipse, 0 < p < 1 (0.5 for a 50 % ellipse).

    Returns
    -------
    k_p : float or ndarray
        ``sqrt(-2 ln(1 - p))``: a semi-axis is ``k_p`` standard deviations, so ``sigma = axis / k_p``.
        50 %: 1.177410, 90 %: 2.145966, 95 %: 2.447747, 99 %: 3.034854.

    References
    ----------
    Chi-square with 2 degrees of freedom: ``P(r^2 <= k^2) = 1 - exp(-k^2/2)`` [Johnson1994]_.
    """
    arr = np.asarray(p, dtype=float)
    if not np.all(np.isfinite(arr)) or np.any((arr <= 0.0) | (arr >= 1.0)):
        raise InputError(f"ellipse confidence must be between 0 and 1 (exclusive), got {p!r}")
    k = np.sqrt(-2.0 * np.log1p(-arr))
    return float(k) if k.ndim == 0 else k


def ellipse_covariance(semi_major_km, semi_minor_km, major_bearing_deg, confidence=0.5):
    """Covariance (km^2) of the bivariate normal behind a reported error ellipse.

    Parameters
    ----------
    semi_major_km, semi_minor_km : array_like
        Ellipse semi-axes at `confidence`, km (> 0; NaN passes through as NaN).
    major_bearing_deg : array_like
        Bearing of the major axis, degrees clockwise from north.
    confidence : float
        Confidence level of the ellipse (``ellipse_confidence``).

    Returns
    -------
    sxx, syy, sxy : ndarray
        ``Sxx = sa^2 sin^2 b + sb^2 cos^2 b``, ``Syy = sa^2 cos^2 b + sb^2 sin^2 b``,
        ``Sxy = (sa^2 - sb^2) sin b cos b``, with ``sa = a / k_p``, ``sb = b / k_p``, x east, y north.

    References
    ----------
    ``S = sa^2 u u' + sb^2 v v'`` with u = (sin b, cos b) the major-axis unit vector [Johnson1994]_.
    """
    a = np.asarray(semi_major_km, dtype=float)
    b = np.asarray(semi_minor_km, dtype=float)
    if np.any(a <= 0.0) or np.any(b <= 0.0):
        raise InputError("error-ellipse semi-axes must be positive (found a zero or negative axis)")
    k = sigma_scale(confidence)
    sa2, sb2 = (a / k) ** 2, (b / k) ** 2
    br = np.radians(np.asarray(major_bearing_deg, dtype=float))
    s, c = np.sin(br), np.cos(br)
    return sa2 * s * s + sb2 * c * c, sa2 * c * c + sb2 * s * s, (sa2 - sb2) * s * c


def principal_axes(sxx, syy, sxy):
    """Principal standard deviations and major-axis angle of a 2-D covariance.

    Returns
    -------
    s1, s2 : ndarray
        Major and minor standard deviations, km (s1 >= s2).
    angle_rad : ndarray
        Angle of the major axis from the x (east) axis, counter-clockwise, radians.
    """
    sxx, syy, sxy = (np.asarray(v, dtype=float) for v in (sxx, syy, sxy))
    mean = 0.5 * (sxx + syy)
    half = np.hypot(0.5 * (sxx - syy), sxy)
    l1 = mean + half
    l2 = np.maximum(mean - half, 0.0)
    return np.sqrt(l1), np.sqrt(l2), 0.5 * np.arctan2(2.0 * sxy, sxx - syy)


def reach_km(sxx, syy, sxy, tail=1e-6):
    """Distance from the reported point beyond which the true point lies with probability < `tail`.

    For any 2-D normal with largest standard deviation s1, ``P(|e| > t) <= exp(-t^2 / (2 s1^2))``
    (the error is dominated by a circular one of sd s1, whose squared radius is s1^2 times a
    chi-square with 2 degrees of freedom). So ``t = s1 sqrt(-2 ln tail)``: 5.26 s1 for 1e-6.

    Parameters
    ----------
    sxx, syy, sxy : array_like
        Covariance, km^2.
    tail : float
        Probability left out, 0 < tail < 1.

    Returns
    -------
    ndarray
        Distance, km.
    """
    if not 0.0 < tail < 1.0:
        raise InputError(f"tail probability must be between 0 and 1, got {tail!r}")
    s1, _, _ = principal_axes(sxx, syy, sxy)
    return s1 * math.sqrt(-2.0 * math.log(tail))


def combine_fixes(x_km, y_km, sxx, syy, sxy, group):
    """Combine repeated position fixes of one point by inverse-covariance weighting.

    The strokes of one ground contact share one termination point; each reported position is a
    measurement of it with its own bivariate-normal error. With a flat prior and errors
    independent between strokes, the posterior of the point is the normalised product of the
    strokes' densities: a normal with information (inverse covariance) ``P = sum P_i`` and mean
    ``P^-1 sum P_i x_i``. Its covariance is never larger than any one stroke's.

    Parameters
    ----------
    x_km, y_km : array_like
        Reported positions in one local plane, km (x east, y north), one per stroke.
    sxx, syy, sxy : array_like
        Each stroke's error covariance, km^2 (positive definite).
    group : array_like of int
        Group label per stroke (e.g. a contact number); labels need not be sorted.

    Returns
    -------
    labels : ndarray
        The sorted distinct labels.
    x_km, y_km, sxx, syy, sxy : ndarray
        The combined position and covariance per label.
    n : ndarray of int
        Fixes combined per label.

    References
    ----------
    [BarShalom2001]_ (the information form of combining independent Gaussian estimates).
    """
    x, y, a, b, c = (np.asarray(v, dtype=float) for v in (x_km, y_km, sxx, syy, sxy))
    labels, inv = np.unique(np.asarray(group), return_inverse=True)
    det = a * b - c * c
    if np.any(~(det > 0.0)) or np.any(~(a > 0.0)):
        raise InputError("combine_fixes: every covariance must be positive definite")
    # Information matrices of the strokes and their sums per group.
    ia, ib, ic = b / det, a / det, -c / det
    m = labels.size
    sa, sb, sc = (np.bincount(inv, weights=w, minlength=m) for w in (ia, ib, ic))
    hx = np.bincount(inv, weights=ia * x + ic * y, minlength=m)
    hy = np.bincount(inv, weights=ic * x + ib * y, minlength=m)
    dd = sa * sb - sc * sc
    cxx, cyy, cxy = sb / dd, sa / dd, -sc / dd
    return (labels, cxx * hx + cxy * hy, cxy * hx + cyy * hy, cxx, cyy, cxy,
            np.bincount(inv, minlength=m).astype(np.int64))


@functools.lru_cache(maxsize=8)
def _gauss_legendre(n: int):
    x, w = np.polynomial.legendre.leggauss(n)
    x.setflags(write=False)
    w.setflags(write=False)
    return x, w


def _circle_quadrature(m1, m2, s1, s2, r, nodes=_QUAD_NODES):
    """P(|T| <= r), T ~ N((m1, m2), diag(s1^2, s2^2)), by the 1-D form over the minor axis.

    All arguments are 1-D arrays of equal length (principal-axis frame, s1 >= s2 > 0).
    """
    m1 = np.abs(m1)  # the circle is symmetric about both axes
    out = np.zeros(m1.shape)
    if m1.size == 0:
        return out
    # Part of [-pi/2, pi/2] (v = r sin theta) where the minor-axis density is non-negligible ...
    lo = np.clip((m2 - _QUAD_HALF_WIDTH_SD * s2) / r, -1.0, 1.0)
    hi = np.clip((m2 + _QUAD_HALF_WIDTH_SD * s2) / r, -1.0, 1.0)
    t_lo, t_hi = np.arcsin(lo), np.arcsin(hi)
    # ... and where the major-axis factor is: it needs r cos(theta) >= |m1| - 6.5 s1.
    c = np.clip((m1 - _QUAD_HALF_WIDTH_SD * s1) / r, 0.0, 1.0)
    t_max = np.arccos(c)
    t_lo = np.maximum(t_lo, -t_max)
    t_hi = np.minimum(t_hi, t_max)
    ok = t_hi > t_lo
    if not np.any(ok):
        return out
    x, w = _gauss_legendre(nodes)
    idx = np.flatnonzero(ok)
    step = max(1, _BLOCK // nodes)
    for s in range(0, idx.size, step):
        j = idx[s:s + step]
        half = 0.5 * (t_hi[j] - t_lo[j])
        mid = 0.5 * (t_hi[j] + t_lo[j])
        th = mid[:, None] + half[:, None] * x[None, :]
        rr = r[j][:, None]
        v = rr * np.sin(th)
        u = rr * np.cos(th)
        z2 = (v - m2[j][:, None]) / s2[j][:, None]
        dens = np.exp(-0.5 * z2 * z2) / (math.sqrt(2.0 * math.pi) * s2[j][:, None])
        a1, b1 = m1[j][:, None], s1[j][:, None]
        band = ndtr((u - a1) / b1) - ndtr((-u - a1) / b1)
        out[j] = half * ((dens * u * band) @ w)
    return np.clip(out, 0.0, 1.0)


def _broadcast(*arrays):
    arrs = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in arrays))
    return arrs[0].shape, [a.ravel() for a in arrs]


def p_within_circle(dx_km, dy_km, sxx, syy, sxy, radius_km):
    """Probability that the true stroke point lies within `radius_km` of the site.

    Parameters
    ----------
    dx_km, dy_km : array_like
        Reported stroke position minus the site, km (x east, y north).
    sxx, syy, sxy : array_like
        Location-error covariance of each stroke, km^2 (:func:`ellipse_covariance`).
    radius_km : float or array_like
        Circle radius, km (> 0). All arguments broadcast together.

    Returns
    -------
    ndarray
        Probability in [0, 1]; NaN where an input is NaN. Absolute error < 1e-4 for radius /
        sigma 0.01-100, axis ratio up to 100 and offsets up to 50 major semi-axes.

    References
    ----------
    Circular error: ``P = F_ncx2((R/s)^2; 2, (d/s)^2)``, the non-central chi-square distribution
    with 2 degrees of freedom [Johnson1994]_. Elliptical error: principal-axis 1-D integral with
    Gauss-Legendre quadrature (module notes).
    """
    shape, (dx, dy, sxx, syy, sxy, r) = _broadcast(dx_km, dy_km, sxx, syy, sxy, radius_km)
    if np.any(r <= 0.0):
        raise InputError("the circle radius must be positive")
    out = np.full(dx.shape, np.nan)
    s1, s2, ang = principal_axes(sxx, syy, sxy)
    good = np.isfinite(dx) & np.isfinite(dy) & np.isfinite(s1) & np.isfinite(r)
    if np.any(good & (s2 <= 0.0)):
        raise InputError("a location-error covariance is degenerate (zero minor axis)")
    d = np.hypot(dx, dy)
    # Far: the circle lies in the half-plane u.x <= r (u = unit vector site -> point), so
    # P <= Phi(-(d - r) / s_u) with s_u the error's sd along u: below 1e-9 beyond 6 s_u.
    with np.errstate(invalid="ignore", divide="ignore"):
        s_u = np.sqrt(np.maximum((dx * dx * sxx + dy * dy * syy + 2.0 * dx * dy * sxy) / (d * d), 0.0))
    s_u = np.where(d > 0.0, s_u, s1)
    far = good & (d - r > _EXIT_SD * s_u)
    deep = good & (r - d > _EXIT_SD * s1)
    out[far] = 0.0
    out[deep] = 1.0
    rest = good & ~far & ~deep
    circ = rest & ((s1 * s1 - s2 * s2) <= _CIRCULAR_RTOL * s1 * s1)
    if np.any(circ):
        sig = s1[circ]
        out[circ] = ncx2.cdf((r[circ] / sig) ** 2, 2, (d[circ] / sig) ** 2)
    ell = rest & ~circ
    if np.any(ell):
        ca, sa = np.cos(ang[ell]), np.sin(ang[ell])
        m1 = dx[ell] * ca + dy[ell] * sa
        m2 = -dx[ell] * sa + dy[ell] * ca
        out[ell] = _circle_quadrature(m1, m2, s1[ell], s2[ell], r[ell])
    return out.reshape(shape)


def _edge_terms(px, py, qx, qy):
    """Signed triangle probability of each edge (p -> q, whitened, relative to the mean).

    The standard bivariate normal probability of the triangle (0, p, q), signed by orientation,
    is ``sign * [(atan(a_q) - atan(a_p)) / 2 pi - (T(h, a_q) - T(h, a_p))]`` with h the distance
    from the mean to the edge's line and ``a = s / h`` the positions along it [Owen1956]_. Owen's T is
    evaluated only for edges nearer than 9 (whitened) units: beyond, T(h, a) <= exp(-h^2/2)/4
    < 1e-18. An edge whose line passes through the mean has a degenerate triangle and adds 0
    (the limit of the formula), which keeps a mean on the boundary exact.
    """
    ex, ey = qx - px, qy - py
    length = np.hypot(ex, ey)
    cross = px * qy - py * qx
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.abs(cross) / length
        sp = (px * ex + py * ey) / length
        sq = (qx * ex + qy * ey) / length
        a_p, a_q = sp / h, sq / h
        term = (np.arctan(a_q) - np.arctan(a_p)) / (2.0 * math.pi)
    near = (h < _OWENS_T_MAX_H) & (h > 1e-300)
    if np.any(near):
        term[near] -= owens_t(h[near], a_q[near]) - owens_t(h[near], a_p[near])
    degenerate = ~(h > 1e-300) | ~(length > 0.0)
    return np.where(degenerate, 0.0, np.sign(cross) * term)


def _whiten(vx, vy, dx, dy, sxx, syy, sxy):
    """Vertices (broadcast against strokes) in the whitened frame of each stroke's error."""
    l11 = np.sqrt(sxx)
    l21 = sxy / l11
    l22 = np.sqrt(np.maximum(syy - l21 * l21, 0.0))
    z1 = (vx - dx) / l11
    z2 = ((vy - dy) - l21 * z1) / l22
    return z1, z2


def _ring_xy(x, y, what="polygon"):
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if x.shape != y.shape:
        raise InputError(f"{what}: x and y vertex lists differ in length")
    if x.size >= 2 and x[0] == x[-1] and y[0] == y[-1]:
        x, y = x[:-1], y[:-1]
    if x.size < 3 or not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise InputError(f"{what}: a ring needs at least 3 distinct finite vertices")
    return x, y


def _p_polygons(x, y, sxx, syy, sxy, owner, polys):
    """P(true point in polys[owner[i]]) for each stroke i: one flat pass over (stroke, edge) pairs.

    `polys` are shapely Polygons (holes allowed); rings are oriented (exterior counter-clockwise,
    holes clockwise) so the signed edge terms of all rings add up to the polygon's probability:
    (:func:`_edge_terms`).
    """
    import shapely

    polys = shapely.orient_polygons(np.asarray(polys, dtype=object), exterior_cw=False)
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    xy, vert_ring = shapely.get_coordinates(rings, return_index=True)
    same = vert_ring[:-1] == vert_ring[1:]  # closed rings: consecutive vertices of one ring are its edges
    e_px, e_py = xy[:-1, 0][same], xy[:-1, 1][same]
    e_qx, e_qy = xy[1:, 0][same], xy[1:, 1][same]
    e_poly = ring_poly[vert_ring[:-1][same]]  # sorted by polygon
    n_poly = len(polys)
    e_start = np.searchsorted(e_poly, np.arange(n_poly))
    e_count = np.bincount(e_poly, minlength=n_poly)
    per = e_count[owner]
    out = np.zeros(x.shape)
    ends = np.cumsum(per)
    i0 = 0
    while i0 < x.size:
        i1 = int(np.searchsorted(ends, (ends[i0 - 1] if i0 else 0) + _BLOCK, side="right"))
        i1 = max(i1, i0 + 1)
        idx = np.arange(i0, i1)
        cnt = per[idx]
        elem_stroke = np.repeat(idx, cnt)
        first = np.repeat(np.cumsum(cnt) - cnt, cnt)
        elem_edge = np.repeat(e_start[owner[idx]], cnt) + (np.arange(elem_stroke.size) - first)
        col = (x[elem_stroke], y[elem_stroke], sxx[elem_stroke], syy[elem_stroke], sxy[elem_stroke])
        px, py = _whiten(e_px[elem_edge], e_py[elem_edge], *col)
        qx, qy = _whiten(e_qx[elem_edge], e_qy[elem_edge], *col)
        terms = _edge_terms(px, py, qx, qy)
        out[i0:i1] = np.bincount(elem_stroke - i0, weights=terms, minlength=i1 - i0)
        i0 = i1
    return np.clip(out, 0.0, 1.0)


def p_within_polygon(dx_km, dy_km, sxx, syy, sxy, polygon_x_km, polygon_y_km, *, holes=()):
    """Probability that the true stroke point lies inside a polygon.

    Parameters
    ----------
    dx_km, dy_km : array_like
        Reported stroke positions, km, in the same local frame as the polygon vertices (for a
        site-centred frame these are the offsets stroke - site).
    sxx, syy, sxy : array_like
        Location-error covariance, km^2.
    polygon_x_km, polygon_y_km : array_like
        Vertices of the outer ring, km (closed or not; either orientation; simple polygon).
    holes : sequence of (x, y)
        Interior rings, km.

    Returns
    -------
    ndarray
        Probability in [0, 1] (NaN where an input is NaN).

    References
    ----------
    Triangle decomposition of bivariate normal probabilities with Owen's T function [Owen1956]_
    (``scipy.special.owens_t``), after whitening by the Cholesky factor of the covariance.
    """
    shape, (dx, dy, sxx, syy, sxy) = _broadcast(dx_km, dy_km, sxx, syy, sxy)
    rx, ry = _ring_xy(polygon_x_km, polygon_y_km)
    good = np.isfinite(dx) & np.isfinite(dy) & np.isfinite(sxx) & np.isfinite(syy) & np.isfinite(sxy)
    out = np.full(dx.shape, np.nan)
    if not np.any(good):
        return out.reshape(shape)
    import shapely

    hole_rings = [_ring_xy(hx, hy, "polygon hole") for hx, hy in holes]
    poly = shapely.Polygon(np.column_stack([rx, ry]), [np.column_stack(h) for h in hole_rings])
    s1, _, _ = principal_axes(sxx, syy, sxy)
    gi = np.flatnonzero(good)
    pts = shapely.points(dx[gi], dy[gi])
    d_edge = shapely.distance(pts, poly.boundary)
    inside = shapely.contains_xy(poly, dx[gi], dy[gi])
    clear = d_edge > _EXIT_SD * s1[gi]  # the error disc of 6 sigma does not cross the boundary
    out[gi[clear]] = np.where(inside[clear], 1.0, 0.0)
    j = gi[~clear]
    if j.size:
        out[j] = _p_polygons(dx[j], dy[j], sxx[j], syy[j], sxy[j], np.zeros(j.size, dtype=np.int64), [poly])
    return out.reshape(shape)


#: Most segments per quarter circle of the corridor's round ends and joins.
CORRIDOR_QUAD_SEGS = 128


def _p_within_corridor_polygon(x_km, y_km, sxx, syy, sxy, line_x_km, line_y_km, half_width_km):
    """Corridor probability by the buffer polygon (the slower reference of :func:`p_within_corridor`).

    Parameters
    ----------
    x_km, y_km : array_like, length n
        Reported stroke positions in a local plane, km.
    sxx, syy, sxy : array_like, length n
        Location-error covariance, km^2.
    line_x_km, line_y_km : array_like
        Polyline vertices in the same plane, km (2 or more).
    half_width_km : float or array_like of length n
        Corridor half-width, km (> 0), one per stroke if an array.

    Returns
    -------
    ndarray, length n
        Probability in [0, 1]. The corridor is the union of the segments' buffers (round ends);
        straight parts are exact, round ends and joins are inscribed polygons with 4 to 128
        segments per quarter circle, as many as keep the probability they miss below 1e-5
        (:func:`_corridor_quad_segs`); at the cap of 128 the corridor there is narrower by at
        most ``half_width * (1 - cos(pi/512))`` = 1.9e-5 half-widths.

    References
    ----------
    Polygon probability by Owen's T function [Owen1956]_ applied to the buffer polygon (shapely).
    """
    import shapely

    shape, (x, y, sxx, syy, sxy, w) = _broadcast(x_km, y_km, sxx, syy, sxy, half_width_km)
    lx = np.asarray(line_x_km, dtype=float).ravel()
    ly = np.asarray(line_y_km, dtype=float).ravel()
    if lx.size < 2 or lx.shape != ly.shape or not (np.all(np.isfinite(lx)) and np.all(np.isfinite(ly))):
        raise InputError("a corridor line needs at least 2 finite vertices")
    if np.any(w <= 0.0):
        raise InputError("the corridor half-width must be positive")
    line = shapely.LineString(np.column_stack([lx, ly]))
    if line.length == 0.0:
        raise InputError("a corridor line has zero length")
    out = np.full(x.shape, np.nan)
    s1, s2, _ = principal_axes(sxx, syy, sxy)
    good = np.isfinite(x) & np.isfinite(y) & np.isfinite(s1) & np.isfinite(w)
    if np.any(good & (s2 <= 0.0)):
        raise InputError("a location-error covariance is degenerate (zero minor axis)")
    d = np.full(x.shape, np.inf)
    if np.any(good):
        d[good] = shapely.distance(shapely.points(x[good], y[good]), line)
    far = good & (d - w > _EXIT_SD * s1)
    deep = good & (w - d > _EXIT_SD * s1)  # the disc of radius w - d about the point is inside
    out[far] = 0.0
    out[deep] = 1.0
    rest = np.flatnonzero(good & ~far & ~deep)
    if rest.size == 0:
        return out.reshape(shape)
    q = _corridor_quad_segs(w[rest], s1[rest], s2[rest], lx.size)
    # One buffer per distinct (width, segments): widths are often shared (a line's own setting).
    keys, inverse = np.unique(np.column_stack([w[rest], q]), axis=0, return_inverse=True)
    polys = np.empty(len(keys), dtype=object)
    for qq in np.unique(keys[:, 1]):
        k = np.flatnonzero(keys[:, 1] == qq)
        polys[k] = shapely.buffer(np.full(k.size, line, dtype=object), keys[k, 0], quad_segs=int(qq))
    out[rest] = _p_polygons(x[rest], y[rest], sxx[rest], syy[rest], sxy[rest], inverse.ravel().astype(np.int64), polys)
    return out.reshape(shape)


def _corridor_quad_segs(w, s1, s2, n_vertices):
    """Segments per quarter circle for the corridor's round parts, per stroke (4 ... 64).

    An inscribed arc of angle 2b misses a sliver of the disc at most ``w (1 - cos b)`` deep; over
    the round parts (two ends and the joins, at most ``n_vertices`` half-turns, arc length
    ``<= n_vertices * pi * w``) the missing area is ``<= n_vertices * pi * w^2 * b^2 / 2`` and the
    density at most ``1 / (2 pi s1 s2)``, so the probability missed is
    ``<= n_vertices * w^2 * b^2 / (4 s1 s2)``. The count is chosen to keep that below 1e-5,
    rounded up to a power of two and capped at :data:`CORRIDOR_QUAD_SEGS` (where the cap binds,
    an error much narrower than the corridor, the miss stayed below 1e-4 in the tests).
    """
    with np.errstate(divide="ignore"):
        b = np.sqrt(4e-5 * s1 * s2 / (n_vertices * w * w))
        need = np.ceil(math.pi / (4.0 * b))
    q = 2.0 ** np.ceil(np.log2(np.maximum(need, 4.0)))
    return np.minimum(q, CORRIDOR_QUAD_SEGS)


# --- corridor: exact boundary integral -------------------------------------------------------

#: Error bound below which a stroke takes an exit (0 or 1) or the 1-D normal-offset formula.
_CORRIDOR_SHORTCUT_TOL = 1e-10
#: Deep inside: the disc of this many major-axis sd about the point lies in the corridor
#: (probability outside it exp(-6.7^2/2) = 1.8e-10).
_CORRIDOR_DEEP_SD = 6.7
#: Whitened distance beyond which the boundary integrand equals its far form to exp(-32) = 1e-14.
_BOUNDARY_NEAR_R = 8.0
#: Whitened length of a coarse boundary panel (classified near or far) and of a fine one.
_BOUNDARY_COARSE = 8.0
_BOUNDARY_FINE = 2.0
#: Gauss-Legendre order on a fine panel (error study in benchmarks/bench_uncertainty.py).
_BOUNDARY_NODES = 10


@njit(cache=True)
def _whitened_point(kind, cx, cy, dx, dy, rad, t, x, y, l11, l21, l22):
    """Point of a boundary piece and its derivative, whitened about the stroke.

    kind 0: a line ``c + t d``; kind 1: a circle ``c + rad (cos t, sin t)``.
    """
    if kind == 0:
        px = cx + t * dx
        py = cy + t * dy
        qx = dx
        qy = dy
    else:
        ct = math.cos(t)
        st_ = math.sin(t)
        px = cx + rad * ct
        py = cy + rad * st_
        qx = -rad * st_
        qy = rad * ct
    z1 = (px - x) / l11
    z2 = ((py - y) - l21 * z1) / l22
    d1 = qx / l11
    d2 = (qy - l21 * d1) / l22
    return z1, z2, d1, d2


@njit(cache=True)
def _piece_integral(kind, cx, cy, dx, dy, rad, ta, tb, x, y, l11, l21, l22, speed, glx, glw):
    """Boundary integral ``(1/2 pi) int g(|z|^2) (z x z') dt`` over one piece, t in [ta, tb].

    ``g(r^2) = (1 - exp(-r^2/2)) / r^2`` is entire, so fixed-order Gauss-Legendre on panels of
    bounded whitened length converges fast. Panels farther than :data:`_BOUNDARY_NEAR_R` from
    the mean use the far form ``g = 1/r^2``, whose integral is the change of the view angle.
    `speed` bounds the whitened length per unit t.
    """
    if kind == 0:
        # a straight piece: only the part within R of the mean needs quadrature
        z01, z02, d1, d2 = _whitened_point(0, cx, cy, dx, dy, 0.0, 0.0, x, y, l11, l21, l22)
        dd = d1 * d1 + d2 * d2
        tc = -(z01 * d1 + z02 * d2) / dd
        h2 = (z01 + tc * d1) ** 2 + (z02 + tc * d2) ** 2
        r2 = _BOUNDARY_NEAR_R * _BOUNDARY_NEAR_R
        za1, za2 = z01 + ta * d1, z02 + ta * d2
        zb1, zb2 = z01 + tb * d1, z02 + tb * d2
        if h2 >= r2:
            return math.atan2(za1 * zb2 - za2 * zb1, za1 * zb1 + za2 * zb2) / (2.0 * math.pi)
        half = math.sqrt((r2 - h2) / dd)
        t1 = min(max(tc - half, ta), tb)
        t2 = min(max(tc + half, ta), tb)
        acc = 0.0
        if t1 > ta:
            z11, z12 = z01 + t1 * d1, z02 + t1 * d2
            acc += math.atan2(za1 * z12 - za2 * z11, za1 * z11 + za2 * z12)
        if tb > t2:
            z21, z22 = z01 + t2 * d1, z02 + t2 * d2
            acc += math.atan2(z21 * zb2 - z22 * zb1, z21 * zb1 + z22 * zb2)
        if t2 > t1:
            nf = max(1, int(math.ceil(math.sqrt(dd) * (t2 - t1) / _BOUNDARY_FINE)))
            hf = (t2 - t1) / nf
            cross = 0.0
            for f in range(nf):
                mid = t1 + (f + 0.5) * hf
                s = 0.0
                for i in range(glx.size):
                    t = mid + 0.5 * hf * glx[i]
                    z1, z2 = z01 + t * d1, z02 + t * d2
                    rr = z1 * z1 + z2 * z2
                    g = 0.5 if rr < 1e-12 else -math.expm1(-0.5 * rr) / rr
                    s += glw[i] * g
                cross += 0.5 * hf * s
            acc += cross * (z01 * d2 - z02 * d1)
        return acc / (2.0 * math.pi)
    length = speed * (tb - ta)
    nc = max(1, int(math.ceil(length / _BOUNDARY_COARSE)))
    h = (tb - ta) / nc
    acc = 0.0
    cos_off = np.empty(glx.size)
    sin_off = np.empty(glx.size)
    for k in range(nc):
        a = ta + k * h
        b = a + h
        za1, za2, _, _ = _whitened_point(kind, cx, cy, dx, dy, rad, a, x, y, l11, l21, l22)
        zb1, zb2, _, _ = _whitened_point(kind, cx, cy, dx, dy, rad, b, x, y, l11, l21, l22)
        zm1, zm2, _, _ = _whitened_point(kind, cx, cy, dx, dy, rad, a + 0.5 * h, x, y, l11, l21, l22)
        plen = speed * h
        if math.hypot(zm1, zm2) - 0.5 * plen > _BOUNDARY_NEAR_R:
            # net view-angle change; |change| <= plen / R < pi, so atan2 is unambiguous
            acc += math.atan2(za1 * zb2 - za2 * zb1, za1 * zb1 + za2 * zb2)
            continue
        nf = max(1, int(math.ceil(plen / _BOUNDARY_FINE)))
        hf = h / nf
        for i in range(glx.size):  # node offsets are the same in every fine panel
            cos_off[i] = math.cos(0.5 * hf * glx[i])
            sin_off[i] = math.sin(0.5 * hf * glx[i])
        for f in range(nf):
            mid = a + (f + 0.5) * hf
            cm, sm = math.cos(mid), math.sin(mid)
            s = 0.0
            for i in range(glx.size):
                ct = cm * cos_off[i] - sm * sin_off[i]
                st_ = sm * cos_off[i] + cm * sin_off[i]
                z1 = (cx + rad * ct - x) / l11
                z2 = ((cy + rad * st_ - y) - l21 * z1) / l22
                d1 = -rad * st_ / l11
                d2 = (rad * ct - l21 * d1) / l22
                r2 = z1 * z1 + z2 * z2
                g = 0.5 if r2 < 1e-12 else -math.expm1(-0.5 * r2) / r2
                s += glw[i] * g * (z1 * d2 - z2 * d1)
            acc += 0.5 * hf * s
    return acc / (2.0 * math.pi)


@njit(cache=True)
def _off_corridor(px, py, vx, vy, lim2):
    """True when the point's squared distance to every segment of the polyline is >= lim2."""
    for j in range(vx.size - 1):
        ex = vx[j + 1] - vx[j]
        ey = vy[j + 1] - vy[j]
        rx = px - vx[j]
        ry = py - vy[j]
        t = (rx * ex + ry * ey) / (ex * ex + ey * ey)
        t = min(max(t, 0.0), 1.0)
        qx = rx - t * ex
        qy = ry - t * ey
        if qx * qx + qy * qy < lim2:
            return False
    return True


@njit(cache=True)
def _arc_inside_neighbour(t, v, w, ux, uy, seg):
    """True when the point at angle t on the circle of radius w about vertex v projects strictly
    inside a segment that ends at v: it is then nearer than w to that segment (|p - v| = w), an
    exact test where the distance test's tolerance cannot tell (nearly straight vertices)."""
    ct = math.cos(t)
    st_ = math.sin(t)
    m = seg.size
    if v < m:  # the segment leaving v
        a = w * (ct * ux[v] + st_ * uy[v])
        if 0.0 < a < seg[v]:
            return True
    if v > 0:  # the segment arriving at v
        a = -w * (ct * ux[v - 1] + st_ * uy[v - 1])
        if 0.0 < a < seg[v - 1]:
            return True
    return False


@njit(cache=True)
def _insertion_sort(a, k):
    for i in range(1, k):
        v = a[i]
        j = i - 1
        while j >= 0 and a[j] > v:
            a[j + 1] = a[j]
            j -= 1
        a[j + 1] = v


@njit(cache=True)
def _corridor_boundary(x, y, l11, l21, l22, smin, w, vx, vy, glx, glw, out):
    """P(true point within w[i] of the polyline) by the boundary integral, for every stroke i.

    The corridor's boundary is made of pieces of the segments' offset lines (distance w, both
    sides) and of the circles of radius w about the vertices. Each piece is cut at all its
    intersections with the other pieces' lines and circles; a sub-piece whose midpoint is not
    nearer than w to any segment lies on the boundary (near a vertex between two segments, the
    exact tests of the inner join decide first). Kept sub-pieces are integrated with
    :func:`_piece_integral` and oriented counter-clockwise about the corridor.
    """
    nv = vx.size
    m = nv - 1
    ux = np.empty(m)
    uy = np.empty(m)
    seg = np.empty(m)
    for j in range(m):
        ex = vx[j + 1] - vx[j]
        ey = vy[j + 1] - vy[j]
        seg[j] = math.hypot(ex, ey)
        ux[j] = ex / seg[j]
        uy[j] = ey / seg[j]
    scale = 0.0
    for j in range(nv):
        scale = max(scale, abs(vx[j]), abs(vy[j]))
    cand = np.empty(2 + 2 * nv + 4 * m + 4)
    for i in range(x.size):
        wi = w[i]
        tol = 1e-9 * wi + 1e-13 * scale
        lim2 = (wi - tol) * (wi - tol)
        xi, yi, a11, a21, a22 = x[i], y[i], l11[i], l21[i], l22[i]
        acc = 0.0
        # offset lines: side -1 runs a -> b on the right, side +1 runs b -> a on the left
        for j in range(m):
            nx, ny = -uy[j], ux[j]
            for side in (-1.0, 1.0):
                if side < 0:
                    p0x, p0y = vx[j] - wi * nx, vy[j] - wi * ny
                    dx, dy = vx[j + 1] - vx[j], vy[j + 1] - vy[j]
                else:
                    p0x, p0y = vx[j + 1] + wi * nx, vy[j + 1] + wi * ny
                    dx, dy = vx[j] - vx[j + 1], vy[j] - vy[j + 1]
                dd = dx * dx + dy * dy
                # Past its crossing with a neighbour's offset line on the same side (the inner
                # side of that turn) the line is inside the neighbour's corridor: known exactly,
                # where the midpoint test below cannot tell (depth ~ w * turn^2, below tol at
                # nearly straight vertices). Inside for t < in_lo and for t > in_hi.
                in_lo = -1.0
                in_hi = 2.0
                k = 0
                cand[k] = 0.0
                cand[k + 1] = 1.0
                k = 2
                for v in range(nv):  # circles (not its own ends: tangent there, at t = 0 and 1)
                    if v == j or v == j + 1:
                        continue
                    qx, qy = p0x - vx[v], p0y - vy[v]
                    bb = (dx * qx + dy * qy) / dd
                    cc = (qx * qx + qy * qy - wi * wi) / dd
                    disc = bb * bb - cc
                    if disc >= 0.0:
                        sq = math.sqrt(disc)
                        for r in (-bb - sq, -bb + sq):
                            if 0.0 < r < 1.0:
                                cand[k] = r
                                k += 1
                for j2 in range(m):  # other offset lines
                    cr = dx * uy[j2] - dy * ux[j2]
                    if abs(cr) <= 1e-12 * math.sqrt(dd):
                        continue
                    for side2 in (-1.0, 1.0):
                        if j2 == j and side2 == side:
                            continue
                        qx = vx[j2] + side2 * wi * (-uy[j2]) - p0x
                        qy = vy[j2] + side2 * wi * ux[j2] - p0y
                        r = (qx * uy[j2] - qy * ux[j2]) / cr
                        if 0.0 < r < 1.0:
                            # a breakpoint only where the other offset line is a piece too
                            along = (p0x + r * dx - vx[j2]) * ux[j2] + (p0y + r * dy - vy[j2]) * uy[j2]
                            if -tol <= along <= seg[j2] + tol:
                                cand[k] = r
                                k += 1
                                # (for turns below 90 degrees whose neighbour is longer
                                # than w sin(turn): the stretch then lies in its slab)
                                if side2 == side and (j2 == j + 1 or j2 == j - 1) \
                                        and ux[j] * ux[j2] + uy[j] * uy[j2] > 0.0 \
                                        and wi * abs(ux[j] * uy[j2] - uy[j] * ux[j2]) < seg[j2]:
                                    # which end of this piece the neighbour's vertex is at
                                    if (j2 == j + 1) == (side < 0):
                                        in_hi = min(in_hi, r)
                                    else:
                                        in_lo = max(in_lo, r)
                _insertion_sort(cand, k)
                speed = math.sqrt(dd) / smin[i]
                run = -1.0
                run_end = 0.0
                for q in range(k - 1):
                    ta, tb = cand[q], cand[q + 1]
                    if tb - ta <= 1e-15:
                        continue
                    tm = 0.5 * (ta + tb)
                    if tm > in_lo and tm < in_hi and _off_corridor(p0x + tm * dx, p0y + tm * dy, vx, vy, lim2):
                        if run < 0.0:
                            run = ta
                        run_end = tb
                    elif run >= 0.0:
                        acc += _piece_integral(0, p0x, p0y, dx, dy, 0.0, run, run_end, xi, yi, a11, a21, a22, speed, glx, glw)
                        run = -1.0
                if run >= 0.0:
                    acc += _piece_integral(0, p0x, p0y, dx, dy, 0.0, run, run_end, xi, yi, a11, a21, a22, speed, glx, glw)
        # circles about the vertices, counter-clockwise
        two_pi = 2.0 * math.pi
        for v in range(nv):
            k = 0
            cand[0] = 0.0
            cand[1] = two_pi
            k = 2
            for v2 in range(nv):
                if v2 == v:
                    continue
                ex, ey = vx[v2] - vx[v], vy[v2] - vy[v]
                dist = math.hypot(ex, ey)
                if dist < 2.0 * wi:
                    phi = math.atan2(ey, ex)
                    half = math.acos(dist / (2.0 * wi))
                    for r in (phi - half, phi + half):
                        cand[k] = r % two_pi
                        k += 1
            for j2 in range(m):
                nx, ny = -uy[j2], ux[j2]
                phi = math.atan2(ny, nx)
                # offset of the vertex from the segment's line: exactly 0 at its own ends, where
                # the circle is tangent (acos near +-1 would turn rounding into 1e-8 rad)
                if v == j2 or v == j2 + 1:
                    off = 0.0
                else:
                    off = (vx[j2] - vx[v]) * nx + (vy[j2] - vy[v]) * ny
                for side2 in (-1.0, 1.0):
                    c = (off + side2 * wi) / wi
                    if abs(c) <= 1.0 + 1e-9:
                        half = math.acos(min(max(c, -1.0), 1.0))
                        for r in (phi - half, phi + half):
                            along = (vx[v] + wi * math.cos(r) - vx[j2]) * ux[j2] + (vy[v] + wi * math.sin(r) - vy[j2]) * uy[j2]
                            if -tol <= along <= seg[j2] + tol:
                                cand[k] = r % two_pi
                                k += 1
            _insertion_sort(cand, k)
            speed = wi / smin[i]
            run = -1.0
            run_end = 0.0
            for q in range(k - 1):
                ta, tb = cand[q], cand[q + 1]
                if tb - ta <= 1e-15:
                    continue
                tm = 0.5 * (ta + tb)
                if not _arc_inside_neighbour(tm, v, wi, ux, uy, seg) and \
                        _off_corridor(vx[v] + wi * math.cos(tm), vy[v] + wi * math.sin(tm), vx, vy, lim2):
                    if run < 0.0:
                        run = ta
                    run_end = tb
                elif run >= 0.0:
                    acc += _piece_integral(1, vx[v], vy[v], 0.0, 0.0, wi, run, run_end, xi, yi, a11, a21, a22, speed, glx, glw)
                    run = -1.0
            if run >= 0.0:
                acc += _piece_integral(1, vx[v], vy[v], 0.0, 0.0, wi, run, run_end, xi, yi, a11, a21, a22, speed, glx, glw)
        out[i] = min(max(acc, 0.0), 1.0)


#: Vertices whose removal moves the polyline by less than this are merged before the boundary
#: integral, km (1 micrometre): at most ``0.4 * tol / s`` of probability for an error sd s (1e-8
#: at s = 40 m), far below any corridor width or location error, and above rounding noise.
_CORRIDOR_MERGE_KM = 1e-9


def _clean_polyline(lx, ly):
    """Merge vertices that (nearly) lie on the line through their neighbours; None when the
    corridor pieces could coincide (the line meets a vertex twice, or two segments overlap along
    a common line).

    Repeated vertices and vertices within :data:`_CORRIDOR_MERGE_KM` of the simplified line go
    (Douglas-Peucker, shapely ``simplify``; every point of either line is within that distance
    of the other).
    """
    import shapely

    keep = np.ones(lx.size, bool)
    keep[1:] = (np.diff(lx) != 0.0) | (np.diff(ly) != 0.0)
    vx, vy = lx[keep], ly[keep]
    if vx.size > 2:
        xy = shapely.get_coordinates(shapely.simplify(shapely.LineString(np.column_stack([vx, vy])),
                                                      _CORRIDOR_MERGE_KM, preserve_topology=False))
        if xy.shape[0] >= 2:
            vx, vy = xy[:, 0].copy(), xy[:, 1].copy()
    if vx.size < 2:
        return None
    pts = np.column_stack([vx, vy])
    if np.unique(pts, axis=0).shape[0] != vx.size:
        return None
    ex, ey = np.diff(vx), np.diff(vy)
    ln = np.hypot(ex, ey)
    ux, uy = ex / ln, ey / ln
    m = ux.size
    for j in range(m):
        for k in range(j + 1, m):
            if abs(ux[j] * uy[k] - uy[j] * ux[k]) > 1e-12:
                continue
            off = (vx[k] - vx[j]) * -uy[j] + (vy[k] - vy[j]) * ux[j]
            if abs(off) > 1e-12 * (1.0 + ln.max()):
                continue
            s0 = (vx[k] - vx[j]) * ux[j] + (vy[k] - vy[j]) * uy[j]
            s1 = (vx[k + 1] - vx[j]) * ux[j] + (vy[k + 1] - vy[j]) * uy[j]
            if max(s0, s1) > 1e-12 * ln[j] and min(s0, s1) < ln[j] * (1 - 1e-12):
                return None  # collinear and overlapping
    return vx, vy


def _corridor_paths(x, y, sxx, syy, sxy, s1, w, vx, vy):
    """Which path each stroke takes: 0 exit (far), 1 exit (deep), 2 one-dimensional, 3 boundary.

    Returns the path code and, for codes 0-2, the probability (NaN for code 3).
    """
    ax, ay = vx[:-1], vy[:-1]
    ex, ey = np.diff(vx), np.diff(vy)
    seg_len = np.hypot(ex, ey)
    ux, uy = ex / seg_len, ey / seg_len
    rx = x[:, None] - ax[None, :]
    ry = y[:, None] - ay[None, :]
    along = rx * ux + ry * uy  # (n, m)
    normal = -rx * uy + ry * ux
    cx = rx - np.clip(along, 0.0, seg_len) * ux
    cy = ry - np.clip(along, 0.0, seg_len) * uy
    dist = np.hypot(cx, cy)
    with np.errstate(invalid="ignore", divide="ignore"):
        s_u = np.sqrt((cx * cx * sxx[:, None] + 2.0 * cx * cy * sxy[:, None] + cy * cy * syy[:, None]) / (dist * dist))
        # P(true point in segment j's stadium) <= P(beyond the half-plane at distance d_j - w)
        bound = np.where(dist > w[:, None], ndtr(-(dist - w[:, None]) / s_u), 1.0)
    total = bound.sum(axis=1)
    k = np.argmin(dist, axis=1)
    r = np.arange(x.size)
    d_min = dist[r, k]
    code = np.full(x.size, 3, dtype=np.int8)
    p = np.full(x.size, np.nan)
    far = total < _CORRIDOR_SHORTCUT_TOL
    deep = ~far & (w - d_min > _CORRIDOR_DEEP_SD * s1)
    code[far], p[far] = 0, 0.0
    code[deep], p[deep] = 1, 1.0
    rest = ~far & ~deep
    tk, tky = ux[k], uy[k]
    s_a = np.sqrt(tk * tk * sxx + 2.0 * tk * tky * sxy + tky * tky * syy)
    s_n = np.sqrt(tky * tky * sxx - 2.0 * tk * tky * sxy + tk * tk * syy)
    a_k = along[r, k]
    # outside the segment's slab the strip and the corridor may differ; elsewhere only where
    # another segment's stadium reaches
    err = ndtr(-a_k / s_a) + ndtr(-(seg_len[k] - a_k) / s_a) + (total - bound[r, k])
    one = rest & (err < _CORRIDOR_SHORTCUT_TOL)
    o = normal[r, k][one]
    p[one] = ndtr((w[one] - o) / s_n[one]) - ndtr((-w[one] - o) / s_n[one])
    code[one] = 2
    return code, p


def p_within_corridor(x_km, y_km, sxx, syy, sxy, line_x_km, line_y_km, half_width_km, *, return_paths=False):
    """Probability that the true stroke point lies within `half_width_km` of a polyline.

    Parameters
    ----------
    x_km, y_km : array_like, length n
        Reported stroke positions in a local plane, km.
    sxx, syy, sxy : array_like, length n
        Location-error covariance, km^2.
    line_x_km, line_y_km : array_like
        Polyline vertices in the same plane, km (2 or more).
    half_width_km : float or array_like of length n
        Corridor half-width, km (> 0), one per stroke if an array.
    return_paths : bool
        Also return, per stroke, the path taken: 0 far (P = 0), 1 deep inside (P = 1),
        2 one-dimensional offset formula, 3 boundary integral, -1 NaN input.

    Returns
    -------
    ndarray, length n
        Probability in [0, 1]; NaN where an input is NaN. Absolute error < 1e-7 (exact round
        ends and joins, no polygon).

    Notes
    -----
    The corridor is the set of points within the half-width of any segment. Per stroke:

    * exits: 0 when the sum over segments of ``Phi(-(d_j - w) / s_j)`` (``d_j`` the distance to
      segment j, ``s_j`` the error's sd towards it) is below 1e-10 (it bounds P); 1 when the
      disc of 6.7 major-axis sd about the point lies inside;
    * one segment: when the error of replacing the corridor by segment k's infinite strip,
      bounded by ``Phi(-s/s_a) + Phi(-(L - s)/s_a)`` (s along the segment, sd ``s_a``) plus the
      other segments' terms above, is below 1e-10, P is the 1-D normal probability
      ``Phi((w - o)/s_n) - Phi((-w - o)/s_n)`` with o the signed offset, ``s_n^2 = n' S n``;
    * otherwise the boundary integral: in the whitened frame (Cholesky factor of S) the
      probability of a region is ``(1/2 pi) * contour integral of g(|z|^2) (z x dz)`` over its
      boundary, ``g(r^2) = (1 - exp(-r^2/2)) / r^2`` (the radial integral of the standard
      normal along each ray from the mean; for a straight edge this is the triangle
      probability of the polygon method). The corridor's boundary is pieced exactly from
      offset lines and vertex circles and integrated by Gauss-Legendre on short panels.

    Vertices closer than 1 micrometre (:data:`_CORRIDOR_MERGE_KM`) to the line through their
    neighbours are merged first (Douglas-Peucker): the line moves by less than that, which
    changes P by at most ``0.4 * 1e-9 km / s`` (s the error sd across the line; 1e-8 at 40 m).
    At a nearly straight vertex the corridor's inner join lies inside by only ``w * turn^2 / 8``;
    the pieces there are classified exactly (past the crossing of the neighbours' offset lines,
    and circle points projecting into a neighbouring segment, are inside) rather than by the
    distance test, whose tolerance cannot tell. Lines whose corridor pieces could coincide (a
    repeated vertex after merging, collinear overlapping segments) use the buffer-polygon
    method of :func:`_p_within_corridor_polygon`.

    References
    ----------
    Triangle probabilities of the bivariate normal by Owen's T function [Owen1956]_, of which the
    boundary integral is the curved-edge form; Gauss-Legendre quadrature.
    """
    shape, (x, y, sxx, syy, sxy, w) = _broadcast(x_km, y_km, sxx, syy, sxy, half_width_km)
    lx = np.asarray(line_x_km, dtype=float).ravel()
    ly = np.asarray(line_y_km, dtype=float).ravel()
    if lx.size < 2 or lx.shape != ly.shape or not (np.all(np.isfinite(lx)) and np.all(np.isfinite(ly))):
        raise InputError("a corridor line needs at least 2 finite vertices")
    if np.any(w <= 0.0):
        raise InputError("the corridor half-width must be positive")
    if not (np.any(np.diff(lx) != 0.0) or np.any(np.diff(ly) != 0.0)):
        raise InputError("a corridor line has zero length")
    out = np.full(x.shape, np.nan)
    paths = np.full(x.shape, -1, dtype=np.int8)
    s1, s2, _ = principal_axes(sxx, syy, sxy)
    good = np.isfinite(x) & np.isfinite(y) & np.isfinite(s1) & np.isfinite(w)
    if np.any(good & (s2 <= 0.0)):
        raise InputError("a location-error covariance is degenerate (zero minor axis)")
    clean = _clean_polyline(lx, ly)
    gi = np.flatnonzero(good)
    if gi.size and clean is None:
        out[gi] = _p_within_corridor_polygon(x[gi], y[gi], sxx[gi], syy[gi], sxy[gi], lx, ly, w[gi])
        paths[gi] = 3
    elif gi.size:
        vx, vy = clean
        code, p = _corridor_paths(x[gi], y[gi], sxx[gi], syy[gi], sxy[gi], s1[gi], w[gi], vx, vy)
        j = gi[code == 3]
        if j.size:
            l11 = np.sqrt(sxx[j])
            l21 = sxy[j] / l11
            l22 = np.sqrt(np.maximum(syy[j] - l21 * l21, 0.0))
            pj = np.empty(j.size)
            glx, glw = _gauss_legendre(_BOUNDARY_NODES)
            _corridor_boundary(x[j], y[j], l11, l21, l22, s2[j], w[j], vx, vy, glx, glw, pj)
            p[code == 3] = pj
        out[gi] = p
        paths[gi] = code
    out = out.reshape(shape)
    return (out, paths.reshape(shape)) if return_paths else out


def stroke_covariance(strokes, config=None, *, default_uncertainty_km=None, confidence=None, on_missing="raise"):
    """Covariance of every stroke's location error, filling missing ellipses from a default.

    Parameters
    ----------
    strokes : DataFrame
        Stroke table with ``semi_major_km``, ``semi_minor_km``, ``major_bearing_deg`` (NaN where
        the network gave no ellipse).
    config : EventConfig, optional
        Supplies ``ellipse_confidence`` and ``default_uncertainty_km``.
    default_uncertainty_km, confidence : float, optional
        Override the settings.
    on_missing : {"raise", "nan"}
        Without a default, strokes with no ellipse raise (site checks need every error), or get
        NaN covariance (``"nan"``: callers that judge such strokes on position alone).

    Returns
    -------
    sxx, syy, sxy : ndarray
        km^2, one per stroke.
    filled : ndarray of bool
        Strokes whose ellipse came from ``default_uncertainty_km`` (a circle).

    Raises
    ------
    InputError
        When some strokes have no ellipse and no default is set, or a semi-axis is zero or
        negative (the message names the stroke's ``source_row``).
    """
    if confidence is None:
        confidence = config.get("ellipse_confidence") if config is not None else 0.5
    if default_uncertainty_km is None and config is not None:
        default_uncertainty_km = config.get("default_uncertainty_km")
    n = len(strokes)
    cols = ("semi_major_km", "semi_minor_km", "major_bearing_deg")
    vals = [strokes[c].to_numpy(dtype=float) if c in strokes else np.full(n, np.nan) for c in cols]
    a, b, br = vals
    # A circle needs no bearing; an ellipse without one is as good as missing.
    br = np.where((a == b) & ~np.isfinite(br), 0.0, br)
    missing = ~(np.isfinite(a) & np.isfinite(b) & np.isfinite(br))
    if np.any(missing):
        if default_uncertainty_km is None and on_missing == "nan":
            sxx, syy, sxy = ellipse_covariance(np.where(missing, 1.0, a), np.where(missing, 1.0, b),
                                               np.where(missing, 0.0, br), confidence)
            nan = np.where(missing, np.nan, 1.0)
            return sxx * nan, syy * nan, sxy * nan, np.zeros(n, dtype=bool)
        if default_uncertainty_km is None:
            raise InputError(
                f"{int(missing.sum())} of {n} strokes have no error ellipse; set "
                "default_uncertainty_km in event.toml or pass --default-uncertainty-km KM (circular semi-axis "
                "at ellipse_confidence)"
            )
        if not default_uncertainty_km > 0:
            raise InputError(f"default_uncertainty_km must be positive, got {default_uncertainty_km!r}")
        a = np.where(missing, default_uncertainty_km, a)
        b = np.where(missing, default_uncertainty_km, b)
        br = np.where(missing, 0.0, br)
    flat = np.flatnonzero((a <= 0.0) | (b <= 0.0))
    if flat.size:  # the reader gives NaN for these; a table built another way is named by its row
        k = flat[0]
        row = f"source_row {strokes['source_row'].iloc[k]}" if "source_row" in strokes else f"row {k}"
        raise InputError(
            f"stroke at {row}: error-ellipse semi-axes must be positive, got {a[k]:g} and {b[k]:g} km "
            f"({flat.size} such stroke{'s' if flat.size > 1 else ''}); set them to NaN (no ellipse) to use default_uncertainty_km"
        )
    sxx, syy, sxy = ellipse_covariance(a, b, br, confidence)
    return sxx, syy, sxy, missing


def ellipse_outline_xy(semi_major_km, semi_minor_km, major_bearing_deg, n=36):
    """Outline of an error ellipse about its centre, km (x east, y north), shape (n,) each.

    For drawing and GeoJSON export; the ellipse is drawn at its reported confidence.
    """
    t = np.linspace(0.0, 2.0 * math.pi, n, endpoint=False)
    br = math.radians(float(major_bearing_deg))
    u = (math.sin(br), math.cos(br))  # major axis, x east / y north
    v = (math.cos(br), -math.sin(br))
    ca, cb = semi_major_km * np.cos(t), semi_minor_km * np.sin(t)
    return ca * u[0] + cb * v[0], ca * u[1] + cb * v[1]
