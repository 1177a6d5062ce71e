"""The one event-stream type: a structured array (t, x, y, p) plus the sensor size.

t is in microseconds (int64, non-decreasing), x/y are pixel addresses from 0 (uint16),
p is +1 (ON) or -1 (OFF). An empty stream is valid.
"""

from __future__ import annotations

import numpy as np

from snnconvert.errors import UsageError, check_int

EVENT_DTYPE = np.dtype([("t", "<i8"), ("x", "<u2"), ("y", "<u2"), ("p", "i1")])
MAX_SIDE = 65535  # x/y are uint16


class EventStream:
    """Validated events of one recording.

    Use `EventStream.from_arrays` for raw columns (it converts, checks and can sort);
    the constructor takes an array already in EVENT_DTYPE and checks it the same way.
    """

    __slots__ = ("events", "width", "height")

    def __init__(self, events: np.ndarray, width: int, height: int):
        width = check_int(width, "width", "EventStream", 1, MAX_SIDE)
        height = check_int(height, "height", "EventStream", 1, MAX_SIDE)
        if not isinstance(events, np.ndarray) or events.dtype != EVENT_DTYPE:
            got = events.dtype if isinstance(events, np.ndarray) else type(events).__name__
            raise TypeError(f"EventStream needs a structured array of dtype {EVENT_DTYPE.descr}; got {got}")
        if events.ndim != 1:
            raise UsageError(f"EventStream needs a 1-D event array; got shape {events.shape}")
        _validate(events["t"], events["x"], events["y"], events["p"], width, height)
        self.events = events
        self.width = width
        self.height = height

    @classmethod
    def from_arrays(cls, t, x, y, p, width: int, height: int, sort: bool = False) -> "EventStream":
        """Build from columns. p may be ±1 or 0/1 (0 = OFF). `sort=True` orders by time (stable)."""
        cols = {}
        for name, a in (("t", t), ("x", x), ("y", y), ("p", p)):
            a = np.asarray(a)
            if a.ndim != 1:
                raise UsageError(f"event field '{name}' must be 1-D; got shape {a.shape}")
            if a.size and not (np.issubdtype(a.dtype, np.integer) or np.issubdtype(a.dtype, np.bool_)):
                if not np.issubdtype(a.dtype, np.floating) or not np.all(np.isfinite(a)) or np.any(a != np.round(a)):
                    raise UsageError(f"event field '{name}' must hold integers; got dtype {a.dtype}")
            cols[name] = a
        n = cols["t"].shape[0]
        for name in "xyp":
            if cols[name].shape[0] != n:
                raise UsageError(f"event field '{name}' has {cols[name].shape[0]} values but 't' has {n}")
        width = check_int(width, "width", "EventStream", 1, MAX_SIDE)
        height = check_int(height, "height", "EventStream", 1, MAX_SIDE)
        p = cols["p"]
        # reductions first (no int64 copies of millions of events); indices only on failure
        if n and (int(p.min()) < -1 or int(p.max()) > 1):
            i = int(np.flatnonzero((p < -1) | (p > 1))[0])
            raise UsageError(f"event field 'p' must be +1/-1 (or 1/0) at index {i}; got {p[i]}")
        for name, side in (("x", width), ("y", height)):
            c = cols[name]
            if n and (c.min() < 0 or c.max() >= side):
                i = int(np.flatnonzero((c < 0) | (c >= side))[0])
                raise UsageError(f"event field '{name}' at index {i} is {int(c[i])}, outside the sensor "
                                 f"({'width' if name == 'x' else 'height'} {side})")
        ev = np.empty(n, EVENT_DTYPE)
        ev["t"] = cols["t"]
        ev["x"] = cols["x"]
        ev["y"] = cols["y"]
        ev["p"] = p
        if n and not np.all(p):
            ev["p"][p == 0] = -1  # 0/1 input: 0 is OFF
        if sort and n:
            ev = ev[np.argsort(ev["t"], kind="stable")]
        out = cls.__new__(cls)
        out.events, out.width, out.height = ev, width, height
        t = ev["t"]
        if n > 1 and np.any(t[1:] < t[:-1]):
            i = int(np.flatnonzero(t[1:] < t[:-1])[0]) + 1
            raise UsageError(f"event field 't' decreases at index {i} ({t[i - 1]} -> {t[i]}); "
                             "pass sort=True to order the events by time")
        return out

    @classmethod
    def empty(cls, width: int, height: int) -> "EventStream":
        return cls(np.empty(0, EVENT_DTYPE), width, height)

    # --- views -------------------------------------------------------------------------------
    @property
    def t(self) -> np.ndarray:
        return self.events["t"]

    @property
    def x(self) -> np.ndarray:
        return self.events["x"]

    @property
    def y(self) -> np.ndarray:
        return self.events["y"]

    @property
    def p(self) -> np.ndarray:
        return self.events["p"]

    def __len__(self) -> int:
        return int(self.events.shape[0])

    @property
    def is_empty(self) -> bool:
        return len(self) == 0

    @property
    def duration_us(self) -> int:
        """t[-1] - t[0]; 0 for an empty or single-event stream."""
        return int(self.t[-1] - self.t[0]) if len(self) else 0

    def slice_time(self, t0: int, t1: int) -> "EventStream":
        """Events with t0 <= t < t1 (binary search: the stream is time-ordered)."""
        i0, i1 = np.searchsorted(self.t, [t0, t1], side="left")
        return EventStream(self.events[i0:i1], self.width, self.height)

    def summary(self) -> dict:
        n = len(self)
        on = int(np.count_nonzero(self.p > 0))
        dur = self.duration_us
        return {
            "events": n, "duration_us": dur, "width": self.width, "height": self.height,
            "t_first_us": int(self.t[0]) if n else None, "t_last_us": int(self.t[-1]) if n else None,
            "rate_hz": (n / (dur * 1e-6)) if dur > 0 else 0.0, "on": on, "off": n - on,
            "empty": n == 0,
        }

    def __eq__(self, other) -> bool:
        return (isinstance(other, EventStream) and self.width == other.width and self.height == other.height
                and np.array_equal(self.events, other.events))

    def __repr__(self) -> str:
        if not len(self):
            return f"EventStream(empty, {self.width}x{self.height})"
        return f"EventStream({len(self)} events, {self.duration_us} us, {self.width}x{self.height})"


def _validate(t, x, y, p, width, height) -> None:
    """Range and order checks shared by every constructor; the message names field and index.

    Whole-array reductions first (cheap on millions of events); the offending index is only
    searched for when a check fails.
    """
    if not t.size:
        return
    if int(x.max()) >= width:
        i = int(np.flatnonzero(x >= width)[0])
        raise UsageError(f"event field 'x' at index {i} is {x[i]}, outside the sensor (width {width})")
    if int(y.max()) >= height:
        i = int(np.flatnonzero(y >= height)[0])
        raise UsageError(f"event field 'y' at index {i} is {y[i]}, outside the sensor (height {height})")
    if int(p.min()) < -1 or int(p.max()) > 1 or not np.all(p):
        i = int(np.flatnonzero((p != 1) & (p != -1))[0])
        raise UsageError(f"event field 'p' must be +1 or -1 at index {i}; got {p[i]}")
    if t.size > 1 and np.any(t[1:] < t[:-1]):
        i = int(np.flatnonzero(t[1:] < t[:-1])[0]) + 1
        raise UsageError(f"event field 't' decreases at index {i} ({t[i - 1]} -> {t[i]}); "
                         "pass sort=True to order the events by time")
