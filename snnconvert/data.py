"""Datasets: event recordings turned into seeded, stratified (frames, labels) splits.

Sources ([data] source):
    digits      scikit-learn's bundled 8x8 digits (values 0..16), upsampled bilinearly
                (scipy.ndimage.zoom, order 1, corners aligned) to sensor_side x sensor_side and shown to
                the simulated sensor. The embedded default; nothing is downloaded.
    idx         IDX image/label files on disk (the MNIST layout). idx_mode "sensor" shows them to the
                simulated sensor (resized to sensor_side); "binarize" turns every pixel at or above
                binarize_level of full scale into one ON event at t = 0 (no burst is found in such a
                recording, so the frame takes all its events; with frames.size equal to the image
                side, frames.threshold = 1 gives one spike per set pixel).
    recordings  a folder of event files with a CSV index `file,label` (paths inside the folder).
                Files that store no sensor size (.bin, plain NPZ, CSV without `# sensor WxH`) take
                sensor_side x sensor_side; CSV and plain NPZ times are read in time_unit.

Degenerate data is an error: when more than MAX_EMPTY_FRACTION of the frames hold no spike,
load_dataset raises a UsageError naming the key to change (the [data] key that left the recordings
without events, frames.threshold in binary mode when the windows hold events, frames.window/pick
otherwise). Above WARN_EMPTY_FRACTION it warns.

Simulated recordings are cached as NPZ in cache_dir, keyed by a hash of the images,
the stimulus, every sensor parameter and the seed; a second run with the same keys reuses them.
Random draws: sensor rng([seed, 1]), `limit` subset rng([seed, 2]), splits random_state=seed.
"""

from __future__ import annotations

import csv
import gzip
import io
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from snnconvert import console, files
from snnconvert.errors import FormatError, UsageError
from snnconvert.events import sensor as _sensor
from snnconvert.events.formats import SUFFIXES, read_events, write_events
from snnconvert.events.stream import EVENT_DTYPE, EventStream

CACHE_FORMAT = "snnconvert-recordings"
CACHE_VERSION = 1
# more than half of the frames empty: a classifier cannot learn from them, so the run stops
# (a threshold or window set for other data); above a tenth it only warns
MAX_EMPTY_FRACTION = 0.5
WARN_EMPTY_FRACTION = 0.1



# --- recordings held in memory ---------------------------------------------------------------
@dataclass
class RecordingSet:
    """Many recordings in one concatenated event array; recording i is events[offsets[i]:offsets[i+1]]."""
    events: np.ndarray          # EVENT_DTYPE
    offsets: np.ndarray         # (N + 1,) int64
    labels: np.ndarray          # (N,) int64
    width: int
    height: int

    def __len__(self) -> int:
        return int(self.labels.size)

    def __getitem__(self, i: int) -> tuple[EventStream, int]:
        i = int(i)
        if not -len(self) <= i < len(self):
            raise IndexError(f"recording {i} out of range ({len(self)} recordings)")
        i %= len(self)
        ev = self.events[self.offsets[i]:self.offsets[i + 1]]
        return EventStream(ev, self.width, self.height), int(self.labels[i])

    @classmethod
    def from_streams(cls, streams: list[EventStream], labels) -> "RecordingSet":
        """Concatenate streams that share one sensor size (a folder comes from one sensor)."""
        sizes = {(s.width, s.height) for s in streams}
        if len(sizes) > 1:
            raise UsageError(f"recordings have different sensor sizes {sorted(sizes)}; use one sensor per folder")
        w, h = sizes.pop() if sizes else (1, 1)
        offsets = np.concatenate([[0], np.cumsum([len(s) for s in streams])]).astype(np.int64)
        ev = np.concatenate([s.events for s in streams]) if streams else np.zeros(0, EVENT_DTYPE)
        return cls(ev, offsets, np.asarray(labels, np.int64), w, h)


@dataclass
class Dataset:
    train: tuple[np.ndarray, np.ndarray]
    val: tuple[np.ndarray, np.ndarray]
    test: tuple[np.ndarray, np.ndarray]
    classes: list[str]
    input_shape: tuple
    input_q: int
    fingerprint: str
    info: dict = field(default_factory=dict)
    recordings: RecordingSet | None = None
    windows: np.ndarray | None = None        # (N, 2) the frame window of each recording
    split_index: dict = field(default_factory=dict)  # "train"/"val"/"test" -> recording indices


