"""The integer front end against hand-computed streams: bin edges, hysteresis, merge gap, minimum
duration, first and last bin, relative thresholds at near-zero background, subsampling of uneven
sizes, the gate's first-event rule and the frame it builds."""

import numpy as np
import pytest

from snnconvert import frames, frontend
from snnconvert.errors import UsageError
from snnconvert.events import EventStream
from snnconvert.settings.frames import FramesSettings

BASE = {"bin_us": 10, "relative": False, "upper_16": 128, "lower_16": 32, "upper_count": 5, "lower_count": 2,
        "background_bins": 4, "min_bins": 0, "merge_bins": 0, "width": 4, "height": 4, "size": 2, "mode": "binary",
        "threshold": 2, "max_count": 2}


def fe(**kw) -> frontend.FrontEnd:
    return frontend.FrontEnd(**{**BASE, **kw})


def times_from_counts(counts, bin_us=10, t0=0):
    """Times with counts[k] events in bin k (at the bin's first microsecond)."""
    return np.repeat(t0 + np.arange(len(counts), dtype=np.int64) * bin_us, counts)


def stream(t, x, y, p=None, w=4, h=4):
    t = np.asarray(t, np.int64)
    p = np.ones(t.size, np.int64) if p is None else np.asarray(p)
    return EventStream.from_arrays(t, np.asarray(x), np.asarray(y), p, w, h)


# --- rate counter ---------------------------------------------------------------------------------


@pytest.mark.parametrize("t, t0, want_t0, want", [
    # hand-computed: bins [0,10) [10,20) [20,30) [30,40) hold {0,9} {10,19} {20} {35}
    ([0, 9, 10, 19, 20, 35], None, 0, [2, 2, 1, 1]),
    # hand-computed: bins [-5,5) [5,15) [15,25) [25,35) [35,45) hold {0} {9,10} {19,20} {} {35}
    ([0, 9, 10, 19, 20, 35], -5, -5, [1, 2, 2, 0, 1]),
    # an event exactly on an edge belongs to the bin it opens: from t0 = 0, 10 is in [10, 20) ...
    ([3, 10], 0, 0, [1, 1]),
    # ... from the default t0 (the first event, 3), 10 is in [3, 13)
    ([3, 10], None, 3, [2]),
    ([7], None, 7, [1]),
    ([], None, 0, []),
])
def test_bin_edges(t, t0, want_t0, want):
    got_t0, c = frontend.rate_counts(np.asarray(t, np.int64), fe(), t0)
    assert got_t0 == want_t0 and c.tolist() == want


@pytest.mark.parametrize("counts, kw, want", [
    # hand-computed with hi = 5, lo = 2: runs of c >= 2 are bins 1-3 and 5-7; each opens at its first c >= 5
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {}, [[2, 4], [6, 8]]),
    # a dip to 3 (>= lo) inside a window does not close it
    ([6, 3, 6, 0], {}, [[0, 3]]),
    # above lower but never above upper: no window
    ([3, 4, 4, 3, 0], {}, []),
    # merge gap: the windows above are 2 closed bins apart (4 and 5): merged when merge_bins > 2
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {"merge_bins": 3}, [[2, 8]]),
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {"merge_bins": 2}, [[2, 4], [6, 8]]),
    # minimum duration after merging: both 2-bin windows dropped at 3 bins, the merged 6-bin one kept
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {"min_bins": 3}, []),
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {"min_bins": 3, "merge_bins": 3}, [[2, 8]]),
    ([0, 3, 6, 2, 1, 4, 6, 3, 0], {"min_bins": 2}, [[2, 4], [6, 8]]),
    # first bin: a window may open at bin 0; last bin: a window still open there closes with it
    ([7, 7], {}, [[0, 2]]),
    ([0, 0, 5], {}, [[2, 3]]),
    # lower above upper acts as the upper: the run is the bins >= 5
    ([5, 4, 6, 0], {"lower_count": 9}, [[0, 1], [2, 3]]),
])
def test_hysteresis_merge_and_minimum_duration(counts, kw, want):
    assert frontend.window_bins(np.asarray(counts), fe(**kw)).tolist() == want


def test_windows_are_bin_edges_in_us():
    # hand-computed: counts [0, 3, 6, 2, 1] from t0 = 100 -> window bins [2, 4) -> [120, 140) us
    t = times_from_counts([0, 3, 6, 2, 1], t0=100) + 3
    got = frontend.windows(t, fe(), t0=100)
    assert got.tolist() == [[120, 140]]
    # default t0 is the first event (103): the same counts shifted by 3 us
    assert frontend.windows(t, fe()).tolist() == [[123, 143]]
    assert frontend.windows(np.zeros(0, np.int64), fe()).shape == (0, 2)


