"""Run every benchmark in this folder, one after another, each in its own process.

Each script prints its own side-by-side table (medians and ratios). ``make bench`` runs this;
pass script names to run only some: ``python benchmarks/run_all.py bench_flashes bench_sites``.
Nothing here is a test: figures depend on the machine and its load.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
    names = argv or sorted(p.stem for p in HERE.glob("bench_*.py"))
    failed = []
    for name in names:
        script = HERE / f"{name.removesuffix('.py')}.py"
        if not script.exists():
            print(f"no such benchmark: {script.name}", file=sys.stderr)
            return 2
        print(f"\n=== {script.name}", flush=True)
        t0 = time.perf_counter()
        rc = subprocess.call([sys.executable, str(script)], cwd=HERE.parent)
        print(f"=== {script.name}: exit {rc}, {time.perf_counter() - t0:.0f} s wall", flush=True)
        if rc:
            failed.append(script.name)
    if failed:
        print("failed: " + ", ".join(failed), file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
