"""Frames: the events of one window binned into a (C, H, W) tensor."""

from __future__ import annotations

from snnconvert.schema import Key

SCHEMA: dict[str, Key] = {
    "window": Key("burst", "choice", "bursts follow the stimulus; no timing has to be known in advance",
                  choices=("burst", "fixed", "count")),
    "pick": Key("first", "choice", "the first burst of a flash is the onset: ON events of the whole shape",
                choices=("first", "largest")),
    "bin_us": Key(1000, "int", "1 ms rate bins resolve a flash onset that lasts a few ms", lo=1),
    "relative": Key(True, "bool", "thresholds as multiples of the background rate adapt to each sensor"),
    "upper": Key(8.0, "float", "a burst must stand well above background (x background, or events/s)", lo=0.0),
    "lower": Key(2.0, "float", "hysteresis: a burst ends when the rate is back near background", lo=0.0),
    "min_duration_us": Key(500, "int", "drops single-bin noise blips", lo=0),
    "merge_gap_us": Key(2000, "int", "a brief dip inside one stimulus response does not split it", lo=0),
    "window_us": Key(5000, "int", "fixed windows: a few ms holds one onset response", lo=1),
    "window_events": Key(2000, "int", "count windows: about the events of one digit onset", lo=1),
    "mode": Key("binary", "choice", "one spike per pixel suits single-spike networks (input_q = 1)",
                choices=("binary", "count", "polarity")),
    "size": Key(16, "int", "half the 32-pixel sensor: keeps the digit shape, 4x fewer input neurons", lo=2, hi=1024),
    "threshold": Key(4, "int", "binary: events a pooled pixel needs to fire; rejects stray noise events", lo=1),
    "max_count": Key(4, "int", "count/polarity: clip so a few busy pixels do not dominate", lo=1, hi=255),
}