def test_relative_thresholds_hand_computed():
    # B = 4, U = 8.0 (128/16), L = 2.0 (32/16); S_k = max(sum of the last 4 closed-bin counts, 4)
    c = np.array([4, 8, 4, 8, 50, 30, 5, 4, 12])
    hi, lo, is_open = frontend.scan(c, fe(relative=True))
    # hand-computed: S = 4 (floor), 4, 12, 16, 24; bins 4-5 are open, so S stays 24 (frozen) at 5 and 6;
    # bin 6 closes (5 < 12) and enters: S = 8+4+8+5 = 25 at 7, then 4+8+5+4 = 21 at 8
    # hi = 128*S//64 + 1, lo = ceil(32*S/64)
    assert hi.tolist() == [9, 9, 25, 33, 49, 49, 49, 51, 43]
    assert lo.tolist() == [2, 2, 6, 8, 12, 12, 12, 13, 11]
    assert is_open.tolist() == [False] * 4 + [True, True] + [False] * 3
    # opens at bin 4 (50 >= 49), stays at bin 5 (30 >= 12: the background does not count the burst)
    assert frontend.window_bins(c, fe(relative=True)).tolist() == [[4, 6]]


@pytest.mark.parametrize("peak, n", [(8, 0), (9, 1)])
def test_near_zero_background_gives_the_floor(peak, n):
    # silent sensor: S_k = 0 is floored at B, so upper = 8 x background means above 8 events per bin:
    # 8 events in one bin open nothing, 9 do (hand-computed: 128*4//64 + 1 = 9)
    c = np.array([0] * 10 + [peak] + [0] * 5)
    assert len(frontend.window_bins(c, fe(relative=True))) == n


def test_background_is_causal():
    # the thresholds of bin k depend only on bins before k: changing a later bin changes nothing before it
    rng = np.random.default_rng(0)
    c = rng.integers(0, 20, 50)
    d = c.copy()
    d[30] += 100
    h1, l1 = frontend.bin_thresholds(c, fe(relative=True))
    h2, l2 = frontend.bin_thresholds(d, fe(relative=True))
    assert np.array_equal(h1[:31], h2[:31]) and np.array_equal(l1[:31], l2[:31])
    assert not np.array_equal(h1, h2)


@pytest.mark.parametrize("section, want", [
    # exact conversions: 8.0 x bg -> 128/16; 8000 events/s at 1 ms bins = 8 per bin -> above it: 9
    ({"upper": 8.0, "lower": 2.0, "bin_us": 1000, "min_duration_us": 500, "merge_gap_us": 2000},
     {"upper_16": 128, "lower_16": 32, "upper_count": 1, "lower_count": 1, "min_bins": 1, "merge_bins": 2}),
    ({"upper": 8000.0, "lower": 2000.0, "bin_us": 1000, "min_duration_us": 0, "merge_gap_us": 0},
     {"upper_count": 9, "lower_count": 2, "min_bins": 0, "merge_bins": 0}),
    # 8.5 per bin -> 9; 2.5 per bin -> 3; 2.53125 x bg -> 40.5/16 -> 41 (halves up)
    ({"upper": 8500.0, "lower": 2.53125, "bin_us": 1000, "min_duration_us": 1001, "merge_gap_us": 2999},
     {"upper_count": 9, "lower_16": 41, "lower_count": 1, "min_bins": 2, "merge_bins": 3}),
])
def test_params_from_frames_section(section, want):
    sec = FramesSettings.from_section(section).as_dict()
    p = frontend.FrontEnd.from_section(sec, 32, 32)
    assert {k: getattr(p, k) for k in want} == want


# --- subsample and gate ------------------------------------------------------------------------------


@pytest.mark.parametrize("w, h, size, want", [
    # hand-computed: x*2//5 -> columns {0,1,2} -> 0, {3,4} -> 1; y*2//3 -> rows {0,1} -> 0, {2} -> 1
    (5, 3, 2, [[6, 4], [3, 2]]),
    # x*3//7 -> columns of 3, 2, 2 sensor pixels; y*3//4 -> rows of 2, 1, 1
    (7, 4, 3, [[6, 4, 4], [3, 2, 2], [3, 2, 2]]),
    # a grid finer than the sensor: x*4//2 -> 0, 2; columns 1 and 3 stay empty
    (2, 2, 4, [[1, 0, 1, 0], [0, 0, 0, 0], [1, 0, 1, 0], [0, 0, 0, 0]]),
])
def test_subsampling_uneven_sizes(w, h, size, want):
    y, x = np.divmod(np.arange(w * h), w)  # one event per sensor pixel
    s = stream(np.arange(w * h), x, y, w=w, h=h)
    p = fe(width=w, height=h, size=size, mode="count", max_count=255)
    got = frontend.frame(frontend.gate(s, (0, w * h), p), p)[0]
    assert got.tolist() == want
    # the same rule as the training frames
    assert np.array_equal(got, frames.bin_window(s, 0, w * h, "count", size, 1, 255)[0])


