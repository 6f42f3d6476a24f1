"""Stroke-to-flash grouping speed, side by side in one run (medians of --repeat runs).

Rows compared:

* ``numpy.argsort`` of the same stroke times as shuffled int64 ns: the yardstick (goal: the
  grouping within 10x of it);
* ``group_flashes`` on the table as the reader delivers it (time order) and on shuffled rows;
* ``group_flashes_reference`` (the plain Python loop) on the first --ref-n strokes, extrapolated
  linearly to the full count (goal: the fast one at least 50x faster);
* first call in a fresh process: numba compiling from nothing, and loading its cache;
* ``debrief flashes`` end to end in a subprocess (reading, grouping, continuing-current flags,
  writing both files) against plain pandas in a subprocess reading the same CSV, parsing the
  times, sorting and writing the rows with ``to_csv`` defaults (goal: within 2.5x).

Run from the repository: ``.venv/bin/python benchmarks/bench_flashes.py`` (about two minutes
at a million strokes on one core; ``--n 200000`` for a quick look).
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from debrief.timeutil import iso_utc_many  # noqa: E402
from debrief.flashes import group_flashes, group_flashes_reference  # noqa: E402


def make_strokes(n: int, seed: int = 20260714):
    """`n` observed strokes: debrief.synth's storm (about 50 strokes/s over 200 x 200 km) if present."""
    try:
        from debrief.synth import generate_storm
    except ModuleNotFoundError:
        return _simple_storm(n, seed), "simple generator in this script (debrief.synth missing)"
    hours = n / 50.0 / 3600.0 * 1.05  # a little more, then cut to n
    observed, _ = generate_storm(seed=seed, strokes_per_s=50.0, duration_h=hours, region_km=200.0, n_cells=40)
    return observed.iloc[:n].reset_index(drop=True), "debrief.synth.generate_storm(strokes_per_s=50, region_km=200, n_cells=40)"


def _simple_storm(n: int, seed: int) -> pd.DataFrame:
    # flashes with multiplicities 1-8, strokes ~60 ms apart within 2 km, in 40 drifting cells
    rng = np.random.default_rng(seed)
    n_flash = n // 3 + 1
    mult = rng.integers(1, 9, n_flash)
    first_t = np.sort(rng.uniform(0, n / 50.0, n_flash))
    cell = rng.integers(0, 40, n_flash)
    cxy = rng.uniform(-100, 100, (40, 2))
    fxy = cxy[cell] + rng.normal(0, 5, (n_flash, 2)) + first_t[:, None] * 0.005
    rep = np.repeat(np.arange(n_flash), mult)
    k = np.concatenate([np.arange(m) for m in mult])
    t = first_t[rep] + k * rng.lognormal(np.log(0.06), 0.5, len(rep))
    xy = fxy[rep] + rng.normal(0, 0.7, (len(rep), 2))
    lat = 45.5 + xy[:, 1] / 111.2
    lon = -93.2 + xy[:, 0] / (111.2 * np.cos(np.radians(45.5)))
    ip = np.where(rng.random(len(rep)) < 0.1, 1, -1) * rng.lognormal(np.log(15), 0.6, len(rep))
    df = pd.DataFrame({
        "time": pd.Timestamp("2026-07-14T19:00Z") + pd.to_timedelta(np.round(t * 1e6).astype(np.int64), unit="us"),
        "latitude": lat, "longitude": lon, "peak_current_ka": np.round(ip, 1),
        "type": pd.Categorical(np.where(rng.random(len(rep)) < 0.3, "IC", "CG"), categories=["CG", "IC"]),
        "semi_major_km": 0.4, "semi_minor_km": 0.2, "major_bearing_deg": 30.0,
    })
    df["time"] = df["time"].dt.as_unit("ns")
    return df.sort_values("time", kind="stable").iloc[:n].reset_index(drop=True)


