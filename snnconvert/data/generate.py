"""Recordings folders and IDX files made by the project's simulated sensor (nothing is downloaded).

write_demo_recordings: a small folder of flashed digits in every event format, for demos.
write_recordings: N recordings in the 40-bit layout (.bin) on a 34x34 sensor, index.csv, and the
matching 28x28 images and labels as IDX files, made in parallel and seeded:

    seeds     one seed; sub-seeds SeedSequence(seed, spawn_key=...): (2, i) draws recording i's digit and
              its augmentation, (1, c) the sensor noise of chunk c (recordings c*CHUNK .. (c+1)*CHUNK - 1,
              simulated in one vectorized pass), (0,) the sensor's fixed threshold pattern (one sensor
              for the folder). Chunks have fixed boundaries, so the output does not depend on the
              number of workers.
    image     one of scikit-learn's 1,797 8x8 digits, upsampled bilinearly to a 20x20 box; stroke
              width: pixels at or above a level L ~ U(0.4, 0.6) of full scale become the strokes,
              image' = clip(0.5 + GAIN * (image - L), 0, 1), so a binarized digit at half scale has
              about 100-150 set pixels like a binarized 28x28 handwritten digit (common practice);
              rotated by U(-10, 10) degrees, centred in a 28x28 field (4 blank pixels a side, the
              MNIST field layout, from memory), shifted by U(-2, 2) pixels in x and y (bilinear).
    sensor    the 28x28 image centred on a 34x34 sensor (3 blank pixels a side), shown as a flash or
              as three saccades of SACCADE_US each along a triangle, at rest at each corner
              (saccade_profile "smooth"): about 300 ms and a few thousand events per recording, as in
              the published saccade recordings (34x34 sensor, ~300 ms, three ~100 ms saccades: from memory).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from snnconvert import files
from snnconvert.data.idx import write_idx
from snnconvert.data.images import digits_images
from snnconvert.data.recordings import in_order
from snnconvert.events import sensor as _sensor
from snnconvert.events.formats import SUFFIXES, write_events
from snnconvert.events.stream import EventStream

FIELD = 28          # image side (the MNIST field)
BOX = 20            # the digit's box inside the field
SENSOR = 34         # sensor side of the published saccade recordings (from memory)
GAIN = 2.5          # edge sharpness of the stroke-width transform
SACCADE_US = 100_000
CHUNK = 250         # recordings per worker task
IMAGES, LABELS = "images-idx3-ubyte", "labels-idx1-ubyte"


def sensor_config(stimulus: str) -> _sensor.SensorConfig:
    """The generator's sensor: the project's defaults, plus three 100 ms smooth saccades of 3 pixels."""
    if stimulus == "saccade":
        return _sensor.SensorConfig(saccade_segments=3, saccade_segment_us=SACCADE_US, saccade_amplitude=3.0,
                                    saccade_steps=20, saccade_profile="smooth")
    return _sensor.SensorConfig()


def augment(digit8: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One 8x8 digit (values 0..1) -> a 28x28 image in [0, 1] (module docstring, 'image')."""
    from scipy import ndimage
    from snnconvert.data.images import _resize
    box = _resize(digit8[None], BOX)[0]
    level = rng.uniform(0.4, 0.6)
    box = np.clip(0.5 + GAIN * (box - level), 0, 1)
    pad = (FIELD - BOX) // 2
    img = np.pad(box, pad)
    img = ndimage.rotate(img, rng.uniform(-10, 10), reshape=False, order=1, mode="constant")
    img = ndimage.shift(img, rng.uniform(-2, 2, size=2), order=1, mode="constant")
    return np.clip(img, 0, 1)


