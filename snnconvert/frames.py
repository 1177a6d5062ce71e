"""Frames: the events of one window binned into a (C, H, W) tensor, by the rules of the front end
(frontend.py: the same grid address and payload rule the hardware applies event by event).

    count[c, i, j] = #{events in [t0, t1) with  i = y * H // height,  j = x * W // width}
    binary:   1 channel,  frame = (count >= threshold)            values {0, 1}
    count:    1 channel,  frame = min(count, max_count)           values 0..max_count
    polarity: 2 channels (ON, OFF), each min(count, max_count)     values 0..max_count

Burst windows come from the front end's integer rate counter (frontend.windows). Subsampling is
sum-pooling: sensor pixel (x, y) goes to target pixel (x*W//width, y*H//height),
with H = W = size. When the sensor side is not a multiple of size, target pixels gather
floor(side/size) or ceil(side/size) sensor pixels, the larger ones spread evenly across the
frame (no pixel is dropped or counted twice). A non-square sensor is stretched to a square frame.
Binary mode ignores polarity; in it no pixel carries more than one spike per window.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np

from snnconvert import frontend, plots
from snnconvert.errors import UsageError, check_choice, check_int
from snnconvert.events.stream import EventStream
from snnconvert.settings.frames import MODES


def channels(mode: str) -> int:
    return 2 if mode == "polarity" else 1


def input_q(mode: str, max_count: int) -> int:
    """Largest frame value: 1 for binary, max_count otherwise."""
    return 1 if mode == "binary" else int(max_count)


def _check(mode, size, threshold, max_count):
    owner = "frames"
    check_choice(mode, "mode", owner, MODES)
    check_int(size, "size", owner, 1, 1024)
    check_int(threshold, "threshold", owner, 1)
    check_int(max_count, "max_count", owner, 1, 255)


def bin_events(x, y, p, width: int, height: int, group, n_groups: int, mode: str = "binary", size: int = 16,
               threshold: int = 1, max_count: int = 4) -> np.ndarray:
    """Bin events tagged by group (window or recording index) into (n_groups, C, size, size) float32;
    a negative group is outside every window (not counted). See _binned for the one-pass rule."""
    _check(mode, size, threshold, max_count)
    block = channels(mode) * size * size
    group = np.asarray(group)
    if group.ndim and group.size and group.min() < -1:
        group = np.maximum(group, -1)
    return _binned(x, y, p, width, height, (group + 1) * block, n_groups, mode, size, threshold, max_count)


def bin_segments(x, y, p, width: int, height: int, bounds, mode: str = "binary", size: int = 16,
                 threshold: int = 1, max_count: int = 4) -> np.ndarray:
    """Frames (K, C, size, size) float32 of K windows that are contiguous runs of events: window j holds
    events bounds[2j] .. bounds[2j + 1] - 1 (bounds rising, 2K values); the events between the runs
    are not counted. The group of every event comes from one np.repeat over the 2K + 1 runs."""
    _check(mode, size, threshold, max_count)
    block = channels(mode) * size * size
    bounds = np.asarray(bounds, np.int64).ravel()
    k = bounds.size // 2
    runs = np.diff(np.concatenate([[0], bounds, [len(x)]]))  # (2K + 1,) gap, window, gap, ..., gap
    offset = np.zeros(runs.size, np.int64)
    offset[1::2] = np.arange(1, k + 1) * block
    return _binned(x, y, p, width, height, np.repeat(offset, runs), k, mode, size, threshold, max_count)


def _binned(x, y, p, width: int, height: int, offset, n_groups: int, mode: str, size: int, threshold: int,
            max_count: int) -> np.ndarray:
    """bin(e) = offset(e) + frontend.grid_address(e), offset(e) = (group(e) + 1) * C * size^2 (0: outside
    every window); one np.bincount over all events, block 0 dropped, then frontend.payload. The
    address array is int64 (the type np.bincount counts without a copy) and the offsets are added in
    place: no Python loop per event or per group."""
    c = channels(mode)
    plane = size * size
    block = c * plane
    idx = frontend.grid_address(x, y, p, width, height, size, c == 2)  # (E,) target pixel, a fresh array
    idx += offset
    counts = np.bincount(idx, minlength=(n_groups + 1) * block)[block:(n_groups + 1) * block]
    counts = counts.reshape(n_groups, c, size, size)  # (K, C, H, W)
    return frontend.payload(counts, mode, threshold, max_count).astype(np.float32)


def bin_windows(stream: EventStream, windows, mode: str = "binary", size: int = 16, threshold: int = 1,
                max_count: int = 4) -> np.ndarray:
    """Frames of several windows of one stream: (K, C, size, size). Overlapping windows are not
    allowed (each event is binned once); events outside every window are ignored."""
    w = np.asarray(windows, np.int64).reshape(-1, 2)  # (K, 2)
    if w.size and (np.any(w[:, 1] < w[:, 0]) or np.any(w[1:, 0] < w[:-1, 1])):
        raise UsageError("windows must be ordered, non-overlapping (t_start, t_end) pairs")
    # windows are contiguous index ranges of the time-ordered events: found by binary search
    bounds = np.searchsorted(stream.t, w.ravel())  # (2K,) event index where each window opens/closes
    return bin_segments(stream.x, stream.y, stream.p, stream.width, stream.height, bounds, mode, size, threshold,
                        max_count)


def bin_window(stream: EventStream, t0: int, t1: int, mode: str = "binary", size: int = 16, threshold: int = 1,
               max_count: int = 4) -> np.ndarray:
    """The frame (C, size, size) float32 of the events with t0 <= t < t1 (see module docstring)."""
    return bin_windows(stream, [(t0, t1)], mode, size, threshold, max_count)[0]


def windows_of(stream: EventStream, section: dict) -> list[tuple[int, int]]:
    """All windows of `stream` by the window rule of a resolved [frames] section (every key present;
    "all": one window holding every event, none for an empty stream)."""
    from snnconvert import windows
    kind = section["window"]
    if kind == "burst":
        params = _front_end(section, stream.width, stream.height)
        return [(int(a), int(b)) for a, b in frontend.windows(stream.t, params)]
    if kind == "fixed":
        return windows.fixed_windows(stream, section["window_us"])
    if kind == "all":
        return [_whole(stream)] if len(stream) else []
    return windows.count_windows(stream, section["window_events"])


def _front_end(section: dict, width: int, height: int) -> frontend.FrontEnd:
    """FrontEnd.from_section, built once per section and sensor rather than once per recording (its exact
    conversions of the float keys cost about 50 us, a tenth of the windows of a 2,000-event recording)."""
    try:
        return _front_end_of(tuple(sorted(section.items())), int(width), int(height))
    except TypeError:  # a section holding an unhashable value: not cached
        return frontend.FrontEnd.from_section(section, width, height)


@functools.lru_cache(maxsize=16)
def _front_end_of(items: tuple, width: int, height: int) -> frontend.FrontEnd:
    return frontend.FrontEnd.from_section(dict(items), width, height)


def _whole(stream: EventStream) -> tuple[int, int]:
    return int(stream.t[0]), int(stream.t[-1]) + 1


def frame_window(stream: EventStream, section: dict) -> tuple[tuple[int, int], bool]:
    """The window that makes a recording's frame, and whether it came from the rule (True) or the
    fallback (False): a recording where the rule finds no window uses all of its events."""
    from snnconvert import windows
    chosen = windows.pick(stream, windows_of(stream, section), section["pick"])
    if chosen is not None:
        return chosen, True
    if len(stream):
        return _whole(stream), False
    return (0, 0), False


def windows_used(section: dict) -> int:
    """K, the windows each recording gives: 1 for per_recording "one", else the `windows` key."""
    return 1 if section["per_recording"] == "one" else int(section["windows"])


def frame_windows(stream: EventStream, section: dict) -> tuple[list[tuple[int, int]], bool]:
    """The K = windows_used(section) windows that make a recording's frames, and whether the rule
    gave them (True) or the fallback did (False).

    per_recording "one": [frame_window]. "each"/"stack": the first K windows of the rule; a recording
    with fewer is cut into K equal windows over its whole span instead (t_k = t0 + k * span // K), so
    every recording gives the same K samples or channels, in time order.
    """
    k = windows_used(section)
    if section["per_recording"] == "one":
        w, ok = frame_window(stream, section)
        return [w], ok
    found = windows_of(stream, section)
    if len(found) >= k:
        return [tuple(v) for v in found[:k]], True
    t0, t1 = _whole(stream) if len(stream) else (0, 0)
    edges = [t0 + i * (t1 - t0) // k for i in range(k + 1)]
    return list(itertools.pairwise(edges)), False


# --- plots ----------------------------------------------------------------------------------


def _frame_image(frame: np.ndarray) -> np.ndarray:
    """(C, H, W) -> (H, W) for display: polarity frames show ON - OFF."""
    return frame[0] - frame[1] if frame.shape[0] == 2 else frame[0]


def frame_style(mode: str, q: int) -> dict:
    """Fixed colour scale of a frame kind, the same for every frame of a figure.

        binary:   0 (no spike) .. 1 (spike),            white -> black
        count:    0 .. q events per pixel (clipped),     white -> dark
        polarity: -q (OFF) .. 0 .. +q (ON) of ON - OFF,  diverging, white at zero

    The scale never depends on the frame's own values: an all-set frame stays black, an empty
    polarity background stays white.
    """
    check_choice(mode, "mode", "frames", MODES)
    q = max(1, int(q))
    if mode == "binary":
        return {"cmap": "Greys", "vmin": 0.0, "vmax": 1.0, "label": "spike (1) / no spike (0)", "ticks": [0, 1]}
    if mode == "count":
        return {"cmap": "Greys", "vmin": 0.0, "vmax": float(q), "label": f"events per pixel (clipped at {q})",
                "ticks": None}
    return {"cmap": "RdBu_r", "vmin": -float(q), "vmax": float(q),
            "label": f"ON - OFF events per pixel (red ON, blue OFF; clipped at {q})", "ticks": None}


def mode_of(frame_shape, mode: str | None) -> str:
    """The frame kind to draw: the given mode, else polarity for 2 channels and count for 1."""
    if mode is not None:
        return mode
    return "polarity" if frame_shape[0] == 2 else "count"


def _draw_frame(ax, frame: np.ndarray, style: dict):
    ax.set_xticks([])
    ax.set_yticks([])
    return ax.imshow(_frame_image(np.asarray(frame)), cmap=style["cmap"], vmin=style["vmin"], vmax=style["vmax"],
                     interpolation="nearest")


def _colorbar(fig, im, axes, style: dict, **kw):
    cb = fig.colorbar(im, ax=axes, label=style["label"], **kw)
    if style["ticks"] is not None:
        cb.set_ticks(style["ticks"])
    return cb


def plot_recording(stream: EventStream, trace: dict, frames, path, title: str = "", mode: str | None = None,
                   q: int | None = None):
    """The front end's rate trace (`plots.draw_rate`: events per bin, the thresholds per bin, the
    windows shaded) with the frame of each window (up to 6) beside it on one fixed colour scale
    (`frame_style(mode, q)`). trace: `frontend.trace`, or for other window rules a dict with
    upper/lower None."""
    plt = plots.pyplot()
    frames = [np.asarray(f) for f in list(frames)[:6]]
    ncol = max(len(frames), 1)
    fig = plt.figure(figsize=(4.6 + 2.2 * ncol, 3.4))
    grid = fig.add_gridspec(1, 2 + ncol, width_ratios=[3.5] + [1] * ncol + [0.12])
    ax = fig.add_subplot(grid[0, 0])
    plots.draw_rate(ax, trace)
    ax.set_title(title or f"{len(stream)} events, {len(trace['windows'])} windows", fontsize=9)
    im = None
    if frames:
        m = mode_of(frames[0].shape, mode)
        style = frame_style(m, q if q is not None else max(1.0, max(float(f.max()) for f in frames)))
    for i, f in enumerate(frames):
        a = fig.add_subplot(grid[0, 1 + i])
        im = _draw_frame(a, f, style)
        a.set_title(f"window {i + 1}: {int(np.count_nonzero(f))} px", fontsize=8)
    if im is not None:
        cb = fig.colorbar(im, cax=fig.add_subplot(grid[0, 1 + ncol]))
        cb.set_label(style["label"], fontsize=7)
        if style["ticks"] is not None:
            cb.set_ticks(style["ticks"])
    else:
        a = fig.add_subplot(grid[0, 1])
        a.text(0.5, 0.5, "no window", ha="center", va="center")
        a.axis("off")
    return plots.save_png(fig, path)


def recording_trace(stream: EventStream, section: dict) -> dict:
    """The trace `plot_recording` draws for a resolved [frames] section: the front end's counter
    (`frontend.trace`) with the section's windows; thresholds only for burst windows."""
    params = frontend.FrontEnd.from_section(section, stream.width, stream.height)
    tr = frontend.trace(stream.t, params)
    if section["window"] != "burst":
        tr.update(upper=None, lower=None, windows=np.asarray(windows_of(stream, section), np.int64).reshape(-1, 2))
    return tr


