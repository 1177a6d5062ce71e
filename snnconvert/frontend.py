"""The front end in integer arithmetic: rate counter -> windows -> subsample -> threshold-and-gate.

This module is the one definition of what the network sees. Training frames (frames.py, data/),
`snnconvert classify` and the hardware reference all call it; it needs numpy alone (no torch).
Every quantity is an integer; where a recipe gives a float (upper, lower), `FrontEnd.from_section`
turns it into integers once, exactly (fractions.Fraction), with the rounding rule stated there.

Rate counter (fixed bins, no sliding)
    t0 = the time the counter starts (default: the first event). Bin k holds the events with
        t0 + k*bin_us <= t < t0 + (k+1)*bin_us,             c_k = #events in bin k, k = 0 .. n-1,
    n = (t_last - t0) // bin_us + 1: the last bin is the one holding the last event.
    Integer thresholds per bin, absolute (relative = false):
        hi_k = upper_count,  lo_k = lower_count             (counts per bin, constants)
    relative (relative = true), against a causal background count: the sum of the counts of the
    last B = background_bins closed bins before bin k (bins in which no window was open; bins
    before t0 count 0; the current bin is not part of it). In hardware: a B-deep FIFO of bin
    counts and its running sum, pushed at the end of every bin that ends closed, so the
    background freezes while a window is open and a burst never raises its own threshold:
        S_k  = max(sum of the last B closed-bin counts,  B)  (floor: one event per bin)
        hi_k = floor(U * S_k / (16 * B)) + 1                (the smallest count above upper x background)
        lo_k = ceil(L * S_k / (16 * B))                     (the smallest count at lower x background)
    U = upper_16, L = lower_16: upper and lower in sixteenths. Compare form without division:
    c_k >= hi_k  <=>  16*B*c_k > U*S_k;  c_k >= lo_k  <=>  16*B*c_k >= L*S_k. In both modes
    lo_k = min(lo_k, hi_k) (a lower above the upper acts as the upper).
    The background is a running count over a stated past (B closed bins), never a statistic of
    the whole recording (a median or percentile), which hardware cannot know in advance.
    A bin that closes a window (c_k < lo_k) is a closed bin and enters the background.
    Near-zero background: the floor S_k >= B makes
    the thresholds absolute, hi = floor(U/16) + 1 and lo = ceil(L/16) (9 and 2 events per bin at
    upper = 8, lower = 2): a silent sensor keeps finite thresholds and one noise event opens nothing.

Hysteresis (one state bit)
    closed, c_k >= hi_k  -> open at bin k            open, c_k >= lo_k -> stays open
    open,   c_k <  lo_k  -> closes: window = bins [open bin, k)
    First bin: the counter starts closed with S_0 = B (the floor), so a window can open at bin 0.
    Last bin: a window still open at bin n-1 closes there: window = bins [open bin, n).
    Merge, then minimum duration (both in bins): windows separated by fewer than merge_bins
    closed bins are merged (merge_bins = 0 or 1: no merging, since a gap holds at least one bin);
    merged windows shorter than min_bins bins are dropped. A window [a, b) in bins spans the times
    [t0 + a*bin_us, t0 + b*bin_us) (half-open, like every window of the tool).

Subsample (sensor -> grid), the rule of frames.bin_events
    grid row i = y * size // height,  grid column j = x * size // width   (floor division)
    Uneven sizes: when a sensor side is not a multiple of size, grid pixels gather floor(side/size)
    or ceil(side/size) sensor pixels, spread evenly; no sensor pixel is dropped or counted twice.
    Channel: 0, or in polarity mode 0 for ON (p > 0) and 1 for OFF (p < 0).

Threshold and gate (one input event per grid pixel and window)
    binary    the pixel emits at the time of its `threshold`-th event in the window, payload 1;
              later events of that pixel are dropped. Emission order: time, then arrival order.
    count,    the pixel's count n is only known at window close: every pixel with n >= 1 emits at
    polarity  the window end t1 with payload min(n, max_count) (p = bit_length(max_count) bits);
              emission order: by address (channel, row, column), the order the payload-coded
              network reads its inputs at window close.
    Either way frame(gate(...)) is exactly the frame the network is trained on:
    binary (n >= threshold), count/polarity min(n, max_count) (`pixel_values`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from snnconvert.errors import UsageError, check_bool, check_choice, check_int

MODES = ("binary", "count", "polarity")
FRACTION_BITS = 4  # upper and lower are held in sixteenths in relative mode
SCALE = 1 << FRACTION_BITS
GATED_DTYPE = np.dtype([("t", "<i8"), ("x", "<u2"), ("y", "<u2"), ("c", "u1"), ("payload", "<u2")])
OWNER = "the front end"


def _half_up(v: Fraction) -> int:
    """round(v) with halves up, exact (v >= 0)."""
    return math.floor(v + Fraction(1, 2))


@dataclass(frozen=True)
class FrontEnd:
    """The front end's integer parameters (see the module docstring for each rule).

    bin_us, background_bins (B), min_bins, merge_bins: rate counter; relative: thresholds against
    the background; upper_16, lower_16: the relative thresholds in sixteenths; upper_count,
    lower_count: the absolute thresholds in events per bin; width, height: the sensor; size: grid
    side; mode, threshold, max_count: the payload rule of the input layer.
    """

    bin_us: int
    relative: bool
    upper_16: int
    lower_16: int
    upper_count: int
    lower_count: int
    background_bins: int
    min_bins: int
    merge_bins: int
    width: int
    height: int
    size: int
    mode: str
    threshold: int
    max_count: int

    def __post_init__(self):
        for name, lo, hi in (("bin_us", 1, None), ("upper_16", 0, None), ("lower_16", 0, None),
                             ("upper_count", 1, None), ("lower_count", 0, None), ("background_bins", 1, 1 << 20),
                             ("min_bins", 0, None), ("merge_bins", 0, None), ("width", 1, 65536),
                             ("height", 1, 65536), ("size", 1, 1024), ("threshold", 1, None),
                             ("max_count", 1, 255)):
            check_int(getattr(self, name), name, OWNER, lo, hi)
        check_bool(self.relative, "relative", OWNER)
        check_choice(self.mode, "mode", OWNER, MODES)

    @classmethod
    def from_section(cls, section: dict, width: int, height: int) -> FrontEnd:
        """The integers of a resolved [frames] section for a width x height sensor. Exact conversions:

            upper_16 = round(16 * upper), lower_16 = round(16 * lower)          (halves up)
            upper_count = floor(upper * bin_us / 1e6) + 1   (events/s -> the smallest count above it)
            lower_count = ceil(lower * bin_us / 1e6)        (events/s -> the smallest count at it)
            min_bins = ceil(min_duration_us / bin_us),  merge_bins = ceil(merge_gap_us / bin_us)
        """
        b = int(section["bin_us"])
        up, low = Fraction(section["upper"]), Fraction(section["lower"])
        per_bin = Fraction(b, 1_000_000)
        return cls(bin_us=b, relative=bool(section["relative"]), upper_16=_half_up(up * SCALE),
                   lower_16=_half_up(low * SCALE), upper_count=math.floor(up * per_bin) + 1,
                   lower_count=math.ceil(low * per_bin), background_bins=int(section["background_bins"]),
                   min_bins=-(-int(section["min_duration_us"]) // b), merge_bins=-(-int(section["merge_gap_us"]) // b),
                   width=int(width), height=int(height), size=int(section["size"]), mode=section["mode"],
                   threshold=int(section["threshold"]), max_count=int(section["max_count"]))

    @property
    def channels(self) -> int:
        return 2 if self.mode == "polarity" else 1

    @property
    def payload_max(self) -> int:
        """q, the largest payload: 1 for binary, max_count otherwise."""
        return 1 if self.mode == "binary" else self.max_count


# --- rate counter and windows -----------------------------------------------------------------


def _times(t) -> np.ndarray:
    t = np.asarray(t)
    if t.ndim != 1 or (t.size and t.dtype.kind not in "iu"):
        raise UsageError(f"event times must be a 1-D integer array; got shape {t.shape}, dtype {t.dtype}")
    t = t.astype(np.int64, copy=False)
    if t.size > 1 and np.any(t[1:] < t[:-1]):
        raise UsageError("event times must be sorted (non-decreasing)")
    return t


def rate_counts(t, params: FrontEnd, t0: int | None = None) -> tuple[int, np.ndarray]:
    """(t0, c): c_k = #{t0 + k*bin_us <= t < t0 + (k+1)*bin_us}, k = 0 .. n-1, n = (t_last - t0)//bin_us + 1.

    t: sorted integer times (us). t0 defaults to the first event; events before t0 are not counted.
    No event (at or after t0): c is empty. Cost: one binary search per bin edge (O(n log E)).
    """
    t = _times(t)
    if not t.size:
        return (0 if t0 is None else int(t0)), np.zeros(0, np.int64)
    t0 = int(t[0]) if t0 is None else int(t0)
    last = int(t[-1])
    if last < t0:
        return t0, np.zeros(0, np.int64)
    n = (last - t0) // params.bin_us + 1
    edges = t0 + np.arange(n + 1, dtype=np.int64) * params.bin_us
    return t0, np.diff(np.searchsorted(t, edges, side="left")).astype(np.int64)


def scan(counts, params: FrontEnd) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The counter bin by bin: (hi_k, lo_k, open_k), int64, int64, bool per bin (module docstring).

    open_k: a window is open during bin k (it opened at or before k and did not close at k).
    Relative thresholds follow the background of closed bins (a FIFO of the last B of them);
    absolute ones are constants. lo_k <= hi_k always.

    Computed by whole-array passes (`_scan_arrays`): given a guess of the open bins, the background,
    thresholds and hysteresis of every bin follow without a loop; the guess is refined until it
    reproduces itself, which only the bin-by-bin result does (`_scan_loop`, the definition, used
    when the iteration does not settle or int64 could overflow).
    """
    c = np.asarray(counts, np.int64)
    n = c.size
    if not params.relative:
        hi_c = params.upper_count
        lo_c = min(params.lower_count, hi_c)
        hi, lo = np.full(n, hi_c, np.int64), np.full(n, lo_c, np.int64)
        return hi, lo, _hysteresis(c, hi, lo)
    b = params.background_bins
    big = max(params.upper_16, params.lower_16, 1) * (max(int(c.sum()), b) + 1)
    if n and big < 1 << 62:
        is_open = np.zeros(n, bool)
        for _ in range(SCAN_ROUNDS):
            hi, lo = _relative_thresholds(c, is_open, params)
            nxt = _hysteresis(c, hi, lo)
            if np.array_equal(nxt, is_open):
                return hi, lo, is_open
            is_open = nxt
    return _scan_loop(c, params)


