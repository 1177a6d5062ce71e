"""Atomic file output, safe loading and fingerprints.

Every artifact is written to a temp file in the same folder and then renamed over the target,
so a crash (or Ctrl-C) never leaves a half-written file behind. Loading never executes code:
`np.load(allow_pickle=False)`, `torch.load(weights_only=True)`, JSON.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import pickle
import re
import sys
import tempfile
import warnings
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from snnconvert.errors import FormatError, UsageError


def atomic_write_bytes(path, data: bytes, durable: bool = True) -> Path:
    """Write `data` to `path` via temp file + fsync + rename. Parent folders are created.

    durable=False skips the fsync (readers still never see a partial file): for writers of many
    small files that sync once at the end (os.sync) before writing the file that marks them complete.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~_umask())  # mkstemp makes files owner-only; artifacts are for sharing
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_text(path, text: str) -> Path:
    return atomic_write_bytes(path, text.encode("utf-8"))


def atomic_write_json(path, obj: Any) -> Path:
    """JSON with sorted keys and a trailing newline, so equal content gives equal bytes."""
    return atomic_write_text(path, json.dumps(obj, indent=2, sort_keys=True, default=_json_default) + "\n")


def npz_bytes(arrays: dict) -> bytes:
    """Uncompressed NPZ in memory; zip members carry numpy's fixed date, so equal arrays give equal bytes.
    Object arrays are refused (files are data, never code)."""
    for k, a in arrays.items():
        if np.asarray(a).dtype == object:
            raise TypeError(f"array '{k}' has dtype object; NPZ artifacts hold plain numeric arrays only")
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def atomic_save_npz(path, **arrays) -> Path:
    """Uncompressed NPZ (`npz_bytes`) written atomically."""
    return atomic_write_bytes(path, npz_bytes(arrays))


def atomic_torch_save(obj, path) -> Path:
    import torch
    buf = io.BytesIO()
    torch.save(obj, buf)
    return atomic_write_bytes(path, buf.getvalue())


def load_json(path) -> Any:
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise FormatError(f"{path}: not valid JSON ({exc})") from None


def load_npz(path) -> dict[str, np.ndarray]:
    """Load every array of an NPZ into memory; pickled content is refused."""
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    with open(path, "rb") as fh:
        magic = fh.read(4)
    if magic not in (b"PK\x03\x04", b"PK\x05\x06"):   # zip local header / empty archive (ZIP format)
        raise FormatError(f"{path}: not an NPZ archive (it does not start with a zip header)")
    try:
        _check_npz_sizes(path)
        with np.load(path, allow_pickle=False) as z:
            return {k: z[k] for k in z.files}
    except (ValueError, OSError, EOFError, KeyError, zipfile.BadZipFile) as exc:
        if isinstance(exc, FormatError):
            raise
        raise FormatError(f"{path}: not a readable NPZ file ({type(exc).__name__}: {exc})") from None


# Deflate cannot expand data by more than about 1032:1 (RFC 1951: a 258-byte match per 2 bits at best).
_DEFLATE_MAX_RATIO = 1032


def _check_npz_sizes(path: Path) -> None:
    """Every array's declared size (its .npy header shape x item size) must fit in the bytes the archive
    really holds for it, so a header can never make the reader allocate more than the file can fill."""
    real = path.stat().st_size
    with zipfile.ZipFile(path) as zf:
        for info in zf.infolist():
            stored = info.compress_size if info.compress_type == zipfile.ZIP_STORED else \
                info.compress_size * _DEFLATE_MAX_RATIO
            limit = min(info.file_size, stored, real * _DEFLATE_MAX_RATIO)
            with zf.open(info) as fh:
                version = np.lib.format.read_magic(fh)
                read = np.lib.format.read_array_header_1_0 if version == (1, 0) else \
                    np.lib.format.read_array_header_2_0
                shape, _, dtype = read(fh)
            if dtype.hasobject:
                raise FormatError(f"{path}: array {info.filename!r} holds Python objects; NPZ files here hold plain "
                                  f"numbers only (refused, nothing in it was run)")
            need = int(np.prod(shape, dtype=object)) * dtype.itemsize
            if need > limit:
                raise FormatError(f"{path}: array {info.filename!r} declares shape {tuple(shape)} ({need} bytes) but the "
                                  f"file holds at most {limit} bytes for it")


