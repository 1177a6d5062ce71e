"""Frames: binning and sum-pooling checked against numpy's histogram2d and torch's pooling."""

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st

from snnconvert import frames
from snnconvert.errors import UsageError
from snnconvert.events import EventStream
from snnconvert.settings.frames import FramesSettings


def rand_stream(n=500, w=32, h=32, seed=0, t_max=10_000):
    rng = np.random.default_rng(seed)
    return EventStream.from_arrays(np.sort(rng.integers(0, t_max, n)), rng.integers(0, w, n), rng.integers(0, h, n),
                                   rng.choice([-1, 1], n), w, h)


def test_full_resolution_counts_match_histogram2d():
    s = rand_stream()
    got = frames.bin_window(s, 0, 10_000, "count", 32, 1, 255)[0]
    ref, _, _ = np.histogram2d(s.y, s.x, bins=[np.arange(33), np.arange(33)])  # numpy's own binning
    assert np.array_equal(got, np.minimum(ref, 255))


@pytest.mark.parametrize("size", [16, 8, 4])
def test_subsampling_is_sum_pooling(size):
    # divisible case: equals torch's avg_pool2d times the pool area (a sum pool)
    s = rand_stream(2000)
    full = frames.bin_window(s, 0, 10_000, "count", 32, 1, 255)
    k = 32 // size
    ref = torch.nn.functional.avg_pool2d(torch.tensor(full)[None], k)[0].numpy() * k * k
    got = frames.bin_window(s, 0, 10_000, "count", size, 1, 255)
    assert np.array_equal(got, np.rint(ref))


def test_uneven_subsampling_keeps_every_event():
    # 34 -> 16: target pixels take 2 or 3 sensor pixels, none dropped or counted twice
    s = rand_stream(3000, 34, 34)
    got = frames.bin_window(s, 0, 10_000, "count", 16, 1, 255)
    assert got.sum() == len(s)
    # one event on every sensor column of row 0: a target pixel's count is the number of sensor
    # columns it gathers, floor(34/16) = 2 or ceil(34/16) = 3 (hand-computed), 34 in all
    row = EventStream.from_arrays(np.zeros(34, np.int64), np.arange(34), np.zeros(34, np.int64),
                                  np.ones(34, np.int64), 34, 34)
    per_target = frames.bin_window(row, 0, 1, "count", 16, 1, 255)[0, 0]
    assert set(per_target.tolist()) == {2.0, 3.0} and per_target.sum() == 34
    # and against numpy's histogram2d with the same 2-or-3 pixel groups (x*16//34)
    full, _, _ = np.histogram2d(s.y, s.x, bins=[np.arange(35), np.arange(35)])
    group = np.arange(34) * 16 // 34
    ref = np.zeros((16, 16))
    np.add.at(ref, (group[:, None], group[None, :]), full)
    assert np.array_equal(got[0], np.minimum(ref, 255))


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), size=st.integers(1, 40), threshold=st.integers(1, 6),
       n=st.integers(0, 400))
def test_binary_frame_invariant(seed, size, threshold, n):
    # binary mode: a pixel fires at most once per window, and only if its pooled count reaches the threshold
    s = rand_stream(n, 30, 20, seed)
    b = frames.bin_window(s, 0, 10_000, "binary", size, threshold)
    c = frames.bin_window(s, 0, 10_000, "count", size, 1, 255)
    assert b.shape == (1, size, size) and b.dtype == np.float32
    assert set(np.unique(b).tolist()) <= {0.0, 1.0}
    assert np.array_equal(b, (c >= threshold).astype(np.float32))
    assert b.sum() <= n


def test_polarity_channels_and_clip():
    s = EventStream.from_arrays([0, 1, 2, 3, 4, 5], [0, 0, 0, 0, 1, 1], [0] * 6, [1, 1, 1, -1, -1, 1], 2, 1)
    f = frames.bin_window(s, 0, 10, "polarity", 2, 1, 2)
    assert f.shape == (2, 2, 2)
    # hand-computed from the six events: x=0 has ON 3 (clipped at max_count=2) and OFF 1; x=1 has ON 1, OFF 1
    assert f[0, 0].tolist() == [2, 1] and f[1, 0].tolist() == [1, 1]
    assert frames.bin_window(s, 0, 3, "count", 2, 1, 9)[0, 0].tolist() == [3, 0]  # hand-computed: [0, 3) holds t=0,1,2 at x=0


