"""Data users bring: 28x28 IDX files, plain NPZ / CSV / .bin events, frame files, renamed recipe keys.

Every error case checks exit 2 and the exact one-line message.
"""

import gzip
import json
from pathlib import Path

import numpy as np
import pytest

from snnconvert import data as D
from snnconvert import recipe as R
from snnconvert.cli import main
from snnconvert.errors import UsageError
from snnconvert.events import EventStream, read_events, write_events

RECIPES = Path(__file__).resolve().parent.parent / "recipes"


# ------------------------------------------------------------------ 28x28 IDX files with thin strokes
def thin_digits_28() -> tuple[np.ndarray, np.ndarray]:
    """scikit-learn's digits as 28x28 uint8 images in the MNIST field layout: each digit upsampled to a
    20x20 box (bilinear) and centred in a 28x28 field with 4 blank pixels on each side (the MNIST layout,
    from memory), scaled to 0..255. At half scale, about 100-150 pixels per digit are set."""
    im20, labels = D.digits_images(20)
    im = np.pad(im20, ((0, 0), (4, 4), (4, 4)))
    return np.rint(im * 255).astype(np.uint8), labels.astype(np.uint8)


@pytest.fixture(scope="module")
def idx_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("idx")
    images, labels = thin_digits_28()
    D.write_idx(d / "images-idx3-ubyte", images)
    D.write_idx(d / "labels-idx1-ubyte", labels)
    return d


def idx_args(d):
    return ["--set", f"data.idx_images={d / 'images-idx3-ubyte'}", "--set", f"data.idx_labels={d / 'labels-idx1-ubyte'}"]


def test_synthesized_digits_have_the_pixel_count_of_a_binarized_28x28_digit():
    images, _ = thin_digits_28()
    set_px = np.count_nonzero(images >= 128, axis=(1, 2))  # >= half of 255 (binarize_level 0.5)
    # about 100-150 pixels set in a binarized 28x28 digit (common practice)
    assert images.shape == (1797, 28, 28) and 100 <= set_px.mean() <= 150


def test_idx_recipe_gives_one_spike_per_set_pixel(idx_dir):
    r = R.load(RECIPES / "idx_files.toml", idx_args(idx_dir)[1::2] + ["data.limit=200"])
    ds = D.load_dataset(r, progress=False)
    assert ds.input_shape == (1, 28, 28) and ds.input_q == 1  # full resolution, binary frames
    images, _ = thin_digits_28()
    keep = np.concatenate(list(ds.split_index.values()))
    X = np.concatenate([ds.train[0], ds.val[0], ds.test[0]])
    # every image pixel at or above 128/255 is one event and one spike in its own frame pixel
    order = np.argsort(keep)
    spikes = X[order].reshape(len(X), -1).sum(1)
    events = np.diff(ds.recordings.offsets)
    assert np.array_equal(spikes, events)
    sub = D._subset(np.asarray(thin_digits_28()[1], np.int64), 200, r["seed"])
    assert np.array_equal(X[order][:, 0] > 0, images[sub] >= 128)
    assert 100 <= ds.info["nonzero_pixels_per_frame"] <= 150 and ds.info["empty_frames"] == 0  # common practice


def test_idx_recipe_runs_to_a_sensible_accuracy(idx_dir, tmp_path):
    # the shipped recipe's data and frames on all 1,797 digits; a smaller model and 4 epochs keep the
    # test to seconds of CPU (the full recipe, 30 epochs of the default model: see README "Shipped recipes")
    out = tmp_path / "run"
    small = '[{type="conv", out=8, kernel=3, stride=2, padding=1}, {type="maxpool", size=2}, {type="dense", units=32}, {type="dense"}]'
    argv = ["run", str(RECIPES / "idx_files.toml"), "--out", str(out), *idx_args(idx_dir), "--set", "train.epochs=4",
            "--set", f"model.layers={small}", "--set", "sweep.enabled=false", "--set", "export.vectors=2"]
    assert main(argv) == 0
    data = json.loads((out / "data" / "summary.json").read_text())
    assert data["input_shape"] == [1, 28, 28]
    assert 100 <= data["mean_input_events_per_frame"] <= 150  # a binarized 28x28 digit (common practice)
    m = json.loads((out / "net" / "metrics.json").read_text())
    # 10 classes: chance is 10 %; measured 0.87 frame / 0.875 spike accuracy here
    assert m["frame_accuracy"] >= 0.75 and m["spike_accuracy"] >= 0.75


