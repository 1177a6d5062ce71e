"""Windows of a stream: fixed-time and fixed-count windows, and the pick of one window.

Bursts found from the event rate are the front end's (frontend.windows: integer rate counter).
Every function returns a list of (t_start, t_end) in us; a window holds the events with
t_start <= t < t_end (the same half-open rule as EventStream.slice_time).
"""

from __future__ import annotations

import numpy as np

from snnconvert.errors import check_int
from snnconvert.events.stream import EventStream


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
