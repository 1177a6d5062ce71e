"""The chunked folder reader and the one-pass binning against straightforward per-event references.

The references decode the 40-bit layout record by record with the published formula
(x = b0, y = b1, p = b2 >> 7, t = ((b2 & 127) << 16) | (b3 << 8) | b4, +2^23 at each decrease;
Orchard et al. 2015, Front. Neurosci. 9:437; REFERENCES.md) and bin event by event with the rule of
frames.py (target pixel (y * S // H, x * S // W), channel 1 for OFF in polarity mode).
"""

from pathlib import Path

import numpy as np
import pytest

from snnconvert import frames
from snnconvert import recipe as R
from snnconvert.data import generate as G
from snnconvert.data import recordings as Rec
from snnconvert.errors import UsageError
from snnconvert.events import EVENT_DTYPE, EventStream, encode_bin
from snnconvert.events.formats import WRAP_US

RECIPES = Path(__file__).resolve().parent.parent / "recipes"


def decode_reference(data: bytes) -> list[tuple[int, int, int, int]]:
    """(t, x, y, p) per record, one record at a time."""
    out, wraps, last = [], 0, None
    for i in range(0, len(data), 5):
        b0, b1, b2, b3, b4 = data[i:i + 5]
        t23 = ((b2 & 127) << 16) | (b3 << 8) | b4
        if last is not None and t23 < last:
            wraps += 1
        last = t23
        out.append((t23 + wraps * WRAP_US, b0, b1, 1 if b2 >> 7 else -1))
    return out