@pytest.mark.parametrize("command", ["train", "run"])
def test_empty_frames_stop_with_the_key_to_change(idx_dir, tmp_path, capsys, command):
    # the old IDX setting: 16x16 frames with threshold 16 on 28x28 images
    argv = [command, str(RECIPES / "idx_files.toml"), "--out", str(tmp_path / "o"), *idx_args(idx_dir),
            "--set", "data.limit=100", "--set", "frames.size=16", "--set", "frames.threshold=16"]
    assert main(argv) == 2
    err = capsys.readouterr().err.splitlines()
    # hand-computed: pooling 28 -> 16 puts 1 or 2 image pixels per side into a frame pixel, so a
    # frame pixel counts at most 2 x 2 = 4 events; a stroke of the median digit fills one such block
    assert err[-1] == ("error: 100 of 100 frames are empty (at most 50% may be); lower frames.threshold (now 16) to "
                       "at most 4, the event count of the busiest pixel in the median frame")
    assert not (tmp_path / "o" / "train" / "model.pt").exists()


def _recordings_folder(folder, counts, threshold=1):
    """A recordings folder: recording i holds counts[i] ON events at pixel (0, 0), t = 0, on an 8x8
    sensor; labels alternate 0, 1. Returns the recipe reading it into 8x8 binary frames."""
    lines = ["file,label"]
    for i, n in enumerate(counts):
        write_events(EventStream.from_arrays(np.zeros(n, np.int64), np.zeros(n, int), np.zeros(n, int),
                                             np.ones(n, int), 8, 8), folder / f"r{i}.npz")
        lines.append(f"r{i}.npz,{i % 2}")
    (folder / "index.csv").write_text("\n".join(lines) + "\n")
    return R.from_dict({"seed": 0, "data": {"source": "recordings", "recordings_index": "index.csv",
                                            "test_fraction": 0.2, "val_fraction": 0.0},
                        "frames": {"size": 8, "threshold": threshold, "window": "fixed", "window_us": 1}},
                       base_dir=folder)


def test_empty_recordings_name_their_source(tmp_path):
    from snnconvert.errors import UsageError
    r = _recordings_folder(tmp_path, [0] * 12 + [3] * 8)  # 12 of 20 recordings hold no event
    with pytest.raises(UsageError) as e:
        D.load_dataset(r, progress=False)
    assert str(e.value) == ("12 of 20 frames are empty (at most 50% may be); the median recording holds no events: "
                            "check the recordings listed in index.csv")


def test_windows_without_events_name_the_window_keys(tmp_path):
    r = _recordings_folder(tmp_path, [3] * 4)
    recs, _, _ = D.load_recordings(r, progress=False)
    # windows that hold none of the recordings' events (lens 0): the window rule is the key to change
    assert D._empty_frames_advice(recs, np.zeros(4, np.int64), r["frames"], r["data"]) == (
        "change frames.window (now 'fixed') or frames.pick (now 'first'): the median frame window holds 0 events")


def test_a_few_empty_frames_only_warn(tmp_path, capsys):
    # 10 recordings of one event and 10 of four, threshold 2: 10 of 20 frames are empty, 50 %, at the
    # limit (more than half is refused), so a warning only; the busiest pixels of the sorted frames are
    # 1 (x10), 4 (x10): the lower median 1 is the threshold that keeps every frame
    r = _recordings_folder(tmp_path, [1] * 10 + [4] * 10, threshold=2)
    ds = D.load_dataset(r, progress=False)
    assert ds.info["empty_frames"] == 10
    assert capsys.readouterr().err == ("warning: 10 of 20 frames are empty; lower frames.threshold (now 2) to at "
                                       "most 1, the event count of the busiest pixel in the median frame\n")
    from snnconvert.errors import UsageError
    r = _recordings_folder(tmp_path, [1] * 11 + [4] * 10, threshold=2)  # 11 of 21: over the limit
    with pytest.raises(UsageError, match=r"^11 of 21 frames are empty \(at most 50% may be\); lower frames.threshold"):
        D.load_dataset(r, progress=False)