def median_time(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def run_time(cmd, repeat: int, env=None) -> float:
    def go():
        r = subprocess.run(cmd, capture_output=True, text=True, env=env)
        if r.returncode != 0:
            raise SystemExit(f"failed: {' '.join(map(str, cmd))}\n{r.stderr}")
    return median_time(go, repeat)


FIRST_CALL = """
import time, numpy as np, pandas as pd
t0 = time.perf_counter()
from debrief.flashes import group_flashes
t1 = time.perf_counter()
df = pd.DataFrame({"time": pd.to_datetime(["2026-07-14T19:00:00Z", "2026-07-14T19:00:00.05Z"], format="ISO8601").as_unit("ns"),
                   "latitude": [45.5, 45.501], "longitude": [-93.2, -93.2], "peak_current_ka": [-20.0, -12.0],
                   "type": pd.Categorical(["CG", "CG"], categories=["CG", "IC"])})
group_flashes(df)
t2 = time.perf_counter()
group_flashes(df)
t3 = time.perf_counter()
print(t1 - t0, t2 - t1, t3 - t2)
"""


def first_call_times(cache_dir: str):
    env = dict(os.environ, NUMBA_CACHE_DIR=cache_dir, PYTHONPATH=str(ROOT))
    r = subprocess.run([sys.executable, "-c", FIRST_CALL], capture_output=True, text=True, env=env, check=True)
    return [float(v) for v in r.stdout.split()]


BASELINE = """
import sys, pandas as pd
df = pd.read_csv(sys.argv[1])
df["time"] = pd.to_datetime(df["time"], utc=True, format="ISO8601").dt.as_unit("ns")
df = df.sort_values("time", kind="stable")
df.to_csv(sys.argv[2], index=False)
"""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000, help="strokes (default 1,000,000)")
    ap.add_argument("--repeat", type=int, default=3, help="runs per row; the median is shown")
    ap.add_argument("--ref-n", type=int, default=20_000, help="strokes for the reference loop")
    ap.add_argument("--skip-cli", action="store_true", help="leave out the end-to-end rows")
    a = ap.parse_args(argv)

    strokes, how = make_strokes(a.n)
    n = len(strokes)
    print(f"{n:,} strokes from {how}")
    rng = np.random.default_rng(1)
    shuffled = strokes.iloc[rng.permutation(n)].reset_index(drop=True)
    t_shuffled = shuffled["time"].array.asi8.copy()

    group_flashes(strokes.iloc[:1000])  # compile or load the kernel before timing
    rows = []
    t_sort = median_time(lambda: np.argsort(t_shuffled), a.repeat)
    rows.append(("numpy.argsort, shuffled int64 ns", t_sort, "1.0 (yardstick)"))
    t_fast = median_time(lambda: group_flashes(strokes), a.repeat)
    rows.append(("group_flashes, rows in time order", t_fast, f"{t_fast / t_sort:.1f} x argsort (goal <= 10)"))
    t_fast_sh = median_time(lambda: group_flashes(shuffled), a.repeat)
    rows.append(("group_flashes, shuffled rows", t_fast_sh, f"{t_fast_sh / t_sort:.1f} x argsort (goal <= 10)"))
    sub = strokes.iloc[: a.ref_n]
    t_ref_sub = median_time(lambda: group_flashes_reference(sub), a.repeat)
    t_ref = t_ref_sub * n / len(sub)
    rows.append((f"reference loop, {len(sub):,} rows", t_ref_sub, ""))
    rows.append((f"reference loop, x{n / len(sub):.0f} (linear)", t_ref, f"fast is {t_ref / t_fast:.0f} x faster (goal >= 50)"))
    _, flashes = group_flashes(strokes)

    with tempfile.TemporaryDirectory(prefix="bench_flashes_") as tmp:
        cold = first_call_times(tmp)
        warm = first_call_times(tmp)
        rows.append(("fresh process, empty numba cache: import / 1st call", cold[0] + cold[1],
                     f"import {cold[0]:.2f} s + compile and run {cold[1]:.2f} s"))
        rows.append(("fresh process, cached kernel: import / 1st call", warm[0] + warm[1],
                     f"import {warm[0]:.2f} s + load and run {warm[1]:.2f} s; warm call {warm[2] * 1e3:.1f} ms"))
        if not a.skip_cli:
            src = Path(tmp) / "strokes.csv"
            text = strokes.copy()
            text["time"] = iso_utc_many(text["time"])
            text.to_csv(src, index=False)
            env = dict(os.environ, PYTHONPATH=str(ROOT))
            t_cli = run_time([sys.executable, "-m", "debrief", "flashes", str(src), "--out", f"{tmp}/f.csv",
                              "--strokes-out", f"{tmp}/s.csv"], a.repeat, env)
            t_cli_f = run_time([sys.executable, "-m", "debrief", "flashes", str(src), "--out", f"{tmp}/f.csv"], a.repeat, env)
            t_pd = run_time([sys.executable, "-c", BASELINE, str(src), f"{tmp}/p.csv"], a.repeat, env)
            rows.append(("pandas: read CSV, parse times, sort, write", t_pd, "1.0 (yardstick)"))
            rows.append(("debrief flashes --out --strokes-out", t_cli, f"{t_cli / t_pd:.2f} x pandas (goal <= 2.5)"))
            rows.append(("debrief flashes --out (flash file only)", t_cli_f, f"{t_cli_f / t_pd:.2f} x pandas"))

    print(f"{len(flashes):,} flashes; medians of {a.repeat}")
    w = max(len(r[0]) for r in rows)
    print(f"{'step'.ljust(w)}  {'median s':>9}  ratio")
    for name, sec, note in rows:
        print(f"{name.ljust(w)}  {sec:9.3f}  {note}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
