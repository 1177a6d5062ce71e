"""Windows: bursts of the front end on realistic streams, fixed-time and fixed-count windows, the pick rule."""

import numpy as np
import pytest

from snnconvert import frontend, windows
from snnconvert.events import EventStream
from snnconvert.settings.frames import FramesSettings


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


def bursts(s, **kw):
    """The front end's burst windows of `s` with the [frames] defaults and `kw`."""
    p = frontend.FrontEnd.from_section(FramesSettings.from_section(kw).as_dict(), s.width, s.height)
    return [tuple(w) for w in frontend.windows(s.t, p).tolist()]


def test_bursts_found_around_the_dense_parts():
    s = bursty()
    found = bursts(s)
    assert len(found) == 2
    (a0, a1), (b0, b1) = found
    # hand-computed from the construction of bursty(): bursts at 20-23 ms and 60-62 ms; windows are whole
    # 1 ms bins from the first event, so each edge lies within one bin of the burst's edge
    assert 19_000 < a0 <= 20_000 and 23_000 <= a1 < 24_000 and (a1 - a0) % 1000 == 0
    assert 59_000 < b0 <= 60_000 and 62_000 <= b1 < 63_000 and (b1 - b0) % 1000 == 0
    # every burst event is inside a burst (plus the odd background event in the same bins)
    inside = sum(np.count_nonzero((s.t >= x) & (s.t < y)) for x, y in found)
    assert 1000 <= inside <= 1010  # hand-computed: 600 + 400 burst events in bursty(), 50 background over 100 ms


@pytest.mark.parametrize("kw, n", [
    ({"merge_gap_us": 40_000}, 1),      # gap of ~37 ms (23 -> 60 ms) merged: hand-computed from bursty()
    ({"min_duration_us": 3_500}, 1),    # at least 4 bins: the 2 ms burst (3 bins) is too short, the 3 ms one (4) is not
    ({"relative": False, "upper": 150_000.0, "lower": 20_000.0}, 2),  # absolute: 200 events per full bin of each burst
    ({"relative": False, "upper": 1e9, "lower": 1.0}, 0),  # 1e6 events per bin: far above the 200 of the bursts
])
def test_burst_parameters(kw, n):
    assert len(bursts(bursty(), **kw)) == n


def test_hysteresis_keeps_burst_through_dip_above_lower():
    # a dip that stays above `lower` does not end the burst, a lone stretch above `lower` only does not start one
    t = np.concatenate([np.arange(10_000, 12_000, 2),       # 500 per 1 ms bin
                        np.arange(12_000, 14_000, 100),      # 10 per bin: the dip
                        np.arange(14_000, 16_000, 2),
                        np.arange(40_000, 42_000, 100)])     # 10 per bin: above lower, never above upper
    s = stream_from_times(t)
    found = bursts(s, relative=False, upper=100_000.0, lower=5_000.0, merge_gap_us=0)
    # hand-computed: bins from t0 = 10 ms; opens at the first bin (500 >= 101), the dip (10 >= 5) keeps it
    # open, closes at the first empty bin (16 ms)
    assert found == [(10_000, 16_000)]


def test_empty_and_silent():
    e = EventStream.empty(4, 4)
    assert bursts(e) == [] and windows.fixed_windows(e, 10) == [] and windows.count_windows(e, 3) == []


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
    found = bursts(s)
    assert windows.pick(s, found, "first") == found[0]
    assert windows.pick(s, [(0, 100), (20_000, 23_000)], "largest") == (20_000, 23_000)  # 600 burst events vs ~0 (bursty())
    assert windows.pick(s, [], "first") is None