def test_bin_windows_equals_single_windows():
    s = rand_stream(1000)
    wins = [(0, 2000), (2000, 5000), (7000, 10_000)]
    many = frames.bin_windows(s, wins, "count", 8, 1, 50)
    for i, (a, b) in enumerate(wins):
        assert np.array_equal(many[i], frames.bin_window(s, a, b, "count", 8, 1, 50))
    with pytest.raises(UsageError, match="non-overlapping"):
        frames.bin_windows(s, [(0, 3000), (2000, 4000)])


def test_input_q_and_channels():
    # the frame definitions (module docstring): binary holds 0/1, count holds 0..max_count;
    # polarity has ON and OFF channels
    assert frames.input_q("binary", 9) == 1 and frames.input_q("count", 9) == 9
    assert frames.channels("polarity") == 2 and frames.channels("binary") == 1


@pytest.mark.parametrize("kw, match", [
    (dict(mode="gray"), r"The 'mode' parameter of frames must be one of 'binary', 'count', 'polarity'"),
    (dict(size=0), r"The 'size' parameter of frames must be an int in \[1, 1024\]. Got 0"),
    (dict(threshold=0), r"The 'threshold' parameter of frames must be an int >= 1. Got 0"),
])
def test_validation(kw, match):
    args = dict(mode="binary", size=8, threshold=1, max_count=4) | kw
    with pytest.raises(UsageError, match=match):
        frames.bin_window(rand_stream(10), 0, 10, **args)


def test_frame_window_falls_back_to_all_events():
    s = EventStream.from_arrays([0] * 5, [0, 1, 2, 3, 4], [0] * 5, [1] * 5, 8, 8)  # one instant: no burst
    (a, b), ok = frames.frame_window(s, FramesSettings.from_section({}).as_dict())
    assert not ok and (a, b) == (0, 1)  # hand-computed: all events, [t_first, t_last + 1) = [0, 1)


def test_plots_write_png(tmp_path):
    s = rand_stream(2000)
    sec = FramesSettings.from_section({"relative": False, "upper": 10.0, "lower": 5.0}).as_dict()
    trace = frames.recording_trace(s, sec)
    fr = [frames.bin_window(s, a, b, "polarity", 16, 1, 4) for a, b in trace["windows"]]
    p = frames.plot_recording(s, trace, fr, tmp_path / "r.png")
    assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, ISO/IEC 15948 §5.2)
    X = np.random.default_rng(0).integers(0, 2, (20, 1, 8, 8)).astype(np.float32)
    png = frames.plot_frames(X, np.arange(20) % 4, tmp_path / "f.png", classes=list("abcd"))
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948 §5.2)


@pytest.mark.parametrize("mode, q, vmin, vmax", [
    ("binary", 1, 0.0, 1.0),        # binary frames hold 0/1 (module docstring)
    ("count", 15, 0.0, 15.0),       # count frames hold 0..max_count
    ("polarity", 15, -15.0, 15.0),  # ON - OFF lies in -max_count..max_count
])
def test_frame_plot_uses_a_fixed_scale(mode, q, vmin, vmax):
    import matplotlib.pyplot as plt
    c = frames.channels(mode)
    X = np.zeros((6, c, 8, 8), np.float32)
    X[0] = 1 if mode == "binary" else 3   # every pixel set, far below the top of the count scale
    X[1, 0, :2] = q
    fig = frames.frames_figure(X, np.array([0, 0, 1, 1, 2, 2]), classes=list("abcd"), mode=mode, q=q, caption="cap")
    try:
        ims = [a.images[0] for a in fig.axes if a.images]
        assert len(ims) == 6
        assert {(im.norm.vmin, im.norm.vmax) for im in ims} == {(vmin, vmax)}   # one scale for every frame
        assert fig.get_suptitle() == "cap"
        # every class has a row, also 'd' without examples; a colour bar is drawn
        assert any(t.get_text() == "d: no example in this split" for a in fig.axes for t in a.texts)
        assert any(a.get_label() == "<colorbar>" for a in fig.axes)
        full = ims[0]
        if mode == "binary":   # an all-set binary frame is drawn at the top of the scale (black), not rescaled
            assert np.allclose(full.to_rgba(full.get_array())[..., :3], 0.0)
        if mode == "polarity":  # diverging map: an empty pixel (ON - OFF = 0) sits at the centre of the colours
            assert full.norm(0.0) == pytest.approx(0.5)
            assert ims[2].norm(ims[2].get_array()).min() == pytest.approx(0.5)  # an empty frame: all centre
    finally:
        plt.close(fig)


def test_frames_caption():
    assert frames.frames_caption("train", "binary", (1, 16, 16), 16, 15) == (
        "train split: binary frames 1x16x16, a pixel spikes at >= 16 events; row label = class (examples in the split)")
    assert "clipped at 15" in frames.frames_caption("test", "polarity", (2, 16, 16), 16, 15)