def bin_reference(events, windows, mode, size, threshold, max_count, w, h) -> np.ndarray:
    """(K, C, S, S) uint8 counted event by event, then thresholded or clipped."""
    c = 2 if mode == "polarity" else 1
    counts = np.zeros((len(windows), c, size, size), np.int64)
    for t, x, y, p in events:
        for j, (t0, t1) in enumerate(windows):
            if t0 <= t < t1:
                counts[j, 1 if (c == 2 and p < 0) else 0, y * size // h, x * size // w] += 1
    if mode == "binary":
        return (counts >= threshold).astype(np.uint8)
    return np.minimum(counts, max_count).astype(np.uint8)


def stream_of(rows, w=34, h=34) -> EventStream:
    t, x, y, p = (np.array(v, np.int64) for v in zip(*rows)) if rows else ([],) * 4
    return EventStream.from_arrays(t, x, y, p, w, h)


def test_chunk_reader_unwraps_each_file_on_its_own(tmp_path):
    rng = np.random.default_rng(0)
    files = {
        # two wraps of the 23-bit field inside one file
        "wraps.bin": [(WRAP_US - 3, 1, 2, 1), (WRAP_US + 4, 3, 4, -1), (2 * WRAP_US + 1, 5, 6, 1)],
        "empty.bin": [],
        # starts below the previous file's last 23-bit value: a new file, not a wrap
        "low.bin": [(0, 7, 8, -1), (10, 9, 10, 1)],
        "random.bin": list(zip(np.sort(rng.integers(0, 3 * WRAP_US, 400)).tolist(), rng.integers(0, 34, 400).tolist(),
                               rng.integers(0, 34, 400).tolist(), rng.choice([-1, 1], 400).tolist())),
        "last_empty.bin": [],
    }
    paths = []
    for name, rows in files.items():
        (tmp_path / name).write_bytes(encode_bin(stream_of(rows)))
        paths.append(str(tmp_path / name))
    ev, starts, sensor = Rec._read_chunk(paths, (34, 34), "us")
    assert sensor == (34, 34) and starts.tolist() == np.cumsum([0] + [len(r) for r in files.values()]).tolist()
    for i, p in enumerate(paths):
        got = ev[starts[i]:starts[i + 1]]
        ref = decode_reference(Path(p).read_bytes())
        assert [tuple(int(v) for v in e) for e in got[["t", "x", "y", "p"]].tolist()] == ref, p


@pytest.mark.parametrize("mode, size, threshold, max_count", [("binary", 17, 2, 4), ("count", 16, 1, 3),
                                                              ("polarity", 5, 1, 2), ("count", 34, 1, 255)])
def test_bin_events_equals_per_event_counting(mode, size, threshold, max_count):
    rng = np.random.default_rng(1)
    n, w, h, k = 20_000, 34, 30, 7
    x, y = rng.integers(0, w, n), rng.integers(0, h, n)
    p = rng.choice([-1, 1], n)
    group = rng.integers(-2, k, n)  # -2 and -1: outside every window
    got = frames.bin_events(x.astype(np.uint16), y.astype(np.uint16), p.astype(np.int8), w, h, group, k, mode,
                            size, threshold, max_count)
    c = 2 if mode == "polarity" else 1
    counts = np.zeros((k, c, size, size), np.int64)
    for xi, yi, pi, gi in zip(x.tolist(), y.tolist(), p.tolist(), group.tolist()):
        if gi >= 0:
            counts[gi, 1 if (c == 2 and pi < 0) else 0, yi * size // h, xi * size // w] += 1
    ref = (counts >= threshold) if mode == "binary" else np.minimum(counts, max_count)
    assert got.dtype == np.float32 and np.array_equal(got, ref.astype(np.float32))


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("chunks")
    G.write_recordings(d, 12, seed=1, workers=1, progress=False, chunk=6)
    return d


@pytest.mark.parametrize("extra", [
    (),
    ("frames.per_recording=each", "frames.mode=polarity", "frames.max_count=3"),
    ("frames.per_recording=one", "frames.mode=count", "frames.size=34"),
    ("frames.window=fixed", "frames.window_us=50000", "frames.windows=4", "frames.mode=count"),
])
def test_folder_frames_equal_the_per_event_reference(folder, extra):
    r = R.load(RECIPES / "saccade_recordings.toml", [f"data.recordings_index={folder / 'index.csv'}",
                                                     f"data.cache_dir='{folder / 'cache'}'", *extra])
    sec = r["frames"]
    paths, _ = Rec.read_index(folder / "index.csv")
    recs = Rec.RecordingFolder(paths, np.zeros(len(paths), np.int64), 34, 34, (34, 34))
    one = Rec.folder_frames(recs, sec, False, workers=1, chunk=5)  # chunks of 5, 5 and 2 files
    two = Rec.folder_frames(recs, sec, False, workers=2, chunk=5)
    assert one.keys() == two.keys() and all(np.array_equal(one[key], two[key]) for key in one)
    for i, p in enumerate(paths):
        events = decode_reference(p.read_bytes())
        ws, ok = frames.frame_windows(stream_of(events), sec)
        ref = bin_reference(events, ws, sec["mode"], sec["size"], sec["threshold"], sec["max_count"], 34, 34)
        assert one["X"].dtype == np.uint8 and np.array_equal(one["X"][i], ref), p.name
        assert one["lens"][i] == sum(t0 <= e[0] < t1 for e in events for t0, t1 in ws)
        assert one["windows"][i].tolist() == [ws[0][0], ws[-1][1]] and one["ok"][i] == ok
        assert one["events"][i] == one["events_in"][i] == len(events)


@pytest.mark.parametrize("t, x, match", [
    ([5, 9, 1, 4], [0, 1, 2, 3], None),                   # time falls where recording 1 starts: allowed
    ([5, 9, 4, 1], [0, 1, 2, 3], "recording 1: event field 't' decreases at index 1"),
    ([5, 9, 1, 4], [0, 1, 34, 3], "event field 'x' at index 2 is 34, outside the sensor"),
])
def test_in_memory_set_is_checked_once_per_set(t, x, match):
    ev = np.zeros(4, EVENT_DTYPE)
    ev["t"], ev["x"], ev["p"] = t, x, 1
    recs = Rec.RecordingSet(ev, np.array([0, 2, 4]), np.array([0, 1]), 34, 34)
    sec = R.load(RECIPES / "default.toml", ["frames.window=all", "frames.size=34", "frames.mode=count"])["frames"]
    if match is None:
        X = Rec.recording_frames(recs, sec, progress=False)[0]
        assert X.sum() == 4
    else:
        with pytest.raises(UsageError, match=match):
            Rec.recording_frames(recs, sec, progress=False)


def test_front_end_is_built_once_per_section_and_sensor():
    from snnconvert import frontend
    sec = R.load(RECIPES / "saccade_recordings.toml")["frames"]
    a = frames._front_end(sec, 34, 34)
    assert a is frames._front_end(dict(sec), 34, 34) and a == frontend.FrontEnd.from_section(sec, 34, 34)
    assert frames._front_end(sec, 32, 34) != a  # another sensor: another front end
    # a section with an unhashable value is converted each time, to the same front end
    assert frames._front_end({**sec, "note": ["x"]}, 34, 34) == a
