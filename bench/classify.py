"""Real-time factor of `snnconvert classify` (front end + integer network) on one core.

The recording: a long recording of K flashed test digits of the default recipe (recipes/make_recordings.py
--long), 200 ms of background before each. The network: the default recipe's network (briefly trained:
speed does not depend on how well it is trained), converted at 4/4 bits, payload coding.

    processing  = classify_recording (rate counter, windows, gate, frames) + decide (the vectorized
                  integer simulator over every window), the work of the command after reading the file
    RTF at 1 M events/s = (events / 1e6 events/s) / processing time: the recording's duration if the
                  sensor delivered its events at 1 M events/s (a busy sensor), over the time to process them
                  goal >= 100
    RTF as recorded    = the recording's own duration / processing time (printed for reference)

    floors             = what no implementation of the same work escapes on this machine, timed in the
                  same run: one np.bincount over the events' grid addresses plus the rate counter's
                  binary searches (the front end touches every event at least once), and the network's
                  weighted sums alone (torch conv2d/linear in float32 on every window, no requantization)

One core: torch.set_num_threads(1), BLAS limited to one thread, one process. Best of a few repeats.
Run: .venv/bin/python bench/classify.py [--stimuli K] [--epochs E] [--repeats R]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
GOAL_RTF = 100.0
SENSOR_RATE = 1e6  # events/s


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stimuli", type=int, default=300, help="stimuli in the long recording (300 of 360 test digits)")
    ap.add_argument("--epochs", type=int, default=5, help="training epochs of the default network (5)")
    ap.add_argument("--repeats", type=int, default=3, help="timed repeats, best kept (3)")
    args = ap.parse_args(argv)
    import threadpoolctl
    import torch
    threadpoolctl.threadpool_limits(1)
    torch.set_num_threads(1)
    from snnconvert import recipe
    from snnconvert.cli.classify import classify_recording, decide
    from snnconvert.convert import convert_model
    from snnconvert.data import load_dataset
    from snnconvert.data.generate import write_long_recording
    from snnconvert.events import read_events
    from snnconvert.train import train

    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        r = recipe.load(ROOT / "recipes" / "default.toml", [f"train.epochs={args.epochs}", "train.threads=1"])
        ds = load_dataset(r, progress=False)
        model, _ = train(r, ds, d / "train", quiet=True)
        net = convert_model(model, ds.train[0][:256], weight_bits=4, payload_bits=4, coding="payload",
                            input_q=int(ds.input_q))
        made = write_long_recording(d / "long.npz", r, args.stimuli, seed=0, progress=False)
        t0 = time.perf_counter()
        stream = read_events(d / "long.npz")
        t_read = time.perf_counter() - t0
    best_fe = best_net = best_fe_floor = best_net_floor = float("inf")
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        rec, frames = classify_recording(net, r, stream, "long.npz")
        t1 = time.perf_counter()
        out = decide(net, frames)
        t2 = time.perf_counter()
        best_fe, best_net = min(best_fe, t1 - t0), min(best_net, t2 - t1)
        best_fe_floor = min(best_fe_floor, front_end_floor(stream, r))
        best_net_floor = min(best_net_floor, network_floor(net, len(frames)))
    n = len(stream)
    duration = made["duration_us"] / 1e6
    total = best_fe + best_net
    rtf = (n / SENSOR_RATE) / total
    found = len(rec.rows)
    print(f"recording: {args.stimuli} stimuli, {n:,} events, {duration:.1f} s as recorded "
          f"({n / duration:,.0f} events/s), {found} windows, {len(out['decision'])} decisions")
    print(f"front end {best_fe * 1e3:.1f} ms ({n / best_fe / 1e6:.1f} M events/s), network {best_net * 1e3:.1f} ms "
          f"({found / best_net:,.0f} windows/s), total {total * 1e3:.1f} ms; reading the file {t_read * 1e3:.1f} ms "
          f"(not counted)")
    floor = best_fe_floor + best_net_floor
    print(f"floors: one bincount + the rate counter's searches {best_fe_floor * 1e3:.1f} ms, the network's weighted "
          f"sums alone {best_net_floor * 1e3:.1f} ms: RTF at most {(n / SENSOR_RATE) / floor:.1f}x at these floors "
          f"(front end {best_fe / best_fe_floor:.1f}x its floor, network {best_net / best_net_floor:.1f}x)")
    print(f"RTF as recorded: {duration / total:,.0f}x real time")
    print(f"measured RTF at 1 M events/s {rtf:.1f}x real time, goal >= {GOAL_RTF:.0f}x: "
          f"{'met' if rtf >= GOAL_RTF else 'NOT met'}")
    return 0


def front_end_floor(stream, r) -> float:
    """Seconds for the least work of the front end: the rate counter's binary searches on the
    event times and one np.bincount over every event's grid address (contiguous columns given)."""
    import numpy as np
    t = np.ascontiguousarray(stream.t)
    size = int(r["frames"]["size"])
    x, y = stream.x.astype(np.int64), stream.y.astype(np.int64)
    key = (y * size // stream.height) * size + x * size // stream.width  # grid address, computed untimed
    t0 = time.perf_counter()
    np.searchsorted(t, np.arange(int(t[0]), int(t[-1]) + 1, int(r["frames"]["bin_us"])))
    np.bincount(key)
    return time.perf_counter() - t0


def network_floor(net, n: int) -> float:
    """Seconds for the network's weighted sums alone: each conv/dense layer on n windows in float32
    (vectorized.weighted_sum without bias, pooling or requantization)."""
    import torch

    from snnconvert.sim.vectorized import weighted_sum
    shape, total = tuple(net.input_shape), 0.0
    for L in net.layers:
        if L.kind in ("conv", "dense"):
            a = torch.ones((n, *shape))
            t0 = time.perf_counter()
            weighted_sum(L, a)
            total += time.perf_counter() - t0
        shape = tuple(L.out_shape)
    return total


if __name__ == "__main__":
    sys.exit(main())
