"""Disk caches of the data stage: simulated recordings, and the frames of a recordings folder.

    recordings-<key>.npz  the events the simulated sensor made from images; key = hash of the images,
                          the stimulus, every sensor parameter and the seed
    frames-<key>.npz      the frames (and per-recording facts) of a recordings folder; key = hash of the
                          index file's bytes, each listed file's (name, size, mtime in ns), the [data] keys
                          that read and filter the events and the whole [frames] section. A second run
                          stats the files and reads this one file: no recording is opened.

Both are written atomically; an unreadable or mismatching cache file is ignored with a warning and
made again. A read-only cache never stops a run.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np

from snnconvert import console, files
from snnconvert.errors import FormatError
from snnconvert.events import sensor as _sensor
from snnconvert.events.stream import EVENT_DTYPE
from snnconvert.data.recordings import RecordingSet

CACHE_FORMAT = "snnconvert-recordings"
CACHE_VERSION = 1
FRAMES_FORMAT = "snnconvert-frames"
FRAMES_VERSION = 2  # 2: burst windows from the integer front end (frontend.py)


def cache_dir(section: dict, base: Path | None = None) -> Path:
    """The recordings cache: the recipe's cache_dir (relative to the recipe's folder), else
    $SNNCONVERT_CACHE, else ~/.cache/snnconvert."""
    if section.get("cache_dir"):
        d = Path(section["cache_dir"]).expanduser()
        return d if d.is_absolute() or base is None else Path(base) / d
    return user_cache_dir()


def user_cache_dir() -> Path:
    """The user's own cache: $SNNCONVERT_CACHE, else ~/.cache/snnconvert."""
    return Path(os.environ.get("SNNCONVERT_CACHE") or "~/.cache/snnconvert").expanduser()


def _cache_folders(recipe: dict, sec: dict, base: Path) -> tuple[Path, Path | None]:
    """(folder written to, folder also read from). A recipe read from inside a file (recipe.EMBEDDED)
    never chooses where files are written: its cache_dir is only read, new recordings go to the
    user's cache."""
    named = cache_dir(sec, base)
    if recipe.get("_embedded"):
        return user_cache_dir(), named
    return named, None


def simulate_cached(images: np.ndarray, labels: np.ndarray, stimulus: str, config: _sensor.SensorConfig,
                    seed: int, folder: Path, read_also: Path | None = None) -> tuple[RecordingSet, Path, bool]:
    """Simulate (or reuse) the recordings of `images`. Returns (recordings, cache file, reused?).

    The cache file is looked for in `folder`, then in `read_also`; a new one is written to `folder` only.
    """
    key = files.fingerprint(CACHE_VERSION, images.astype(np.float32), labels, stimulus, sorted(config.as_dict().items()),
                            int(seed), nested=False)
    path = Path(folder) / f"recordings-{key}.npz"
    h, w = images.shape[1:]
    if not path.is_file() and read_also is not None and (Path(read_also) / path.name).is_file():
        path = Path(read_also) / path.name
    if path.is_file():
        try:
            z = files.load_npz(path)
            if str(z["format"]) == CACHE_FORMAT and int(z["version"]) == CACHE_VERSION and z["key"] == key:
                _check_cache_arrays(z, len(labels), w, h)
                ev = np.empty(z["t"].size, EVENT_DTYPE)
                ev["t"], ev["x"], ev["y"], ev["p"] = z["t"], z["x"], z["y"], z["p"]
                return RecordingSet(ev, z["offsets"].astype(np.int64), labels, w, h), path, True
        except (FormatError, KeyError, ValueError) as exc:
            console.say(f"warning: ignoring unreadable cache {path} ({exc}); simulating again")
    path = Path(folder) / path.name
    rng = np.random.default_rng([int(seed), 1])
    ev, offsets = _sensor.simulate_batch(images, stimulus, config, rng, progress=True)
    # uncompressed but compact (7 bytes per event on sensors up to 256 pixels): deflating millions of
    # events costs more time than the simulation itself; uint32 us covers 71 minutes per recording
    xy = np.uint8 if max(w, h) <= 256 else np.uint16
    buf = io.BytesIO()
    np.savez(buf, format=np.array(CACHE_FORMAT), version=np.array(CACHE_VERSION), key=np.array(key),
             t=ev["t"].astype(np.uint32), x=ev["x"].astype(xy), y=ev["y"].astype(xy), p=ev["p"], offsets=offsets)
    try:
        files.atomic_write_bytes(path, buf.getvalue())
    except OSError as exc:  # a read-only cache must not stop the run
        console.say(f"warning: cannot write cache {path} ({exc})")
    return RecordingSet(ev, offsets, labels, w, h), path, False


