"""Noise filters checked against their definitions on hand-made streams (expected outputs by hand).

Definitions (see snnconvert/events/filters.py):
- background activity (Delbruck 2008, "Frame-free dynamic digital vision"): an event passes when an
  earlier event at one of its 8 neighbours (not the pixel itself) lies within T us;
- refractory: an event passes when its pixel's last passed event is at least the dead time earlier
  (per-pixel dead time; common practice);
- hot pixels: count > factor * median count of the pixels that fired (outlier rule, common practice).
"""

import numpy as np
import pytest

from snnconvert.events import EventStream
from snnconvert.events import filters as FL


def stream(rows, side=5):
    t, x, y = zip(*rows)
    return EventStream.from_arrays(t, x, y, np.ones(len(t)), side, side)


@pytest.mark.parametrize("rows, window, expected", [
    # a lone event has no earlier neighbour: dropped
    ([(0, 2, 2)], 10, [False]),
    # (2,2) at 0 supports its right neighbour (3,2) 10 us later: T = 10 passes (t - t' <= T), T = 9 does not
    ([(0, 2, 2), (10, 3, 2)], 10, [False, True]),
    ([(0, 2, 2), (10, 3, 2)], 9, [False, False]),
    # the pixel itself does not count: the same pixel twice within T is dropped twice
    ([(0, 2, 2), (5, 2, 2)], 10, [False, False]),
    # diagonal neighbour counts; two pixels apart does not
    ([(0, 1, 1), (3, 2, 2), (4, 4, 4)], 10, [False, True, False]),
    # a neighbour event counts even when it was itself dropped: (0,0) dropped, vouches for (1,0)
    ([(0, 0, 0), (1, 1, 0), (2, 0, 0)], 5, [False, True, True]),
    # only earlier events count: the neighbour firing after does not help the first
    ([(0, 2, 2), (100, 3, 3)], 10, [False, False]),
])
def test_background_activity_filter(rows, window, expected):
    assert FL.background_activity(stream(rows), window).tolist() == expected


@pytest.mark.parametrize("rows, dead, expected", [
    # pixel (1,1) at 0, 60, 120, 250 with dead time 100: 0 passes (first); 60 - 0 < 100 dropped;
    # 120 - 0 >= 100 passes (measured from the last *passed* event); 250 - 120 >= 100 passes
    ([(0, 1, 1), (60, 1, 1), (120, 1, 1), (250, 1, 1)], 100, [True, False, True, True]),
    # exactly the dead time apart passes (t - t_last >= dead)
    ([(0, 1, 1), (100, 1, 1)], 100, [True, True]),
    # pixels are independent: interleaved pixels each keep their first event
    ([(0, 1, 1), (10, 2, 1), (20, 1, 1), (30, 2, 1)], 50, [True, True, False, False]),
])
def test_refractory_filter(rows, dead, expected):
    assert FL.refractory(stream(rows), dead).tolist() == expected


def test_hot_pixel_rule():
    # pixel (0,0) fires 30 times, pixels (1,0), (2,0), (3,0) 2, 3 and 4 times: the median over firing
    # pixels of [30, 2, 3, 4] is (3 + 4) / 2 = 3.5; factor 5 -> limit 17.5: only (0,0) is hot
    rows = [(i, 0, 0) for i in range(30)] + [(100 + i, 1, 0) for i in range(2)] + \
           [(200 + i, 2, 0) for i in range(3)] + [(300 + i, 3, 0) for i in range(4)]
    s = EventStream.from_arrays(*zip(*[(t, x, y, 1) for t, x, y in sorted(rows)]), 5, 5)
    keep, hot = FL.hot_pixels(s, 5.0)
    assert hot == 1 and keep.sum() == 9 and not np.any(keep & (s.x == 0))
    # factor 10 -> limit 35: nothing is hot; factor 0 turns the filter off
    assert FL.hot_pixels(s, 10.0)[1] == 0 and FL.hot_pixels(s, 0.0)[0].all()
    out, eff = FL.apply(s, hot_factor=5.0)
    assert eff == {"events_in": 39, "events_out": 9, "pixels_removed": 1} and len(out) == 9
