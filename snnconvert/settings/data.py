"""Recipe section [data]: the data source, the splits and the simulated sensor (torch-free)."""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.schema import Key
from snnconvert.settings import Section

SOURCES = ("digits", "idx", "recordings")
STIMULI = ("flash", "saccade")
TIME_UNITS = ("us", "ms", "s")

# The sensor's recipe keys (section [data]); SensorConfig has one field per key.
SENSOR_KEYS: dict[str, Key] = {
    "contrast": Key(0.25, "float", "typical DVS contrast threshold, 0.1-0.5 natural-log units (from memory)",
                    lo=0.01, hi=2.0),
    "mismatch": Key(0.03, "float", "per-pixel threshold sigma relative to contrast; 2.1% is published for a "
                    "128x128 sensor", lo=0.0, hi=0.5),
    "refractory_us": Key(100, "int", "caps a pixel near 10 kHz, above its bandwidth (common practice)", lo=0),
    "jitter_us": Key(50, "int", "timestamp noise of tens of us, typical of arbiters under load (from memory)", lo=0),
    "noise_hz": Key(0.2, "float", "background activity of a fraction of an event per pixel per second "
                    "(from memory)", lo=0.0),
    "hot_pixels": Key(0, "int", "a clean sensor by default; raise it to test robustness", lo=0),
    "hot_pixel_hz": Key(300.0, "float", "a hot pixel fires hundreds of times per second (from memory)", lo=0.0),
    "dark_level": Key(0.2, "float", "screen black at 20% of white: up to 7 events per bright pixel at C=0.25",
                      lo=0.001, hi=1.0),
    "rise_us": Key(1000, "int", "a display and photoreceptor settle in about a millisecond (from memory)", lo=1),
    "flash_delay_us": Key(10000, "int", "quiet lead-in so the background rate can be measured", lo=0),
    "flash_on_us": Key(50000, "int", "keeps the ON and OFF bursts well apart", lo=1),
    "flash_off_us": Key(30000, "int", "quiet tail after the OFF burst", lo=0),
    "saccade_segments": Key(3, "int", "a triangle: the shortest closed path that moves every edge", lo=2, hi=16),
    "saccade_segment_us": Key(30000, "int", "about the pace of small eye movements, tens of ms per segment", lo=1),
    "saccade_amplitude": Key(2.0, "float", "a couple of sensor pixels: edges move, the shape stays put", lo=0.1),
    "saccade_steps": Key(16, "int", "time samples per segment: sub-pixel motion per step", lo=2, hi=1000),
    "saccade_profile": Key("linear", "choice", "linear: constant speed along each side; smooth: speed 1 - cos, at rest "
                           "at each corner like an eye or a pan-tilt unit, so each saccade is its own burst",
                           choices=("linear", "smooth")),
}

# The optional noise filters (snnconvert/events/filters.py); 0 turns each off.
FILTER_KEYS: dict[str, Key] = {
    "filter_hot_factor": Key(0.0, "float", "off: simulated sensors have no hot pixel unless asked; 10 removes a pixel "
                             "firing 10x the median active pixel", lo=0.0),
    "filter_refractory_us": Key(0, "int", "off: the simulated sensor already keeps a refractory period; real "
                                "recordings may want ~1000 us", lo=0),
    "filter_background_us": Key(0, "int", "off: clean simulated data; real sensors use a few ms (T = 5000 us keeps "
                                "moving edges, drops isolated noise)", lo=0),
}

# keys that were renamed: old name -> new name (recipe.from_dict reads the old name with a note)
RENAMED = {"sensor_size": "sensor_side"}

KEYS: dict[str, Key] = {
    "source": Key("digits", "choice", "bundled with scikit-learn: runs offline with nothing to download",
                  choices=SOURCES),
    "stimulus": Key("flash", "choice", "a flash gives one clean ON burst per image, the simplest frame",
                    choices=STIMULI),
    "sensor_side": Key(32, "int", "4x the 8x8 digits: enough pixels for smooth edges, small enough to simulate fast; "
                       "also the side of recordings that store no sensor size (.bin)", lo=8, hi=1024),
    "limit": Key(0, "int", "0 keeps every sample; tests set a small number to run in seconds", lo=0),
    "val_fraction": Key(0.1, "float", "a small validation split for early stopping and calibration", lo=0.0, hi=0.5),
    "test_fraction": Key(0.2, "float", "about 360 digits: one test error moves accuracy by under 0.3 points",
                         lo=0.05, hi=0.5),
    "idx_images": Key("", "path", "no default: IDX files are the user's own (relative to the recipe folder)"),
    "idx_labels": Key("", "path", "no default: IDX files are the user's own (relative to the recipe folder)"),
    "idx_mode": Key("sensor", "choice", "showing images to the sensor keeps IDX data comparable with recordings",
                    choices=("sensor", "binarize")),
    "binarize_level": Key(0.5, "float", "half of full scale: the usual cut for dark-on-light digit images",
                          lo=0.0, hi=1.0),
    "recordings_index": Key("", "path", "no default: a CSV `file,label` inside the user's recordings folder"),
    "time_unit": Key("us", "choice", "recordings store integer microseconds; s or ms read float times in CSV and plain "
                     "NPZ files", choices=TIME_UNITS),
    "cache_dir": Key("", "path", "empty: $SNNCONVERT_CACHE or ~/.cache/snnconvert, shared between runs"),
    "workers": Key(2, "int", "the 2 cores of a laptop read a recordings folder in parallel; the frames do not "
                   "depend on it", lo=1, hi=64),
    **FILTER_KEYS,
    **SENSOR_KEYS,
}


@dataclass(frozen=True)
class DataSettings(Section):
    """The [data] section, checked (the sensor's keys included)."""

    SECTION = "data"
    KEYS = KEYS

    source: str
    stimulus: str
    sensor_side: int
    limit: int
    val_fraction: float
    test_fraction: float
    idx_images: str
    idx_labels: str
    idx_mode: str
    binarize_level: float
    recordings_index: str
    time_unit: str
    cache_dir: str
    workers: int
    filter_hot_factor: float
    filter_refractory_us: int
    filter_background_us: int
    contrast: float
    mismatch: float
    refractory_us: int
    jitter_us: int
    noise_hz: float
    hot_pixels: int
    hot_pixel_hz: float
    dark_level: float
    rise_us: int
    flash_delay_us: int
    flash_on_us: int
    flash_off_us: int
    saccade_segments: int
    saccade_segment_us: int
    saccade_amplitude: float
    saccade_steps: int
    saccade_profile: str
