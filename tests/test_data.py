"""Datasets: scikit-learn digits through the simulated sensor, IDX files, recordings folders."""

import numpy as np
import pytest

from snnconvert import data as D
from snnconvert import recipe as R
from snnconvert.errors import FormatError, UsageError
from snnconvert.events import read_events


def recipe(tmp_path, **data):
    return R.from_dict({"name": "t", "seed": 3, "data": {"cache_dir": str(tmp_path / "cache"), **data}},
                       base_dir=tmp_path)


def test_digits_facts():
    # scikit-learn load_digits: 1,797 images of 8x8, values 0..16; class counts verified with
    # scikit-learn 1.9.1 (REFERENCES.md; Alpaydin & Kaynak 1998, UCI)
    images, labels = D.digits_images(8)
    assert images.shape == (1797, 8, 8)
    assert np.bincount(labels).tolist() == [178, 182, 177, 183, 181, 182, 181, 179, 174, 180]
    assert images.min() == 0.0 and images.max() == 1.0  # load_digits values 0..16 (REFERENCES.md) scaled by 1/16


def test_upsampling_is_bilinear_with_corners_aligned():
    from scipy import ndimage
    images, _ = D.digits_images(32)
    small, _ = D.digits_images(8)
    assert images.shape == (1797, 32, 32)  # 1,797 digits (scikit-learn load_digits, REFERENCES.md)
    assert np.allclose(images[:, 0, 0], small[:, 0, 0]) and np.allclose(images[:, -1, -1], small[:, -1, -1])
    assert np.allclose(images[5], np.clip(ndimage.zoom(small[5], 4, order=1, grid_mode=False), 0, 1))  # scipy as reference


def test_digits_dataset_split_cache_and_frames(tmp_path):
    r = recipe(tmp_path, limit=200)
    ds = D.load_dataset(r, progress=False)
    (xtr, ytr), (xva, yva), (xte, yte) = ds.train, ds.val, ds.test
    # hand-computed: 200 samples with the default fractions val 0.1, test 0.2 -> 140 / 20 / 40
    assert (len(ytr), len(yva), len(yte)) == (140, 20, 40)
    # the recipe defaults: binary frames (1 channel, input_q 1) of size 16
    assert xtr.dtype == np.float32 and ytr.dtype == np.int64 and xtr.shape[1:] == (1, 16, 16)
    assert ds.input_shape == (1, 16, 16) and ds.input_q == 1 and ds.classes == [str(i) for i in range(10)]
    assert set(np.unique(np.concatenate([xtr, xva, xte]))) <= {0.0, 1.0}
    assert np.bincount(yte, minlength=10).tolist() == [4] * 10  # stratified: 40 test samples / 10 classes
    assert ds.info["cache_reused"] is False and ds.info["fallback_windows"] == 0
    again = D.load_dataset(r, progress=False)
    assert again.info["cache_reused"] is True and again.fingerprint == ds.fingerprint
    other = D.load_dataset({**r, "seed": 4}, progress=False)
    assert other.fingerprint != ds.fingerprint
    rec, label = ds.recordings[0]
    assert len(rec) > 0 and rec.width == 32 and label == ds.recordings.labels[0]  # default sensor_side 32


def test_corrupt_cache_is_replaced(tmp_path, capsys):
    r = recipe(tmp_path, limit=30, val_fraction=0.0, test_fraction=0.34)
    ds = D.load_dataset(r, progress=False)
    from pathlib import Path
    Path(ds.info["cache"]).write_bytes(b"junk")
    again = D.load_dataset(r, progress=False)
    assert again.fingerprint == ds.fingerprint and "ignoring unreadable cache" in capsys.readouterr().err


@pytest.mark.parametrize("dtype", ["uint8", "int8", "int16", "int32", "float32", "float64"])
@pytest.mark.parametrize("suffix", ["", ".gz"])
def test_idx_round_trip(tmp_path, dtype, suffix):
    a = (np.arange(2 * 3 * 5) % 100).astype(dtype).reshape(2, 3, 5)
    f = tmp_path / f"a.idx{suffix}"
    D.write_idx(f, a)
    back = D.read_idx(f)
    assert back.dtype == np.dtype(dtype) and np.array_equal(back, a)


def test_idx_header_is_the_mnist_layout(tmp_path):
    # MNIST image files start with magic 2051 = 00 00 08 03 (uint8, 3 dims), labels 2049 = 00 00 08 01,
    # then big-endian uint32 dims (the MNIST database page; common practice)
    D.write_idx(tmp_path / "i", np.zeros((60000, 28, 28), np.uint8))
    D.write_idx(tmp_path / "l", np.zeros(60000, np.uint8))
    head = (tmp_path / "i").read_bytes()[:16]
    assert int.from_bytes(head[:4], "big") == 2051
    assert head[4:16] == (60000).to_bytes(4, "big") + (28).to_bytes(4, "big") + (28).to_bytes(4, "big")
    assert int.from_bytes((tmp_path / "l").read_bytes()[:4], "big") == 2049


