"""Event stream type and file formats."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from snnconvert.errors import FormatError, UsageError
from snnconvert.events import EVENT_DTYPE, EventStream, decode_bin, encode_bin, parse_sensor, read_events, write_events
from snnconvert.events.formats import WRAP_US


def make(t, x, y, p, w=34, h=34, **kw):
    return EventStream.from_arrays(np.asarray(t), np.asarray(x), np.asarray(y), np.asarray(p), w, h, **kw)


# --- the 40-bit layout -----------------------------------------------------------------------
def test_bin_byte_example():
    # x=5, y=17, ON, t=1000 us -> 05 11 80 03 E8: worked from the layout published with N-MNIST
    # (Orchard et al. 2015, Front. Neurosci. 9:437; REFERENCES.md, verified)
    s = make([1000], [5], [17], [1])
    assert encode_bin(s) == bytes([0x05, 0x11, 0x80, 0x03, 0xE8])
    t, x, y, p = decode_bin(bytes.fromhex("051180" "03E8"))
    assert (t[0], x[0], y[0], p[0]) == (1000, 5, 17, 1)


def test_bin_reader_matches_published_reader_formula():
    # the dataset's reader: x=b0, y=b1, p=b2>>7, t=((b2&127)<<16)|(b3<<8)|b4 (REFERENCES.md, verified)
    rng = np.random.default_rng(0)
    raw = rng.integers(0, 256, size=(50, 5), dtype=np.uint8)
    raw[:, 2] &= 0x80  # keep the 23-bit timestamps increasing: high bits zero ...
    raw[:, 3] = np.arange(50)  # ... middle byte strictly increasing
    t, x, y, p = decode_bin(raw.tobytes())
    b = raw.astype(np.int64)
    assert np.array_equal(x, b[:, 0]) and np.array_equal(y, b[:, 1])
    assert np.array_equal(p, np.where(b[:, 2] >> 7, 1, -1))
    assert np.array_equal(t, ((b[:, 2] & 127) << 16) | (b[:, 3] << 8) | b[:, 4])


def test_bin_23_bit_wrap(tmp_path):
    # the timestamp field has 23 bits: it wraps at 2^23 us (REFERENCES.md)
    assert WRAP_US == 8_388_608  # 2^23 us: the 23-bit timestamp field of the N-MNIST layout (REFERENCES.md)
    t = [WRAP_US - 2, WRAP_US - 1, WRAP_US, WRAP_US + 5, 2 * WRAP_US + 3]
    s = make(t, [1] * 5, [2] * 5, [1, -1, 1, -1, 1])
    raw = encode_bin(s)
    # hand-computed from the 40-bit layout (Orchard et al. 2015): x=1, y=2, ON bit 23 set, t = 2^23 mod 2^23 = 0
    assert raw[10:15] == bytes([1, 2, 0x80, 0, 0])
    write_events(s, tmp_path / "w.bin")
    assert read_events(tmp_path / "w.bin", sensor=(34, 34)) == s


@pytest.mark.parametrize("t, match", [
    ([WRAP_US], "first timestamp"),
    ([0, WRAP_US], "23-bit timestamp cannot represent gaps"),
])
def test_bin_writer_refuses_unrecoverable_times(tmp_path, t, match):
    s = make(t, [0] * len(t), [0] * len(t), [1] * len(t))
    with pytest.raises(UsageError, match=match):
        write_events(s, tmp_path / "x.bin")
    assert not (tmp_path / "x.bin").exists()


def test_bin_writer_refuses_wide_addresses(tmp_path):
    s = make([0], [300], [0], [1], w=346, h=260)
    with pytest.raises(UsageError, match="8-bit addresses"):
        write_events(s, tmp_path / "x.bin")


# --- validation ------------------------------------------------------------------------------
@pytest.mark.parametrize("cols, sort, match", [
    (([0, 1], [0, 34], [0, 0], [1, 1]), False, r"field 'x' at index 1 is 34, outside the sensor \(width 34\)"),
    (([0, 1], [0, 0], [0, 40], [1, 1]), False, r"field 'y' at index 1 is 40"),
    (([5, 3], [0, 0], [0, 0], [1, 1]), False, r"field 't' decreases at index 1 \(5 -> 3\).*sort=True"),
    (([0, 1], [0, 0], [0, 0], [1, 2]), False, r"field 'p' must be \+1/-1 \(or 1/0\) at index 1; got 2"),
    (([0, 1], [0, -1], [0, 0], [1, 1]), False, r"field 'x' at index 1 is -1"),
    (([0, 1], [0.5, 0], [0, 0], [1, 1]), False, r"field 'x' must hold integers"),
    (([0, 1], [0], [0, 0], [1, 1]), False, r"field 'x' has 1 values but 't' has 2"),
    (([[0, 1]], [0], [0], [1]), False, r"field 't' must be 1-D"),
])
def test_validation_rejects(cols, sort, match):
    with pytest.raises(UsageError, match=match):
        make(*cols, sort=sort)


def test_constructor_checks_dtype_and_ranges():
    with pytest.raises(TypeError, match="structured array"):
        EventStream(np.zeros(3), 4, 4)
    ev = np.zeros(2, EVENT_DTYPE)
    ev["p"] = 1
    ev["x"][1] = 4
    with pytest.raises(UsageError, match="field 'x' at index 1"):
        EventStream(ev, 4, 4)
    with pytest.raises(UsageError, match="The 'width' parameter of EventStream must be an int in \\[1, 65535\\]"):
        EventStream(np.zeros(0, EVENT_DTYPE), 0, 4)


def test_sort_and_zero_one_polarity():
    s = make([5, 3, 3], [1, 2, 3], [0, 0, 0], [0, 1, 0], sort=True)
    assert s.t.tolist() == [3, 3, 5]  # hand-computed: the input times sorted
    assert s.x.tolist() == [2, 3, 1]  # stable: equal times keep their order
    assert s.p.tolist() == [1, -1, -1]  # 1/0 polarity as in the N-MNIST layout (1 = ON, 0 = OFF), stored as +1/-1


def test_empty_stream_reports_empty(tmp_path):
    s = EventStream.empty(34, 34)
    assert s.is_empty and len(s) == 0 and s.duration_us == 0
    assert s.summary()["empty"] is True and s.summary()["events"] == 0
    for suf in (".npz", ".csv", ".bin"):
        write_events(s, tmp_path / f"e{suf}")
        assert read_events(tmp_path / f"e{suf}", sensor=(34, 34)) == s


def test_slice_time_half_open():
    s = make([0, 10, 10, 20], [0, 1, 2, 3], [0] * 4, [1] * 4)
    assert s.slice_time(10, 20).x.tolist() == [1, 2]  # hand-computed: [10, 20) holds the two events at t=10


# --- files -----------------------------------------------------------------------------------
@pytest.mark.parametrize("content, match", [
    (b"t,x,y,p\n0,1,2,1\n5,1,2\n", r"line 3: expected 4 integers"),
    (b"t,x,y,p\n0,1,2,1\n5,a,2,1\n", r"line 3: expected 4 integers"),
    (b"t,x,y\n0,1,2\n", r"line 1: missing column 'p'"),
    (b"# sensor 4x4\nt,x,y,p\n0,1,2,1\n1,9,2,1\n", r"line 4\)"),
    (b"# sensor 4x4\nt,x,y,p\n5,1,2,1\n1,1,2,1\n", r"field 't' decreases at index 1.*line 4"),
    (b"\xff\xfe", r"not a UTF-8 text file \(byte offset 0\)"),
    (b"", r"line 1: missing the header"),
])
def test_csv_errors_name_file_and_line(tmp_path, content, match):
    f = tmp_path / "bad.csv"
    f.write_bytes(content)
    with pytest.raises(FormatError, match=match) as err:
        read_events(f)
    assert "bad.csv" in str(err.value)


def test_csv_any_column_order(tmp_path):
    f = tmp_path / "c.csv"
    f.write_text("p,y,x,t\n1,2,3,100\n0,1,1,200\n")
    s = read_events(f, sensor=(8, 8))
    # hand-computed: the columns read by name; p=0 means OFF (-1)
    assert (s.t.tolist(), s.x.tolist(), s.y.tolist(), s.p.tolist()) == ([100, 200], [3, 1], [2, 1], [1, -1])


def test_bin_truncated_names_offset(tmp_path):
    f = tmp_path / "t.bin"
    f.write_bytes(bytes.fromhex("05118003E8") + b"\x00\x01")  # one 5-byte event + 2 stray bytes (N-MNIST layout)
    with pytest.raises(FormatError, match=r"t.bin: truncated: 7 bytes is not a multiple of 5; .*byte offset 5"):
        read_events(f)


def test_bin_event_outside_given_sensor_names_offset(tmp_path):
    f = tmp_path / "o.bin"
    f.write_bytes(bytes.fromhex("05118003E8" "40118003E9"))  # 2nd event: x = 0x40 = 64, at byte 5 (5 bytes/event)
    with pytest.raises(FormatError, match=r"field 'x' at index 1 is 64.*byte offset 5"):
        read_events(f, sensor=(34, 34))


@pytest.mark.parametrize("name, match", [
    ("x.txt", "unknown event file type '.txt'"),
    ("missing.npz", "file not found"),
])
def test_read_bad_paths(tmp_path, name, match):
    with pytest.raises(UsageError, match=match):
        read_events(tmp_path / name)


def test_npz_wrong_format_and_version(tmp_path):
    np.savez(tmp_path / "a.npz", format=np.array("other"), t=np.zeros(1, np.int64))
    with pytest.raises(FormatError, match="not an event file"):
        read_events(tmp_path / "a.npz")
    np.savez(tmp_path / "b.npz", format=np.array("snnconvert-events"), version=np.array(99))
    with pytest.raises(FormatError, match="version 99 is not supported"):
        read_events(tmp_path / "b.npz")


def _npy_bytes():
    import io
    buf = io.BytesIO()
    np.save(buf, np.arange(3))
    return buf.getvalue()


@pytest.mark.parametrize("content", [
    _npy_bytes(),                       # a bare .npy under an .npz name
    b"PK\x03\x04" + bytes(40),          # a zip header with nothing behind it
])
def test_npz_not_a_zip_archive(tmp_path, content):
    f = tmp_path / "z.npz"
    f.write_bytes(content)
    with pytest.raises(FormatError, match="z.npz"):
        read_events(f)


@pytest.mark.parametrize("text, expect", [("34x34", (34, 34)), ("346X260", (346, 260))])
def test_parse_sensor(text, expect):
    assert parse_sensor(text) == expect


@pytest.mark.parametrize("text", ["34", "ax3", "0x5", "3x4x5"])
def test_parse_sensor_rejects(text):
    with pytest.raises(UsageError, match="--sensor"):
        parse_sensor(text)


# --- property tests --------------------------------------------------------------------------
@st.composite
def streams(draw):
    w = draw(st.integers(1, 256))
    h = draw(st.integers(1, 256))
    n = draw(st.integers(0, 40))
    gaps = draw(st.lists(st.integers(0, WRAP_US - 1), min_size=n, max_size=n))
    t0 = draw(st.integers(0, WRAP_US - 1))
    t = t0 + np.cumsum(np.asarray(gaps, np.int64)) - (gaps[0] if n else 0)
    x = draw(st.lists(st.integers(0, w - 1), min_size=n, max_size=n))
    y = draw(st.lists(st.integers(0, h - 1), min_size=n, max_size=n))
    p = draw(st.lists(st.sampled_from([1, -1]), min_size=n, max_size=n))
    return EventStream.from_arrays(np.asarray(t, np.int64), np.asarray(x, np.int64), np.asarray(y, np.int64),
                                   np.asarray(p, np.int64), w, h)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(s=streams(), suffix=st.sampled_from([".npz", ".csv", ".bin"]))
def test_round_trip_every_format(tmp_path, s, suffix):
    f = tmp_path / f"rt{suffix}"
    write_events(s, f)
    back = read_events(f, sensor=(s.width, s.height) if suffix == ".bin" else None)
    assert back == s


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=200), suffix=st.sampled_from([".npz", ".csv", ".bin"]),
       sensor=st.sampled_from([None, (34, 34)]))
def test_random_bytes_only_raise_format_error(tmp_path, data, suffix, sensor):
    f = tmp_path / f"rnd{suffix}"
    f.write_bytes(data)
    try:
        s = read_events(f, sensor=sensor)
    except FormatError:
        return
    assert isinstance(s, EventStream)
    # what is accepted must be a valid stream: time-ordered, inside the sensor, polarity +1/-1
    assert np.all(np.diff(s.t) >= 0) and np.all(s.x < s.width) and np.all(s.y < s.height)
    assert set(np.unique(s.p).tolist()) <= {1, -1}
    if suffix == ".bin":
        assert len(s) == len(data) // 5  # 5 bytes per event (N-MNIST layout, Orchard et al. 2015)
