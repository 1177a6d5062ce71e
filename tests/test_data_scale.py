"""The large-set generator, saccade bursts and the streamed recordings folder, on small generated sets."""

import numpy as np
import pytest

from snnconvert import data as D
from snnconvert import frames as F
from snnconvert import recipe as R
from snnconvert.data import generate as G
from snnconvert.data import recordings as Rec
from snnconvert.events import read_events

from pathlib import Path

RECIPES = Path(__file__).resolve().parent.parent / "recipes"
N = 100


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("saccades")
    G.write_recordings(d, N, seed=0, workers=1, progress=False)
    return d


def saccade_recipe(folder, *extra):
    return R.load(RECIPES / "saccade_recordings.toml", [f"data.recordings_index={folder / 'index.csv'}",
                                                         f"data.cache_dir='{folder / 'cache'}'", *extra])


def test_generated_set_has_the_published_layout(folder):
    images, labels = D.read_idx(folder / G.IMAGES), D.read_idx(folder / G.LABELS)
    assert images.shape == (N, 28, 28) and images.dtype == np.uint8 and labels.shape == (N,)
    # about 100-150 set pixels in a binarized 28x28 digit (common practice)
    assert 100 <= np.count_nonzero(images >= 128, axis=(1, 2)).mean() <= 150
    paths, names = D.read_index(folder / "index.csv")
    assert [int(v) for v in names] == labels.tolist() and all(p.suffix == ".bin" for p in paths)
    s = read_events(paths[0], default_sensor=(34, 34))
    # 34x34 sensor, about 300 ms, a few thousand events (published saccade recordings, from memory)
    assert s.width == 34 and 250_000 <= s.duration_us <= 300_000 and 1000 <= len(s) <= 5000


def test_generator_output_does_not_depend_on_the_workers(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    G.write_recordings(a, 8, seed=3, workers=1, progress=False, chunk=4)
    G.write_recordings(b, 8, seed=3, workers=2, progress=False, chunk=4)
    for name in ["index.csv", G.IMAGES, G.LABELS] + [f"rec{i:06d}.bin" for i in range(8)]:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_three_saccades_give_three_bursts(folder):
    sec = saccade_recipe(folder)["frames"]
    found = []
    for i in range(30):
        s = read_events(folder / f"rec{i:06d}.bin", default_sensor=(34, 34))
        found.append(F.windows_of(s, sec))
    assert sum(len(w) == 3 for w in found) >= 28
    for w in (w for w in found if len(w) == 3):  # burst k lies in saccade k (100 ms each, 10 ms slack)
        assert all(k * 100_000 - 10_000 <= a < b <= (k + 1) * 100_000 + 10_000 for k, (a, b) in enumerate(w))
    # relative thresholds count the motion itself as the background (the closed bins before a saccade are the
    # previous saccade): with the default relative rule and no minimum duration, the recipe's three windows
    # are not what it finds (one window from the first saccade to the second, measured)
    s = read_events(folder / "rec000000.bin", default_sensor=(34, 34))
    relative = dict(sec, relative=True, upper=8.0, lower=2.0)
    assert len(F.windows_of(s, sec)) == 3 and len(F.windows_of(s, relative)) != 3


@pytest.mark.parametrize("per, shape, samples", [("stack", (3, 17, 17), 1), ("each", (1, 17, 17), 3),
                                                 ("one", (1, 17, 17), 1)])
def test_folder_streams_into_frames_and_the_cache(folder, per, shape, samples, monkeypatch):
    r = saccade_recipe(folder, f"frames.per_recording={per}", "data.val_fraction=0")
    ds = D.load_dataset(r, progress=False)
    assert ds.input_shape == shape and isinstance(ds.recordings, D.RecordingFolder)
    assert len(ds.train[0]) == samples * ds.info["split_sizes"]["train"]
    # the same frames as the in-memory path over every recording
    streams = [ds.recordings[i][0] for i in range(N)]
    X5 = D.recording_frames(D.RecordingSet.from_streams(streams, ds.recordings.labels), r["frames"], False)[0]
    tr = ds.split_index["train"]
    assert np.array_equal(ds.train[0], X5[tr].reshape(len(ds.train[0]), *shape))
    # a second run reads the cache alone: no recording is opened
    monkeypatch.setattr(Rec, "read_events", lambda *a, **k: pytest.fail("a recording was read"))
    again = D.load_dataset(r, progress=False)
    assert again.info["cache_reused"] and again.fingerprint == ds.fingerprint


def test_folder_frames_do_not_depend_on_the_workers(folder):
    r = saccade_recipe(folder)
    recs = D.load_recordings(r, progress=False)[0]
    one = Rec.folder_frames(recs, r["frames"], False, workers=1, chunk=40)
    two = Rec.folder_frames(recs, r["frames"], False, workers=2, chunk=40)
    assert all(np.array_equal(one[k], two[k]) for k in one)


def test_filters_report_their_effect(folder):
    r = saccade_recipe(folder, "data.filter_background_us=5000", "data.filter_refractory_us=1000",
                       "data.filter_hot_factor=10", "data.val_fraction=0")
    f = D.load_dataset(r, progress=False).info["filters"]
    assert f["events_in"] > f["events_out"] > 0.5 * f["events_in"] and f["pixels_removed"] >= 0
