"""Incident report speed and size, side by side in one run (medians of --repeat runs).

Rows compared, each ``render_report`` end to end (settings, kernel start, every cell, export,
atomic write) with the stage times from its progress callback:

* the shipped example event (about 5,000 strokes, with sites, lines and outages);
* the same folder with its strokes replaced by ``debrief.synth.write_example_event`` at
  ``--n`` observed strokes (default 100,000; goals: under 30 s and an HTML under 5 MB).

Also a baseline: the kernel alone (start, ``import debrief.report.content``, stop), so the
ratios show what the report's own work costs beyond starting Python.

Run from the repository: ``.venv/bin/python benchmarks/bench_report.py`` (about a minute or two;
``--repeat 1`` for a single pass).
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from debrief.report import render_report  # noqa: E402
from debrief.report.render import _kernel_env, _kernel_manager  # noqa: E402


def big_event(folder: Path, n: int) -> Path:
    """The example event's folder with `n` generated strokes (sites, lines, outages kept)."""
    from debrief.synth import write_example_event

    ev = folder / f"event_{n}"
    shutil.copytree(ROOT / "example_event", ev)
    info = write_example_event(ev, n_strokes=n)
    print(f"generated {info['observed']:,} observed strokes in {ev}", file=sys.stderr)
    return ev


def time_render(event_dir: Path, out: Path):
    marks = []
    t0 = time.perf_counter()

    def progress(stage, _msg):
        marks.append((stage, time.perf_counter() - t0))

    render_report(event_dir, out, progress=progress)
    total = time.perf_counter() - t0
    # A stage lasts from its first progress line to the first line of the next stage.
    firsts = []
    for stage, t in marks:
        if not firsts or firsts[-1][0] != stage:
            firsts.append((stage, t))
    firsts.append(("end", total))
    stages = {}
    for (stage, t), (_, t_next) in zip(firsts, firsts[1:]):
        stages[stage] = stages.get(stage, 0.0) + (t_next - t)
    return total, stages, out.stat().st_size


def time_kernel_only(workdir: Path) -> float:
    t0 = time.perf_counter()
    km = _kernel_manager(workdir)
    km.start_kernel(env=_kernel_env(workdir / "params.json"), cwd=str(workdir))
    kc = km.client()
    kc.start_channels()
    kc.wait_for_ready(timeout=120)
    kc.execute_interactive("import debrief.report.content, debrief.figures", timeout=120)
    kc.stop_channels()
    km.shutdown_kernel(now=True)
    return time.perf_counter() - t0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000, help="strokes of the large event (default 100,000)")
    ap.add_argument("--repeat", type=int, default=2, help="runs per row (median reported)")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="bench-report-") as tmp:
        tmp = Path(tmp)
        big = big_event(tmp, args.n)
        rows = []
        kernel = [time_kernel_only(Path(tempfile.mkdtemp(dir=tmp))) for _ in range(args.repeat)]
        rows.append(("kernel start + imports (baseline)", statistics.median(kernel), {}, 0))
        for label, ev in (("example event (~5k strokes)", ROOT / "example_event"), (f"{args.n:,} strokes", big)):
            runs = [time_render(ev, tmp / f"r{i}.html") for i in range(args.repeat)]
            totals = [r[0] for r in runs]
            med = statistics.median(totals)
            best = runs[totals.index(sorted(totals)[len(totals) // 2])]
            rows.append((label, med, best[1], best[2]))
    base = rows[0][1]
    print(f"{'row':38s} {'median s':>9s} {'x kernel':>9s} {'HTML MB':>8s}  stages (s)")
    for label, med, stages, size in rows:
        st = ", ".join(f"{k} {v:.1f}" for k, v in stages.items())
        mb = f"{size / 1e6:8.2f}" if size else f"{'':8s}"
        print(f"{label:38s} {med:9.2f} {med / base:9.2f} {mb}  {st}")
    big_row = rows[-1]
    print(f"\ngoal: {args.n:,} strokes under 30 s -> {big_row[1]:.1f} s ({'met' if big_row[1] < 30 else 'NOT met'}); "
          f"HTML under 5 MB -> {big_row[3] / 1e6:.2f} MB ({'met' if big_row[3] < 5e6 else 'NOT met'})")
    print(f"ratio {args.n:,} strokes / example event: {big_row[1] / rows[1][1]:.2f}x time, "
          f"{big_row[3] / rows[1][3]:.2f}x size")
    return 0


if __name__ == "__main__":
    sys.exit(main())
