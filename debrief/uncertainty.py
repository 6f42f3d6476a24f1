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
* Corridor (within a distance of a polyline): the line's buffer polygon (shapely), then the
  polygon method; exact along straight parts, the round ends and joins are inscribed polygons
  (up to 128 segments per quarter circle, fewer where the error is wide).

References
----------
.. [1] Johnson, N. L., Kotz, S. and Balakrishnan, N. (1994). Continuous Univariate
       Distributions, Vol. 1, 2nd ed., Wiley: chi-square distribution (2-D normal contours).
.. [2] Owen, D. B. (1956). Tables for computing bivariate normal probabilities. Annals of
       Mathematical Statistics 27(4), 1075-1090 (the T function; triangle probabilities).
.. [3] Cummins, K. L. and Murphy, M. J. (2009). An overview of lightning location systems:
       history, techniques, and data uses. IEEE Trans. EMC 51(3), 499-518 (error ellipses).
"""

from __future__ import annotations

import functools
import math

import numpy as np
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
    Chi-square with 2 degrees of freedom: ``P(r^2 <= k^2) = 1 - exp(-k^2/2)`` [1]_.
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
    ``S = sa^2 u u' + sb^2 v v'`` with u = (sin b, cos b) the major-axis unit vector [1]_.
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
    with 2 degrees of freedom [1]_. Elliptical error: principal-axis 1-D integral with
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
    from the mean to the edge's line and ``a = s / h`` the positions along it [2]_. Owen's T is
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
    Triangle decomposition of bivariate normal probabilities with Owen's T function [2]_
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


def p_within_corridor(x_km, y_km, sxx, syy, sxy, line_x_km, line_y_km, half_width_km):
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
    Polygon probability by Owen's T function [2]_ applied to the buffer polygon (shapely).
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


def stroke_covariance(strokes, config=None, *, default_uncertainty_km=None, confidence=None):
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

    Returns
    -------
    sxx, syy, sxy : ndarray
        km^2, one per stroke.
    filled : ndarray of bool
        Strokes whose ellipse came from ``default_uncertainty_km`` (a circle).

    Raises
    ------
    InputError
        When some strokes have no ellipse and no default is set.
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
        if default_uncertainty_km is None:
            raise InputError(
                f"{int(missing.sum())} of {n} strokes have no error ellipse; set "
                "default_uncertainty_km in event.toml (circular semi-axis at ellipse_confidence, km)"
            )
        if not default_uncertainty_km > 0:
            raise InputError(f"default_uncertainty_km must be positive, got {default_uncertainty_km!r}")
        a = np.where(missing, default_uncertainty_km, a)
        b = np.where(missing, default_uncertainty_km, b)
        br = np.where(missing, 0.0, br)
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