# --- images ----------------------------------------------------------------------------------
def digits_images(sensor_side: int) -> tuple[np.ndarray, np.ndarray]:
    """scikit-learn's digits as (1797, S, S) float64 in [0, 1] and labels (1797,) int64."""
    from sklearn.datasets import load_digits
    d = load_digits()
    return _resize(d.images / 16.0, sensor_side), d.target.astype(np.int64)


def _resize(images: np.ndarray, size: int) -> np.ndarray:
    """(N, H, W) -> (N, size, size), bilinear with corners aligned, clipped to [0, 1]."""
    from scipy import ndimage
    n, h, w = images.shape
    if (h, w) == (size, size):
        return np.clip(images, 0, 1)
    return np.clip(ndimage.zoom(images, (1, size / h, size / w), order=1, grid_mode=False), 0, 1)


# --- IDX -------------------------------------------------------------------------------------
_IDX_TYPES = {0x08: ">u1", 0x09: ">i1", 0x0B: ">i2", 0x0C: ">i4", 0x0D: ">f4", 0x0E: ">f8"}


def read_idx(path) -> np.ndarray:
    """IDX file: bytes 0-1 zero, byte 2 the element type, byte 3 the number of dims, then each dim as
    a big-endian uint32, then the elements big-endian in C order. `.gz` files are decompressed."""
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    data = path.read_bytes()
    if path.suffix == ".gz":
        import zlib
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError, zlib.error):  # bad header / cut short / damaged deflate stream
            raise FormatError(f"{path}: not a readable gzip file (damaged or cut short)") from None
    if len(data) < 4 or data[0] != 0 or data[1] != 0:
        raise FormatError(f"{path}: not an IDX file (byte offset 0: magic number must start with 00 00)")
    if data[2] not in _IDX_TYPES:
        raise FormatError(f"{path}: byte offset 2: unknown IDX element type 0x{data[2]:02X}")
    ndim = data[3]
    head = 4 + 4 * ndim
    if ndim == 0 or len(data) < head:
        raise FormatError(f"{path}: byte offset 3: {ndim} dimensions but the header is cut short")
    dims = tuple(int(v) for v in np.frombuffer(data, ">u4", count=ndim, offset=4))
    dt = np.dtype(_IDX_TYPES[data[2]])
    need = head + int(np.prod(dims, dtype=np.int64)) * dt.itemsize
    if len(data) != need:
        raise FormatError(f"{path}: dims {dims} need {need} bytes but the file has {len(data)} "
                          f"(byte offset {min(len(data), need)})")
    return np.frombuffer(data, dt, offset=head).reshape(dims).astype(dt.newbyteorder("="))


def write_idx(path, array) -> Path:
    """Write `array` as IDX (atomically); dtype one of uint8, int8, int16, int32, float32, float64."""
    a = np.asarray(array)
    codes = {np.dtype(v).newbyteorder("="): k for k, v in _IDX_TYPES.items()}
    key = a.dtype.newbyteorder("=")
    if key not in codes or a.ndim == 0 or a.ndim > 255:
        raise UsageError(f"write_idx cannot store dtype {a.dtype} with {a.ndim} dims")
    code = codes[key]
    head = bytes([0, 0, code, a.ndim]) + np.asarray(a.shape, ">u4").tobytes()
    body = np.ascontiguousarray(a, dtype=_IDX_TYPES[code]).tobytes()
    data = head + body
    if Path(path).suffix == ".gz":
        data = gzip.compress(data, mtime=0)
    return files.atomic_write_bytes(path, data)


# --- simulated recordings with a disk cache --------------------------------------------------
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
    key = files.fingerprint(CACHE_VERSION, images.astype(np.float32), labels, stimulus,
                            sorted(config.as_dict().items()), int(seed), nested=False)
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


