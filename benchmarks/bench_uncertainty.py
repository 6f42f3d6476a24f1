"""Location-uncertainty probabilities: error study of the circle quadrature and speed, one run.

1. Error study: Gauss-Legendre order N of the circle integral against a 2000-node reference of
   the same integral, over a seeded sample of the stated grid (radius/sigma 0.01-100, axis
   ratio 1-100, offsets up to 50 major semi-axes; half the sample within a few sigma of the
   circle's edge), plus a scipy dblquad spot check of the reference. The chosen order (32) must
   keep the maximum absolute error below 1e-4.
2. Corridor boundary integral: Gauss-Legendre order per panel against 24 nodes over strokes
   that take the boundary path (the chosen order must keep the error below 1e-8).
3. Speed, side by side: 100,000 strokes with p_within_circle (elliptical errors), the circular
   ncx2 path, a 64-gon with p_within_polygon, and a corridor along a 3-segment line.
4. Corridor, old vs new: the buffer-polygon method (_p_within_corridor_polygon) against
   p_within_corridor on 100,000 strokes near the 3-segment line, one shared half-width and
   per-stroke half-widths; medians, ratio, the largest difference and the split of strokes
   over the paths (far exit, deep exit, 1-D offset formula, boundary integral).

Run: ``.venv/bin/python benchmarks/bench_uncertainty.py [--n-error 100000] [--repeat 5] [--repeat-old 3]``.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from debrief import uncertainty as U  # noqa: E402


def grid(n, seed=1):
    rng = np.random.default_rng(seed)
    s1 = np.ones(n)
    ratio = 10 ** rng.uniform(0, 2, n)
    s2 = s1 / ratio
    r = 10 ** rng.uniform(-2, 2, n) * s1
    k = U.sigma_scale(0.5)
    ang = rng.uniform(0, 2 * np.pi, n)
    off = rng.uniform(0, 1, n) ** 2 * 50 * k * s1
    near = rng.random(n) < 0.5
    off = np.where(near, np.abs(r + rng.normal(0, 2, n) * s1), off)
    return off * np.cos(ang), off * np.sin(ang), s1, s2, r


def med(fn, repeat):
    ts = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t)
    return statistics.median(ts)


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--n-error", type=int, default=100_000)
    ap.add_argument("--n-speed", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--repeat-old", type=int, default=3)
    a = ap.parse_args(argv)

    m1, m2, s1, s2, r = grid(a.n_error)
    ref = U._circle_quadrature(m1, m2, s1, s2, r, nodes=2000)
    ref2 = U._circle_quadrature(m1, m2, s1, s2, r, nodes=1500)
    print(f"error study over {a.n_error:,} grid points; reference self-difference (2000 vs 1500 nodes) {np.abs(ref - ref2).max():.1e}")
    for n in (16, 24, 32, 40, 48, 64):
        e = np.abs(U._circle_quadrature(m1, m2, s1, s2, r, nodes=n) - ref)
        mark = "  <- used" if n == U._QUAD_NODES else ""
        print(f"  N = {n:3d}: max abs error {e.max():.2e}, 99.9th percentile {np.quantile(e, 0.999):.1e}{mark}")
    # the reference itself against scipy dblquad on a few points (principal frame, multivariate_normal pdf)
    from scipy import integrate, stats

    worst = 0.0
    for i in np.random.default_rng(5).choice(a.n_error, 6, replace=False):
        f = stats.multivariate_normal([m1[i], m2[i]], np.diag([s1[i] ** 2, s2[i] ** 2])).pdf
        lo, hi = max(-r[i], m2[i] - 10 * s2[i]), min(r[i], m2[i] + 10 * s2[i])
        if hi <= lo:
            continue
        w = lambda v: math.sqrt(max(r[i] ** 2 - v * v, 0.0))  # noqa: E731
        g_lo = lambda v: max(-w(v), m1[i] - 10 * s1[i])  # noqa: E731
        g_hi = lambda v: max(min(w(v), m1[i] + 10 * s1[i]), g_lo(v))  # noqa: E731
        val, _ = integrate.nquad(lambda u, v: f([u, v]), [lambda v: (g_lo(v), g_hi(v)), (lo, hi)],
                                 opts=[{"epsabs": 1e-10, "limit": 200}, {"epsabs": 1e-9, "limit": 200}])
        worst = max(worst, abs(val - ref[i]))
    print(f"  reference vs scipy dblquad (6 points): max abs difference {worst:.1e}")

    n = a.n_speed
    rng = np.random.default_rng(2)
    dx, dy = rng.uniform(-3, 3, n), rng.uniform(-3, 3, n)
    am = rng.uniform(0.1, 1.0, n)
    sxx, syy, sxy = U.ellipse_covariance(am, am * rng.uniform(0.1, 0.9, n), rng.uniform(0, 180, n), 0.5)
    sc = (am / U.sigma_scale(0.5)) ** 2
    t_ell = med(lambda: U.p_within_circle(dx, dy, sxx, syy, sxy, 1.0), a.repeat)
    t_circ = med(lambda: U.p_within_circle(dx, dy, sc, sc, 0.0, 1.0), a.repeat)
    th = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    t_poly = med(lambda: U.p_within_polygon(dx, dy, sxx, syy, sxy, np.cos(th), np.sin(th)), a.repeat)
    lx, ly = np.array([-3.0, -1.0, 1.0, 3.0]), np.array([-2.0, 0.5, -0.5, 2.0])
    t_cor = med(lambda: U.p_within_corridor(dx, dy, sxx, syy, sxy, lx, ly, 0.3), a.repeat)
    print(f"\n{n:,} strokes, median of {a.repeat}:")
    print(f"  {'p_within_circle, elliptical':<36} {t_ell * 1e3:8.1f} ms  1.00  (goal < 1000 ms)")
    print(f"  {'p_within_circle, circular (ncx2)':<36} {t_circ * 1e3:8.1f} ms  {t_circ / t_ell:.2f}")
    print(f"  {'p_within_polygon, 64-gon':<36} {t_poly * 1e3:8.1f} ms  {t_poly / t_ell:.2f}")
    print(f"  {'p_within_corridor, 3 segments':<36} {t_cor * 1e3:8.1f} ms  {t_cor / t_ell:.2f}")

    # boundary integral: quadrature order on its panels
    w_each = rng.uniform(0.02, 0.5, n)
    code = U.p_within_corridor(dx, dy, sxx, syy, sxy, lx, ly, w_each, return_paths=True)[1]
    j = np.flatnonzero(code == 3)[:20_000]
    s1_, s2_, _ = U.principal_axes(sxx[j], syy[j], sxy[j])
    l11 = np.sqrt(sxx[j])
    l21 = sxy[j] / l11
    l22 = np.sqrt(np.maximum(syy[j] - l21 * l21, 0.0))

    def boundary(nodes):
        out = np.empty(j.size)
        U._corridor_boundary(dx[j], dy[j], l11, l21, l22, s2_, w_each[j], lx, ly, *U._gauss_legendre(nodes), out)
        return out

    bref = boundary(24)
    print(f"\ncorridor boundary integral, {j.size:,} boundary-path strokes, Gauss-Legendre nodes per panel vs 24:")
    for nodes in (6, 8, 10, 12, 16):
        mark = "  <- used" if nodes == U._BOUNDARY_NODES else ""
        print(f"  N = {nodes:3d}: max abs error {np.abs(boundary(nodes) - bref).max():.1e}{mark}")

    # old (buffer polygon) vs new, shared and per-stroke half-widths
    print(f"\ncorridor, {n:,} strokes near a 3-segment line; old median of {a.repeat_old}, new median of {a.repeat}:")
    print(f"  {'half-width':<22}{'old s':>9}{'new s':>9}{'ratio':>9}{'max |new-old|':>15}   paths far/deep/1-D/boundary")
    for label, hw in (("0.3 km, shared", 0.3), ("0.02-0.5 km, each", w_each)):
        t_old = med(lambda: U._p_within_corridor_polygon(dx, dy, sxx, syy, sxy, lx, ly, hw), a.repeat_old)
        t_new = med(lambda: U.p_within_corridor(dx, dy, sxx, syy, sxy, lx, ly, hw), a.repeat)
        old = U._p_within_corridor_polygon(dx, dy, sxx, syy, sxy, lx, ly, hw)
        new, paths = U.p_within_corridor(dx, dy, sxx, syy, sxy, lx, ly, hw, return_paths=True)
        split = "/".join(f"{np.mean(paths == c) * 100:.1f}" for c in range(4))
        print(f"  {label:<22}{t_old:9.2f}{t_new:9.3f}{t_old / t_new:8.0f}x{np.abs(new - old).max():15.1e}   {split} %")


if __name__ == "__main__":
    main()