@pytest.mark.parametrize("content, match", [
    (b"\x01\x00\x08\x01", r"magic number must start with 00 00"),
    # IDX element types are 0x08 0x09 0x0B 0x0C 0x0D 0x0E (the MNIST database page, from memory)
    (b"\x00\x00\x07\x01\x00\x00\x00\x01\x00", r"byte offset 2: unknown IDX element type 0x07"),
    (b"\x00\x00\x08\x02\x00\x00", r"byte offset 3: 2 dimensions but the header is cut short"),
    # hand-computed from the IDX layout: 4-byte magic + one 4-byte dim + 4 uint8 values = 12 bytes
    (b"\x00\x00\x08\x01\x00\x00\x00\x04\x01\x02", r"dims \(4,\) need 12 bytes but the file has 10"),
])
def test_idx_errors(tmp_path, content, match):
    f = tmp_path / "bad-idx"
    f.write_bytes(content)
    with pytest.raises(FormatError, match=match):
        D.read_idx(f)


def _idx_pair(tmp_path, n=60):
    images, labels = D.digits_images(8)
    D.write_idx(tmp_path / "img.idx", (images[:n] * 255).astype(np.uint8))
    D.write_idx(tmp_path / "lab.idx", labels[:n].astype(np.uint8))


@pytest.mark.parametrize("mode, threshold", [("sensor", 4), ("binarize", 1)])
def test_idx_dataset(tmp_path, mode, threshold):
    _idx_pair(tmp_path)
    r = recipe(tmp_path, source="idx", idx_images="img.idx", idx_labels="lab.idx", idx_mode=mode,
               val_fraction=0.0, test_fraction=0.25)
    r["frames"].update(threshold=threshold, size=8)
    ds = D.load_dataset(r, progress=False)
    assert len(ds.train[1]) + len(ds.test[1]) == 60 and ds.input_shape == (1, 8, 8)  # the 60 images written, size 8
    if mode == "binarize":
        # one spike per pixel at or above half scale, frame at the image's own size
        images, _ = D.digits_images(8)
        expect = (images[:60] * 255).astype(np.uint8) / 255 >= 0.5  # the stored uint8 values
        rec0 = ds.recordings[0][0]
        assert len(rec0) == expect[0].sum() and np.all(rec0.t == 0)
        # all events at t=0 fall in the first 1 ms bin; on a silent sensor that bin opens a window at
        # >= 128*32//512 + 1 = 9 events (frontend.py, floor background), so only images with fewer than 9
        # set pixels fall back to all events; either way the frame holds every event
        assert ds.info["fallback_windows"] == int(np.sum(expect.reshape(60, -1).sum(1) < 9))


@pytest.mark.parametrize("key, value, match", [
    ("idx_images", "nope.idx", r"file not found: .*nope.idx \(set data.idx_images\)"),
    ("idx_labels", "", r"data.idx_labels is empty"),
])
def test_idx_missing_files_name_the_key(tmp_path, key, value, match):
    _idx_pair(tmp_path)
    r = recipe(tmp_path, source="idx", idx_images="img.idx", idx_labels="lab.idx")
    r["data"][key] = value
    with pytest.raises(UsageError, match=match):
        D.load_dataset(r, progress=False)


def test_recordings_folder(tmp_path):
    index = D.write_demo_recordings(tmp_path / "recs", per_class=2, seed=1)
    lines = index.read_text().splitlines()
    assert lines[0] == "file,label" and len(lines) == 21  # hand-computed: header + 10 classes x 2 per class
    assert {l.split(",")[0].rsplit(".", 1)[1] for l in lines[1:]} == {"npz", "csv", "bin"}
    first = read_events(index.parent / lines[1].split(",")[0])
    assert first.width == 32 and len(first) > 0
    r = recipe(tmp_path, source="recordings", recordings_index="recs/index.csv", val_fraction=0.0,
               test_fraction=0.5)
    ds = D.load_dataset(r, progress=False)
    # hand-computed: 20 recordings split in half
    assert ds.classes == [str(i) for i in range(10)] and len(ds.train[1]) == 10 and len(ds.test[1]) == 10
    assert ds.info["fallback_windows"] == 0


@pytest.mark.parametrize("index_text, match", [
    ("name,label\n", r"line 1: the header must be 'file,label'"),
    ("file,label\na.npz\n", r"line 2: expected 'file,label'"),
    ("file,label\n../x.npz,1\n", r"escapes the folder"),
    ("file,label\nmissing.npz,1\n", r"line 2: file not found"),
    ("file,label\n", r"lists no recordings"),
])
def test_recordings_index_errors(tmp_path, index_text, match):
    (tmp_path / "index.csv").write_text(index_text)
    r = recipe(tmp_path, source="recordings", recordings_index="index.csv")
    with pytest.raises(UsageError, match=match):
        D.load_dataset(r, progress=False)


def test_split_too_small_is_a_usage_error(tmp_path):
    with pytest.raises(UsageError, match=r"cannot split 12 samples of 10 classes"):
        D.load_dataset(recipe(tmp_path, limit=12), progress=False)


def test_schema_defaults_pass_their_own_checks():
    from snnconvert.settings import data as data_settings, frames as frames_settings
    for sec, schema in (("data", data_settings.KEYS), ("frames", frames_settings.KEYS)):
        for k, key in schema.items():
            assert key.reason and key.check(key.default, k, sec) == key.default