def test_gate_first_event_rule():
    # 4x4 sensor, 2x2 grid, threshold 2. Grid (0,0) gets events at t=1, 3, 5: emits at its 2nd (t=3),
    # t=5 is dropped. Grid (1,1) gets sensor (3,3) at t=2 and (2,2) at t=4: emits at t=4.
    s = stream([1, 2, 3, 4, 5], [0, 3, 1, 2, 0], [0, 3, 1, 2, 1])
    g = frontend.gate(s, (0, 10), fe())
    assert [tuple(int(v) for v in e) for e in g] == [(3, 0, 0, 0, 1), (4, 1, 1, 0, 1)]
    # the window [0, 4) holds one event of grid (1,1): below threshold, no emission
    g = frontend.gate(s, (0, 4), fe())
    assert [tuple(int(v) for v in e) for e in g] == [(3, 0, 0, 0, 1)]
    # equal times: arrival order decides which event is the threshold-th
    s2 = stream([5, 5, 5], [0, 1, 0], [0, 0, 1])
    assert frontend.gate(s2, (0, 10), fe())["t"].tolist() == [5]


def test_gate_count_and_polarity_payloads():
    # count mode, max_count 2: grid (0,0) saw 3 events -> payload 2, grid (1,1) saw 1 -> 1; both at the
    # window end (t = 10), in address order
    s = stream([1, 2, 3, 4], [0, 3, 1, 0], [0, 3, 1, 1], p=[1, -1, -1, 1])
    g = frontend.gate(s, (0, 10), fe(mode="count"))
    assert [tuple(int(v) for v in e) for e in g] == [(10, 0, 0, 0, 2), (10, 1, 1, 0, 1)]
    # polarity: ON (c=0) and OFF (c=1) counted apart: (0,0) ON 2, (0,0) OFF 1, (1,1) OFF 1
    g = frontend.gate(s, (0, 10), fe(mode="polarity"))
    assert [tuple(int(v) for v in e) for e in g] == [(10, 0, 0, 0, 2), (10, 0, 0, 1, 1), (10, 1, 1, 1, 1)]


@pytest.mark.parametrize("mode, threshold, max_count", [("binary", 1, 4), ("binary", 3, 4), ("count", 1, 3),
                                                        ("polarity", 1, 2)])
def test_frame_of_gated_events_is_the_training_frame(mode, threshold, max_count):
    rng = np.random.default_rng(1)
    n = 3000
    s = stream(np.sort(rng.integers(0, 5000, n)), rng.integers(0, 34, n), rng.integers(0, 34, n),
               rng.choice([-1, 1], n), w=34, h=34)
    p = fe(width=34, height=34, size=16, mode=mode, threshold=threshold, max_count=max_count)
    g = frontend.gate(s, (1000, 4000), p)
    got = frontend.frame(g, p)
    want = frames.bin_window(s, 1000, 4000, mode, 16, threshold, max_count)
    assert np.array_equal(got, want) and got.any()
    assert np.all(np.diff(g["t"]) >= 0)  # emission order is time order
    if mode == "binary":  # each emitted event is the threshold-th of its pixel in the window
        inside = (s.t >= 1000) & (s.t < 4000)
        j, i = frontend.subsample(s.x, s.y, p)
        for e in g[:20]:
            at = inside & (i == e["y"]) & (j == e["x"]) & (s.t <= e["t"])
            assert np.count_nonzero(at) >= threshold


def test_bad_inputs_refused():
    with pytest.raises(UsageError, match="sorted"):
        frontend.rate_counts(np.array([3, 1]), fe())
    with pytest.raises(UsageError, match="4x4 sensor"):
        frontend.gate(np.array([(1, 5, 0, 1)], [("t", "<i8"), ("x", "<u2"), ("y", "<u2"), ("p", "i1")]), (0, 9), fe())
    with pytest.raises(UsageError, match="'threshold' parameter of the front end must be an int"):
        fe(threshold=0)
    with pytest.raises(UsageError, match="one event per grid pixel"):
        g = np.zeros(2, frontend.GATED_DTYPE)
        frontend.frame(g, fe())


# --- all windows at once against the per-event rule ------------------------------------------------


