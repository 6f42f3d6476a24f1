"""Storm generator, flash statistics and continuing-current flags: speed side by side in one run.

Rows compared (medians of --repeat runs):

* ``generate_storm`` making about --n observed strokes, and ten times as many once (``--big``):
  the ratio shows how the generator scales (ideal 10);
* the polarity statistics of ``debrief summary`` (multiplicity, interstroke, positive share,
  medians, histogram, IEEE comparison) on the grouped storm, against ``numpy.sort`` of the
  same |Ip| as a yardstick;
* ``flag_continuing_current`` (vectorised) against a plain per-flash Python loop applying the
  same two rules, timed on the first --ref-flashes flashes and extrapolated linearly.

Run from the repository: ``.venv/bin/python benchmarks/bench_synth_stats.py`` (about a minute;
``--big`` adds the 10x generator run, about 40 s more and a few GB of memory).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from debrief import polarity as P  # noqa: E402
from debrief.continuing_current import flag_continuing_current, rules_from  # noqa: E402
from debrief.flashes import group_flashes  # noqa: E402
from debrief.synth import generate_storm  # noqa: E402


def timed(fn, repeat):
    """(result, (median wall s, median CPU s)): CPU time too, since the machine may be shared."""
    out, times, cpu = None, [], []
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        out = fn()
        times.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    return out, (statistics.median(times), statistics.median(cpu))


def storm(n):
    hours = n / 50.0 / 3600.0
    return generate_storm(seed=1, strokes_per_s=50.0, duration_h=hours, region_km=200.0, n_cells=40)


def stats_suite(s, f):
    P.multiplicity_table(f)
    P.mean_multiplicity(f)
    P.interstroke_summary(f)
    P.positive_share(f)
    P.first_subsequent_medians(s)
    P.polarity_histogram(s)
    P.compare_reference(s, floor_ka=10.0)


def flag_loop(strokes, flashes, r):
    """The same rules, flash by flash, in plain Python (the yardstick for the vectorised one)."""
    by_flash = {k: g for k, g in strokes.sort_values(["flash_id", "stroke_order"]).groupby("flash_id", sort=False)}
    out = []
    for row in flashes.itertuples(index=False):
        codes = []
        if (row.type == "CG" and row.polarity == "positive" and row.multiplicity == 1
                and row.max_abs_peak_ka >= r["positive_min_ka"] and not row.likely_ic):
            codes.append("single_positive")
        if row.type == "CG" and row.polarity == "negative":
            g = by_flash[row.flash_id]
            t = g["time"].dt.as_unit("ns").astype("int64").to_numpy()
            ip = g["peak_current_ka"].to_numpy()
            gc = g["ground_contact"].to_numpy()
            for k in range(len(g) - 1):
                if ip[k] < 0 and -ip[k] < r["negative_max_abs_ka"] and (t[k + 1] - t[k]) / 1e6 >= r["min_interval_ms"] and gc[k] == gc[k + 1]:
                    codes.append("long_gap_after_weak")
                    break
        out.append(";".join(codes))
    return out


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=1_000_000, help="observed strokes (default 1,000,000)")
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--ref-flashes", type=int, default=5_000, help="flashes for the Python-loop yardstick")
    p.add_argument("--big", action="store_true", help="also generate 10 x --n strokes once")
    a = p.parse_args(argv)

    rows = []
    (obs, truth), t_gen = timed(lambda: storm(a.n), a.repeat)
    rows.append((f"generate_storm, {len(obs):,} observed / {len(truth):,} true strokes", t_gen, None))
    if a.big:
        (big, _), t_big = timed(lambda: storm(10 * a.n), 1)
        rows.append((f"generate_storm, {len(big):,} observed strokes (1 run)", t_big, t_big[0] / t_gen[0]))
        del big

    s, f = group_flashes(obs)
    absip = np.abs(s["peak_current_ka"].to_numpy())
    _, t_sort = timed(lambda: np.sort(absip), a.repeat)
    _, t_stats = timed(lambda: stats_suite(s, f), a.repeat)
    rows.append((f"numpy.sort of |Ip|, {len(s):,} strokes (yardstick)", t_sort, None))
    rows.append((f"polarity statistics, {len(f):,} flashes", t_stats, t_stats[0] / t_sort[0]))

    _, t_flag = timed(lambda: flag_continuing_current(s, f), a.repeat)
    sub_f = f.iloc[: a.ref_flashes]
    sub_s = s[s["flash_id"].isin(sub_f["flash_id"])]
    r = rules_from(None)
    ref, t_ref_sub = timed(lambda: flag_loop(sub_s, sub_f, r), 1)
    fast = flag_continuing_current(sub_s, sub_f)
    assert list(fast["cc_reasons"]) == ref, "vectorised and loop flags differ"
    t_ref = tuple(x * len(f) / len(sub_f) for x in t_ref_sub)
    rows.append((f"flag_continuing_current (vectorised), {len(f):,} flashes", t_flag, None))
    rows.append((f"per-flash Python loop, same rules (from {len(sub_f):,} flashes, extrapolated)", t_ref, t_ref[0] / t_flag[0]))

    w = max(len(r[0]) for r in rows)
    print(f"{'what':<{w}}  {'median s':>9}  {'cpu s':>8}  {'ratio':>8}")
    for name, (wall, cpu), ratio in rows:
        print(f"{name:<{w}}  {wall:9.3f}  {cpu:8.3f}  {'' if ratio is None else f'{ratio:8.1f}x'}")
    print("ratios (of wall medians): 10x generator / 1x; statistics / numpy.sort; Python loop / vectorised flags")
    return 0


if __name__ == "__main__":
    sys.exit(main())
