"""Event file readers and writers; the format follows the file suffix.

    .npz  the project's own: arrays t, x, y, p, width, height plus `format`/`version`
    .csv  text with a header naming the columns t,x,y,p (any order); an optional first line
          `# sensor WxH` stores the sensor size
    .bin  the 40-bit layout published with the N-MNIST dataset, 5 bytes per event, most
          significant byte first: x (8 bits) | y (8 bits) | p (1 bit, 1 = ON) | t (23 bits, us)

The .bin timestamp wraps at 2^23 us (about 8.39 s). The reader unwraps it by adding 2^23 each
time the stored value decreases, so the writer refuses what that cannot recover: a first
timestamp at or beyond 2^23, or two consecutive events 2^23 us or more apart.
.bin stores no sensor size: pass `sensor=(width, height)`, else max address + 1 is used.

Every failure on file content is a FormatError naming the file and the byte offset or line.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError
from snnconvert.events.stream import EventStream
from snnconvert.files import atomic_write_bytes, load_npz

FORMAT = "snnconvert-events"
VERSION = 1
SUFFIXES = (".npz", ".csv", ".bin")
WRAP_US = 1 << 23  # the 23-bit timestamp field of the 40-bit layout


def _suffix(path: Path) -> str:
    s = path.suffix.lower()
    if s not in SUFFIXES:
        raise UsageError(f"{path}: unknown event file type '{path.suffix}'; use one of {', '.join(SUFFIXES)}")
    return s


def parse_sensor(text: str, what: str = "--sensor") -> tuple[int, int]:
    """'34x34' -> (34, 34)."""
    parts = str(text).lower().split("x")
    try:
        w, h = (int(v) for v in parts)
    except ValueError:
        raise UsageError(f"{what} must look like WIDTHxHEIGHT, e.g. 34x34; got {text!r}") from None
    if not (1 <= w <= 65535 and 1 <= h <= 65535):
        raise UsageError(f"{what} sides must be in [1, 65535]; got {text!r}")
    return w, h


def read_events(path, sensor: tuple[int, int] | None = None) -> EventStream:
    """Read an event file. `sensor=(width, height)` overrides a stored size or supplies a missing one."""
    path = Path(path)
    kind = _suffix(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    if kind == ".npz":
        return _read_npz(path, sensor)
    data = path.read_bytes()
    if kind == ".csv":
        return _read_csv(path, data, sensor)
    return _read_bin(path, data, sensor)


def write_events(stream: EventStream, path) -> Path:
    """Write atomically in the format of the suffix."""
    path = Path(path)
    kind = _suffix(path)
    if not isinstance(stream, EventStream):
        raise TypeError(f"write_events needs an EventStream; got {type(stream).__name__}")
    if kind == ".npz":
        buf = io.BytesIO()
        np.savez(buf, format=np.array(FORMAT), version=np.array(VERSION), t=stream.t, x=stream.x, y=stream.y,
                 p=stream.p, width=np.array(stream.width), height=np.array(stream.height))
        return atomic_write_bytes(path, buf.getvalue())
    if kind == ".csv":
        return atomic_write_bytes(path, encode_csv(stream))
    return atomic_write_bytes(path, encode_bin(stream))


# --- own NPZ ---------------------------------------------------------------------------------
def _read_npz(path: Path, sensor) -> EventStream:
    try:
        z = load_npz(path)
    except FormatError:
        raise
    except Exception as exc:  # a broken zip directory, or a bare .npy renamed to .npz
        raise FormatError(f"{path}: not a readable NPZ file ({type(exc).__name__}: {exc})") from None
    fmt = str(z.get("format", ""))
    if fmt != FORMAT:
        raise FormatError(f"{path}: not an event file (format {fmt!r}, expected {FORMAT!r})")
    version = int(z["version"]) if "version" in z else -1
    if version != VERSION:
        raise FormatError(f"{path}: event file version {version} is not supported (expected {VERSION})")
    for k in ("t", "x", "y", "p", "width", "height"):
        if k not in z:
            raise FormatError(f"{path}: missing array '{k}'")
        if not np.issubdtype(z[k].dtype, np.integer):
            raise FormatError(f"{path}: array '{k}' has dtype {z[k].dtype}, expected integers")
    w, h = sensor if sensor else (int(z["width"]), int(z["height"]))
    return _build(path, z["t"], z["x"], z["y"], z["p"], w, h)


def _build(path, t, x, y, p, w, h, where=None) -> EventStream:
    """EventStream.from_arrays with errors prefixed by the file (and the event's location)."""
    try:
        return EventStream.from_arrays(t, x, y, p, w, h)
    except (UsageError, TypeError) as exc:
        msg = str(exc)
        if where is not None:
            import re
            m = re.search(r"index (\d+)", msg)
            if m:
                msg += f" ({where(int(m.group(1)))})"
        raise FormatError(f"{path}: {msg}") from None


# --- CSV -------------------------------------------------------------------------------------
def encode_csv(stream: EventStream) -> bytes:
    head = f"# sensor {stream.width}x{stream.height}\nt,x,y,p\n"
    if not len(stream):
        return head.encode()
    cols = np.stack([stream.t, stream.x.astype(np.int64), stream.y.astype(np.int64), stream.p.astype(np.int64)], 1)
    buf = io.StringIO()
    np.savetxt(buf, cols, fmt="%d", delimiter=",")
    return (head + buf.getvalue()).encode()


def _read_csv(path: Path, data: bytes, sensor) -> EventStream:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise FormatError(f"{path}: not a UTF-8 text file (byte offset {exc.start})") from None
    lines = text.splitlines()
    line_no = 0  # 0-based index into lines
    stored = None
    if lines and lines[0].startswith("#"):
        words = lines[0][1:].split()
        if len(words) == 2 and words[0] == "sensor":
            try:
                stored = parse_sensor(words[1], "the '# sensor' line")
            except UsageError as exc:
                raise FormatError(f"{path}: line 1: {exc}") from None
        line_no = 1
    if line_no >= len(lines):
        raise FormatError(f"{path}: line {line_no + 1}: missing the header t,x,y,p")
    header = [c.strip() for c in lines[line_no].split(",")]
    for col in ("t", "x", "y", "p"):
        if col not in header:
            raise FormatError(f"{path}: line {line_no + 1}: missing column '{col}' in header {lines[line_no]!r}")
    if len(set(header)) != len(header):
        raise FormatError(f"{path}: line {line_no + 1}: repeated column in header {lines[line_no]!r}")
    order = [header.index(c) for c in ("t", "x", "y", "p")]
    first = line_no + 1
    body = lines[first:]
    ncol = len(header)
    if body:
        try:
            arr = np.loadtxt(io.StringIO("\n".join(body)), delimiter=",", dtype=np.int64, ndmin=2)
            if arr.shape[1] != ncol or arr.shape[0] != len(body):
                raise ValueError("shape")
        except ValueError:
            bad = _first_bad_csv_line(body, ncol)
            raise FormatError(f"{path}: line {first + bad + 1}: expected {ncol} integers, got "
                              f"{body[bad][:60]!r}") from None
    else:
        arr = np.zeros((0, ncol), np.int64)
    t, x, y, p = (arr[:, j] for j in order)
    w, h = sensor or stored or _infer_sensor(x, y)
    return _build(path, t, x, y, p, w, h, where=lambda i: f"line {first + i + 1}")


def _first_bad_csv_line(body: list[str], ncol: int) -> int:
    for i, line in enumerate(body):
        parts = line.split(",")
        if len(parts) != ncol:
            return i
        for v in parts:
            try:
                int(v)
            except ValueError:
                return i
    return len(body) - 1  # pragma: no cover - loadtxt failed on something line-by-line parsing accepts


def _infer_sensor(x, y) -> tuple[int, int]:
    if not len(x):
        return 1, 1
    w, h = int(np.max(x)) + 1, int(np.max(y)) + 1
    if w < 1 or h < 1:  # negative addresses: let validation name them
        return 1, 1
    return min(w, 65535), min(h, 65535)


# --- 40-bit binary ---------------------------------------------------------------------------
def encode_bin(stream: EventStream) -> bytes:
    """word = x << 32 | y << 24 | (p == ON) << 23 | (t mod 2^23), 5 bytes big-endian per event."""
    t = stream.t
    if len(stream):
        if stream.width > 256 or stream.height > 256:
            if int(stream.x.max()) > 255 or int(stream.y.max()) > 255:
                raise UsageError("the 40-bit layout stores 8-bit addresses; this stream has x or y above 255")
        if t[0] < 0 or t[0] >= WRAP_US:
            raise UsageError(f"the 40-bit layout needs the first timestamp in [0, {WRAP_US}); got {int(t[0])}")
        gaps = np.flatnonzero(np.diff(t) >= WRAP_US)
        if gaps.size:
            i = int(gaps[0]) + 1
            raise UsageError(f"events {i - 1} and {i} are {int(t[i] - t[i - 1])} us apart; the 40-bit layout's "
                             f"23-bit timestamp cannot represent gaps of {WRAP_US} us or more")
    out = np.empty((len(stream), 5), np.uint8)  # (N, 5)
    tw = (t % WRAP_US).astype(np.uint32)
    out[:, 0] = stream.x
    out[:, 1] = stream.y
    out[:, 2] = ((stream.p > 0).astype(np.uint32) << 7) | (tw >> 16)
    out[:, 3] = (tw >> 8) & 0xFF
    out[:, 4] = tw & 0xFF
    return out.tobytes()


def decode_bin(data: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(t, x, y, p) from whole 5-byte records; t unwrapped at each decrease of the 23-bit field."""
    b = np.frombuffer(data, np.uint8).reshape(-1, 5)  # (N, 5)
    x = b[:, 0].astype(np.uint16)
    y = b[:, 1].astype(np.uint16)
    p = np.where(b[:, 2] >> 7, 1, -1).astype(np.int8)
    t = ((b[:, 2].astype(np.int64) & 0x7F) << 16) | (b[:, 3].astype(np.int64) << 8) | b[:, 4]
    if t.size > 1:
        wraps = np.concatenate([[0], np.cumsum(np.diff(t) < 0)])
        t = t + wraps * WRAP_US
    return t, x, y, p


def _read_bin(path: Path, data: bytes, sensor) -> EventStream:
    whole = len(data) - len(data) % 5
    if whole != len(data):
        raise FormatError(f"{path}: truncated: {len(data)} bytes is not a multiple of 5; the last event "
                          f"starts at byte offset {whole} and is incomplete")
    t, x, y, p = decode_bin(data)
    w, h = sensor or _infer_sensor(x, y)
    return _build(path, t, x, y, p, w, h, where=lambda i: f"byte offset {5 * i}")
