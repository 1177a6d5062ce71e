"""Event file readers and writers; the format follows the file suffix.

    .npz  the project's own: arrays t, x, y, p, width, height plus `format`/`version`; or a plain
          NPZ with integer arrays t, x, y, p of equal length (optionally width, height), as written
          by `np.savez(path, t=t, x=x, y=y, p=p)`
    .csv  text with a header naming the columns t,x,y,p (any order); an optional first line
          `# sensor WxH` stores the sensor size
    .bin  the 40-bit layout published with the N-MNIST dataset, 5 bytes per event, most
          significant byte first: x (8 bits) | y (8 bits) | p (1 bit, 1 = ON) | t (23 bits, us)

The .bin timestamp wraps at 2^23 us (about 8.39 s). The reader unwraps it by adding 2^23 each
time the stored value decreases, so the writer refuses what that cannot recover: a first
timestamp at or beyond 2^23, or two consecutive events 2^23 us or more apart.
.bin stores no sensor size. Sensor size, in order: `sensor=(width, height)` (overrides a stored
size), the size stored in the file, `default_sensor` (e.g. a recipe's sensor_side), else
max address + 1 with a warning on stderr naming the guessed size (never silently).

Times are integer microseconds. `time_unit` "s" or "ms" reads float times of CSV and plain NPZ
files and rounds t * 1e6 (or * 1e3) to the nearest microsecond (np.rint: halves to even).

Every failure on file content is a FormatError naming the file and the byte offset or line.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from snnconvert import console
from snnconvert.errors import FormatError, UsageError
from snnconvert.events.stream import EventStream
from snnconvert.files import atomic_write_bytes, load_npz
from snnconvert.settings.data import TIME_UNITS

FORMAT = "snnconvert-events"
VERSION = 1
SUFFIXES = (".npz", ".csv", ".bin")
_US_PER_UNIT = {"us": 1, "ms": 1_000, "s": 1_000_000}
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


def read_events(path, sensor: tuple[int, int] | None = None, default_sensor: tuple[int, int] | None = None,
                time_unit: str = "us") -> EventStream:
    """Read an event file. `sensor=(width, height)` overrides a stored size; `default_sensor` is used
    only when the file stores none; `time_unit` (us, ms, s) is the unit of CSV and plain NPZ times."""
    from snnconvert.errors import check_choice
    path = Path(path)
    kind = _suffix(path)
    check_choice(time_unit, "time_unit", "read_events", TIME_UNITS)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    size = _SensorChoice(path, sensor, default_sensor)
    if kind == ".npz":
        return _read_npz(path, size, time_unit)
    data = path.read_bytes()
    if kind == ".csv":
        return _read_csv(path, data, size, time_unit)
    return _read_bin(path, data, size)


class _SensorChoice:
    """The sensor size of one file: given > stored > default > guessed from the addresses (with a warning)."""

    def __init__(self, path: Path, given, default):
        self.path, self.given, self.default = path, given, default

    def __call__(self, x, y, stored=None) -> tuple[int, int]:
        if self.given:
            return tuple(self.given)
        if stored:
            return tuple(stored)
        if self.default:
            return tuple(self.default)
        w, h = _infer_sensor(x, y)
        console.say(f"warning: {self.path} stores no sensor size; guessed {w}x{h} from the largest address "
                    f"(set it with --sensor WxH, or data.sensor_side in a recipe)")
        return w, h


def _times_us(path: Path, t: np.ndarray, time_unit: str, where=None) -> np.ndarray:
    """t in `time_unit` -> int64 microseconds: t * US_PER_UNIT, rounded to the nearest microsecond."""
    t = np.asarray(t)
    if time_unit == "us":
        return t
    if t.dtype.kind not in "iuf":
        raise FormatError(f"{path}: times 't' must be numbers; got dtype {t.dtype}")
    us = t.astype(np.float64) * _US_PER_UNIT[time_unit]
    if us.size and not np.all(np.isfinite(us)) or us.size and np.abs(us).max() >= 2.0 ** 62:
        i = int(np.flatnonzero(~np.isfinite(us) | (np.abs(np.nan_to_num(us, nan=np.inf)) >= 2.0 ** 62))[0])
        loc = where(i) if where else f"index {i}"
        raise FormatError(f"{path}: {loc}: time {t[i]} is not a finite time in {time_unit}")
    return np.rint(us).astype(np.int64)


def write_events(stream: EventStream, path, durable: bool = True) -> Path:
    """Write atomically in the format of the suffix (durable: see files.atomic_write_bytes)."""
    path = Path(path)
    kind = _suffix(path)
    if not isinstance(stream, EventStream):
        raise TypeError(f"write_events needs an EventStream; got {type(stream).__name__}")
    if kind == ".npz":
        buf = io.BytesIO()
        np.savez(buf, format=np.array(FORMAT), version=np.array(VERSION), t=stream.t, x=stream.x, y=stream.y,
                 p=stream.p, width=np.array(stream.width), height=np.array(stream.height))
        return atomic_write_bytes(path, buf.getvalue(), durable)
    if kind == ".csv":
        return atomic_write_bytes(path, encode_csv(stream), durable)
    return atomic_write_bytes(path, encode_bin(stream), durable)


# --- NPZ: own or plain ------------------------------------------------------------------------
def _read_npz(path: Path, size: _SensorChoice, time_unit: str) -> EventStream:
    try:
        z = load_npz(path)
    except FormatError:
        raise
    except Exception as exc:  # a broken zip directory, or a bare .npy renamed to .npz
        raise FormatError(f"{path}: not a readable NPZ file ({type(exc).__name__}: {exc})") from None
    own = "format" in z
    if own:
        fmt = str(z["format"])
        if fmt != FORMAT:
            raise FormatError(f"{path}: not an event file (format {fmt!r}, expected {FORMAT!r}; "
                              f"a plain NPZ holds only the arrays t, x, y, p)")
        version = int(z["version"]) if "version" in z and z["version"].dtype.kind in "iu" else -1
        if version != VERSION:
            raise FormatError(f"{path}: event file version {version} is not supported (expected {VERSION})")
    keys = ("t", "x", "y", "p", "width", "height") if own else ("t", "x", "y", "p")
    for k in keys:
        if k not in z:
            raise FormatError(f"{path}: missing array '{k}' (an event NPZ holds t, x, y, p); found {sorted(z)}")
    for k in ("t", "x", "y", "p", "width", "height"):
        if k not in z:
            continue
        a = z[k]
        float_time = k == "t" and time_unit != "us" and not own and a.dtype.kind == "f"
        if not (np.issubdtype(a.dtype, np.integer) or float_time):
            tail = "; for times in seconds or milliseconds pass --time-unit s or ms" if k == "t" and not own else ""
            raise FormatError(f"{path}: array '{k}' has dtype {a.dtype}, expected integers{tail}")
        if k in ("width", "height") and a.shape != ():
            raise FormatError(f"{path}: array '{k}' must be one integer; got shape {a.shape}")
        if k not in ("width", "height") and a.ndim != 1:
            raise FormatError(f"{path}: array '{k}' must be 1-D; got shape {a.shape}")
    n = z["t"].shape[0]
    for k in "xyp":
        if z[k].shape[0] != n:
            raise FormatError(f"{path}: array '{k}' has {z[k].shape[0]} values but 't' has {n}")
    stored = None
    if ("width" in z) != ("height" in z):
        raise FormatError(f"{path}: array '{'height' if 'width' in z else 'width'}' is missing; store both "
                          f"width and height, or neither (then --sensor WxH gives the size)")
    if "width" in z:
        stored = (int(z["width"]), int(z["height"]))
        if not (1 <= stored[0] <= 65535 and 1 <= stored[1] <= 65535):
            raise FormatError(f"{path}: arrays 'width' and 'height' must be in [1, 65535]; got {stored}")
    t = z["t"] if own else _times_us(path, z["t"], time_unit)
    w, h = size(z["x"], z["y"], stored)
    return _build(path, t, z["x"], z["y"], z["p"], w, h)


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


def _read_csv(path: Path, data: bytes, size: _SensorChoice, time_unit: str) -> EventStream:
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
    # times in us must be integers; in s or ms the t column may hold decimals (read as float64)
    float_col = order[0] if time_unit != "us" else None
    if body:
        try:
            if float_col is None:
                arr = np.loadtxt(io.StringIO("\n".join(body)), delimiter=",", dtype=np.int64, ndmin=2)
            else:
                arr = np.loadtxt(io.StringIO("\n".join(body)), delimiter=",", dtype=np.float64, ndmin=2)
            if arr.shape[1] != ncol or arr.shape[0] != len(body):
                raise ValueError("shape")
            if float_col is not None:
                ints = np.delete(arr, float_col, axis=1)
                if not np.all(ints == np.round(ints)):  # x, y, p and other columns stay integers
                    raise ValueError("not integral")
        except ValueError:
            bad, col = _first_bad_csv_line(body, ncol, float_col)
            if col == order[0] and float_col is None and _is_float(body[bad].split(",")[col]):
                raise FormatError(f"{path}: line {first + bad + 1}: time {body[bad].split(',')[col].strip()!r} is "
                                  f"not an integer; times are integer microseconds (for seconds or milliseconds "
                                  f"pass --time-unit s or ms)") from None
            want = f"{ncol} integers" if float_col is None else f"{ncol} numbers (t in {time_unit}, then integers)"
            raise FormatError(f"{path}: line {first + bad + 1}: expected {want}, got {body[bad][:60]!r}") from None
    else:
        arr = np.zeros((0, ncol), np.int64)
    t, x, y, p = (arr[:, j] for j in order)
    where = lambda i: f"line {first + i + 1}"  # noqa: E731
    if float_col is not None:
        t = _times_us(path, t, time_unit, where)
        x, y, p = (c.astype(np.int64) for c in (x, y, p))  # checked integral above
    w, h = size(x, y, stored)
    return _build(path, t, x, y, p, w, h, where=where)


def _is_float(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def _first_bad_csv_line(body: list[str], ncol: int, float_col: int | None = None) -> tuple[int, int]:
    """(line index, column) of the first field that is not an integer (a number in column float_col)."""
    for i, line in enumerate(body):
        parts = line.split(",")
        if len(parts) != ncol:
            return i, -1
        for j, v in enumerate(parts):
            try:
                float(v) if j == float_col else int(v)
            except ValueError:
                return i, j
    return len(body) - 1, -1  # pragma: no cover - loadtxt failed on something line-by-line parsing accepts


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


def decode_bin(data: bytes, starts=None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(t int64, x uint16, y uint16, p int8) from whole 5-byte records, every column from one
    np.frombuffer (no Python per event): x = b0, y = b1, p = +1 if b2 >> 7 else -1,
    t = (b2 & 0x7F) << 16 | b3 << 8 | b4, plus 2^23 for every decrease of that field before it.

    `starts` (rising record indices, first 0, last the record count) marks several files joined
    together: the wrap count restarts at each file's first record (a file starting below the previous
    file's last time is not a wrap). Default: one file.
    """
    b = np.frombuffer(data, np.uint8).reshape(-1, 5)  # (N, 5)
    x = b[:, 0].astype(np.uint16)
    y = b[:, 1].astype(np.uint16)
    hi = b[:, 2]
    p = (hi >> 7).astype(np.int8)
    p *= 2
    p -= 1
    t = (hi & 0x7F).astype(np.int64)
    t <<= 16
    t |= b[:, 3].astype(np.int64) << 8
    t |= b[:, 4]
    if t.size > 1:
        wraps = np.empty(t.size, np.int64)  # decreases up to each record, then less those before its file
        wraps[0] = 0
        np.less(t[1:], t[:-1], out=wraps[1:])
        np.cumsum(wraps, out=wraps)
        if starts is not None:
            counts = np.diff(starts)
            filled = counts > 0
            wraps -= np.repeat(wraps[np.asarray(starts)[:-1][filled]], counts[filled])
        wraps *= WRAP_US
        t += wraps
    return t, x, y, p


def _read_bin(path: Path, data: bytes, size: _SensorChoice) -> EventStream:
    whole = len(data) - len(data) % 5
    if whole != len(data):
        raise FormatError(f"{path}: truncated: {len(data)} bytes is not a multiple of 5; the last event "
                          f"starts at byte offset {whole} and is incomplete")
    t, x, y, p = decode_bin(data)
    w, h = size(x, y)
    return _build(path, t, x, y, p, w, h, where=lambda i: f"byte offset {5 * i}")
