"""Recipe section [frames]: how a recording's window becomes one frame (torch-free)."""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.schema import Key
from snnconvert.settings import Section

MODES = ("binary", "count", "polarity")
PER_RECORDING = ("one", "each", "stack")

# Keys no longer read, with the reason; a recipe that gives one loads with a note (recipe._rename).
RETIRED = {"background_percentile": "the background of relative thresholds is now the causal event count of the "
                                    "background_bins bins before each bin (frontend.py), not a percentile of the "
                                    "whole recording"}

KEYS: dict[str, Key] = {
    "window": Key("burst", "choice", "bursts follow the stimulus; no timing has to be known in advance "
                  "(all: the whole recording is one window)", choices=("burst", "fixed", "count", "all")),
    "per_recording": Key("one", "choice", "one frame per recording (the picked window) keeps one sample per "
                         "recording; each: one sample per window (3 per saccade recording, more data); stack: the "
                         "windows as channels of one sample (keeps the order of the saccades)",
                         choices=PER_RECORDING),
    "windows": Key(3, "int", "each/stack use the first 3 windows: three saccades per recording in the published "
                   "layout", lo=1, hi=64),
    "pick": Key("first", "choice", "the first burst of a flash is the onset: ON events of the whole shape",
                choices=("first", "largest")),
    "bin_us": Key(1000, "int", "1 ms rate bins resolve a flash onset that lasts a few ms", lo=1),
    "background_bins": Key(32, "int", "relative thresholds: the background is the event count of the 32 bins before "
                           "each bin (32 ms at 1 ms bins), a causal count hardware keeps in a 32-deep FIFO; longer "
                           "than a flash burst, shorter than the gap between stimuli", lo=1, hi=1 << 20),
    "relative": Key(True, "bool", "thresholds as multiples of the background rate adapt to each sensor"),
    "upper": Key(8.0, "float", "a burst must stand well above background (x background, or events/s)", lo=0.0),
    "lower": Key(2.0, "float", "hysteresis: a burst ends when the rate is back near background", lo=0.0),
    "min_duration_us": Key(500, "int", "drops single-bin noise blips", lo=0),
    "merge_gap_us": Key(2000, "int", "a brief dip inside one stimulus response does not split it", lo=0),
    "window_us": Key(5000, "int", "fixed windows: a few ms holds one onset response", lo=1),
    "window_events": Key(2000, "int", "count windows: about the events of one digit onset", lo=1),
    "mode": Key("binary", "choice", "one spike per pixel suits single-spike networks (input_q = 1)",
                choices=MODES),
    "size": Key(16, "int", "half the 32-pixel sensor: keeps the digit shape, 4x fewer input neurons", lo=2, hi=1024),
    "threshold": Key(16, "int", "binary: ~4 onset events per pixel of a 2x2 block keeps strokes at half brightness "
                     "and above and drops the blurred rim (measured best of 4-24 on digits)", lo=1),
    "max_count": Key(15, "int", "count/polarity: a 4-bit input payload; clips only the brightest 2x2 blocks",
                     lo=1, hi=255),
}


@dataclass(frozen=True)
class FramesSettings(Section):
    """The [frames] section, checked."""

    SECTION = "frames"
    KEYS = KEYS

    window: str
    per_recording: str
    windows: int
    pick: str
    bin_us: int
    background_bins: int
    relative: bool
    upper: float
    lower: float
    min_duration_us: int
    merge_gap_us: int
    window_us: int
    window_events: int
    mode: str
    size: int
    threshold: int
    max_count: int
