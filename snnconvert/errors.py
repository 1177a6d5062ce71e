"""User-facing errors and the one validation message template.

Every check on user input goes through these helpers so that every message reads the same:

    The 'payload_bits' parameter of convert must be an int in [1, 8]. Got 0 instead.

`UsageError` means "the user gave us something wrong" (CLI: one line `error: ...`, exit 2).
Anything else escaping to the CLI is a bug (exit 1).
"""

from __future__ import annotations

import difflib
import math
from typing import Iterable, Sequence


class UsageError(ValueError):
    """Bad user input: a value, a file or a field. The message is one line and names the culprit."""


class FormatError(UsageError):
    """A file exists but its content is not valid (truncated, corrupt, wrong columns)."""


def _fmt(value) -> str:
    return repr(value)


def fail(name: str, owner: str, must: str, got, what: str = "parameter", error: type = UsageError):
    """Raise `error` with the one template: The '<name>' <what> of <owner> must be <must>. Got <got> instead.

    `what` is "parameter" for arguments and recipe keys, "field" or "array" for values read from a
    file (then `owner` names the file and `error` is FormatError).
    """
    raise error(f"The '{name}' {what} of {owner} must be {must}. Got {got} instead.")


def check_int(value, name: str, owner: str, lo: int | None = None, hi: int | None = None,
              what: str = "parameter", error: type = UsageError) -> int:
    """Return `value` as int if it is an int (not bool) within [lo, hi]; else raise UsageError/TypeError."""
    rng = _range_text(lo, hi)
    if isinstance(value, bool) or not isinstance(value, (int,)) and not _is_np_int(value):
        fail(name, owner, f"an int{rng}", _fmt(value), what, error)
    value = int(value)
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        fail(name, owner, f"an int{rng}", _fmt(value), what, error)
    return value


def check_float(value, name: str, owner: str, lo: float | None = None, hi: float | None = None,
                lo_open: bool = False, hi_open: bool = False, what: str = "parameter",
                error: type = UsageError) -> float:
    """Return `value` as float if it is a real number within the interval; ints are accepted."""
    rng = _range_text(lo, hi, lo_open, hi_open)
    if isinstance(value, bool) or not isinstance(value, (int, float)) and not _is_np_number(value):
        fail(name, owner, f"a float{rng}", _fmt(value), what, error)
    v = float(value)
    bad = math.isnan(v)
    if lo is not None:
        bad |= v <= lo if lo_open else v < lo
    if hi is not None:
        bad |= v >= hi if hi_open else v > hi
    if bad:
        fail(name, owner, f"a float{rng}", _fmt(value), what, error)
    return v


def check_bool(value, name: str, owner: str, what: str = "parameter", error: type = UsageError) -> bool:
    if not isinstance(value, bool):
        fail(name, owner, "a bool", _fmt(value), what, error)
    return value


def check_str(value, name: str, owner: str, what: str = "parameter", error: type = UsageError) -> str:
    if not isinstance(value, str):
        fail(name, owner, "a str", _fmt(value), what, error)
    return value


def check_choice(value, name: str, owner: str, choices: Sequence[str], what: str = "parameter",
                 error: type = UsageError) -> str:
    """Return `value` if it is one of `choices`; the error lists the valid choices."""
    if not isinstance(value, str) or value not in choices:
        opts = ", ".join(repr(c) for c in choices)
        fail(name, owner, f"one of {opts}", _fmt(value), what, error)
    return value


def check_shape(value, name: str, owner: str, length: int | None = None, lo: int = 1, what: str = "field",
                error: type = UsageError) -> tuple:
    """Return `value` as a tuple of ints if it is a list of `length` ints, each >= lo (lengths 1..4 if None)."""
    n = f"{length} ints" if length is not None else "1 to 4 ints"
    must = f"a list of {n} >= {lo}"
    ok = isinstance(value, (list, tuple)) and (len(value) == length if length is not None else 1 <= len(value) <= 4)
    if not ok or any(isinstance(v, bool) or not (isinstance(v, int) or _is_np_int(v)) or v < lo for v in value):
        fail(name, owner, must, _fmt(value), what, error)
    return tuple(int(v) for v in value)


def check_array(a, name: str, owner: str, shape: tuple | None = None, lo: int | None = None, hi: int | None = None,
                error: type = UsageError):
    """Return `a` as int64 if it is an integer array of `shape` with every value in [lo, hi].

    The message names the array, the owner (a file) and what was found (dtype, shape or the
    first value out of range), in the one template.
    """
    import numpy as np
    want = "an int array" + (f" of shape {tuple(shape)}" if shape is not None else "") + _range_text(lo, hi, words=True)
    if not isinstance(a, np.ndarray) or a.dtype.kind not in "iu":
        got = f"{a.dtype} values" if isinstance(a, np.ndarray) else _fmt(a)
        fail(name, owner, want, got, "array", error)
    if shape is not None and tuple(a.shape) != tuple(shape):
        fail(name, owner, want, f"shape {tuple(a.shape)}", "array", error)
    if a.dtype.kind == "u" and a.size and int(a.max()) > np.iinfo(np.int64).max:
        fail(name, owner, want, f"the value {int(a.max())}", "array", error)
    a = a.astype(np.int64)
    if a.size:
        bad = np.zeros(a.shape, bool)
        if lo is not None:
            bad |= a < lo
        if hi is not None:
            bad |= a > hi
        if bad.any():
            fail(name, owner, want, f"the value {int(a.reshape(-1)[np.flatnonzero(bad.reshape(-1))[0]])}", "array",
                 error)
    return a


def closest(word: str, candidates: Iterable[str]) -> str | None:
    """The closest candidate to `word`, for "did you mean ...?" hints, or None."""
    hits = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.5)
    return hits[0] if hits else None


def unknown_key_message(key: str, section: str, valid: Iterable[str]) -> str:
    valid = sorted(valid)
    hint = closest(key, valid)
    tail = f" Did you mean '{hint}'?" if hint else f" Valid keys: {', '.join(valid)}."
    return f"Unknown key '{key}' in section [{section}].{tail}"


def _range_text(lo, hi, lo_open=False, hi_open=False, words=False) -> str:
    if lo is None and hi is None:
        return ""
    if words:
        return " with values" + _range_text(lo, hi, lo_open, hi_open)
    if hi is None:
        return f" {'>' if lo_open else '>='} {lo}"
    if lo is None:
        return f" {'<' if hi_open else '<='} {hi}"
    return f" in {'(' if lo_open else '['}{lo}, {hi}{')' if hi_open else ']'}"


def _is_np_int(v) -> bool:
    try:
        import numpy as np
        return isinstance(v, np.integer)
    except ImportError:  # pragma: no cover
        return False


def _is_np_number(v) -> bool:
    try:
        import numpy as np
        return isinstance(v, (np.integer, np.floating))
    except ImportError:  # pragma: no cover
        return False
