"""`snnconvert events`: exit codes and exact text."""

import json

import numpy as np
import pytest

from snnconvert.cli import main
from snnconvert.events import EventStream, write_events


@pytest.fixture
def rec(tmp_path):
    # two lone events and a burst of 100 events in 100 us (50 ON, 50 OFF)
    t = np.concatenate([[0], 20_000 + np.arange(100), [50_000]])
    x = np.arange(102) % 34
    p = np.where(np.arange(102) % 2 == 0, 1, -1)
    s = EventStream.from_arrays(t, x, np.zeros(102, int), p, 34, 34)
    for suf in (".npz", ".csv", ".bin"):
        write_events(s, tmp_path / f"r{suf}")
    return tmp_path


# hand-computed from the recording above: 102 events over 50 ms = 2040 events/s. 1 ms bins from t = 0;
# background = events of the last 32 closed bins, floored at 32 (one per bin): it never leaves the
# floor (the burst bin is open, so it does not count), so a window opens at >= 128*32//512 + 1 = 9 and
# stays open at >= ceil(32*32/512) = 2: the burst bin (20 ms, 100 events) opens and the next bin closes
EXPECTED = """file      {f}
events    102 (ON 51 = 50.0%, OFF 51)
time      0 .. 50000 us (duration 50000 us)
rate      2040 events/s
sensor    34x34
bursts    1 (opens at >= 9, stays open at >= 2 events per 1000 us bin)
    #   start_us     end_us   events
    1      20000      21000      100
"""


@pytest.mark.parametrize("suffix, extra", [(".npz", []), (".csv", []), (".bin", ["--sensor", "34x34"])])
def test_text_summary(rec, capsys, suffix, extra):
    f = rec / f"r{suffix}"
    assert main(["events", str(f), *extra]) == 0
    assert capsys.readouterr().out == EXPECTED.format(f=f)


def test_json(rec, capsys):
    assert main(["events", str(rec / "r.npz"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {k: out[k] for k in ("events", "duration_us", "width", "height", "on", "off", "bursts")} == {
        "events": 102, "duration_us": 50000, "width": 34, "height": 34, "on": 51, "off": 51,
        "bursts": [[20000, 21000, 100]]}  # hand-computed, as for EXPECTED


def test_absolute_thresholds_and_plot(rec, capsys):
    png = rec / "out" / "r.png"
    assert main(["events", str(rec / "r.npz"), "--absolute", "--upper", "1e9", "--plot", str(png)]) == 0
    out = capsys.readouterr().out
    # 1e9 events/s = 1e6 per 1 ms bin: the smallest count above it is 1000001; 2 events/s -> at least 1
    assert "bursts    0 (opens at >= 1000001, stays open at >= 1 events per 1000 us bin)" in out
    assert f"plot      {png}" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948 §5.2)


def test_empty_recording(tmp_path, capsys):
    write_events(EventStream.empty(8, 8), tmp_path / "e.csv")
    assert main(["events", str(tmp_path / "e.csv"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["events"] == 0 and out["bursts"] == [] and out["empty"] is True


@pytest.mark.parametrize("make, args, message", [
    (None, ["missing.npz"], "error: file not found: {d}/missing.npz\n"),
    (None, ["r.npz", "--sensor", "34"], "error: --sensor must look like WIDTHxHEIGHT, e.g. 34x34; got '34'\n"),
    (None, ["r.npz", "--bin-us", "0"], "error: --bin-us must be >= 1; got 0\n"),
    (None, ["r.npz", "--upper", "-1"], "error: --upper must be >= 0; got -1.0\n"),
    (None, ["r.txt"], "error: {d}/r.txt: unknown event file type '.txt'; use one of .npz, .csv, .bin\n"),
    # 4 bytes: one event short of the 5-byte N-MNIST layout (Orchard et al. 2015)
    (b"\x05\x11\x80\x03", ["t.bin"], "error: {d}/t.bin: truncated: 4 bytes is not a multiple of 5; the last event "
                                     "starts at byte offset 0 and is incomplete\n"),
    (b"t,x,y,p\n1,2,3\n", ["c.csv"], "error: {d}/c.csv: line 2: expected 4 integers, got '1,2,3'\n"),
    # hand-computed: event index 4 has x = 4 and starts at byte 4 * 5 = 20
    (None, ["r.bin", "--sensor", "4x4"], "error: {d}/r.bin: event field 'x' at index 4 is 4, outside the sensor "
                                         "(width 4) (byte offset 20)\n"),
])
def test_errors_exit_2_with_one_line(rec, capsys, make, args, message):
    if make is not None:
        (rec / args[0]).write_bytes(make)
    args = [str(rec / args[0]), *args[1:]]
    assert main(["events", *args]) == 2
    assert capsys.readouterr().err == message.format(d=rec)


def test_bad_option_is_usage_error(rec, capsys):
    assert main(["events", str(rec / "r.npz"), "--mode", "gray"]) == 2
    assert capsys.readouterr().err.startswith("error: snnconvert events: argument --mode: invalid choice: 'gray'")