@pytest.mark.parametrize("damage", [
    lambda g: g[:-9],                                # cut short: the gzip trailer is missing (RFC 1952 §2.2)
    lambda g: b"\x1f\x8c" + g[2:],                   # wrong magic: ID1 ID2 must be 1f 8b (RFC 1952 §2.3.1)
    lambda g: g[:10] + b"\xff" * 20 + g[30:],        # damaged deflate blocks (RFC 1951 §3.2.3: block type 3 is invalid)
], ids=["cut", "magic", "deflate"])
def test_corrupt_gzip_idx_is_a_usage_error(idx_dir, tmp_path, capsys, damage):
    bad = tmp_path / "images-idx3-ubyte.gz"
    bad.write_bytes(damage(gzip.compress((idx_dir / "images-idx3-ubyte").read_bytes(), mtime=0)))
    argv = ["train", str(RECIPES / "idx_files.toml"), "--out", str(tmp_path / "o"),
            "--set", f"data.idx_images={bad}", "--set", f"data.idx_labels={idx_dir / 'labels-idx1-ubyte'}"]
    assert main(argv) == 2
    assert capsys.readouterr().err == f"error: {bad}: not a readable gzip file (damaged or cut short)\n"


# ------------------------------------------------------------------ event files users have
def _plain(path, **over):
    # 3 events: t in us, x, y, p with 1 = ON and 0 = OFF
    arrays = {"t": np.array([0, 100, 250]), "x": np.array([1, 5, 9]), "y": np.array([0, 3, 6]), "p": np.array([1, 0, 1])}
    arrays.update(over)
    np.savez(path, **{k: v for k, v in arrays.items() if v is not None})
    return path


def test_plain_npz_takes_the_sensor_from_the_command_line(tmp_path, capsys):
    f = _plain(tmp_path / "plain.npz")
    assert main(["events", str(f), "--sensor", "34x34", "--json"]) == 0
    out = capsys.readouterr()
    info = json.loads(out.out)
    # the 3 events written above: 2 ON, 1 OFF, 250 us
    assert (info["events"], info["on"], info["off"], info["duration_us"], info["width"], info["height"]) == \
        (3, 2, 1, 250, 34, 34)
    assert out.err == ""


def test_plain_npz_with_its_own_size_and_guess_warning(tmp_path, capsys):
    s = read_events(_plain(tmp_path / "wh.npz", width=np.array(12), height=np.array(7)))
    assert (s.width, s.height) == (12, 7) and capsys.readouterr().err == ""
    f = _plain(tmp_path / "plain.npz")
    assert main(["events", str(f), "--json"]) == 0
    out = capsys.readouterr()
    # largest x 9, largest y 6 -> guessed 10x7 (max address + 1)
    assert json.loads(out.out)["width"] == 10 and out.err == (
        f"warning: {f} stores no sensor size; guessed 10x7 from the largest address (set it with --sensor WxH, "
        f"or data.sensor_side in a recipe)\n")


@pytest.mark.parametrize("over, message", [
    ({"x": np.array([1.5, 5, 9])}, "{f}: array 'x' has dtype float64, expected integers"),
    ({"t": np.array([0.0, 1e-4, 2.5e-4])},
     "{f}: array 't' has dtype float64, expected integers; for times in seconds or milliseconds pass --time-unit s or ms"),
    ({"y": np.array([0, 3])}, "{f}: array 'y' has 2 values but 't' has 3"),
    ({"p": None}, "{f}: missing array 'p' (an event NPZ holds t, x, y, p); found ['t', 'x', 'y']"),
    ({"p": np.array([1, 2, 1])}, "{f}: event field 'p' must be +1/-1 (or 1/0) at index 1; got 2"),
    ({"x": np.array([1, 5, 40])}, "{f}: event field 'x' at index 2 is 40, outside the sensor (width 34)"),
    ({"y": np.array([0, -3, 6])}, "{f}: event field 'y' at index 1 is -3, outside the sensor (height 34)"),
    ({"t": np.array([[0, 100, 250]])}, "{f}: array 't' must be 1-D; got shape (1, 3)"),
    ({"t": np.array([0, 300, 250])}, "{f}: event field 't' decreases at index 2 (300 -> 250); pass sort=True to order "
                                     "the events by time"),
    ({"width": np.array(34)}, "{f}: array 'height' is missing; store both width and height, or neither (then "
                              "--sensor WxH gives the size)"),
    ({"format": np.array("something-else")}, "{f}: not an event file (format 'something-else', expected "
                                             "'snnconvert-events'; a plain NPZ holds only the arrays t, x, y, p)"),
])
def test_plain_npz_errors_name_the_file_and_key(tmp_path, capsys, over, message):
    # each row breaks one rule of the plain NPZ (README "Plain NPZ"); the sensor is 34x34
    f = _plain(tmp_path / "bad.npz", **over)
    assert main(["events", str(f), "--sensor", "34x34"]) == 2
    assert capsys.readouterr().err == "error: " + message.format(f=f) + "\n"