def _gate_by_event(t, x, y, p, windows, params):
    """The gate's stated rule, one event at a time (module docstring of frontend): per window, count
    each grid pixel's events in arrival order; binary emits an event's time when its pixel's count
    reaches the threshold; count/polarity emit every counted pixel at the window end by address
    (channel, row, column) with min(n, max_count)."""
    out = []
    for t1, t2 in windows:
        n, emitted = {}, []
        for ti, xi, yi, pi in zip(t.tolist(), x.tolist(), y.tolist(), p.tolist()):
            if not t1 <= ti < t2:
                continue
            c = 1 if params.mode == "polarity" and pi < 0 else 0
            a = (c, yi * params.size // params.height, xi * params.size // params.width)
            n[a] = n.get(a, 0) + 1
            if params.mode == "binary" and n[a] == params.threshold:
                emitted.append((ti, a[2], a[1], a[0], 1))
        if params.mode != "binary":
            emitted = [(t2, a[2], a[1], a[0], min(k, params.max_count)) for a, k in sorted(n.items())]
        out.append(emitted)
    return out


@pytest.mark.parametrize("mode", frontend.MODES)
@pytest.mark.parametrize("threshold", [1, 2, 3])
@pytest.mark.parametrize("w, h, size, seed", [(10, 7, 4, 0), (8, 8, 4, 1), (6, 9, 3, 2)])
def test_all_windows_at_once_equal_the_per_event_rule(mode, threshold, w, h, size, seed):
    rng = np.random.default_rng(seed * 10 + threshold)
    e = 400
    t = np.sort(rng.integers(0, 300, e))  # repeated times: arrival order decides
    x, y, p = rng.integers(0, w, e), rng.integers(0, h, e), rng.choice([-1, 1], e)
    s = stream(t, x, y, p, w, h)
    params = fe(width=w, height=h, size=size, mode=mode, threshold=threshold, max_count=2)
    # adjacent, empty, overlapping, out of order, beyond the stream, and starting before it
    windows = [(0, 40), (40, 41), (41, 41), (50, 120), (100, 180), (30, 60), (290, 400), (350, 360), (-20, 5)]
    want = _gate_by_event(t, x, y, p, windows, params)
    gated, offsets = frontend.gate_windows(frontend.columns(s), windows, params)
    counts = frontend.window_counts(s, windows, params)
    assert offsets.tolist() == np.cumsum([0] + [len(g) for g in want]).tolist()
    for k, win in enumerate(windows):
        got = gated[offsets[k]:offsets[k + 1]]
        assert [tuple(v) for v in got.tolist()] == want[k], (k, win)
        assert np.array_equal(frontend.gate(s, win, params), got)
        assert np.array_equal(frontend.frame(got, params), frontend.pixel_values(counts[k], params))
        assert np.count_nonzero(frontend.pixel_values(counts[k], params)) == len(want[k])
    assert sum(map(len, want)) > 20  # the streams emit


def test_gate_refuses_times_that_decrease_inside_a_window_only():
    s = np.array([(5, 0, 0, 1), (3, 1, 0, 1), (8, 0, 0, 1), (9, 0, 0, 1)],
                 [("t", "<i8"), ("x", "<u2"), ("y", "<u2"), ("p", "i1")])
    assert frontend.gate(s, (6, 10), fe(threshold=1)).size == 1  # 5 > 3 lies outside [6, 10)
    with pytest.raises(UsageError, match="sorted"):
        frontend.gate(s, (0, 10), fe())
    with pytest.raises(UsageError, match="sorted"):
        frontend.gate_windows(s, [(6, 10), (0, 10)], fe())


@pytest.mark.parametrize("b, upper, lower, seed", [(4, 128, 32, 0), (1, 40, 40, 1), (8, 64, 8, 2), (32, 128, 32, 3),
                                                   (3, 16, 200, 4)])
def test_scan_by_arrays_equals_the_bin_by_bin_loop(b, upper, lower, seed, monkeypatch):
    # bursts on a noisy background: the whole-array passes must settle on the loop's result (without it)
    rng = np.random.default_rng(seed)
    c = rng.poisson(2, 3000)
    for k in rng.integers(0, 2990, 40):
        c[k:k + rng.integers(1, 8)] += rng.integers(5, 60)
    params = fe(relative=True, background_bins=b, upper_16=upper, lower_16=lower)
    want = frontend._scan_loop(np.asarray(c, np.int64), params)
    monkeypatch.setattr(frontend, "_scan_loop", None)
    got = frontend.scan(c, params)
    assert all(np.array_equal(g, w) for g, w in zip(got, want))
    assert len(frontend._runs(got[2])) > 10
    # absolute thresholds: the hysteresis rule bin by bin
    state, opened = False, []
    for v in c.tolist():
        state = v >= 2 if state else v >= 9
        opened.append(state)
    assert frontend.scan(c, fe(upper_count=9, lower_count=2))[2].tolist() == opened