def load_torch(path):
    """`torch.load(weights_only=True)`: tensors and plain containers only."""
    import torch
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    with open(path, "rb") as fh:
        head = fh.read(4)
    if head[:2] not in (b"PK", b"\x80\x02") and head[:1] != b"\x80":   # a zip archive (torch) or a pickle
        raise FormatError(f"{path}: not a readable checkpoint (neither a torch archive nor a pickle)")
    try:
        with warnings.catch_warnings():      # torch warns about pickle protocols on stderr
            warnings.simplefilter("ignore")
            return torch.load(path, map_location="cpu", weights_only=True)
    except pickle.UnpicklingError:
        raise FormatError(f"{path}: not a snnconvert checkpoint: it holds Python objects or code, which a "
                          f"checkpoint never contains; refused without running any of it") from None
    except Exception as exc:  # torch raises many types for corrupt files
        first = re.sub(r"\x1b\[[0-9;]*m", "", str(exc)).strip().splitlines()[:1] or [""]
        raise FormatError(f"{path}: not a readable checkpoint ({type(exc).__name__}: {first[0][:200]})") from None


def plain_name(relative: str) -> bool:
    """True for a file name without a folder part ("rec1.bin"; not "", ".", ".." or "a/b"): inside
    its folder by construction, unless it names a symlink."""
    return "/" not in relative and "\\" not in relative and relative not in ("", ".", "..")


def resolve_inside(folder, relative: str, what: str = "path") -> Path:
    """Resolve a path listed in an index file; anything escaping `folder` is rejected.

    Fast path (one lstat, no realpath): a plain file name without a folder part, naming a regular
    file (not a symlink) in `folder`, is inside it by construction; everything else is resolved.
    """
    if plain_name(relative):
        import stat as _stat
        target = Path(folder) / relative
        try:
            if _stat.S_ISREG(os.lstat(target).st_mode):
                return target.absolute()
        except OSError:
            pass
    folder = Path(folder).resolve()
    rel = Path(relative)
    if rel.is_absolute():
        raise UsageError(f"{what} '{relative}' is absolute; paths in an index must be relative to {folder}")
    target = (folder / rel).resolve()
    if target != folder and folder not in target.parents:
        raise UsageError(f"{what} '{relative}' escapes the folder {folder}")
    return target


def check_output_path(path, option: str, kind: str = "file") -> Path:
    """Refuse an output path that cannot be written, before any work and without touching it.

    `kind` is "file" (the path is written as a file; its folders may be created) or "folder"
    (the path is a folder that may be created). The nearest existing ancestor must be a folder
    the user can write into; an existing target must be of the right kind.
    """
    path = Path(path)
    label = f"{option} {path}" if option else str(path)
    if path.exists() and path.is_dir() != (kind == "folder"):
        what = "a folder, not a file" if path.is_dir() else "a file, not a folder"
        raise UsageError(f"{label}: cannot write there: {path} is {what}")
    if path.exists():
        ancestor, target = path, path
    else:
        ancestor = path.parent
        while not ancestor.exists() and ancestor != ancestor.parent:
            ancestor = ancestor.parent
        target = ancestor
        if not ancestor.is_dir():
            raise UsageError(f"{label}: cannot write there: {ancestor} is a file, not a folder")
    folder = target if target.is_dir() else target.parent
    if not os.access(folder, os.W_OK | os.X_OK):
        raise UsageError(f"{label}: cannot write there: no permission to write in {folder}")
    return path


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def fingerprint(*items: Any, nested: bool = True) -> str:
    """16 hex digits of SHA-256 over arrays, tensors, dicts and scalars (by value, not identity).

    Arrays hash as dtype, shape and bytes; anything else as its repr. nested=True walks dicts
    (by sorted key), lists and tuples item by item, so arrays inside them hash by value;
    nested=False hashes top-level containers by their repr (the data set fingerprint and the
    recordings cache key use that form, so stored checkpoints and caches keep matching).
    Tensors are hashed as their numpy values; torch is never imported here: a tensor can only
    exist once torch is loaded.
    """
    h = hashlib.sha256()
    for item in items:
        _feed(h, item, nested)
    return h.hexdigest()[:16]


def _feed(h, item, nested: bool = True) -> None:
    torch = sys.modules.get("torch")
    if torch is not None and isinstance(item, torch.Tensor):
        item = item.detach().cpu().numpy()
    if isinstance(item, np.ndarray):
        a = np.ascontiguousarray(item)
        h.update(f"nd{a.dtype.str}{a.shape}".encode())
        h.update(a.tobytes() if a.dtype.hasobject else a.reshape(-1).view(np.uint8))  # the bytes, without a copy
    elif nested and isinstance(item, dict):
        h.update(b"{")
        for k in sorted(item, key=str):
            _feed(h, str(k))
            _feed(h, item[k])
        h.update(b"}")
    elif nested and isinstance(item, (list, tuple)):
        h.update(b"[")
        for x in item:
            _feed(h, x)
        h.update(b"]")
    else:
        h.update(repr(item).encode())


def _json_default(o):
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")
