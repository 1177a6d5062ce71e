"""Recordings: many in memory (RecordingSet), or a folder of files read lazily (RecordingFolder),
and their frames.

A folder is never held in memory: `folder_frames` reads, filters, windows and bins it file by file
in worker processes (chunks of CHUNK files) and keeps only the frames, so memory is bounded by the
frames plus one chunk of events per worker, whatever the folder's size.
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from snnconvert import console, files
from snnconvert.errors import FormatError, UsageError
from snnconvert.events import filters as _filters
from snnconvert.events.formats import read_events
from snnconvert.events.stream import EVENT_DTYPE, EventStream

SCAN_ROWS = 64  # an index with more rows checks its files by one directory scan
CHUNK = 256  # files per worker task: large enough to hide the task overhead, small enough for a smooth bar


def in_order(fn, tasks: list, workers: int, total: int, desc: str, unit: str, progress: bool, size) -> list:
    """[fn(t) for t in tasks], run in min(workers, len(tasks)) spawned processes (no state of this process
    leaks in; one runs here), results in task order; the bar advances by size(result)."""
    workers = max(1, min(int(workers), len(tasks)))
    parts, pool = [], None
    with console.bar(total=total, desc=desc, unit=unit, enabled=progress) as bar:
        if workers == 1:
            results = map(fn, tasks)
        else:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor
            pool = ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn"))
            results = pool.map(fn, tasks)
        try:
            for r in results:
                parts.append(r)
                bar.update(size(r))
        finally:
            if pool is not None:
                pool.shutdown(cancel_futures=True)
    return parts


def _position(i: int, n: int) -> int:
    """Index i (negative counts from the end) of n recordings; IndexError outside."""
    i = int(i)
    if not -n <= i < n:
        raise IndexError(f"recording {i} out of range ({n} recordings)")
    return i % n


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
        i = _position(i, len(self))
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
class RecordingFolder:
    """The recordings of a folder, read one file at a time; recording i is read (and filtered) on access.

    `events` (events per recording after the filters) is known once the frames have been made.
    """
    paths: list[Path]
    labels: np.ndarray          # (N,) int64
    width: int
    height: int
    default_sensor: tuple[int, int]
    time_unit: str = "us"
    filters: tuple = (0.0, 0, 0)   # (hot_factor, refractory_us, background_us)
    events: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))

    def __len__(self) -> int:
        return int(self.labels.size)

    def __getitem__(self, i: int) -> tuple[EventStream, int]:
        i = _position(i, len(self))
        s = read_events(self.paths[i], default_sensor=self.default_sensor, time_unit=self.time_unit)
        return _filters.apply(s, *self.filters)[0], int(self.labels[i])

    @property
    def offsets(self) -> np.ndarray:
        """(N + 1,) cumulative event counts, as RecordingSet.offsets."""
        return np.concatenate([[0], np.cumsum(self.events)]).astype(np.int64)


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
    root = index_path.parent.resolve()  # once: a plain file name then needs no system call (below)
    # a long index: one directory scan lists the regular files (not symlinks) of the folder, so a
    # plain file name found there is inside the folder and exists; other names go through
    # resolve_inside and a stat, as every name of a short index does
    regular = ({e.name for e in os.scandir(root) if e.is_file(follow_symlinks=False)}
               if len(rows) > SCAN_ROWS else set())
    for n, row in enumerate(rows[1:], start=2):
        if not row or not "".join(row).strip():
            continue
        if len(row) != 2 or not row[0].strip() or not row[1].strip():
            raise FormatError(f"{index_path}: line {n}: expected 'file,label', got {','.join(row)!r}")
        name = row[0].strip()
        if name in regular and files.plain_name(name):
            p = root / name
        else:
            p = files.resolve_inside(root, name, what=f"{index_path} line {n}: file")
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


# --- frames of many recordings ---------------------------------------------------------------
def _frames_section(frames_section: dict) -> dict:
    """A resolved [frames] section (every key present, as recipe.load leaves it); a missing key is named."""
    from snnconvert.settings.frames import KEYS
    missing = [k for k in KEYS if k not in frames_section]
    if missing:
        raise UsageError(f"the [frames] section lacks {', '.join(missing)}; pass a resolved section "
                         "(recipe.load fills every key)")
    return frames_section


def recording_frames(recs, frames_section: dict, progress: bool = True, workers: int = 1):
    """(X (N, K, C, S, S) float32, windows (N, 2), used_rule (N,) bool, lens (N,) int64) for a
    RecordingSet or a RecordingFolder; K = frames.windows_used, windows (N, 2) spans the first to the
    last window of each recording, lens counts the events inside its windows."""
    if isinstance(recs, RecordingFolder):
        out = folder_frames(recs, frames_section, progress, workers)
        return out["X"].astype(np.float32), out["windows"], out["ok"], out["lens"]
    from snnconvert import frames
    sec = _frames_section(frames_section)
    n = len(recs)
    wins, ok = np.zeros((n, 2), np.int64), np.zeros(n, bool)
    bounds = np.zeros((n, 2 * frames.windows_used(sec)), np.int64)
    _check_set(recs)  # once for the set: the recordings below are views of checked events
    for i in console.bar(range(n), desc="windows", unit="rec", enabled=progress):
        ev = recs.events[recs.offsets[i]:recs.offsets[i + 1]]
        _window_bounds(_stream(ev, recs.width, recs.height), int(recs.offsets[i]), sec, i, wins, ok, bounds)
    X = frames.bin_segments(recs.events["x"], recs.events["y"], recs.events["p"], recs.width, recs.height, bounds,
                            sec["mode"], sec["size"], sec["threshold"], sec["max_count"])
    return X.reshape(n, -1, *X.shape[1:]), wins, ok, (bounds[:, 1::2] - bounds[:, 0::2]).sum(1)


def _check_set(recs: RecordingSet) -> None:
    """The checks of EventStream over every recording of a set at once: addresses on the sensor,
    polarity +1/-1, time non-decreasing within each recording (it may fall where a recording starts)."""
    from snnconvert.events.stream import _validate
    ev, off = recs.events, np.asarray(recs.offsets, np.int64)
    if off.shape != (len(recs) + 1,) or off[0] != 0 or off[-1] != ev.size or np.any(np.diff(off) < 0):
        raise UsageError(f"recording offsets must rise from 0 to {ev.size} over {len(recs)} recordings")
    _validate(ev["t"][:1], ev["x"], ev["y"], ev["p"], recs.width, recs.height)  # time order: per recording, below
    t = ev["t"]
    falls = np.flatnonzero(t[1:] < t[:-1]) + 1
    bad = falls[~np.isin(falls, off)]
    if bad.size:
        i = int(bad[0])
        r = int(np.searchsorted(off, i, side="right") - 1)
        raise UsageError(f"recording {r}: event field 't' decreases at index {i - off[r]} ({t[i - 1]} -> {t[i]})")


def _window_bounds(s: EventStream, start: int, sec: dict, i: int, wins, ok, bounds) -> None:
    """Recording i (events start.. of the whole array) by the window rule: wins[i] spans its first to
    its last window, ok[i] says whether the rule gave them, bounds[i] (2K,) are the event indices
    (of the whole array) where its windows open and close, for frames.bin_segments."""
    from snnconvert import frames
    ws, ok[i] = frames.frame_windows(s, sec)
    wins[i] = ws[0][0], ws[-1][1]
    bounds[i] = start + np.searchsorted(s.t, np.asarray(ws, np.int64).ravel())


def _read_chunk(paths: list[str], default_sensor, time_unit: str) -> tuple[np.ndarray, np.ndarray, tuple]:
    """(events EVENT_DTYPE, starts (n + 1,), (width, height)) of one chunk: file i is
    events[starts[i]:starts[i + 1]]; files of different sensor sizes are refused.

    .bin files (no stored sensor size: default_sensor) are decoded together: one np.frombuffer over
    the concatenated bytes, the 23-bit timestamp unwrapped within each file (its wrap count restarts
    at the file's first event), addresses checked once for the chunk; no Python work per event. A
    file that fails a check is read again alone, so the error names the file and the byte offset.
    Other formats go through read_events one by one.
    """
    from snnconvert.events.formats import decode_bin
    if not all(p.endswith(".bin") for p in paths) or not default_sensor:
        streams = [read_events(p, default_sensor=default_sensor, time_unit=time_unit) for p in paths]
        sizes = {(s.width, s.height) for s in streams}
        if len(sizes) > 1:
            raise UsageError(f"recordings have different sensor sizes {sorted(sizes)}; use one sensor per folder")
        starts = np.concatenate([[0], np.cumsum([len(s) for s in streams])]).astype(np.int64)
        ev = np.concatenate([s.events for s in streams]) if streams else np.zeros(0, EVENT_DTYPE)
        return ev, starts, sizes.pop() if sizes else tuple(default_sensor or (1, 1))
    blobs = []
    for p in paths:
        with open(p, "rb") as f:
            blobs.append(f.read())
    sizes = np.fromiter(map(len, blobs), np.int64, len(blobs))
    bad = np.flatnonzero(sizes % 5)
    if bad.size:  # the one-file reader names the byte offset
        read_events(paths[int(bad[0])], default_sensor=default_sensor)
    starts = np.concatenate([[0], np.cumsum(sizes // 5)])
    t, x, y, p = decode_bin(b"".join(blobs), starts)  # wraps counted within each file
    w, h = default_sensor
    if t.size and (int(x.max()) >= w or int(y.max()) >= h):
        i = int(np.flatnonzero((x >= w) | (y >= h))[0])
        f = int(np.searchsorted(starts, i, side="right") - 1)
        read_events(paths[f], default_sensor=default_sensor)  # raises, naming the file and offset
    ev = np.empty(t.size, EVENT_DTYPE)
    ev["t"], ev["x"], ev["y"], ev["p"] = t, x, y, p
    return ev, starts, (w, h)


def _folder_chunk(task: tuple) -> dict:
    """Worker: read, filter and window the files of one chunk, bin all their windows in one pass;
    return only frames (uint8) and per-file counts.

    The Python loop per file only finds its windows (frames.frame_windows); reading, the window
    bounds (one np.searchsorted per file over its own times), the group of every event (one np.repeat
    over the chunk) and the binning (one np.bincount) are whole-chunk array operations.
    """
    from snnconvert import frames
    paths, default_sensor, time_unit, filt, sec = task
    n, k = len(paths), frames.windows_used(sec)
    out = {"X": None, "windows": np.zeros((n, 2), np.int64), "ok": np.zeros(n, bool), "lens": np.zeros(n, np.int64),
           "events_in": np.zeros(n, np.int64), "events": np.zeros(n, np.int64), "pixels_removed": np.zeros(n, np.int64),
           "sensor": np.zeros((n, 2), np.int64)}
    ev, starts, (w, h) = _read_chunk(paths, default_sensor, time_unit)
    out["sensor"][:] = w, h
    out["events_in"][:] = np.diff(starts)
    if any(filt):  # the filters change the events: keep each file's survivors, then re-count
        kept = []
        for i in range(n):
            s, eff = _filters.apply(_stream(ev[starts[i]:starts[i + 1]], w, h), *filt)
            kept.append(s.events)
            out["pixels_removed"][i] = eff["pixels_removed"]
        ev = np.concatenate(kept) if kept else ev[:0]
        starts = np.concatenate([[0], np.cumsum([len(v) for v in kept])]).astype(np.int64)
    out["events"][:] = np.diff(starts)
    bounds = np.zeros((n, 2 * k), np.int64)  # event index where each window of each file opens / closes
    for i in range(n):
        _window_bounds(_stream(ev[starts[i]:starts[i + 1]], w, h), int(starts[i]), sec, i, out["windows"], out["ok"],
                       bounds)
    # window j of file i is the run of events bounds[i, 2j] .. bounds[i, 2j + 1] - 1 of the chunk
    out["lens"][:] = (bounds[:, 1::2] - bounds[:, 0::2]).sum(1)
    X = frames.bin_segments(ev["x"], ev["y"], ev["p"], w, h, bounds, sec["mode"], sec["size"], sec["threshold"],
                            sec["max_count"])
    out["X"] = X.reshape(n, k, *X.shape[1:]).astype(np.uint8)
    return out


def _stream(events: np.ndarray, w: int, h: int) -> EventStream:
    """An EventStream over events checked already as part of their chunk (addresses, polarity, time order)."""
    s = EventStream.__new__(EventStream)
    s.events, s.width, s.height = events, w, h
    return s


def folder_frames(folder: RecordingFolder, frames_section: dict, progress: bool = True, workers: int = 1,
                  chunk: int = CHUNK) -> dict:
    """Stream a folder: chunks of `chunk` files go to `workers` processes (spawned, so no state of this
    process leaks in), each returning frames as uint8 and per-file counts; results come back in file
    order, so the frames do not depend on the number of workers. One worker (or one chunk) runs here.

    Returns {"X" (N, K, C, S, S) uint8, "windows", "ok", "lens", "events_in", "events", "pixels_removed",
    "sensor" (N, 2)}. Files of different sensor sizes are refused (one sensor per folder).
    """
    sec = _frames_section(frames_section)
    n = len(folder)
    tasks = [([str(p) for p in folder.paths[i:i + chunk]], folder.default_sensor, folder.time_unit,
              tuple(folder.filters), sec) for i in range(0, n, chunk)]
    parts = in_order(_folder_chunk, tasks, workers, n, "frames", "file", progress, lambda r: len(r["ok"]))
    out = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]} if parts else {}
    sizes = {tuple(v) for v in out["sensor"]} if parts else set()
    if len(sizes) > 1:
        raise UsageError(f"recordings have different sensor sizes {sorted(sizes)}; use one sensor per folder")
    return out
