"""The data stage at the size of the published benchmarks: 60,000 recordings, 60,000 IDX images.

    recordings  a folder of 60,000 generated saccade recordings in the 40-bit layout (34x34 sensor,
                ~300 ms, ~2,000 events each; recipes/make_recordings.py --count), made once and kept in
                ~/.cache/snnconvert/bench-saccade-<N>-seed0 (or --folder). recipes/saccade_recordings.toml
                reads it: cold = no frames cache (every file read, windowed and binned in 2 workers),
                warm = the second run (the frames cache alone).
    idx         the same set's 28x28 images and labels as IDX files, through recipes/idx_files.toml
                (one event per set pixel); first and second run.
Each timing is one fresh process running load_dataset; peak memory = that process's max RSS plus
its largest worker's (getrusage); CPU = user + system seconds of the process and its workers, imports
included (getrusage), which the other load of a shared machine inflates less than the wall time. "Cold" means no frames cache; the OS file cache may hold the files.
Goals: recordings cold <= 60 s, warm <= 5 s, peak memory <= 2 GB.

Run: .venv/bin/python bench/data_scale.py [--count 60000] [--folder DIR] [--workers 2]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
GOALS = {"cold_s": 60.0, "warm_s": 5.0, "peak_gb": 2.0}

CHILD = r"""
import json, resource, sys, time
from snnconvert import data, recipe
r = recipe.load(sys.argv[1], sys.argv[2:])
t = time.perf_counter()
ds = data.load_dataset(r, progress=False)
secs = time.perf_counter() - t
me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
kb = me.ru_maxrss + kids.ru_maxrss
cpu = me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime
print(json.dumps({"seconds": secs, "peak_gb": kb / 2**20, "cpu_s": cpu, "samples": int(sum(len(s[1]) for s in (ds.train, ds.val, ds.test))),
                  "recordings": ds.info["recordings"], "events": float(ds.info["events_per_recording"]) * ds.info["recordings"],
                  "reused": bool(ds.info.get("cache_reused", False))}))
"""


def timed(recipe: Path, overrides: list[str]) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = subprocess.run([sys.executable, "-c", CHILD, str(recipe), *overrides], capture_output=True, text=True,
                         env=env)
    if out.returncode:
        raise SystemExit(out.stderr[-3000:])
    return json.loads(out.stdout.strip().splitlines()[-1])


def line(name: str, value: float, unit: str, goal: float | None) -> str:
    tail = f"   goal <= {goal:g} {unit}   {'met' if value <= goal else 'NOT met'}" if goal is not None else ""
    return f"  {name:<22} {value:8.2f} {unit}{tail}"


def main(argv: list[str] | None = None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--count", type=int, default=60_000)
    ap.add_argument("--folder", default="")
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)
    from snnconvert.data import generate as G
    from snnconvert.data.cache import user_cache_dir
    folder = Path(args.folder or user_cache_dir() / f"bench-saccade-{args.count}-seed0").expanduser()
    if not G.complete(folder, args.count):
        t = time.perf_counter()
        G.write_recordings(folder, args.count, seed=0, stimulus="saccade", workers=args.workers)
        print(f"generated {args.count} recordings in {time.perf_counter() - t:.0f} s ({args.workers} workers)")
    cache = folder / "frames-cache"
    shutil.rmtree(cache, ignore_errors=True)
    rec = [f"data.recordings_index={folder / 'index.csv'}", f"data.cache_dir='{cache}'", f"data.workers={args.workers}"]
    idx = [f"data.idx_images={folder / G.IMAGES}", f"data.idx_labels={folder / G.LABELS}"]
    fig = {"recordings": args.count, "load_average": os.getloadavg()}
    fig["cold"] = timed(ROOT / "recipes" / "saccade_recordings.toml", rec)
    fig["warm"] = timed(ROOT / "recipes" / "saccade_recordings.toml", rec)
    fig["idx_first"] = timed(ROOT / "recipes" / "idx_files.toml", idx)
    fig["idx_second"] = timed(ROOT / "recipes" / "idx_files.toml", idx)
    c, w = fig["cold"], fig["warm"]
    fig["load_average_end"] = os.getloadavg()
    print(f"data scale bench: {args.count:,} recordings in {folder}, {args.workers} workers, "
          f"load average {fig['load_average'][0]:.1f} at the start, {fig['load_average_end'][0]:.1f} at the end "
          f"(on a shared machine every time is inflated by the other load)")
    print(line("recordings cold", c["seconds"], "s", GOALS["cold_s"]))
    print(f"  {'':<22} {c['events'] / c['seconds'] / 1e6:8.2f} M events/s, {c['recordings'] / c['seconds']:,.0f} files/s; "
          f"CPU {c['cpu_s']:.1f} s in all processes ({c['cpu_s'] / c['recordings'] * 1e3:.2f} ms per file, "
          f"imports included: less sensitive to the other load than the wall time)")
    print(line("recordings warm", w["seconds"], "s", GOALS["warm_s"]) + f"   (cache reused: {w['reused']}; "
          f"CPU {w['cpu_s']:.1f} s with the imports)")
    print(line("recordings peak memory", max(c["peak_gb"], w["peak_gb"]), "GB", GOALS["peak_gb"]))
    print(line("idx first run", fig["idx_first"]["seconds"], "s", None) +
          f"   {fig['idx_first']['samples'] / fig['idx_first']['seconds']:,.0f} images/s")
    print(line("idx second run", fig["idx_second"]["seconds"], "s", None))
    print(line("idx peak memory", max(fig["idx_first"]["peak_gb"], fig["idx_second"]["peak_gb"]), "GB", GOALS["peak_gb"]))
    return fig


if __name__ == "__main__":
    main()
