"""Outage matching at scale: 1,000 outages on 500 km of lines against 1,000,000 strokes.

Side by side in one run:

* ``match_outages`` end to end (time sort + searchsorted windows, degree-box prefilter, per-line
  plane + shapely distances, corridor probabilities for the survivors);
* its candidate search alone, against a naive search that masks all strokes for every outage
  (time window and box test over the whole table, one outage at a time);
* the per-line exposure summary over the whole storm.

Prints medians of a few repeats and ratios. Goal: match_outages under 10 s.

Run: ``.venv/bin/python benchmarks/bench_outages.py [--strokes N] [--repeat R]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import shapely

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from debrief.config import from_dict  # noqa: E402
from debrief.geodesy import LocalPlane, WGS84  # noqa: E402
from debrief.outages import _bbox_margin_deg, _candidate_pairs, line_exposure, match_outages  # noqa: E402


def make_inputs(n_strokes=1_000_000, n_lines=50, line_km=10.0, n_outages=1000, seed=1):
    rng = np.random.default_rng(seed)
    plane = LocalPlane(45.5, -93.2)
    region = 150.0
    t0 = pd.Timestamp("2026-07-14T19:00:00Z").value
    t = np.sort(t0 + rng.integers(0, 4 * 3600 * 10**9, n_strokes))
    x, y = rng.uniform(-region / 2, region / 2, (2, n_strokes))
    lat, lon = plane.to_latlon(x, y)
    a = np.clip(rng.lognormal(np.log(0.3), 0.4, n_strokes), 0.1, 1.0)
    strokes = pd.DataFrame({
        "time": pd.to_datetime(t, unit="ns", utc=True), "latitude": lat, "longitude": lon,
        "peak_current_ka": -rng.lognormal(np.log(20), 0.6, n_strokes),
        "type": pd.Categorical(np.where(rng.random(n_strokes) < 0.3, "IC", "CG"), categories=["CG", "IC"]),
        "semi_major_km": a, "semi_minor_km": a * rng.uniform(0.3, 1.0, n_strokes),
        "major_bearing_deg": rng.uniform(0, 180, n_strokes), "source_row": np.arange(n_strokes) + 2,
    })
    rows = []
    for k in range(n_lines):
        c = rng.uniform(-region / 2 + 10, region / 2 - 10, 2)
        ang = rng.uniform(0, np.pi)
        steps = np.linspace(-0.5, 0.5, 6)[:, None] * line_km * np.array([np.cos(ang), np.sin(ang)])
        xy = c + steps + rng.normal(0, 0.2, steps.shape)
        la, lo = plane.to_latlon(xy[:, 0], xy[:, 1])
        g = shapely.LineString(np.column_stack([lo, la]))
        rows.append({"line_id": f"L{k}", "name": f"L{k}", "height_m": 10.0, "cfo_kv": 150.0, "spacing_m": 0.0,
                     "shielded": False, "height_defaulted": False, "cfo_defaulted": False,
                     "length_km": WGS84.geometry_length(g) / 1000.0, "feature": k + 1, "geometry": g})
    lines = pd.DataFrame(rows)
    ot = np.sort(t0 + rng.integers(0, 4 * 3600 * 10**9, n_outages))
    outages = pd.DataFrame({
        "outage_id": [f"O{k}" for k in range(n_outages)], "time": pd.to_datetime(ot, unit="ns", utc=True),
        "line_id": rng.choice(lines["line_id"], n_outages), "fault_latitude": np.nan, "fault_longitude": np.nan,
        "device": "", "clock_tolerance_s": np.nan, "reclose_times": [()] * n_outages, "source_row": 2, "problem": "",
    })
    return strokes, outages, lines


def fast_search(strokes, outages, lines, lc):
    cg = np.flatnonzero((strokes["type"] == "CG").to_numpy())
    t_ns = pd.DatetimeIndex(strokes["time"]).asi8[cg]
    po, ps = _candidate_pairs(t_ns, outages, lc)
    ps = cg[ps]
    b = np.array([shapely.bounds(g) for g in lines["geometry"]])
    li = lines.reset_index().set_index("line_id").loc[outages["line_id"], "index"].to_numpy()
    dlat, dlon = _bbox_margin_deg(np.abs(b[li, 3]), lc["search_km"])
    la, lo = strokes["latitude"].to_numpy()[ps], strokes["longitude"].to_numpy()[ps]
    keep = (la >= b[li, 1][po] - dlat[po]) & (la <= b[li, 3][po] + dlat[po]) & (lo >= b[li, 0][po] - dlon[po]) & (lo <= b[li, 2][po] + dlon[po])
    return int(keep.sum())


def naive_search(strokes, outages, lines, lc):
    t_ns = pd.DatetimeIndex(strokes["time"]).asi8
    cg = (strokes["type"] == "CG").to_numpy()
    la, lo = strokes["latitude"].to_numpy(), strokes["longitude"].to_numpy()
    tol = int(lc["clock_tolerance_s"] * 1e9)
    bounds = {r.line_id: shapely.bounds(r.geometry) for r in lines.itertuples()}
    n = 0
    for ot, lid in zip(pd.DatetimeIndex(outages["time"]).asi8, outages["line_id"]):
        b = bounds[lid]
        dlat, dlon = _bbox_margin_deg(abs(b[3]), lc["search_km"])
        m = cg & (np.abs(t_ns - ot) <= tol) & (la >= b[1] - dlat) & (la <= b[3] + dlat) & (lo >= b[0] - dlon) & (lo <= b[2] + dlon)
        n += int(m.sum())
    return n


def timed(fn, repeat):
    out, times = None, []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--strokes", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    t = time.perf_counter()
    strokes, outages, lines = make_inputs(args.strokes)
    print(f"inputs: {len(strokes):,} strokes, {len(outages):,} outages, {lines['length_km'].sum():.0f} km of lines "
          f"({len(lines)} lines); built in {time.perf_counter() - t:.1f} s")
    cfg = from_dict({})
    lc = cfg["lines"]
    t_fast, n_fast = timed(lambda: fast_search(strokes, outages, lines, lc), args.repeat)
    t_naive, n_naive = timed(lambda: naive_search(strokes, outages, lines, lc), args.repeat)
    assert n_fast == n_naive, (n_fast, n_naive)
    t_match, res = timed(lambda: match_outages(strokes, outages, lines, cfg), args.repeat)
    t_exp, _ = timed(lambda: line_exposure(strokes, lines, cfg), 1)
    print(f"{'step':<44}{'median s':>10}{'ratio':>9}")
    print(f"{'candidate search, naive (mask per outage)':<44}{t_naive:>10.3f}{1.0:>9.2f}")
    print(f"{'candidate search, searchsorted + box':<44}{t_fast:>10.3f}{t_naive / t_fast:>9.1f}x faster")
    print(f"{'match_outages end to end':<44}{t_match:>10.3f}   goal < 10 s: {'met' if t_match < 10 else 'NOT met'}")
    print(f"{'line_exposure, whole storm (1 run)':<44}{t_exp:>10.3f}")
    print(f"box-prefiltered pairs: {n_fast:,}; candidates after exact distance: {len(res.candidates):,}; "
          f"verdicts: {res.verdicts['verdict'].value_counts().to_dict()}")


if __name__ == "__main__":
    main()
