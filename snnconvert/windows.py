"""Windows of a stream: bursts found from the event rate, fixed-time and fixed-count windows.

Every function returns a list of (t_start, t_end) in us; a window holds the events with
t_start <= t < t_end (the same half-open rule as EventStream.slice_time).
"""

from __future__ import annotations

import numpy as np

from snnconvert.errors import check_bool, check_float, check_int
from snnconvert.events.stream import EventStream

SUBSTEPS = 4  # rate windows slide by bin_us / SUBSTEPS: 4 samples per window resolve edges to a quarter bin


def rate_trace(stream: EventStream, bin_us: int = 1000) -> tuple[np.ndarray, np.ndarray]:
    """rate(t_k) = #{events with t_k <= t < t_k + bin_us} / bin_us, in events per second.

    Sliding windows of width bin_us start every bin_us / SUBSTEPS (at least 1 us) from the first
    event; the last window is the first that reaches past the last event. Returns (t_k int64, rate
    float64). An empty stream gives two empty arrays.
    """
    bin_us = check_int(bin_us, "bin_us", "rate_trace", 1)
    if not len(stream):
        return np.zeros(0, np.int64), np.zeros(0)
    step = max(bin_us // SUBSTEPS, 1)
    per = -(-bin_us // step)  # sub-bins per window (ceil): window = per * step >= bin_us
    t = stream.t
    t0 = int(t[0])
    k = int((int(t[-1]) - t0) // step) + 1  # sub-bins up to the last event
    # events are time-ordered: sub-bin edges found by binary search, O(k log n) instead of O(n)
    below = np.searchsorted(t, t0 + np.arange(k + per) * step, side="left")  # (k + per,) events before edge
    below = np.minimum(below, len(t))
    starts = np.arange(k)
    counts = below[starts + per] - below[starts]
    return t0 + starts * step, counts * (1e6 / (per * step))


def background_rate(rate: np.ndarray, bin_us: int, percentile: float = 50.0) -> float:
    """The `percentile`-th percentile of the rate trace (default the median), floored at one event
    per bin (1e6 / bin_us events/s).

    The median ignores bursts as long as they cover under half of the recording (a flash). A
    saccade recording moves for most of its length; its quiet stretches are the turns between
    saccades, so a low percentile (about 10) measures them instead.
    Near-zero background: the floor takes over, and relative thresholds become absolute ones,
    upper * 1e6 / bin_us events/s (8 events in one 1 ms bin at the defaults) and lower likewise;
    a silent sensor still gets a finite scale, and a single noise event never starts a burst.
    """
    floor = 1e6 / bin_us
    return max(float(np.percentile(rate, percentile)) if rate.size else 0.0, floor)


def thresholds(rate: np.ndarray, bin_us: int, upper: float, lower: float, relative: bool,
               percentile: float = 50.0) -> tuple[float, float]:
    """(upper, lower) in events/s: as given, or multiplied by background_rate when relative."""
    if relative:
        bg = background_rate(rate, bin_us, percentile)
        return upper * bg, lower * bg
    return float(upper), float(lower)


def bursts(stream: EventStream, bin_us: int = 1000, upper: float = 8.0, lower: float = 2.0,
           relative: bool = True, min_duration_us: int = 500, merge_gap_us: int = 2000,
           percentile: float = 50.0) -> list[tuple[int, int]]:
    """Bursts by hysteresis on the sliding rate r(t_k) (see rate_trace).

    A burst starts at the first window with r > upper and lasts while r >= lower; it spans from
    the first event of that window to the end (t_k + bin_us) of its last window with r >= lower,
    clipped to just past the last event. Bursts separated by less than merge_gap_us are merged; bursts shorter
    than min_duration_us are dropped (after merging). lower > upper is treated as lower = upper.
    Empty stream: no bursts. `percentile` chooses the background statistic (see background_rate).
    """
    owner = "bursts"
    bin_us = check_int(bin_us, "bin_us", owner, 1)
    upper = check_float(upper, "upper", owner, 0.0)
    lower = check_float(lower, "lower", owner, 0.0)
    relative = check_bool(relative, "relative", owner)
    min_duration_us = check_int(min_duration_us, "min_duration_us", owner, 0)
    merge_gap_us = check_int(merge_gap_us, "merge_gap_us", owner, 0)
    percentile = check_float(percentile, "percentile", owner, 0.0, 100.0)
    tk, rate = rate_trace(stream, bin_us)
    if not rate.size:
        return []
    hi, lo = thresholds(rate, bin_us, upper, lower, relative, percentile)
    lo = min(lo, hi)
    above_lo = rate >= lo
    # runs of consecutive windows at or above `lower`
    edges = np.diff(np.r_[0, above_lo.astype(np.int8), 0])
    run_start = np.flatnonzero(edges == 1)
    run_end = np.flatnonzero(edges == -1)  # exclusive
    above_hi = rate > hi
    first_hi = np.r_[np.flatnonzero(above_hi), rate.size]
    # the first window above `upper` inside each run, if any
    pos = np.searchsorted(first_hi, run_start)
    cand = first_hi[pos]
    keep = cand < run_end
    t = stream.t
    t_last = int(t[-1]) + 1
    # a window may open before its first event: start the burst at that event instead
    first_ev = t[np.minimum(np.searchsorted(t, tk[cand[keep]]), len(t) - 1)]
    out = [(int(f), min(int(tk[e - 1]) + bin_us, t_last)) for f, e in zip(first_ev, run_end[keep])]
    merged: list[tuple[int, int]] = []
    for s, e in out:
        if merged and s - merged[-1][1] < merge_gap_us:
            merged[-1] = (merged[-1][0], max(e, merged[-1][1]))
        else:
            merged.append((s, e))
    return [(s, e) for s, e in merged if e - s >= min_duration_us]


def fixed_windows(stream: EventStream, window_us: int, t0: int | None = None) -> list[tuple[int, int]]:
    """Consecutive windows [t0 + k*window_us, t0 + (k+1)*window_us) covering every event from t0.

    t0 defaults to the first event. Empty stream: no windows.
    """
    window_us = check_int(window_us, "window_us", "fixed_windows", 1)
    if not len(stream):
        return []
    t0 = int(stream.t[0]) if t0 is None else int(t0)
    n = max(int((int(stream.t[-1]) - t0) // window_us) + 1, 0)
    return [(t0 + k * window_us, t0 + (k + 1) * window_us) for k in range(n)]


def count_windows(stream: EventStream, window_events: int) -> list[tuple[int, int]]:
    """Windows of window_events consecutive events each (the last may hold fewer).

    A window ends just after its last event's timestamp, or at the next window's first
    timestamp, whichever is later; events sharing a timestamp across a boundary therefore fall
    in the earlier window (half-open intervals cannot split equal timestamps).
    """
    window_events = check_int(window_events, "window_events", "count_windows", 1)
    t = stream.t
    n = len(stream)
    out = []
    i = 0
    while i < n:
        s = int(t[i])
        j = min(i + window_events, n)
        e = int(t[j - 1]) + 1
        j = int(np.searchsorted(t, e, side="left"))
        out.append((s, e))
        i = j
    return out


def pick(stream: EventStream, windows: list[tuple[int, int]], rule: str = "first") -> tuple[int, int] | None:
    """The first window, or the one holding most events (ties: the earliest). None if no window."""
    if not windows:
        return None
    if rule == "first":
        return windows[0]
    w = np.asarray(windows, np.int64)  # (K, 2)
    counts = np.diff(np.searchsorted(stream.t, w.ravel()).reshape(-1, 2), axis=1).ravel()
    return tuple(int(v) for v in w[int(np.argmax(counts))])