# --- recordings folder -----------------------------------------------------------------------
def read_index(index_path) -> tuple[list[Path], list[str]]:
    """CSV with header `file,label`; files resolve inside the index's folder."""
    index_path = Path(index_path)
    if not index_path.is_file():
        raise UsageError(f"file not found: {index_path} (set data.recordings_index)")
    try:
        rows = list(csv.reader(io.StringIO(index_path.read_text(encoding="utf-8"))))
    except (UnicodeDecodeError, csv.Error) as exc:
        raise FormatError(f"{index_path}: not a readable CSV ({exc})") from None
    if not rows or [c.strip() for c in rows[0]] != ["file", "label"]:
        raise FormatError(f"{index_path}: line 1: the header must be 'file,label'")
    paths, labels = [], []
    for n, row in enumerate(rows[1:], start=2):
        if not row or not "".join(row).strip():
            continue
        if len(row) != 2 or not row[0].strip() or not row[1].strip():
            raise FormatError(f"{index_path}: line {n}: expected 'file,label', got {','.join(row)!r}")
        p = files.resolve_inside(index_path.parent, row[0].strip(), what=f"{index_path} line {n}: file")
        if not p.is_file():
            raise UsageError(f"{index_path}: line {n}: file not found: {p}")
        paths.append(p)
        labels.append(row[1].strip())
    if not paths:
        raise FormatError(f"{index_path}: the index lists no recordings")
    return paths, labels


def class_names(labels: list[str]) -> list[str]:
    """Sorted class names: numerically when every label is an integer."""
    uniq = set(labels)
    try:
        return [str(v) for v in sorted(uniq, key=int)]
    except ValueError:
        return sorted(uniq)


def write_demo_recordings(folder, per_class: int = 3, seed: int = 0, sensor_side: int = 32,
                          stimulus: str = "flash", config: _sensor.SensorConfig | None = None) -> Path:
    """A small recordings folder made by the simulated sensor from the digits, for demos.

    Files rotate through every format (.npz, .csv, .bin); returns the path of index.csv.
    """
    images, labels = digits_images(sensor_side)
    rng = np.random.default_rng([int(seed), 3])
    pick = np.concatenate([rng.permutation(np.flatnonzero(labels == c))[:per_class] for c in range(10)])
    ev, offsets = _sensor.simulate_batch(images[pick], stimulus, config, np.random.default_rng([int(seed), 1]),
                                         progress=False)
    folder = Path(folder)
    lines = ["file,label"]
    for k, i in enumerate(pick):
        s = EventStream(ev[offsets[k]:offsets[k + 1]], sensor_side, sensor_side)
        name = f"digit{labels[i]}_{k:04d}{SUFFIXES[k % len(SUFFIXES)]}"
        write_events(s, folder / name)
        lines.append(f"{name},{labels[i]}")
    return files.atomic_write_text(folder / "index.csv", "\n".join(lines) + "\n")


# --- frame files (simulate --data, export --inputs) ----------------------------------------------
def load_frames_file(path, input_shape, input_q: int, n_classes: int, need_labels: bool = True):
    """(x int64 (N, C, H, W), y int64 (N,) or None) from a frames NPZ: array `x` holds the frames as
    input payloads (integers in [0, input_q]; an integer dtype, or floats holding whole numbers, as the
    data set's frames do) and array `y` the class labels (an integer dtype, values in [0, n_classes)).

    Every failure is a FormatError naming the file and the array.
    """
    from snnconvert.files import load_npz
    path = Path(path)
    z = load_npz(path)
    shape = "(N, " + ", ".join(map(str, input_shape)) + ")"
    for k, what in (("x", f"frames as input payloads 0..{input_q}, shape {shape}"), ("y", "class labels, shape (N,)")):
        if k not in z and (k == "x" or need_labels):
            raise FormatError(f"{path}: array '{k}' ({what}) is missing; found {sorted(z)} "
                              f"(a frames file holds the arrays x and y)")
    x = z["x"]
    if x.ndim != 4 or tuple(x.shape[1:]) != tuple(input_shape) or x.shape[0] == 0:
        raise FormatError(f"{path}: array 'x' has shape {x.shape}; the network needs {shape} with N >= 1")
    if x.dtype.kind == "f":
        if not np.all(np.isfinite(x)) or np.any(x != np.round(x)):
            raise FormatError(f"{path}: array 'x' must hold whole-number input payloads in [0, {input_q}]; "
                              f"got fractions or non-finite values")
    elif x.dtype.kind not in "iub":
        raise FormatError(f"{path}: array 'x' must hold integer input payloads; got dtype {x.dtype}")
    lo, hi = x.min(), x.max()
    if lo < 0 or hi > input_q:
        raise FormatError(f"{path}: array 'x' must hold input payloads in [0, {input_q}]; got values in "
                          f"[{lo:g}, {hi:g}]")
    y = z.get("y")
    if y is not None:
        if y.dtype.kind not in "iu":
            raise FormatError(f"{path}: array 'y' must hold integer class labels; got dtype {y.dtype}")
        if y.shape != (x.shape[0],):
            raise FormatError(f"{path}: array 'y' must hold one label per frame, shape ({x.shape[0]},); "
                              f"got shape {y.shape}")
        bad = np.flatnonzero((y < 0) | (y >= n_classes))
        if bad.size:
            raise FormatError(f"{path}: array 'y' must hold class labels in [0, {n_classes - 1}]; got "
                              f"{int(y[bad[0]])} at index {int(bad[0])}")
        y = y.astype(np.int64)
    return x.astype(np.int64), y


