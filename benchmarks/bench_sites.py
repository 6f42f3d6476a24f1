"""Site check speed, side by side in one run: k-d tree index vs brute-force haversine scan.

1. One site, 1 km radius, against 10,000,000 strokes (a generated storm over 200 x 200 km and
   6 hours): the full check with a prebuilt index vs a brute-force vectorised haversine pre-filter
   over every stroke followed by the same evaluation. The index build is timed separately.
2. 10,000 sites (radius 0.5-2 km, 2-hour windows) against 1,000,000 strokes with
   ``check_sites`` (index build included).

Run: ``.venv/bin/python benchmarks/bench_sites.py [--n-strokes 10000000] [--repeat 5]``.
Prints medians and ratios. Not a unit test.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from debrief import sites as S  # noqa: E402
from debrief.geodesy import haversine_km  # noqa: E402


def storm(n, seed=1, centre=(45.5, -93.2), size_km=200.0, hours=6.0):
    """A plain-numpy grouped stroke table: cells drifting SW -> NE, elliptical errors."""
    rng = np.random.default_rng(seed)
    n_cells = 40
    cell = rng.integers(0, n_cells, n)
    t = np.sort(rng.uniform(0, hours * 3600.0, n))
    start_xy = rng.uniform(-size_km / 2, size_km / 2, (n_cells, 2))
    drift = 30.0 / 3600.0 * t  # 30 km/h towards the NE
    x = np.clip(start_xy[cell, 0] + drift * 0.707 + rng.normal(0, 6, n), -size_km / 2, size_km / 2)
    y = np.clip(start_xy[cell, 1] + drift * 0.707 + rng.normal(0, 6, n), -size_km / 2, size_km / 2)
    x = np.where(np.abs(x) >= size_km / 2, rng.uniform(-size_km / 2, size_km / 2, n), x)
    lat = centre[0] + y / 111.2
    lon = centre[1] + x / (111.2 * np.cos(np.radians(centre[0])))
    # semi-major axes: log-normal, median 0.25 km (regional networks locate to ~0.1-0.3 km median;
    # from memory), clipped to 0.05-5 km
    a = np.clip(0.25 * np.exp(rng.normal(0, 0.5, n)), 0.05, 5.0)
    df = pd.DataFrame({
        "time": pd.to_datetime(pd.Timestamp("2026-07-14T17:00:00Z").value + (t * 1e9).astype(np.int64), utc=True),
        "latitude": lat, "longitude": lon,
        "peak_current_ka": rng.normal(-15, 20, n),
        "type": pd.Categorical(np.where(rng.random(n) < 0.7, "CG", "IC"), categories=["CG", "IC"]),
        "semi_major_km": a, "semi_minor_km": a * rng.uniform(0.2, 1.0, n), "major_bearing_deg": rng.uniform(0, 180, n),
        "source_row": np.arange(2, n + 2),
        "flash_id": np.arange(n) // 3 + 1, "stroke_order": np.arange(n) % 3 + 1,
        "ground_contact": np.ones(n, dtype=np.int64), "likely_ic": np.zeros(n, dtype=bool),
    })
    return df


class _BruteIndex(S.StrokeIndex):
    """The same evaluation with the k-d tree replaced by a haversine scan over every stroke."""

    def __init__(self, base):  # share the arrays, no tree
        self.__dict__.update(base.__dict__)

    def pairs(self, lat_deg, lon_deg, base_km):
        lat = float(np.atleast_1d(lat_deg)[0])
        lon = float(np.atleast_1d(lon_deg)[0])
        d = haversine_km(lat, lon, self.lat, self.lon)
        j = np.flatnonzero(d <= (float(np.atleast_1d(base_km)[0]) + self.max_reach_km) * 1.01 + 0.05)
        return np.zeros(j.size, dtype=np.int64), j


def median_time(fn, repeat):
    ts = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        ts.append(time.perf_counter() - t)
    return statistics.median(ts), out


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--n-strokes", type=int, default=10_000_000)
    ap.add_argument("--n-bulk-strokes", type=int, default=1_000_000)
    ap.add_argument("--n-sites", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args(argv)

    t = time.perf_counter()
    st = storm(a.n_strokes)
    print(f"generated {len(st):,} strokes in {time.perf_counter() - t:.1f} s")
    build, idx = median_time(lambda: S.StrokeIndex(st), 1)
    print(f"index build (k-d tree on unit vectors): {build:.2f} s (once)")
    cbuild, cidx = median_time(lambda: S.build_contact_index(st), 1)
    print(f"contact index build (combined fixes + k-d tree): {cbuild:.2f} s (once), {len(cidx.strokes):,} contacts")
    site = (45.5, -93.2, 1.0)
    t_idx, r_idx = median_time(lambda: S.check_site(None, *site, index=idx, contact_index=cidx), a.repeat)
    brute, cbrute = _BruteIndex(idx), _BruteIndex(cidx)
    t_bf, r_bf = median_time(lambda: S.check_site(None, *site, index=brute, contact_index=cbrute), a.repeat)
    assert r_idx.summary["n_candidates"] == r_bf.summary["n_candidates"]
    assert abs(r_idx.summary["p_any_within"] - r_bf.summary["p_any_within"]) < 1e-12
    print(f"\none site, 1 km, {len(st):,} strokes ({r_idx.summary['n_candidates']} candidates), median of {a.repeat}:")
    print(f"  {'brute-force haversine scan':<34} {t_bf * 1e3:9.1f} ms   1.00")
    print(f"  {'k-d tree index':<34} {t_idx * 1e3:9.1f} ms   {t_idx / t_bf:.4f}  (goal < 0.05)")
    print(f"  {'index incl. its builds':<34} {(t_idx + build + cbuild) * 1e3:9.1f} ms   {(t_idx + build + cbuild) / t_bf:.2f}")
    del idx, brute, cidx, cbrute, st

    st = storm(a.n_bulk_strokes, seed=2)
    rng = np.random.default_rng(9)
    sites = pd.DataFrame({
        "name": [f"site {i}" for i in range(a.n_sites)],
        "latitude": 45.5 + rng.uniform(-0.9, 0.9, a.n_sites),
        "longitude": -93.2 + rng.uniform(-1.28, 1.28, a.n_sites),
        "radius_km": rng.uniform(0.5, 2.0, a.n_sites),
    })
    # claim windows of 2 hours somewhere in the 6-hour storm
    w0 = pd.Timestamp("2026-07-14T17:00:00Z") + pd.to_timedelta(rng.uniform(0, 4 * 3600, a.n_sites), unit="s")
    sites["start"] = w0
    sites["end"] = w0 + pd.Timedelta(hours=2)
    t_bulk, out = median_time(lambda: S.check_sites(st, sites, sentences=False), 1)
    t_sent, _ = median_time(lambda: S.check_sites(st, sites, sentences=True), 1)
    print(f"\n{a.n_sites:,} sites against {len(st):,} strokes (index build included), one run each:")
    print(f"  {'check_sites, figures only':<34} {t_bulk:9.2f} s    (goal < 10 s); {int(out['n_candidates'].sum()):,} candidate pairs")
    print(f"  {'check_sites, with sentences':<34} {t_sent:9.2f} s    ratio {t_sent / t_bulk:.2f}")


if __name__ == "__main__":
    main()
