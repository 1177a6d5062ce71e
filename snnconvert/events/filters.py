"""Noise filters for sensor recordings; each returns a keep mask over the stream's events.

Applied by `apply` in this order: hot pixels, refractory, background activity (a hot pixel removed
first cannot vouch for its neighbours in the background-activity test). Each is off at 0.

    hot pixels           c_p = events of pixel p in the recording; m = median of c_p over the pixels
                         with c_p > 0; pixel p is hot when c_p > factor * m, and all its events go.
                         The median runs over active pixels only: most pixels of a digit recording
                         never fire, so the median over all would be 0 and every active pixel "hot".
                         Outlier removal by a multiple of the median rate (common practice).
    refractory           event i of pixel p passes when t_i - t_last >= dead_us, where t_last is the
                         time of p's last *passed* event (any polarity); the first event of a pixel
                         passes. A per-pixel dead time, as the pixel circuit's refractory period
                         (Lichtsteiner, Posch, Delbruck 2008, JSSC 43(2)).
    background activity  event i at (x, y, t_i) passes when an earlier event j (earlier in stream
                         order, any polarity, passed or not) at one of the 8 neighbours
                         (|dx| <= 1, |dy| <= 1, not the pixel itself) has t_i - t_j <= window_us.
                         The variant in which the pixel itself does not count: an isolated pixel
                         firing repeatedly is noise (Delbruck 2008, "Frame-free dynamic digital
                         vision", Intl. Symp. on Secure-Life Electronics).
"""

from __future__ import annotations

import numpy as np

from snnconvert.events.stream import EventStream

# The filters' recipe keys (section [data]); 0 turns a filter off.
# The filters' recipe keys ([data] filter_*) live in snnconvert/settings/data.py (FILTER_KEYS).


def hot_pixels(stream: EventStream, factor: float) -> tuple[np.ndarray, int]:
    """(keep mask, number of hot pixels) by the rule in the module docstring; factor 0 keeps all."""
    n = len(stream)
    if factor <= 0 or n == 0:
        return np.ones(n, bool), 0
    pix = stream.y.astype(np.int64) * stream.width + stream.x
    counts = np.bincount(pix, minlength=stream.width * stream.height)
    m = float(np.median(counts[counts > 0]))
    hot = counts > factor * m
    return ~hot[pix], int(np.count_nonzero(hot))


def refractory(stream: EventStream, dead_us: int) -> np.ndarray:
    """Keep mask of the refractory filter (module docstring); dead_us 0 keeps all.

    The last passed event depends on earlier decisions, so this is one pass over the events grouped
    by pixel (a Python loop over plain ints: about 0.3 us per event).
    """
    n = len(stream)
    keep = np.ones(n, bool)
    if dead_us <= 0 or n == 0:
        return keep
    pix = stream.y.astype(np.int64) * stream.width + stream.x
    order = np.lexsort((np.arange(n), pix))  # by pixel, then stream order
    p_sorted, t_sorted = pix[order].tolist(), stream.t[order].tolist()
    drop = []
    last_p, last_t = -1, 0
    for k, (p, t) in enumerate(zip(p_sorted, t_sorted)):
        if p != last_p:
            last_p, last_t = p, t
        elif t - last_t >= dead_us:
            last_t = t
        else:
            drop.append(k)
    keep[order[drop]] = False
    return keep


def background_activity(stream: EventStream, window_us: int) -> np.ndarray:
    """Keep mask of the background-activity filter (module docstring); window_us 0 keeps all.

    Vectorized: events sorted by key = pixel * n + index; for each of the 8 neighbour offsets one
    binary search finds the neighbour pixel's last event before event i.
    """
    n = len(stream)
    if window_us <= 0 or n == 0:
        return np.ones(n, bool)
    w, h = stream.width, stream.height
    x, y, t = stream.x.astype(np.int64), stream.y.astype(np.int64), stream.t
    idx = np.arange(n, dtype=np.int64)
    keys = np.sort((y * w + x) * n + idx)
    keep = np.zeros(n, bool)
    for dy in (-1, 0, 1):
        for dx in (-1, 0, 1):
            if dx == 0 and dy == 0:
                continue
            nx, ny = x + dx, y + dy
            inside = (nx >= 0) & (nx < w) & (ny >= 0) & (ny < h)
            nb = ny * w + nx
            pos = np.searchsorted(keys, nb * n + idx, side="left") - 1  # last key below (nb, i)
            cand = keys[np.maximum(pos, 0)]
            found = inside & (pos >= 0) & (cand // n == nb)
            j = cand % n
            keep |= found & (t - t[j] <= window_us)
    return keep


def apply(stream: EventStream, hot_factor: float = 0.0, refractory_us: int = 0,
          background_us: int = 0) -> tuple[EventStream, dict]:
    """The stream after every filter that is on (order in the module docstring), and its effect:
    {"events_in", "events_out", "pixels_removed"}."""
    n_in = len(stream)
    keep, hot = hot_pixels(stream, hot_factor)
    if not keep.all():
        stream = EventStream(stream.events[keep], stream.width, stream.height)
    for fn, arg in ((refractory, refractory_us), (background_activity, background_us)):
        if arg > 0:
            keep = fn(stream, arg)
            if not keep.all():
                stream = EventStream(stream.events[keep], stream.width, stream.height)
    return stream, {"events_in": n_in, "events_out": len(stream), "pixels_removed": hot}


def settings_of(section: dict) -> tuple[float, int, int]:
    """(hot_factor, refractory_us, background_us) from a [data] section (defaults filled)."""
    return (float(section.get("filter_hot_factor", 0.0)), int(section.get("filter_refractory_us", 0)),
            int(section.get("filter_background_us", 0)))
