"""The IDX file format (the MNIST layout): read and write.

An IDX file is: bytes 0-1 zero, byte 2 the element type, byte 3 the number of dims, then each dim
as a big-endian uint32, then the elements big-endian in C order. A `.gz` suffix means gzip.
"""

from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np

from snnconvert import files
from snnconvert.errors import FormatError, UsageError

_IDX_TYPES = {0x08: ">u1", 0x09: ">i1", 0x0B: ">i2", 0x0C: ">i4", 0x0D: ">f4", 0x0E: ">f8"}


def read_idx(path) -> np.ndarray:
    """IDX file: bytes 0-1 zero, byte 2 the element type, byte 3 the number of dims, then each dim as
    a big-endian uint32, then the elements big-endian in C order. `.gz` files are decompressed."""
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    data = path.read_bytes()
    if path.suffix == ".gz":
        import zlib
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError, zlib.error):  # bad header / cut short / damaged deflate stream
            raise FormatError(f"{path}: not a readable gzip file (damaged or cut short)") from None
    if len(data) < 4 or data[0] != 0 or data[1] != 0:
        raise FormatError(f"{path}: not an IDX file (byte offset 0: magic number must start with 00 00)")
    if data[2] not in _IDX_TYPES:
        raise FormatError(f"{path}: byte offset 2: unknown IDX element type 0x{data[2]:02X}")
    ndim = data[3]
    head = 4 + 4 * ndim
    if ndim == 0 or len(data) < head:
        raise FormatError(f"{path}: byte offset 3: {ndim} dimensions but the header is cut short")
    dims = tuple(int(v) for v in np.frombuffer(data, ">u4", count=ndim, offset=4))
    dt = np.dtype(_IDX_TYPES[data[2]])
    need = head + int(np.prod(dims, dtype=np.int64)) * dt.itemsize
    if len(data) != need:
        raise FormatError(f"{path}: dims {dims} need {need} bytes but the file has {len(data)} "
                          f"(byte offset {min(len(data), need)})")
    return np.frombuffer(data, dt, offset=head).reshape(dims).astype(dt.newbyteorder("="))


def write_idx(path, array) -> Path:
    """Write `array` as IDX (atomically); dtype one of uint8, int8, int16, int32, float32, float64."""
    a = np.asarray(array)
    codes = {np.dtype(v).newbyteorder("="): k for k, v in _IDX_TYPES.items()}
    key = a.dtype.newbyteorder("=")
    if key not in codes or a.ndim == 0 or a.ndim > 255:
        raise UsageError(f"write_idx cannot store dtype {a.dtype} with {a.ndim} dims")
    code = codes[key]
    head = bytes([0, 0, code, a.ndim]) + np.asarray(a.shape, ">u4").tobytes()
    body = np.ascontiguousarray(a, dtype=_IDX_TYPES[code]).tobytes()
    data = head + body
    if Path(path).suffix == ".gz":
        data = gzip.compress(data, mtime=0)
    return files.atomic_write_bytes(path, data)

