"""Kernel-side cost and message size of one time-slider step of the explore dashboard.

A generated storm of about 100,000 strokes (debrief.synth) is loaded into a Dashboard whose
widgets talk to a recording comm instead of a browser; the slider is stepped ~20 times and we
report, side by side in this one run:

* the wall time per step (everything the kernel does: window tables, map layers, histogram,
  multiplicity table, continuing-current flags), medians, for a 30-minute window (too many
  strokes: counts per cell) and a 2-minute window (strokes drawn one by one);
* the bytes sent to the browser per step (JSON payload plus binary buffers);
* the map's window lookup: one searchsorted slice on presorted times versus a boolean mask
  over every stroke, and their ratio.

Goals: under 0.2 s per step and under 1 MB per update. Run: ``.venv/bin/python benchmarks/bench_widgets.py``.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
import uuid
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

SENT: list[int] = []


class RecordingComm:
    """Stands in for a kernel comm: records the size of everything a widget sends."""

    kernel = True  # ipywidgets only sends when the comm has a kernel

    def __init__(self, *args, **kwargs):
        self.comm_id = uuid.uuid4().hex

    def send(self, data=None, metadata=None, buffers=None):
        n = len(json.dumps(data, default=str, separators=(",", ":")).encode())
        n += sum(memoryview(b).nbytes for b in (buffers or ()))
        SENT.append(n)

    def on_msg(self, callback):
        pass

    def on_close(self, callback):
        pass

    def open(self, *args, **kwargs):
        pass

    def close(self, *args, **kwargs):
        pass


def build_event(n_strokes: int, seed: int):
    from debrief.config import from_dict
    from debrief.continuing_current import flag_continuing_current
    from debrief.event import Event
    from debrief.flashes import group_flashes
    from debrief.synth import generate_storm

    observed, _ = generate_storm(seed=seed, strokes_per_s=n_strokes / (4 * 3600.0))
    observed = observed.reset_index(drop=True)
    observed["source_row"] = np.arange(2, len(observed) + 2, dtype=np.int64)
    cfg = from_dict({"name": "benchmark storm", "time_zone": "America/Chicago", "default_uncertainty_km": 0.5})
    strokes, flashes = group_flashes(observed, cfg)
    flashes = flag_continuing_current(strokes, flashes, cfg)
    return Event(config=cfg, strokes=strokes, flashes=flashes, ledger=None,
                 start=strokes["time"].min(), end=strokes["time"].max())


def step_costs(dash, n_steps: int):
    times, sizes = [], []
    for i in range(1, n_steps + 1):
        SENT.clear()
        t = time.perf_counter()
        dash.time.slider.value = i
        times.append(time.perf_counter() - t)
        sizes.append(sum(SENT))
    return times, sizes


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--strokes", type=int, default=100_000)
    ap.add_argument("--steps", type=int, default=20)
    ap.add_argument("--seed", type=int, default=11)
    args = ap.parse_args(argv)

    import comm

    comm.create_comm = RecordingComm  # what ipywidgets' own tests do: a comm that records sends
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        from debrief.widgets import Dashboard

    t = time.perf_counter()
    ev = build_event(args.strokes, args.seed)
    print(f"event: {len(ev.strokes):,} strokes, {len(ev.flashes):,} flashes, {ev.start} to {ev.end} "
          f"(generated and grouped in {time.perf_counter() - t:.1f} s)")

    rows = []
    for width in (30, 2):
        t = time.perf_counter()
        dash = Dashboard(ev, width_min=width, sites=False)
        build_s = time.perf_counter() - t
        times, sizes = step_costs(dash, args.steps)
        rows.append((f"slider step, {width}-min window ({dash.map.mode})", statistics.median(times), max(times),
                     statistics.median(sizes), max(sizes), build_s))

    # The map's window lookup, two ways, on the same windows.
    m = dash.map
    ft = m._ftime_sorted
    flash_time_by_row = np.empty_like(ft)
    flash_time_by_row[m._order] = ft
    windows = [dash.time.window_of(i) for i in range(1, args.steps + 1)]
    t_ss, t_mask = [], []
    for s, e in windows:
        t = time.perf_counter()
        a = m._order[np.searchsorted(ft, s.value, "left"):np.searchsorted(ft, e.value, "right")]
        t_ss.append(time.perf_counter() - t)
        t = time.perf_counter()
        b = np.flatnonzero((flash_time_by_row >= s.value) & (flash_time_by_row <= e.value))
        t_mask.append(time.perf_counter() - t)
        assert np.array_equal(np.sort(a), b)

    print(f"\n{'case':52s} {'median s':>9s} {'max s':>8s} {'median sent':>12s} {'max sent':>10s} {'build s':>8s}")
    for name, med, mx, smed, smax, b in rows:
        print(f"{name:52s} {med:9.4f} {mx:8.4f} {smed / 1e3:10.1f} kB {smax / 1e3:7.1f} kB {b:8.2f}")
    ss, mk = statistics.median(t_ss), statistics.median(t_mask)
    print(f"\nwindow lookup over {len(ev.strokes):,} strokes: searchsorted slice {ss * 1e6:.1f} us, "
          f"boolean mask {mk * 1e6:.1f} us, ratio mask/searchsorted {mk / ss:.1f}x")
    worst = max(r[1] for r in rows)
    biggest = max(r[4] for r in rows)
    print(f"goals: step median < 0.2 s -> {'met' if worst < 0.2 else 'NOT met'} ({worst:.3f} s); "
          f"update < 1 MB -> {'met' if biggest < 1e6 else 'NOT met'} ({biggest / 1e6:.2f} MB max)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
