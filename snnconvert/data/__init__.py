"""Data: recordings and images turned into frames and seeded splits (one job per module).

    idx.py         the IDX file format (read_idx, write_idx)
    images.py      the bundled digits, resized (digits_images)
    recordings.py  recordings in memory (RecordingSet) or in a folder (RecordingFolder, read_index),
                   and their frames; a folder is streamed through worker processes
    cache.py       disk caches: simulated recordings, and the frames of a recordings folder
    dataset.py     dataset assembly (the [data] keys live in snnconvert/settings/data.py) (load_dataset -> Dataset)
    generate.py    recordings folders and IDX files made by the simulated sensor (demos, benchmarks)
    framefile.py   frame files given to simulate/export

Every public name stays importable as snnconvert.data.<name>. Nothing here imports torch.
"""

from snnconvert.data.cache import cache_dir, simulate_cached, user_cache_dir
from snnconvert.data.dataset import (MAX_EMPTY_FRACTION, WARN_EMPTY_FRACTION, Dataset,
                                     _empty_frames_advice, _subset, check_frames, load_dataset,
                                     load_recordings)
from snnconvert.data.framefile import load_frames_file
from snnconvert.settings.data import SOURCES
from snnconvert.data.generate import write_demo_recordings
from snnconvert.data.idx import read_idx, write_idx
from snnconvert.data.images import digits_images
from snnconvert.data.recordings import RecordingFolder, RecordingSet, class_names, read_index, recording_frames

__all__ = ["SOURCES", "MAX_EMPTY_FRACTION", "WARN_EMPTY_FRACTION", "Dataset", "RecordingSet",
           "RecordingFolder", "load_dataset", "load_recordings", "check_frames", "read_idx",
           "write_idx", "digits_images", "read_index", "class_names", "recording_frames", "cache_dir",
           "user_cache_dir", "simulate_cached", "load_frames_file", "write_demo_recordings",
           "_subset", "_empty_frames_advice"]
