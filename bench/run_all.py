"""Run every benchmark and print each figure against its goal: measured, goal, met or not.

Each benchmark runs in its own process (so thread settings and caches do not leak between them)
and prints its own details; this script collects the lines that state a goal and repeats them in
one table at the end. Figures are measured side by side within each benchmark, because the
machines are noisy: compare ratios, not absolute times, between machines.

    python bench/run_all.py            # all six
    python bench/run_all.py events sweep
"""

from __future__ import annotations

import platform
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
BENCHES = ["events", "data_scale", "train", "simulate", "sweep", "classify"]


def main(argv: list[str] | None = None) -> int:
    names = (argv if argv is not None else sys.argv[1:]) or BENCHES
    unknown = [n for n in names if n not in BENCHES]
    if unknown:
        print(f"error: unknown benchmark {unknown[0]!r}; choose from {', '.join(BENCHES)}", file=sys.stderr)
        return 2
    print(f"machine: {platform.machine()}, {platform.processor() or 'cpu'}, "
          f"{_cores()} cores, Python {platform.python_version()}, {time.strftime('%Y-%m-%d')}")
    table: list[tuple[str, str]] = []
    failed = []
    for name in names:
        print(f"\n=== {name} ===", flush=True)
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, str(HERE / f"{name}.py")], capture_output=True, text=True)
        print(proc.stdout, end="")
        if proc.returncode != 0:
            failed.append(name)
            print(proc.stderr[-2000:], file=sys.stderr)
        for line in proc.stdout.splitlines():
            if "goal" in line and ("met" in line or "NOT" in line):
                table.append((name, " ".join(line.split())))
        print(f"({name}: {time.perf_counter() - t0:.0f} s)")
    print("\n=== figures against goals ===")
    for name, line in table:
        print(f"  [{name}] {line}")
    if failed:
        print(f"benchmarks that failed to run: {', '.join(failed)}")
        return 1
    return 0


def _cores() -> int:
    import os
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


if __name__ == "__main__":
    sys.exit(main())
