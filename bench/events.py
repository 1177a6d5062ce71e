"""Read, window and bin a 10-million-event stream; compare with a bare np.bincount floor.

The stream is made of simulated digit flashes placed one after another (one long recording of a
32x32 sensor). Timed stages, each the best of a few repeats, all in this one run:
    read    read_events(.npz) (load + validation)
    window  frontend.windows (integer rate counter + hysteresis)
    bin     frames.bin_windows over all bursts (binary 16x16)
    floor   np.bincount(y * width + x) on the same events, already in memory
Goals: total <= 3x the floor, and >= 20 M events/s on one core.

Beside them, for the reader of the figures: the time to read the file's bytes alone (open().read(),
no decoding: what any reader pays), and the same three stages on a column layout (contiguous t, x, y,
p arrays with the same checks, instead of EventStream's packed 13-byte records), to show what the
record layout costs.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

N_EVENTS = 10_000_000
GOAL_RATIO = 3.0
GOAL_RATE = 20e6


def _best(fn, repeats=5):
    best, out = float("inf"), None
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def make_stream(n_events: int = N_EVENTS, seed: int = 0):
    """Tile simulated flashes of 200 digits, 100 ms apart, until n_events."""
    from snnconvert.data import digits_images
    from snnconvert.events import EVENT_DTYPE, EventStream, SensorConfig, simulate_batch
    images, _ = digits_images(32)
    ev, off = simulate_batch(images[:200], "flash", SensorConfig(), np.random.default_rng(seed), progress=False)
    period = 100_000
    per = np.diff(off)
    reps = int(np.ceil(n_events / len(ev)))
    rec = np.tile(np.repeat(np.arange(200), per), reps)[:n_events]  # recording slot of each event
    k = np.repeat(np.arange(reps), len(ev))[:n_events]
    out = np.empty(n_events, EVENT_DTYPE)
    src = np.tile(ev, reps)[:n_events]
    out["x"], out["y"], out["p"] = src["x"], src["y"], src["p"]
    out["t"] = src["t"] + (k * 200 + rec) * period
    out = out[np.argsort(out["t"], kind="stable")]
    return EventStream(out, 32, 32)


class _Columns:
    """A stream as four contiguous columns (the column layout measured beside EventStream)."""

    def __init__(self, t, x, y, p, width, height):
        self.t, self.x, self.y, self.p, self.width, self.height = t, x, y, p, width, height

    def __len__(self) -> int:
        return len(self.t)


def _read_columns(path) -> _Columns:
    """The .npz columns as they are stored, with EventStream's checks (ranges, polarity, time order)."""
    from snnconvert.files import load_npz
    z = load_npz(path)
    t, x, y, p, w, h = z["t"], z["x"], z["y"], z["p"], int(z["width"]), int(z["height"])
    if len(t) and (int(x.max()) >= w or int(y.max()) >= h or int(p.min()) < -1 or int(p.max()) > 1
                   or not np.all(p) or np.any(t[1:] < t[:-1])):
        raise ValueError(f"{path}: events outside the checks")
    return _Columns(t, x, y, p, w, h)


def main(n_events: int = N_EVENTS) -> dict:
    try:
        import threadpoolctl
        threadpoolctl.threadpool_limits(1)
    except ImportError:  # pragma: no cover
        pass
    from snnconvert import frames, frontend
    from snnconvert.events import read_events, write_events
    from snnconvert.settings.frames import FramesSettings
    stream = make_stream(n_events)
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "big.npz"
        write_events(stream, path)
        t_read, s = _best(lambda: read_events(path))
        t_bytes, _ = _best(lambda: path.read_bytes())
        t_cread, cols = _best(lambda: _read_columns(path))
    params = frontend.FrontEnd.from_section(FramesSettings.from_section({}).as_dict(), s.width, s.height)
    t_win, wins = _best(lambda: frontend.windows(s.t, params))
    t_bin, _ = _best(lambda: frames.bin_windows(s, wins, "binary", 16, 16))
    t_cwin, cwins = _best(lambda: frontend.windows(cols.t, params))
    t_cbin, _ = _best(lambda: frames.bin_windows(cols, cwins, "binary", 16, 16))
    pix = s.y.astype(np.int64) * s.width + s.x  # the same pixel indices, prepared outside the timing
    t_floor, _ = _best(lambda: np.bincount(pix, minlength=s.width * s.height))
    total = t_read + t_win + t_bin
    col_total = t_cread + t_cwin + t_cbin
    fig = {
        "events": len(s), "bursts": len(wins), "read_s": t_read, "window_s": t_win, "bin_s": t_bin,
        "total_s": total, "floor_s": t_floor, "events_per_s": len(s) / total,
        "window_bin_events_per_s": len(s) / (t_win + t_bin),
        "ratio_to_floor": total / t_floor, "window_bin_ratio_to_floor": (t_win + t_bin) / t_floor,
        "file_bytes_s": t_bytes, "columns_total_s": col_total, "load_average": os.getloadavg(),
    }
    fig["goal_ratio_met"] = fig["ratio_to_floor"] <= GOAL_RATIO
    fig["goal_rate_met"] = fig["events_per_s"] >= GOAL_RATE
    print(f"events bench: {len(s):,} events, {len(wins)} bursts, 1 thread, load average "
          f"{fig['load_average'][0]:.1f} (times are the best of 5)")
    print(f"  {'stage':<34} {'ms':>8} {'x floor':>8}")
    for name, sec in (("read (.npz, packed records)", t_read), ("window (frontend.windows)", t_win),
                      ("bin (frames.bin_windows)", t_bin), ("total", total),
                      ("floor: np.bincount", t_floor), ("file bytes alone (open().read())", t_bytes)):
        print(f"  {name:<34} {sec * 1e3:8.1f} {sec / t_floor:8.2f}")
    print(f"  column layout: read {t_cread * 1e3:.1f}, window {t_cwin * 1e3:.1f}, bin {t_cbin * 1e3:.1f}, "
          f"total {col_total * 1e3:.1f} ms = {col_total / t_floor:.2f} x floor")
    print(f"  rate   {fig['events_per_s'] / 1e6:6.1f} M events/s   goal >= {GOAL_RATE / 1e6:.0f}   "
          f"{'met' if fig['goal_rate_met'] else 'NOT met'}")
    print(f"  ratio  {fig['ratio_to_floor']:6.2f} x floor        goal <= {GOAL_RATIO:.0f}    "
          f"{'met' if fig['goal_ratio_met'] else 'NOT met'}   "
          f"(window+bin alone: {fig['window_bin_ratio_to_floor']:.2f} x)")
    return fig


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else N_EVENTS
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    main(n)
