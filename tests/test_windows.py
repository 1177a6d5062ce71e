"""Windows: sliding event rate, bursts by hysteresis, fixed-time and fixed-count windows."""

import numpy as np
import pytest

from snnconvert import windows
from snnconvert.errors import UsageError
from snnconvert.events import EventStream


def stream_from_times(t, w=8, h=8, seed=0):
    t = np.sort(np.asarray(t, np.int64))
    rng = np.random.default_rng(seed)
    return EventStream.from_arrays(t, rng.integers(0, w, t.size), rng.integers(0, h, t.size),
                                   np.ones(t.size, np.int64), w, h)


def bursty(seed=0):
    """Background at 500 events/s over 100 ms plus dense bursts at 20-23 ms and 60-62 ms."""
    rng = np.random.default_rng(seed)
    bg = rng.integers(0, 100_000, 50)
    b1 = rng.integers(20_000, 23_000, 600)
    b2 = rng.integers(60_000, 62_000, 400)
    return stream_from_times(np.concatenate([bg, b1, b2]), seed=seed)


def test_rate_trace_matches_direct_count():
    s = stream_from_times(np.random.default_rng(1).integers(0, 20_000, 300))
    tk, rate = windows.rate_trace(s, bin_us=1000)
    assert np.all(np.diff(tk) == 250) and tk[0] == s.t[0]  # the toolkit's documented slide: bin_us / 4 = 250 us
    direct = np.array([np.count_nonzero((s.t >= a) & (s.t < a + 1000)) for a in tk])  # plain definition: events in [t, t+bin)
    assert np.array_equal(np.rint(rate * 1000 / 1e6).astype(int), direct)
    assert tk[-1] + 1000 > s.t[-1]


def test_bursts_found_around_the_dense_parts():
    s = bursty()
    found = windows.bursts(s, bin_us=1000, upper=8, lower=2)
    assert len(found) == 2
    (a0, a1), (b0, b1) = found
    # hand-computed from the construction of bursty(): bursts at 20-23 ms and 60-62 ms, edges within one
    # 1 ms rate bin (+ half a bin of slack at the end)
    assert 19_000 <= a0 <= 20_100 and 23_000 <= a1 <= 24_500
    assert 59_000 <= b0 <= 60_100 and 62_000 <= b1 <= 63_500
    # every burst event is inside a burst
    inside = sum(np.count_nonzero((s.t >= x) & (s.t < y)) for x, y in found)
    assert inside >= 1000  # hand-computed: 600 + 400 burst events in bursty()


@pytest.mark.parametrize("kw, n", [
    (dict(merge_gap_us=40_000), 1),            # gap of ~37 ms (23 -> 60 ms) merged: hand-computed from bursty()
    (dict(min_duration_us=2_800), 1),          # the 2 ms burst is too short (hand-computed from bursty())
    (dict(relative=False, upper=150_000.0, lower=20_000.0), 2),  # absolute: 600/3 ms and 400/2 ms = 200k events/s peaks
    (dict(relative=False, upper=1e9, lower=1.0), 0),  # 1e9 events/s: far above the 200k events/s peaks
])
def test_burst_parameters(kw, n):
    assert len(windows.bursts(bursty(), **kw)) == n


def test_hysteresis_keeps_burst_through_dip_above_lower():
    # a dip that stays above `lower` does not end the burst, a lone spike above `lower` only does not start one
    t = np.concatenate([np.arange(10_000, 12_000, 2),       # 500k/s
                        np.arange(12_000, 14_000, 100),      # 10k/s dip
                        np.arange(14_000, 16_000, 2),
                        np.arange(40_000, 42_000, 100)])     # 10k/s: above lower, never above upper
    s = stream_from_times(t)
    found = windows.bursts(s, relative=False, upper=100_000.0, lower=5_000.0, merge_gap_us=0)
    # hand-computed from the times above: starts at the first burst event, ends within one 1 ms bin of 16 ms
    assert len(found) == 1 and found[0][0] == 10_000 and 16_000 <= found[0][1] <= 17_000


def test_empty_and_silent():
    e = EventStream.empty(4, 4)
    assert windows.bursts(e) == [] and windows.fixed_windows(e, 10) == [] and windows.count_windows(e, 3) == []
    assert windows.rate_trace(e)[0].size == 0


def test_fixed_windows_cover_every_event_once():
    s = stream_from_times(np.random.default_rng(2).integers(0, 10_000, 200))
    wins = windows.fixed_windows(s, 1000)
    assert all(b - a == 1000 for a, b in wins)  # the requested width
    counts = [np.count_nonzero((s.t >= a) & (s.t < b)) for a, b in wins]
    assert sum(counts) == len(s)


@pytest.mark.parametrize("n", [1, 7, 50, 500])
def test_count_windows(n):
    t = np.repeat(np.arange(100), 3)  # ties: three events per timestamp
    s = stream_from_times(t)
    wins = windows.count_windows(s, n)
    counts = [np.count_nonzero((s.t >= a) & (s.t < b)) for a, b in wins]
    assert sum(counts) == len(s)
    assert all(c <= n + 2 for c in counts)  # a window may take the rest of a tied timestamp
    assert all(wins[i][1] <= wins[i + 1][0] for i in range(len(wins) - 1))


def test_pick_rules():
    s = bursty()
    found = windows.bursts(s)
    assert windows.pick(s, found, "first") == found[0]
    assert windows.pick(s, [(0, 100), (20_000, 23_000)], "largest") == (20_000, 23_000)  # 600 burst events vs ~0 (bursty())
    assert windows.pick(s, [], "first") is None


@pytest.mark.parametrize("kw, match", [
    (dict(bin_us=0), r"The 'bin_us' parameter of bursts must be an int >= 1. Got 0 instead."),
    (dict(upper=-1.0), r"The 'upper' parameter of bursts must be a float >= 0.0. Got -1.0 instead."),
    (dict(relative="yes"), r"The 'relative' parameter of bursts must be a bool. Got 'yes' instead."),
])
def test_burst_validation(kw, match):
    with pytest.raises(UsageError, match=match):
        windows.bursts(bursty(), **kw)