def frames_figure(X, y, classes=None, per_class: int = 8, mode: str | None = None, q: int | None = None,
                  caption: str = ""):
    """The figure of `plot_frames`: one row per class (every class, also one without examples),
    up to per_class examples each, one fixed colour scale with a colour bar, caption on top."""
    plt = plots.pyplot()
    X = np.asarray(X)  # (N, C, H, W)
    y = np.asarray(y)
    labels = list(range(len(classes))) if classes is not None else [int(v) for v in np.unique(y)]
    m = mode_of(X.shape[1:], mode)
    style = frame_style(m, q if q is not None else (1 if m == "binary" else max(1, int(X.max(initial=0)))))
    rows = max(1, len(labels))
    per_class = max(1, min(per_class, max((int(np.sum(y == lab)) for lab in labels), default=1)))
    fig, axes = plt.subplots(rows, per_class, figsize=(1.6 + per_class * 0.9, 0.8 + rows * 0.95), squeeze=False,
                             layout="constrained")
    im = None
    for r, lab in enumerate(labels):
        idx = np.flatnonzero(y == lab)
        for c in range(per_class):
            a = axes[r, c]
            if c < min(idx.size, per_class):
                im = _draw_frame(a, X[idx[c]], style)
            else:
                a.axis("off")
        name = str(classes[lab]) if classes is not None else str(lab)
        if idx.size:
            axes[r, 0].set_ylabel(f"{name}\n({idx.size})", rotation=0, labelpad=16, va="center", fontsize=8)
        else:
            axes[r, 0].text(0.0, 0.5, f"{name}: no example in this split", transform=axes[r, 0].transAxes,
                            va="center", fontsize=8).set_in_layout(False)
    if im is not None:
        _colorbar(fig, im, axes[:, -1].tolist(), style, shrink=min(1.0, 6 / rows), aspect=30)
    fig.suptitle(caption or f"{m} frames", fontsize=9)
    return fig


def frames_caption(split: str, mode: str, shape, threshold: int, max_count: int) -> str:
    """'train split: binary frames 1x16x16, a pixel spikes at >= 16 events' and the like."""
    dims = "x".join(str(int(d)) for d in shape)
    if mode == "binary":
        rule = f"a pixel spikes at >= {threshold} event{'s' if threshold != 1 else ''}"
    else:
        rule = f"events per pixel clipped at {max_count}"
    return f"{split} split: {mode} frames {dims}, {rule}; row label = class (examples in the split)"


def plot_frames(X, y, path, classes=None, per_class: int = 8, mode: str | None = None, q: int | None = None,
                caption: str = ""):
    """PNG grid of example frames: one row per class, up to per_class examples each (see frames_figure)."""
    return plots.save_png(frames_figure(X, y, classes, per_class, mode, q, caption), path)