@pytest.mark.parametrize("unit, times, expect_us", [
    ("s", ["0.0012", "0.0035", "1.25"], [1200, 3500, 1250000]),    # 1 s = 10^6 us (SI)
    ("ms", ["1.2", "3.5", "1250"], [1200, 3500, 1250000]),         # 1 ms = 10^3 us (SI)
    ("us", ["1200", "3500", "1250000"], [1200, 3500, 1250000]),
])
def test_csv_time_units(tmp_path, unit, times, expect_us):
    f = tmp_path / "sec.csv"
    f.write_text("# sensor 34x34\nt,x,y,p\n" + "".join(f"{t},1,2,1\n" for t in times))
    s = read_events(f, time_unit=unit)
    assert s.t.tolist() == expect_us and (s.width, s.height) == (34, 34)


@pytest.mark.parametrize("text, args, message", [
    ("t,x,y,p\n0.0012,1,2,1\n", [], "{f}: line 2: time '0.0012' is not an integer; times are integer microseconds "
                                    "(for seconds or milliseconds pass --time-unit s or ms)"),
    ("t,x,y,p\n0.0012,1.5,2,1\n", ["--time-unit", "s"], "{f}: line 2: expected 4 numbers (t in s, then integers), "
                                                        "got '0.0012,1.5,2,1'"),
    ("t,x,y,p\nnan,1,2,1\n", ["--time-unit", "s"], "{f}: line 2: time nan is not a finite time in s"),
])
def test_csv_time_errors(tmp_path, capsys, text, args, message):
    f = tmp_path / "c.csv"
    f.write_text(text)
    assert main(["events", str(f), "--sensor", "8x8", *args]) == 2
    assert capsys.readouterr().err == "error: " + message.format(f=f) + "\n"


