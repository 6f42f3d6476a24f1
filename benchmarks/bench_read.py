"""Reading a 1,000,000-row stroke file: plain pandas.read_csv beside debrief's read_strokes.

Run: ``.venv/bin/python benchmarks/bench_read.py [--rows N] [--repeat R]``

Prints the median wall time of each reader (R runs, side by side in one process), their ratio,
and the peak resident memory of each in a fresh subprocess. The peak is the process's own
high-water mark (``VmHWM`` of /proc/self/status on Linux): ``resource.getrusage().ru_maxrss`` of
a child carries over its parent's peak through fork and exec, so it is printed only where /proc
is missing. The file is invented: realistic values drawn with numpy, canonical columns.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from debrief.io.strokes import read_strokes  # noqa: E402


def make_file(path: Path, n: int, seed: int = 1) -> None:
    """A CSV of `n` canonical stroke rows over a 4 h, 80 x 80 km storm (0.1 % with problems)."""
    rng = np.random.default_rng(seed)
    t0 = np.datetime64("2026-07-14T19:00:00", "ns")
    t = t0 + np.sort(rng.integers(0, 4 * 3600 * 10**9, n)).astype("timedelta64[ns]")
    sign = np.where(rng.random(n) < 0.1, 1.0, -1.0)
    a = rng.lognormal(np.log(0.3), 0.5, n)
    frame = pd.DataFrame({
        "time": np.char.add(np.datetime_as_string(t, unit="us"), "Z"),
        "latitude": np.round(45.5 + rng.uniform(-0.36, 0.36, n), 6),
        "longitude": np.round(-93.2 + rng.uniform(-0.51, 0.51, n), 6),
        "peak_current_ka": np.round(sign * rng.lognormal(np.log(15.0), 0.6, n), 1),
        "type": np.where(rng.random(n) < 0.4, "IC", "CG"),
        "semi_major_km": np.round(a, 3),
        "semi_minor_km": np.round(a * rng.uniform(0.3, 1.0, n), 3),
        "major_bearing_deg": np.round(rng.uniform(0, 180, n), 1),
        "sensors": rng.integers(3, 30, n),
    })
    bad = rng.choice(n, n // 1000, replace=False)
    frame.loc[bad, "latitude"] = 99.0
    frame.to_csv(path, index=False)


def timed(fn, repeat: int) -> list[float]:
    out = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return out


_RSS = """
import resource, sys
sys.path.insert(0, {root!r})
import pandas as pd
from debrief.io.strokes import read_strokes

def peak_kib():
    try:
        with open("/proc/self/status") as f:
            return int(next(l for l in f if l.startswith("VmHWM:")).split()[1])
    except OSError:
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
base = peak_kib()
{call}
print(base, peak_kib())
"""


def peak_rss_mib(call: str) -> tuple[float, float]:
    """(peak RSS after imports, peak RSS after `call`) of a fresh interpreter, MiB."""
    code = _RSS.format(root=str(ROOT), call=call)
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    base, peak = (int(x) for x in r.stdout.split())
    return base / 1024, peak / 1024


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "strokes.csv"
        t = time.perf_counter()
        make_file(path, args.rows)
        size_mb = path.stat().st_size / 1e6
        print(f"{args.rows:,} rows, {size_mb:.0f} MB CSV (made in {time.perf_counter() - t:.1f} s)")
        pq = Path(d) / "strokes.parquet"
        read_strokes(path)[0].to_parquet(pq, index=False)

        def csv_and_times():
            frame = pd.read_csv(path)
            frame["time"] = pd.to_datetime(frame["time"], format="ISO8601", utc=True)

        for warm in (lambda: pd.read_csv(path), lambda: read_strokes(path), lambda: pd.read_parquet(pq)):
            warm()  # first calls pay for imports and caches
        runs = {
            "pandas.read_csv (defaults)": timed(lambda: pd.read_csv(path), args.repeat),
            "read_csv + to_datetime": timed(csv_and_times, args.repeat),
            "read_strokes CSV": timed(lambda: read_strokes(path), args.repeat),
            "pandas.read_parquet": timed(lambda: pd.read_parquet(pq), args.repeat),
            "read_strokes Parquet": timed(lambda: read_strokes(pq), args.repeat),
        }
        rss = {
            "pandas.read_csv (defaults)": peak_rss_mib(f"pd.read_csv({str(path)!r})"),
            "read_csv + to_datetime": peak_rss_mib(
                f"f = pd.read_csv({str(path)!r}); f['time'] = pd.to_datetime(f['time'], format='ISO8601', utc=True)"),
            "read_strokes CSV": peak_rss_mib(f"read_strokes({str(path)!r})"),
            "pandas.read_parquet": peak_rss_mib(f"pd.read_parquet({str(pq)!r})"),
            "read_strokes Parquet": peak_rss_mib(f"read_strokes({str(pq)!r})"),
        }
    base = statistics.median(runs["pandas.read_csv (defaults)"])
    print(f"\n{'reader':<28}{'median s':>10}{'ratio':>8}{'peak RSS MiB':>14}{'(imports)':>11}")
    for name, times in runs.items():
        med = statistics.median(times)
        print(f"{name:<28}{med:>10.2f}{med / base:>8.2f}{rss[name][1]:>14.0f}{rss[name][0]:>11.0f}")
    print(f"\nratio = median / median of pandas.read_csv; {args.repeat} runs each; "
          "peak RSS of a fresh process (VmHWM), after imports in brackets.")
    return 0


if __name__ == "__main__":
    sys.exit(main())