SCAN_ROUNDS = 32  # refinements of the open-bin guess before `scan` falls back to the bin-by-bin loop


def _relative_thresholds(c: np.ndarray, is_open: np.ndarray, params: FrontEnd) -> tuple[np.ndarray, np.ndarray]:
    """(hi_k, lo_k) of every bin for a given set of open bins: S_k = the sum of the last B counts of
    closed bins before k (the closed-bin sequence's cumulative sum at two positions)."""
    b = params.background_bins
    closed = ~is_open
    z = np.concatenate(([0], np.cumsum(c[closed])))          # z[m] = sum of the first m closed-bin counts
    m = np.cumsum(closed) - closed                            # closed bins before bin k
    s = np.maximum(z[m] - z[np.maximum(m - b, 0)], b)
    den = SCALE * b
    hi = params.upper_16 * s // den + 1
    lo = np.minimum(-(-params.lower_16 * s // den), hi)
    return hi, lo


def _hysteresis(c: np.ndarray, hi: np.ndarray, lo: np.ndarray) -> np.ndarray:
    """open_k = c_k >= hi_k if closed at k-1, else c_k >= lo_k (closed before bin 0), for lo <= hi:
    a bin with c >= hi is open, one with c < lo closed, any other keeps the state of the bin before."""
    up = c >= hi
    decided = up | (c < lo)
    last = np.maximum.accumulate(np.where(decided, np.arange(c.size), -1)) if c.size else np.zeros(0, np.int64)
    return (last >= 0) & up[np.maximum(last, 0)]


def _scan_loop(c: np.ndarray, params: FrontEnd) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The relative counter of `scan`, one bin at a time in Python integers (its definition)."""
    n = c.size
    b = params.background_bins
    u, low, den = params.upper_16, params.lower_16, SCALE * b
    fifo = [0] * b  # the last B closed-bin counts (ring buffer), all 0 before t0
    pos = total = 0
    hi, lo, is_open = [0] * n, [0] * n, [False] * n
    state = False
    for k, v in enumerate(c.tolist()):
        s = max(b, total)
        h = u * s // den + 1
        lw = -(-low * s // den)
        lw = min(lw, h)
        hi[k], lo[k] = h, lw
        state = v >= lw if state else v >= h
        if state:
            is_open[k] = True
        else:  # a closed bin enters the background
            total += v - fifo[pos]
            fifo[pos] = v
            pos = pos + 1 if pos + 1 < b else 0
    return np.asarray(hi, np.int64), np.asarray(lo, np.int64), np.asarray(is_open, bool)


def bin_thresholds(counts, params: FrontEnd) -> tuple[np.ndarray, np.ndarray]:
    """(hi_k, lo_k) int64 per bin: the opening and closing counts of `scan`."""
    hi, lo, _ = scan(counts, params)
    return hi, lo


def _runs(is_open: np.ndarray) -> np.ndarray:
    """(K, 2) [first, end) of each run of True."""
    edges = np.diff(np.r_[0, is_open.astype(np.int8), 0])
    return np.stack([np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)], axis=1)


def window_bins(counts, params: FrontEnd) -> np.ndarray:
    """Windows in bins: (K, 2) int64 [open bin, close bin), after hysteresis (`scan`), merge and
    minimum duration (module docstring). A window open at the last bin closes with it."""
    return _merge(_runs(scan(counts, params)[2]), params)


def _merge(raw: np.ndarray, params: FrontEnd) -> np.ndarray:
    """Merge windows (sorted, disjoint) separated by fewer than merge_bins bins, then drop those
    shorter than min_bins."""
    raw = np.asarray(raw, np.int64).reshape(-1, 2)
    if len(raw):
        first = np.flatnonzero(np.r_[True, raw[1:, 0] - raw[:-1, 1] >= params.merge_bins])  # a group starts
        raw = np.stack([raw[first, 0], raw[np.r_[first[1:] - 1, len(raw) - 1], 1]], axis=1)
    return raw[raw[:, 1] - raw[:, 0] >= params.min_bins]


def trace(t, params: FrontEnd, t0: int | None = None) -> dict:
    """Everything the counter sees, for plots and reports: {"t0", "bin_us", "counts", "upper", "lower"
    (hi_k, lo_k per bin), "windows" ((K, 2) in us)}."""
    t0, c = rate_counts(t, params, t0)
    hi, lo, is_open = scan(c, params)
    return {"t0": t0, "bin_us": params.bin_us, "counts": c, "upper": hi, "lower": lo,
            "windows": t0 + _merge(_runs(is_open), params) * params.bin_us}


def windows(t, params: FrontEnd, t0: int | None = None) -> np.ndarray:
    """(K, 2) int64 window boundaries in us, [t0 + a*bin_us, t0 + b*bin_us) for each window [a, b) in
    bins (`window_bins`); t0 as in `rate_counts`. No event: no window."""
    t0, c = rate_counts(t, params, t0)
    return t0 + window_bins(c, params) * params.bin_us


# --- subsample, threshold and gate ------------------------------------------------------------


def _check_on_sensor(x: np.ndarray, y: np.ndarray, width: int, height: int) -> None:
    if x.size and (int(x.min()) < 0 or int(x.max()) >= width or int(y.min()) < 0 or int(y.max()) >= height):
        raise UsageError(f"event addresses must lie on the {width}x{height} sensor of the front end")


def grid_address(x, y, p, width: int, height: int, size: int, polarity: bool) -> np.ndarray:
    """Flat grid address (c*size + i)*size + j, int64, with i = y*size//height, j = x*size//width
    (floor division, by lookup tables) and c = 1 for OFF (p < 0) when `polarity`, else 0.
    Addresses must lie on the width x height sensor (refused otherwise)."""
    x = np.asarray(x)
    y = np.asarray(y)
    _check_on_sensor(x, y, width, height)
    # the address of every sensor pixel (row-major; OFF pixels after them), then one gather: the flat
    # sensor index y * width + x (+ width * height for OFF) is built in place in one int64 array and
    # replaced by its address (np.take into itself: each element is read before it is written)
    lut = ((np.arange(height, dtype=np.int64) * size // height)[:, None] * size
           + (np.arange(width, dtype=np.int64) * size // width)[None, :]).ravel()  # (height * width,)
    idx = y.astype(np.int64)  # a fresh array, whatever y's type
    idx *= width
    idx += x
    if polarity:
        lut = np.concatenate([lut, lut + size * size])
        idx += (np.asarray(p) < 0) * (width * height)
    lut.take(idx, out=idx, mode="clip")  # in range (checked above): "clip" skips take's bounds buffer
    return idx


def payload(counts, mode: str, threshold: int, max_count: int) -> np.ndarray:
    """The payload of a pixel that saw n = `counts` events in a window (0: no event), int64:
    binary (n >= threshold), count/polarity min(n, max_count)."""
    n = np.asarray(counts, np.int64)
    if mode == "binary":
        return (n >= threshold).astype(np.int64)
    return np.minimum(n, max_count)


def subsample(x, y, params: FrontEnd) -> tuple[np.ndarray, np.ndarray]:
    """(grid column j, grid row i) int64: j = x * size // width, i = y * size // height (floor)."""
    idx = grid_address(x, y, None, params.width, params.height, params.size, False)
    return idx % params.size, idx // params.size


def pixel_index(x, y, p, params: FrontEnd) -> np.ndarray:
    """Flat grid address (c*size + i)*size + j of each event (`grid_address` with the params)."""
    return grid_address(x, y, p, params.width, params.height, params.size, params.channels == 2)


def pixel_values(counts, params: FrontEnd) -> np.ndarray:
    """`payload` with the params: binary (n >= threshold), count/polarity min(n, max_count)."""
    return payload(counts, params.mode, params.threshold, params.max_count)


@dataclass(frozen=True)
class Columns:
    """Contiguous t, x, y, p arrays of an event stream: a structured array's fields are strided views,
    and a binary search on a strided view copies it, so a long stream gated window by window is
    split into columns once (`columns`)."""

    t: np.ndarray
    x: np.ndarray
    y: np.ndarray
    p: np.ndarray


def columns(events) -> Columns:
    """The Columns of an EventStream, a structured event array or Columns (returned as is)."""
    if isinstance(events, Columns):
        return events
    t, x, y, p = (events.t, events.x, events.y, events.p) if hasattr(events, "x") else \
        (np.asarray(events)[k] for k in ("t", "x", "y", "p"))
    return Columns(*(np.ascontiguousarray(v) for v in (t, x, y, p)))


def _fields(events) -> tuple:
    """(t, x, y, p) of Columns, an EventStream or a structured event array (views, not copies)."""
    if isinstance(events, Columns):
        return events.t, events.x, events.y, events.p
    ev = np.asarray(getattr(events, "events", events))
    return ev["t"], ev["x"], ev["y"], ev["p"]


def _grid_keys(x, y, p, params: FrontEnd) -> np.ndarray:
    """`pixel_index` in the smallest unsigned dtype that holds C*size*size addresses. A side that is a
    multiple of size divides by side // size (equal to v*size//side); others go through a table."""
    x, y = np.asarray(x), np.asarray(y)
    _check_on_sensor(x, y, params.width, params.height)
    plane = params.size * params.size
    dt = np.uint16 if params.channels * plane <= 1 << 16 else np.uint32
    parts = []
    for v, side, mult in ((y, params.height, params.size), (x, params.width, 1)):
        if side % params.size == 0:
            g = (v // (side // params.size)).astype(dt)
        else:
            g = (np.arange(side, dtype=np.int64) * params.size // side).astype(dt)[v]
        parts.append(g * dt(mult) if mult != 1 else g)
    key = parts[0] + parts[1]
    if params.channels == 2:
        key += (np.asarray(p) < 0).astype(dt) * dt(plane)
    return key


def _window_events(events, windows, params: FrontEnd, check_order: bool = True):
    """The events of every window, concatenated window after window: (first (K,), lengths (K,),
    grid keys of the concatenated events, t). check_order refuses times that decrease inside a window."""
    t, x, y, p = _fields(events)
    if t.size and t.dtype.kind not in "iu":
        raise UsageError(f"event times must be a 1-D integer array; got shape {t.shape}, dtype {t.dtype}")
    w = np.asarray(windows, np.int64).reshape(-1, 2)
    first = np.searchsorted(t, w[:, 0], side="left")
    lengths = np.maximum(np.searchsorted(t, w[:, 1], side="left") - first, 0)
    if check_order and t.size > 1:
        down = t[1:] < t[:-1]
        if down.any():  # a decrease at i (t[i+1] < t[i]) matters when both events lie in one window
            cum = np.r_[0, np.cumsum(down)]
            inside = lengths > 1
            if np.any(cum[(first + lengths - 1)[inside]] - cum[first[inside]] > 0):
                raise UsageError("event times must be sorted (non-decreasing)")
    if len(w) == 1:
        sl = slice(int(first[0]), int(first[0] + lengths[0]))
        keys = _grid_keys(x[sl], y[sl], p[sl], params)
    else:
        sl = [slice(int(a), int(a + n)) for a, n in zip(first.tolist(), lengths.tolist())]
        keys = _grid_keys(*(np.concatenate([v[s] for s in sl]) if sl else v[:0] for v in (x, y, p)), params)
    return first, lengths, keys, t


def _counts(keys: np.ndarray, lengths: np.ndarray, params: FrontEnd) -> np.ndarray:
    """(K, C*size*size) int64: n[k, a] = events of grid address a in window k (one bincount)."""
    k, plane_all = len(lengths), params.channels * params.size * params.size
    if k == 1:
        return np.bincount(keys, minlength=plane_all).reshape(1, plane_all)
    dt = np.int32 if k * plane_all < 1 << 31 else np.int64
    wk = np.repeat(np.arange(k, dtype=dt) * dt(plane_all), lengths) + keys
    return np.bincount(wk, minlength=k * plane_all).reshape(k, plane_all)


def window_counts(events, windows, params: FrontEnd) -> np.ndarray:
    """(K, C, size, size) int64: n[k, c, i, j] = events of grid pixel (c, i, j) in window k, t_start <= t < t_end.

    events: as for `gate` (Columns fastest), time-ordered; windows: (K, 2) [t_start, t_end) in us, any
    order. pixel_values(n) is each window's training frame, which equals frame(gate(...)) of the window;
    its nonzero entries are the events the gate emits. One bincount over all windows' events."""
    _, lengths, keys, _ = _window_events(events, windows, params)
    return _counts(keys, lengths, params).reshape(-1, params.channels, params.size, params.size)


def gate_windows(events, windows, params: FrontEnd) -> tuple[np.ndarray, np.ndarray]:
    """(gated, offsets): the `gate` of every window at once; gated[offsets[k]:offsets[k + 1]] equals
    gate(events, windows[k], params). windows: (K, 2) [t_start, t_end) in us, any order.

    binary: the threshold-th event of each (window, pixel) group. The events of all windows are
    concatenated window after window (time order inside) and stably sorted by pixel, so each pixel's
    events stand grouped by window in time order; with n[k, a] the group sizes, the group of
    (k, a) starts at start[a] + sum_{k' < k} n[k', a], and its threshold-th event sits threshold - 1
    further. Sorting the picked positions restores window order, then time, then arrival order."""
    first, lengths, keys, t = _window_events(events, windows, params)
    w = np.asarray(windows, np.int64).reshape(-1, 2)
    n = _counts(keys, lengths, params)                                     # (K, A)
    plane, size = params.size * params.size, params.size
    if params.mode == "binary":
        order = np.argsort(keys, kind="stable")                            # 16-bit keys: a radix sort
        start = np.r_[0, np.cumsum(n.sum(axis=0))[:-1]]                    # (A,) first place of each address
        before = np.cumsum(n, axis=0) - n                                  # (K, A) events in earlier windows
        k, addr = np.nonzero(n >= params.threshold)
        pick = np.sort(order[start[addr] + before[k, addr] + params.threshold - 1])
        cat_first = np.cumsum(lengths) - lengths                           # (K,) window starts, concatenated
        k = np.searchsorted(cat_first, pick, side="right") - 1  # an empty window shares its start with the next
        addr = keys[pick].astype(np.int64)
        times = t[pick - cat_first[k] + first[k]].astype(np.int64)
        payload = np.ones(pick.size, np.int64)
    else:
        k, addr = np.nonzero(n)
        times, payload = w[k, 1], pixel_values(n[k, addr], params)
    out = np.zeros(addr.size, GATED_DTYPE)
    out["t"] = times
    out["c"] = addr // plane
    out["y"] = addr % plane // size
    out["x"] = addr % size
    out["payload"] = payload
    return out, np.r_[0, np.cumsum(np.bincount(k, minlength=len(w)))]


def gate(events, window, params: FrontEnd) -> np.ndarray:
    """The input events of one window, GATED_DTYPE (t, x = grid column, y = grid row, c = channel,
    payload), in emission order (module docstring). events: an EventStream, an array with fields
    t, x, y, p, or their `columns`, time-ordered; window: (t_start, t_end), holding t_start <= t < t_end.
    Many windows of one stream: `gate_windows` (one pass for all)."""
    return gate_windows(events, [(int(window[0]), int(window[1]))], params)[0]


def frame(gated, params: FrontEnd) -> np.ndarray:
    """(C, size, size) int64 frame of one window's gated events: frame[c, y, x] = payload.

    Equals pixel_values of the window's counts (the training frame). A pixel given twice is refused."""
    g = np.asarray(gated)
    out = np.zeros((params.channels, params.size, params.size), np.int64)
    flat = (g["c"].astype(np.int64) * params.size + g["y"]) * params.size + g["x"]
    if np.unique(flat).size != flat.size:
        raise UsageError("gated events must hold at most one event per grid pixel")
    out.reshape(-1)[flat] = g["payload"]
    return out