def test_csv_seconds_through_the_events_command(tmp_path, capsys):
    f = tmp_path / "sec.csv"
    f.write_text("# sensor 34x34\nt,x,y,p\n0.001,1,2,1\n0.002,3,4,0\n")
    assert main(["events", str(f), "--time-unit", "s", "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert (info["t_first_us"], info["t_last_us"]) == (1000, 2000)  # 1 ms and 2 ms in us (SI)


def test_bin_guess_is_warned_on_its_own_line(tmp_path, capsys):
    s = EventStream.from_arrays([0, 10], [3, 20], [5, 7], [1, -1], 34, 34)
    write_events(s, tmp_path / "r.bin")
    assert main(["events", str(tmp_path / "r.bin"), "--json"]) == 0
    out = capsys.readouterr()
    # the 40-bit layout stores no size (Orchard et al. 2015): largest x 20, y 7 -> 21x8
    assert (json.loads(out.out)["width"], json.loads(out.out)["height"]) == (21, 8)
    assert out.err == (f"warning: {tmp_path / 'r.bin'} stores no sensor size; guessed 21x8 from the largest address "
                       f"(set it with --sensor WxH, or data.sensor_side in a recipe)\n")
    assert main(["events", str(tmp_path / "r.bin"), "--sensor", "34x34", "--json"]) == 0
    assert capsys.readouterr().err == ""


def test_recordings_folder_reads_plain_files_with_the_recipe_sensor_and_time_unit(tmp_path, capsys):
    # one recording in each form a user may have: plain NPZ, CSV in seconds without a size line, .bin
    t_us = np.array([0, 100, 200])
    np.savez(tmp_path / "a.npz", t=t_us, x=np.array([1, 2, 3]), y=np.array([1, 1, 1]), p=np.array([1, 1, 0]))
    (tmp_path / "b.csv").write_text("t,x,y,p\n0.0,1,2,1\n0.0001,2,2,1\n0.0002,3,2,0\n")
    write_events(EventStream.from_arrays(t_us, [1, 2, 3], [3, 3, 3], [1, 1, -1], 40, 40), tmp_path / "c.bin")
    (tmp_path / "index.csv").write_text("file,label\na.npz,0\nb.csv,1\nc.bin,0\n")
    r = R.from_dict({"data": {"source": "recordings", "recordings_index": "index.csv", "sensor_side": 40,
                              "time_unit": "s"}}, base_dir=tmp_path)
    recs, classes, _ = D.load_recordings(r, progress=False)
    assert (recs.width, recs.height) == (40, 40) and classes == ["0", "1"]
    assert recs[1][0].t.tolist() == [0, 100, 200]  # 0.0001 s = 100 us (SI)
    assert capsys.readouterr().err == ""  # the recipe gave the size: nothing guessed


# ------------------------------------------------------------------ frame files: x and y
@pytest.fixture
def net_dir(tmp_path):
    from test_export import small_net
    small_net().save(tmp_path / "net")  # input (1, 6, 6), payloads 0..1, 3 classes
    return tmp_path / "net"


def _frames(path, x=None, y=None, **extra):
    rng = np.random.default_rng(0)
    arrays = {"x": (rng.random((6, 1, 6, 6)) < 0.3).astype(np.int64) if x is None else x,
              "y": np.array([0, 1, 2, 0, 1, 2]) if y is None else y, **extra}
    np.savez(path, **{k: v for k, v in arrays.items() if not (isinstance(v, str) and v == "drop")})
    return path


@pytest.mark.parametrize("command", ["simulate", "export"])
def test_one_frames_file_serves_simulate_and_export(net_dir, tmp_path, capsys, command):
    f = _frames(tmp_path / "f.npz", x=(np.random.default_rng(1).random((6, 1, 6, 6)) < 0.3).astype(np.float32))
    argv = {"simulate": ["simulate", str(net_dir), "--data", str(f), "--quiet"],
            "export": ["export", str(net_dir), str(tmp_path / "out"), "--inputs", str(f), "--vectors", "2", "--quiet"]}
    assert main(argv[command]) == 0


_X = (np.random.default_rng(0).random((6, 1, 6, 6)) < 0.3).astype(np.int64)


@pytest.mark.parametrize("command", ["simulate", "export"])
@pytest.mark.parametrize("arrays, message", [
    # the network of small_net: input (1, 6, 6), input payloads 0..1, classes 0..2
    ({"y": np.array([0, 1, -1, 0, 1, 2])}, "array 'y' must hold class labels in [0, 2]; got -1 at index 2"),
    ({"y": np.array([0, 1, 2, 3, 1, 2])}, "array 'y' must hold class labels in [0, 2]; got 3 at index 3"),
    ({"y": np.array([0, 1, 2, 0, 1, 1.5])}, "array 'y' must hold integer class labels; got dtype float64"),
    ({"y": np.array([0, 1, 2])}, "array 'y' must hold one label per frame, shape (6,); got shape (3,)"),
    ({"x": "drop", "X": _X}, "array 'x' (frames as input payloads 0..1, shape (N, 1, 6, 6)) is missing; found "
                             "['X', 'y'] (a frames file holds the arrays x and y)"),
    ({"x": _X * 2}, "array 'x' must hold input payloads in [0, 1]; got values in [0, 2]"),
    ({"x": _X - 1}, "array 'x' must hold input payloads in [0, 1]; got values in [-1, 0]"),
    ({"x": _X * 0.5}, "array 'x' must hold whole-number input payloads in [0, 1]; got fractions or non-finite values"),
    ({"x": _X[:, :, :4]}, "array 'x' has shape (6, 1, 4, 6); the network needs (N, 1, 6, 6) with N >= 1"),
])
def test_frames_file_errors(net_dir, tmp_path, capsys, command, arrays, message):
    f = _frames(tmp_path / "f.npz", **arrays)
    argv = {"simulate": ["simulate", str(net_dir), "--data", str(f), "--quiet"],
            "export": ["export", str(net_dir), str(tmp_path / "out"), "--inputs", str(f), "--quiet"]}
    assert main(argv[command]) == 2
    assert capsys.readouterr().err == f"error: {f}: {message}\n"
    assert not (tmp_path / "out").exists()


def test_simulate_needs_labels(net_dir, tmp_path, capsys):
    f = _frames(tmp_path / "f.npz", y="drop")
    assert main(["simulate", str(net_dir), "--data", str(f)]) == 2
    assert capsys.readouterr().err == (f"error: {f}: array 'y' (class labels, shape (N,)) is missing; found ['x'] "
                                       f"(a frames file holds the arrays x and y)\n")


# ------------------------------------------------------------------ [data] sensor_side, old sensor_size
def test_old_sensor_key_is_read_with_a_note(tmp_path, capsys):
    f = tmp_path / "old.toml"
    f.write_text("[data]\nsensor_size = 24\n")
    r = R.load(f)
    assert r["data"]["sensor_side"] == 24 and "sensor_size" not in r["data"]
    assert capsys.readouterr().err == (f"note: {f}: [data] sensor_size is now called sensor_side; read as "
                                       f"sensor_side = 24 (rename it)\n")
    r = R.load(tmp_path / "old.toml", ["data.sensor_size=20"])
    assert r["data"]["sensor_side"] == 20
    assert capsys.readouterr().err.splitlines()[-1] == ("note: --set data.sensor_size: data.sensor_size is now "
                                                        "called data.sensor_side; read as data.sensor_side")
    # a recipe stored by an earlier version inside a run folder reads the same
    assert R.from_embedded({"data": {"sensor_size": 24}}, "model.pt")["data"]["sensor_side"] == 24


def test_retired_background_percentile_is_ignored_with_a_note(tmp_path, capsys):
    f = tmp_path / "old.toml"
    f.write_text("[frames]\nbackground_percentile = 10.0\n")
    r = R.load(f)
    assert "background_percentile" not in r["frames"] and r["frames"]["background_bins"] == 32
    why = R.retired()["frames"]["background_percentile"]
    assert capsys.readouterr().err == (f"note: {f}: [frames] background_percentile is no longer used and is ignored: "
                                       f"{why} (remove it)\n")
    with pytest.raises(UsageError, match=r"^--set frames.background_percentile: frames.background_percentile is "
                                         r"no longer used: the background of relative thresholds is now the causal"):
        R.load(f, ["frames.background_percentile=10"])


def test_old_and_new_sensor_key_together_are_refused(tmp_path, capsys):
    f = tmp_path / "both.toml"
    f.write_text("[data]\nsensor_size = 24\nsensor_side = 32\n")
    assert main(["train", str(f), "--out", str(tmp_path / "o")]) == 2
    assert capsys.readouterr().err == (f"error: {f}: [data] gives both 'sensor_size' (the old name of "
                                       f"'sensor_side') and 'sensor_side'; keep only 'sensor_side'\n")


def test_shipped_recipes_use_the_new_name():
    import tomllib
    for f in RECIPES.glob("*.toml"):
        assert "sensor_size" not in f.read_text(), f
        assert "shift" not in tomllib.loads(f.read_text()).get("train", {}), f


# ------------------------------------------------------------------ every shipped recipe, scaled down
@pytest.mark.parametrize("name", ["default", "saccade_ttfs", "recordings", "idx_files"])
def test_no_shipped_recipe_gives_empty_frames(name, idx_dir, tmp_path, capsys):
    sets = ["data.limit=100", f"data.cache_dir={tmp_path / 'cache'}"]
    if name == "recordings":
        D.write_demo_recordings(tmp_path / "recs", per_class=10, seed=0)
        sets.append(f"data.recordings_index={tmp_path / 'recs' / 'index.csv'}")
    if name == "idx_files":
        sets += idx_args(idx_dir)[1::2]
    ds = D.load_dataset(R.load(RECIPES / f"{name}.toml", sets), progress=False)
    assert ds.info["empty_frames"] == 0 and "frames are empty" not in capsys.readouterr().err