def _make_chunk(task: tuple) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Worker: recordings i0..i1-1 (one chunk) written as rec<i>.bin; returns (labels, uint8 images, events).

    Images: recording i's own generator (2, i). Sensor noise: the chunk's generator (1, i0 // CHUNK),
    one vectorized pass over the chunk. Chunk boundaries are fixed multiples of CHUNK, whatever the
    number of workers.
    """
    folder, seed, stimulus, i0, i1, chunk = task
    digits, labels = digits_images(8)
    config = sensor_config(stimulus)
    pattern = _sensor.fixed_pattern(SENSOR * SENSOR, config, _rng(seed, 0))
    idx = np.zeros(i1 - i0, np.int64)
    images = np.zeros((i1 - i0, FIELD, FIELD))
    for k, i in enumerate(range(i0, i1)):
        rng = _rng(seed, 2, i)
        idx[k] = rng.integers(len(labels))
        images[k] = augment(digits[idx[k]], rng)
    border = (SENSOR - FIELD) // 2
    ev, off = _sensor.simulate_batch(np.pad(images, ((0, 0), (border, border), (border, border))), stimulus,
                                     config, _rng(seed, 1, i0 // chunk), progress=False, pattern=pattern)
    for k, i in enumerate(range(i0, i1)):
        write_events(EventStream(ev[off[k]:off[k + 1]], SENSOR, SENSOR), Path(folder) / f"rec{i:06d}.bin",
                     durable=False)
    return labels[idx].astype(np.uint8), np.rint(images * 255).astype(np.uint8), np.diff(off)


def _rng(seed: int, *key: int) -> np.random.Generator:
    """The generator of SeedSequence(seed, spawn_key=key): (0,) sensor pattern, (1, c) noise of chunk c,
    (2, i) image of recording i."""
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=tuple(int(v) for v in key)))


def write_recordings(folder, count: int, seed: int = 0, stimulus: str = "saccade", workers: int = 2,
                     progress: bool = True, chunk: int = CHUNK) -> dict:
    """Write `count` recordings, index.csv and the IDX images/labels into `folder` (module docstring).

    index.csv is written last: a folder with an index is complete. Returns {"index", "images",
    "labels", "events"} (events: per recording).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tasks = [(str(folder), int(seed), stimulus, i, min(i + chunk, count), chunk) for i in range(0, count, chunk)]
    parts = in_order(_make_chunk, tasks, workers, count, f"recordings ({stimulus})", "rec", progress,
                     lambda r: len(r[0]))
    labels = np.concatenate([p[0] for p in parts])
    images = np.concatenate([p[1] for p in parts])
    events = np.concatenate([p[2] for p in parts])
    os.sync()  # the recordings were written without fsync: make them durable before the index marks them done
    write_idx(folder / IMAGES, images)
    write_idx(folder / LABELS, labels)
    lines = ["file,label", *(f"rec{i:06d}.bin,{int(v)}" for i, v in enumerate(labels))]
    index = files.atomic_write_text(folder / "index.csv", "\n".join(lines) + "\n")
    return {"index": index, "images": folder / IMAGES, "labels": folder / LABELS, "events": events}


def complete(folder, count: int) -> bool:
    """True when `folder` holds a finished set of `count` recordings (index.csv lists them all)."""
    index = Path(folder) / "index.csv"
    if not index.is_file() or not (Path(folder) / IMAGES).is_file():
        return False
    with open(index, "rb") as f:
        return sum(1 for _ in f) == count + 1


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




# --- long recordings: many stimuli in one stream ------------------------------------------------------------

LABELS_HEADER = "start_us,end_us,label"


def long_recording(streams, labels, span_us: int, gap_us: int, noise_hz: float, rng) -> tuple[EventStream, np.ndarray]:
    """K recordings of one sensor (each starting at t = 0 and lasting span_us) placed one after another in
    one stream, with gap_us of background noise before each stimulus and after the last:

        stimulus i spans [o_i, o_i + span_us),  o_i = gap_us + i * (span_us + gap_us),
        total length K * (span_us + gap_us) + gap_us.

    The gaps get Poisson background noise of noise_hz per pixel (uniform times, pixels and polarity);
    the recordings keep their own sensor noise. Returns (stream, stimuli (K, 3) int64 [start, end, label]).
    """
    if not streams:
        raise ValueError("a long recording needs at least one stimulus")
    w, h = streams[0].width, streams[0].height
    parts, table = [], []
    period = span_us + gap_us
    npx = w * h
    for i, (s, lab) in enumerate(zip(streams, labels)):
        if (s.width, s.height) != (w, h):
            raise ValueError("every stimulus must come from the same sensor")
        o = gap_us + i * period
        ev = s.events.copy()
        ev["t"] += o
        parts.append(ev)
        table.append((o, o + span_us, int(lab)))
    starts = np.r_[0, np.asarray([r[1] for r in table])]  # every gap: [end of the previous stimulus, next start)
    for a in starts:
        n = int(rng.poisson(noise_hz * npx * gap_us / 1e6)) if noise_hz > 0 else 0
        ev = np.zeros(n, parts[0].dtype)
        ev["t"] = a + rng.integers(0, gap_us, n)
        pix = rng.integers(0, npx, n)
        ev["x"], ev["y"] = pix % w, pix // w
        ev["p"] = np.where(rng.random(n) < 0.5, 1, -1)
        parts.append(ev)
    events = np.concatenate(parts)
    events = events[np.argsort(events["t"], kind="stable")]
    return EventStream(events, w, h), np.asarray(table, np.int64).reshape(-1, 3)


def write_labels(path, stimuli: np.ndarray) -> Path:
    """The label file of a long recording: CSV `start_us,end_us,label`, one stimulus per line."""
    lines = [LABELS_HEADER] + [f"{int(a)},{int(b)},{int(c)}" for a, b, c in np.asarray(stimuli).reshape(-1, 3)]
    return files.atomic_write_text(path, "\n".join(lines) + "\n")


def labels_path(recording) -> Path:
    """Where write_long_recording puts the label file of a recording: <stem>.labels.csv beside it."""
    p = Path(recording)
    return p.with_name(p.stem + ".labels.csv")


def write_long_recording(path, recipe: dict, count: int, seed: int = 0, gap_us: int = 200_000,
                         noise_hz: float | None = None, progress: bool = True) -> dict:
    """A long recording of `count` test-split stimuli of a recipe's data set, plus its label file.

    The stimuli are recordings of the recipe's test split (the same events the network's test frames
    come from), drawn without replacement with numpy.random.default_rng(seed), in the drawn order;
    gaps and noise as in long_recording (noise_hz: default the recipe's [data] noise_hz). Writes the
    stream to `path` (any event format) and the labels to labels_path(path).
    Returns {"recording", "labels", "stimuli", "indices" (recording indices), "events", "duration_us"}.
    """
    from snnconvert.data.dataset import load_dataset
    ds = load_dataset(recipe, progress=progress)
    if ds.recordings is None or recipe["data"]["source"] == "folder":
        raise ValueError("a long recording is made from simulated stimuli (data.source digits or idx)")
    test = np.asarray(ds.split_index["test"])
    if not 1 <= count <= test.size:
        raise ValueError(f"count must lie in [1, {test.size}] (the test recordings); got {count}")
    rng = np.random.default_rng(seed)
    pick = rng.choice(test, size=count, replace=False)
    sec = recipe["data"]
    span = _sensor.duration_us(sec["stimulus"], _sensor.SensorConfig.from_section(sec))
    streams = [ds.recordings[int(i)][0] for i in pick]
    labels = [int(ds.recordings[int(i)][1]) for i in pick]
    noise = float(sec["noise_hz"]) if noise_hz is None else float(noise_hz)
    stream, stimuli = long_recording(streams, labels, span, gap_us, noise, rng)
    write_events(stream, path)
    lab = write_labels(labels_path(path), stimuli)
    return {"recording": Path(path), "labels": lab, "stimuli": stimuli, "indices": pick, "events": len(stream),
            "duration_us": int(stimuli[-1, 1]) + gap_us}
