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
                Streamed: read, filtered, windowed and binned file by file in `workers` processes;
                only the frames are kept, and cached (see cache.py): a second run reads the cache alone.

Noise filters (events/filters.py: hot pixels, refractory, background activity) are optional steps
applied to every recording before its windows are found; their effect (events in, events out, pixels
removed) goes into the data summary.

Frames per recording (frames.per_recording): "one" frame, one sample per window ("each", K samples
per recording, all in the recording's split so no recording is in two splits), or K windows stacked
as channels ("stack").

Degenerate data is an error: when more than MAX_EMPTY_FRACTION of the frames hold no spike,
load_dataset raises a UsageError naming the key to change (the [data] key that left the recordings
without events, frames.threshold in binary mode when the windows hold events, frames.window/pick
otherwise). Above WARN_EMPTY_FRACTION it warns.

Random draws: sensor rng([seed, 1]), `limit` subset rng([seed, 2]), splits random_state=seed.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from snnconvert import console, files
from snnconvert.data import cache as _cache
from snnconvert.data.idx import read_idx
from snnconvert.data.images import _resize, digits_images
from snnconvert.data.recordings import (RecordingFolder, RecordingSet, class_names, folder_frames, read_index,
                                        recording_frames)
from snnconvert.errors import FormatError, UsageError
from snnconvert.events import filters as _filters
from snnconvert.events import sensor as _sensor
from snnconvert.events.stream import EVENT_DTYPE

# more than half of the frames empty: a classifier cannot learn from them, so the run stops
# (a threshold or window set for other data); above a tenth it only warns
MAX_EMPTY_FRACTION = 0.5
WARN_EMPTY_FRACTION = 0.1
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
    recordings: RecordingSet | RecordingFolder | None = None
    windows: np.ndarray | None = None        # (N, 2) the frame window of each recording (first to last window)
    split_index: dict = field(default_factory=dict)  # "train"/"val"/"test" -> recording indices


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





def load_recordings(recipe: dict, progress: bool = True) -> tuple[RecordingSet | RecordingFolder, list[str], dict]:
    """The recordings a recipe's [data] section describes, plus class names and facts for the report.

    Simulated and IDX sources are held in memory (RecordingSet, filtered here); a recordings folder is
    a RecordingFolder: only its index is read here, the files are read when the frames are made.
    """
    sec = recipe["data"]
    seed = int(recipe.get("seed", 0))
    base = Path(recipe.get("_base_dir") or ".")
    config = _sensor.SensorConfig.from_section(sec)
    info = {"source": sec["source"]}
    src = sec["source"]
    if src == "digits":
        images, labels = digits_images(sec["sensor_side"])
        keep = _subset(labels, sec["limit"], seed)
        recs, path, hit = _cache.simulate_cached(images[keep], labels[keep], sec["stimulus"], config, seed,
                                                 *_cache._cache_folders(recipe, sec, base))
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
            recs, path, hit = _cache.simulate_cached(_resize(images, sec["sensor_side"]), labels, sec["stimulus"],
                                                     config, seed, *_cache._cache_folders(recipe, sec, base))
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
        recs = RecordingFolder([paths[i] for i in keep], np.array([classes.index(names[i]) for i in keep], np.int64),
                               side[0], side[1], side, sec["time_unit"], _filters.settings_of(sec))
        info.update(index=str(index))
    if isinstance(recs, RecordingSet) and any(_filters.settings_of(sec)):
        recs, info["filters"] = _filter_set(recs, _filters.settings_of(sec), progress)
    return recs, classes, info


def _filter_set(recs: RecordingSet, settings: tuple, progress: bool) -> tuple[RecordingSet, dict]:
    """Every recording of an in-memory set through the noise filters; their summed effect."""
    streams, total = [], {"events_in": 0, "events_out": 0, "pixels_removed": 0}
    for i in console.bar(range(len(recs)), desc="filters", unit="rec", enabled=progress):
        s, eff = _filters.apply(recs[i][0], *settings)
        streams.append(s)
        for k in total:
            total[k] += eff[k]
    return RecordingSet.from_streams(streams, recs.labels) if streams else recs, total


def _binarized_recordings(images: np.ndarray, labels: np.ndarray, level: float) -> RecordingSet:
    """One ON event at t = 0 for every pixel >= level (images in [0, 1])."""
    n, h, w = images.shape
    s, y, x = np.nonzero(images >= level)  # row-major: grouped by image already
    ev = np.zeros(s.size, EVENT_DTYPE)
    ev["x"], ev["y"], ev["p"] = x, y, 1
    offsets = np.concatenate([[0], np.cumsum(np.bincount(s, minlength=n))]).astype(np.int64)
    return RecordingSet(ev, offsets, labels, w, h)


def _folder_frames_cached(recipe: dict, dsec: dict, fsec: dict, recs: RecordingFolder, info: dict,
                          progress: bool):
    """recording_frames of a folder through the frames cache, with the frames as the uint8 array the
    cache holds: hit -> the cache file alone (one np.load; the key stats each file once); miss ->
    stream the files (folder_frames) and write the cache. Fills recs.events, width, height and info
    (cache, cache_reused, filters)."""
    base = Path(recipe.get("_base_dir") or ".")
    settings = (dsec["sensor_side"], dsec["time_unit"], recs.filters, sorted(fsec.items()))
    key = _cache.folder_key(Path(info["index"]), recs.paths, settings)
    folder, read_also = _cache._cache_folders(recipe, dsec, base)
    got, path = _cache.load_frames(key, folder, read_also)
    hit = got is not None
    if not hit:
        got = folder_frames(recs, fsec, progress, dsec["workers"])
        _cache.save_frames(path, key, got)
    recs.events = got["events"].astype(np.int64)
    if len(got["sensor"]):
        recs.width, recs.height = (int(v) for v in got["sensor"][0])
    info.update(cache=str(path), cache_reused=hit)
    if any(recs.filters):
        info["filters"] = {"events_in": int(got["events_in"].sum()), "events_out": int(got["events"].sum()),
                           "pixels_removed": int(got["pixels_removed"].sum())}
    return got["X"], got["windows"], got["ok"].astype(bool), got["lens"]


def check_frames(X: np.ndarray, recs, lens: np.ndarray, fsec: dict, dsec: dict) -> None:
    """Refuse degenerate data: more than MAX_EMPTY_FRACTION of the frames without a spike.

    empty = #{i : sum(X[i]) == 0}; refused when empty > MAX_EMPTY_FRACTION * N. The UsageError is
    one line naming the recipe key to change (see _empty_frames_advice).
    """
    n = len(X)
    empty = int(np.count_nonzero(X.reshape(n, -1).sum(1) == 0)) if n else 0
    if n and empty > MAX_EMPTY_FRACTION * n:
        raise UsageError(f"{empty} of {n} frames are empty (at most {MAX_EMPTY_FRACTION:.0%} may be); "
                         f"{_empty_frames_advice(recs, lens, fsec, dsec)}")


def _empty_frames_advice(recs, lens: np.ndarray, fsec: dict, dsec: dict) -> str:
    """Which key to change, by the first cause that holds:
    recordings without events: the [data] key that made them (binarize_level, contrast) or the files;
    binary frames whose windows hold events: frames.threshold, with the pooled count of the busiest
    pixel of the median frame as the largest threshold that keeps it; else frames.window / frames.pick.
    lens: events per frame window."""
    per_rec = np.diff(recs.offsets)
    if per_rec.size and np.median(per_rec) == 0:     # a folder knows its counts once its frames are made
        if dsec["source"] == "idx" and dsec["idx_mode"] == "binarize":
            key = f"lower data.binarize_level (now {dsec['binarize_level']})"
        elif dsec["source"] == "recordings":
            key = f"check the recordings listed in {dsec['recordings_index']}"
        else:
            key = f"lower data.contrast (now {dsec['contrast']})"
        return f"the median recording holds no events: {key}"
    if fsec["mode"] == "binary" and np.median(lens) > 0:
        counts = recording_frames(recs, {**fsec, "mode": "count", "max_count": 255}, progress=False,
                                  workers=dsec["workers"])[0]
        # the lower median: a threshold at most this keeps at least half of the frames non-empty
        busiest = int(np.percentile(counts.reshape(len(counts), -1).max(1), 50, method="lower"))
        return (f"lower frames.threshold (now {fsec['threshold']}) to at most {busiest}, the event count of "
                f"the busiest pixel in the median frame")
    return (f"change frames.window (now {fsec['window']!r}) or frames.pick (now {fsec['pick']!r}): "
            f"the median frame window holds {int(np.median(lens))} events")




def load_dataset(recipe: dict, progress: bool = True) -> Dataset:
    """Recordings -> frames (frames section) -> seeded stratified train/val/test split of the recordings.

    val_fraction and test_fraction are fractions of all recordings; val_fraction 0 gives an empty
    validation split. Splits use scikit-learn's train_test_split(stratify=labels, random_state=seed).
    With frames.per_recording "each", every window of a recording becomes a sample of the recording's
    split (K samples per recording, in window order).
    """
    from sklearn.model_selection import train_test_split
    from snnconvert import frames
    seed = int(recipe.get("seed", 0))
    dsec, fsec = recipe["data"], recipe["frames"]
    recs, classes, info = load_recordings(recipe, progress)
    if isinstance(recs, RecordingFolder):
        X5, wins, ok, lens = _folder_frames_cached(recipe, dsec, fsec, recs, info, progress)
    else:
        X5, wins, ok, lens = recording_frames(recs, fsec, progress)  # (N, K, C, S, S)
    n, k = X5.shape[:2]
    per = fsec["per_recording"]
    # counts on the frames as they come (a folder's: uint8, a quarter of the bytes); every frame sum is an
    # integer below 2^24, so it is the same in float32
    check_frames(X5.reshape(n, -1, *X5.shape[3:]), recs, lens, fsec, dsec)
    spikes = X5.reshape(n, k, -1).sum(2).astype(np.float32)  # (N, K) spikes per frame
    nonzero = float(np.count_nonzero(X5.reshape(n * k, -1), axis=1).mean()) if n else 0.0
    X5 = X5.astype(np.float32, copy=False)
    X = X5.reshape(n, -1, *X5.shape[3:]) if per != "each" else X5[:, 0]  # (N, K*C or C, S, S)
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
    if per == "each":
        def split(s):
            return X5[s].reshape(-1, *X5.shape[2:]), np.repeat(y[s], k).astype(np.int64)
    else:
        def split(s):
            return X[s], y[s].astype(np.int64)
    per_rec = np.diff(recs.offsets) if len(recs) else np.zeros(0, np.int64)
    info.update(
        recordings=len(recs), events_per_recording=float(per_rec.mean()) if len(recs) else 0.0,
        events_per_window=float(lens.mean() / k) if len(lens) else 0.0,
        nonzero_pixels_per_frame=nonzero,
        frame_sum_mean=float(spikes.mean()) if n else 0.0,
        fallback_windows=int((~ok).sum()), sensor=[recs.width, recs.height],
        empty_frames=int(np.count_nonzero(spikes == 0)), per_recording=per, windows_per_recording=int(k),
        split_sizes={"train": int(tr.size), "val": int(va.size), "test": int(te.size)},
    )
    if n and info["empty_frames"] > WARN_EMPTY_FRACTION * n * k:
        console.say(f"warning: {info['empty_frames']} of {n * k} frames are empty; "
                    f"{_empty_frames_advice(recs, lens, fsec, dsec)}")
    fp = (files.fingerprint(X, y, tr, va, te, classes, nested=False) if per == "one"
          else files.fingerprint(X5, y, tr, va, te, classes, per, nested=False))
    train_, val_, test_ = split(tr), split(va), split(te)
    return Dataset(train=train_, val=val_, test=test_, classes=classes, input_shape=tuple(X.shape[1:] if per != "each" else X5.shape[2:]),
                   input_q=frames.input_q(fsec["mode"], fsec["max_count"]), fingerprint=fp, info=info, recordings=recs,
                   windows=wins, split_index={"train": tr, "val": va, "test": te})