# --- frames of many recordings ---------------------------------------------------------------
def recording_frames(recs: RecordingSet, frames_section: dict, progress: bool = True):
    """(X (N, C, S, S) float32, windows (N, 2), used_rule (N,) bool) for a RecordingSet."""
    from snnconvert import frames as F
    sec = frames_section
    n = len(recs)
    wins = np.zeros((n, 2), np.int64)
    ok = np.zeros(n, bool)
    sel = []
    for i in console.bar(range(n), desc="windows", unit="rec", enabled=progress):
        s, _ = recs[i]
        (t0, t1), ok[i] = F.frame_window(s, sec)
        wins[i] = t0, t1
        a, b = np.searchsorted(s.t, [t0, t1])
        sel.append(np.arange(recs.offsets[i] + a, recs.offsets[i] + b))
    lens = np.array([len(v) for v in sel], np.int64)
    idx = np.concatenate(sel) if sel else np.zeros(0, np.int64)
    ev = recs.events[idx]
    X = F.bin_events(ev["x"], ev["y"], ev["p"], recs.width, recs.height, np.repeat(np.arange(n), lens), n,
                     sec["mode"], sec["size"], sec["threshold"], sec["max_count"])
    return X, wins, ok, lens


# --- the dataset -----------------------------------------------------------------------------
def _path_key(section: dict, key: str, base: Path) -> Path:
    v = section.get(key, "")
    if not v:
        raise UsageError(f"data.{key} is empty; set it to the file's path (source = {section.get('source')!r})")
    p = Path(v).expanduser()
    p = p if p.is_absolute() else base / p
    if not p.is_file():
        raise UsageError(f"file not found: {p} (set data.{key})")
    return p


def _subset(labels: np.ndarray, limit: int, seed: int) -> np.ndarray:
    """A seeded subset of `limit` indices with every class in proportion (all if limit is 0 or too big)."""
    n = labels.size
    if not limit or limit >= n:
        return np.arange(n)
    from sklearn.model_selection import train_test_split
    rs = int(np.random.default_rng([int(seed), 2]).integers(2**31))
    try:
        keep, _ = train_test_split(np.arange(n), train_size=limit, stratify=labels, random_state=rs)
    except ValueError:
        keep = np.random.default_rng([int(seed), 2]).permutation(n)[:limit]
    return np.sort(keep)