def _check_cache_arrays(z: dict, n: int, w: int, h: int) -> None:
    """A cache file's arrays must describe n recordings on a w x h sensor (ValueError otherwise)."""
    off, size = z["offsets"], z["t"].size
    if any(z[k].shape != (size,) or z[k].dtype.kind not in "iu" for k in ("t", "x", "y", "p")):
        raise ValueError("event arrays t, x, y, p must be integers of one length")
    if off.shape != (n + 1,) or off.dtype.kind not in "iu" or off[0] != 0 or off[-1] != size or np.any(np.diff(off) < 0):
        raise ValueError(f"offsets must rise from 0 to {size} over {n} recordings")
    if size and (z["x"].max() >= w or z["y"].max() >= h or z["p"].min() < -1 or z["p"].max() > 1):
        raise ValueError(f"events must lie on the {w}x{h} sensor with polarity -1, 0 or 1")




# --- frames of a recordings folder ---------------------------------------------------------------
def folder_key(index_path: Path, paths: list[Path], settings) -> str:
    """The frames cache key of a folder: hash of the index's bytes, each file's (name, size, mtime_ns)
    and `settings` (everything else that changes a frame). Editing, touching, adding or removing a
    recording changes the key; no recording is read. One os.stat per file on its path string (a few
    microseconds: faster than os.scandir plus DirEntry.stat, which stats again on Linux)."""
    stats = np.array([(st.st_size, st.st_mtime_ns) for st in map(os.stat, map(os.fspath, paths))],
                     np.int64).reshape(-1, 2)
    names = "\n".join(p.name for p in paths)
    return files.fingerprint(FRAMES_VERSION, Path(index_path).read_bytes(), names, stats, settings, nested=False)


def load_frames(key: str, folder: Path, read_also: Path | None = None) -> tuple[dict | None, Path]:
    """The arrays of frames-<key>.npz from `folder` (or `read_also`), or None when absent or unreadable;
    and the path a new cache file goes to."""
    name = f"frames-{key}.npz"
    for d in (folder, read_also):
        path = Path(d) / name if d is not None else None
        if path is None or not path.is_file():
            continue
        try:
            z = files.load_npz(path)
            if str(z["format"]) == FRAMES_FORMAT and int(z["version"]) == FRAMES_VERSION and str(z["key"]) == key:
                return {k: v for k, v in z.items() if k not in ("format", "version", "key")}, path
        except (FormatError, KeyError, ValueError) as exc:
            console.say(f"warning: ignoring unreadable cache {path} ({exc}); reading the recordings again")
    return None, Path(folder) / name


def save_frames(path: Path, key: str, arrays: dict) -> None:
    """Write the frames cache atomically (uncompressed: the frames are small, reading must be fast)."""
    buf = io.BytesIO()
    np.savez(buf, format=np.array(FRAMES_FORMAT), version=np.array(FRAMES_VERSION), key=np.array(key), **arrays)
    try:
        files.atomic_write_bytes(path, buf.getvalue())
    except OSError as exc:  # a read-only cache must not stop the run
        console.say(f"warning: cannot write cache {path} ({exc})")