def load_recordings(recipe: dict, progress: bool = True) -> tuple[RecordingSet, list[str], dict]:
    """The recordings a recipe's [data] section describes, plus class names and facts for the report."""
    sec = recipe["data"]
    seed = int(recipe.get("seed", 0))
    base = Path(recipe.get("_base_dir") or ".")
    config = _sensor.SensorConfig.from_section(sec)
    info = {"source": sec["source"]}
    src = sec["source"]
    if src == "digits":
        images, labels = digits_images(sec["sensor_side"])
        keep = _subset(labels, sec["limit"], seed)
        recs, path, hit = simulate_cached(images[keep], labels[keep], sec["stimulus"], config, seed,
                                          *_cache_folders(recipe, sec, base))
        classes = [str(c) for c in range(10)]
        info.update(cache=str(path), cache_reused=hit, stimulus=sec["stimulus"])
    elif src == "idx":
        img_path, lab_path = _path_key(sec, "idx_images", base), _path_key(sec, "idx_labels", base)
        images, labels = read_idx(img_path), read_idx(lab_path)
        if images.ndim != 3:
            raise FormatError(f"{img_path}: IDX images must have 3 dims (N, H, W); got {images.shape}")
        if labels.ndim != 1 or labels.shape[0] != images.shape[0] or not np.issubdtype(labels.dtype, np.integer):
            raise FormatError(f"{lab_path}: IDX labels must be N={images.shape[0]} integers; got "
                              f"{labels.shape} {labels.dtype}")
        uniq = np.unique(labels)
        classes = [str(v) for v in uniq]
        labels = np.searchsorted(uniq, labels).astype(np.int64)
        keep = _subset(labels, sec["limit"], seed)
        images, labels = images[keep], labels[keep]
        full = float(np.iinfo(images.dtype).max) if np.issubdtype(images.dtype, np.integer) else float(images.max() or 1)
        images = np.clip(images.astype(np.float64) / full, 0, 1)
        if sec["idx_mode"] == "sensor":
            recs, path, hit = simulate_cached(_resize(images, sec["sensor_side"]), labels, sec["stimulus"], config,
                                              seed, *_cache_folders(recipe, sec, base))
            info.update(cache=str(path), cache_reused=hit, stimulus=sec["stimulus"])
        else:
            recs = _binarized_recordings(images, labels, sec["binarize_level"])
        info.update(idx_images=str(img_path), idx_mode=sec["idx_mode"])
    else:
        index = _path_key(sec, "recordings_index", base)
        paths, names = read_index(index)
        classes = class_names(names)
        keep = _subset(np.array([classes.index(v) for v in names]), sec["limit"], seed)
        side = (sec["sensor_side"], sec["sensor_side"])
        streams = [read_events(paths[i], default_sensor=side, time_unit=sec["time_unit"])
                   for i in console.bar(keep, desc="reading", unit="file", enabled=progress)]
        recs = RecordingSet.from_streams(streams, [classes.index(names[i]) for i in keep])
        info.update(index=str(index))
    return recs, classes, info


def _binarized_recordings(images: np.ndarray, labels: np.ndarray, level: float) -> RecordingSet:
    """One ON event at t = 0 for every pixel >= level (images in [0, 1])."""
    n, h, w = images.shape
    s, y, x = np.nonzero(images >= level)  # row-major: grouped by image already
    ev = np.zeros(s.size, EVENT_DTYPE)
    ev["x"], ev["y"], ev["p"] = x, y, 1
    offsets = np.concatenate([[0], np.cumsum(np.bincount(s, minlength=n))]).astype(np.int64)
    return RecordingSet(ev, offsets, labels, w, h)


def check_frames(X: np.ndarray, recs: RecordingSet, lens: np.ndarray, fsec: dict, dsec: dict) -> None:
    """Refuse degenerate data: more than MAX_EMPTY_FRACTION of the frames without a spike.

    empty = #{i : sum(X[i]) == 0}; refused when empty > MAX_EMPTY_FRACTION * N. The UsageError is
    one line naming the recipe key to change (see _empty_frames_advice).
    """
    n = len(X)
    empty = int(np.count_nonzero(X.reshape(n, -1).sum(1) == 0)) if n else 0
    if n and empty > MAX_EMPTY_FRACTION * n:
        raise UsageError(f"{empty} of {n} frames are empty (at most {MAX_EMPTY_FRACTION:.0%} may be); "
                         f"{_empty_frames_advice(recs, lens, fsec, dsec)}")


def _empty_frames_advice(recs: RecordingSet, lens: np.ndarray, fsec: dict, dsec: dict) -> str:
    """Which key to change, by the first cause that holds:
    recordings without events: the [data] key that made them (binarize_level, contrast) or the files;
    binary frames whose windows hold events: frames.threshold, with the pooled count of the busiest
    pixel of the median frame as the largest threshold that keeps it; else frames.window / frames.pick.
    lens: events per frame window."""
    per_rec = np.diff(recs.offsets)
    if np.median(per_rec) == 0:
        if dsec["source"] == "idx" and dsec["idx_mode"] == "binarize":
            key = f"lower data.binarize_level (now {dsec['binarize_level']})"
        elif dsec["source"] == "recordings":
            key = f"check the recordings listed in {dsec['recordings_index']}"
        else:
            key = f"lower data.contrast (now {dsec['contrast']})"
        return f"the median recording holds no events: {key}"
    if fsec["mode"] == "binary" and np.median(lens) > 0:
        counts = recording_frames(recs, {**fsec, "mode": "count", "max_count": 255}, progress=False)[0]
        # the lower median: a threshold at most this keeps at least half of the frames non-empty
        busiest = int(np.percentile(counts.reshape(len(counts), -1).max(1), 50, method="lower"))
        return (f"lower frames.threshold (now {fsec['threshold']}) to at most {busiest}, the event count of "
                f"the busiest pixel in the median frame")
    return (f"change frames.window (now {fsec['window']!r}) or frames.pick (now {fsec['pick']!r}): "
            f"the median frame window holds {int(np.median(lens))} events")


def load_dataset(recipe: dict, progress: bool = True) -> Dataset:
    """Recordings -> one frame each (frames section) -> seeded stratified train/val/test split.

    val_fraction and test_fraction are fractions of all samples; val_fraction 0 gives an empty
    validation split. Splits use scikit-learn's train_test_split(stratify=labels, random_state=seed).
    """
    from sklearn.model_selection import train_test_split
    from snnconvert import frames as F
    seed = int(recipe.get("seed", 0))
    dsec, fsec = recipe["data"], recipe["frames"]
    recs, classes, info = load_recordings(recipe, progress)
    X, wins, ok, lens = recording_frames(recs, fsec, progress)  # (N, C, S, S)
    check_frames(X, recs, lens, fsec, dsec)
    y = recs.labels
    idx = np.arange(len(y))
    tf, vf = dsec["test_fraction"], dsec["val_fraction"]
    try:
        rest, te = train_test_split(idx, test_size=tf, stratify=y, random_state=seed)
        if vf > 0:
            tr, va = train_test_split(rest, test_size=vf / (1 - tf), stratify=y[rest], random_state=seed)
        else:
            tr, va = rest, rest[:0]
    except ValueError as exc:
        raise UsageError(f"cannot split {len(y)} samples of {len(classes)} classes into train/val/test "
                         f"(data.limit={dsec['limit']}, test_fraction={tf}, val_fraction={vf}): {exc}") from None
    tr, va, te = np.sort(tr), np.sort(va), np.sort(te)
    split = lambda s: (X[s], y[s].astype(np.int64))  # noqa: E731
    spikes = X.reshape(len(X), -1).sum(1)
    info.update(
        recordings=len(recs), events_per_recording=float(np.diff(recs.offsets).mean()) if len(recs) else 0.0,
        events_per_window=float(lens.mean()) if len(lens) else 0.0,
        nonzero_pixels_per_frame=float(np.count_nonzero(X.reshape(len(X), -1), axis=1).mean()) if len(X) else 0.0,
        frame_sum_mean=float(spikes.mean()) if len(X) else 0.0,
        fallback_windows=int((~ok).sum()), sensor=[recs.width, recs.height],
        empty_frames=int(np.count_nonzero(spikes == 0)),
        split_sizes={"train": int(tr.size), "val": int(va.size), "test": int(te.size)},
    )
    if len(X) and info["empty_frames"] > WARN_EMPTY_FRACTION * len(X):
        console.say(f"warning: {info['empty_frames']} of {len(X)} frames are empty; "
                    f"{_empty_frames_advice(recs, lens, fsec, dsec)}")
    fp = files.fingerprint(X, y, tr, va, te, classes, nested=False)
    return Dataset(train=split(tr), val=split(va), test=split(te), classes=classes, input_shape=tuple(X.shape[1:]),
                   input_q=F.input_q(fsec["mode"], fsec["max_count"]), fingerprint=fp, info=info, recordings=recs,
                   windows=wins, split_index={"train": tr, "val": va, "test": te})
