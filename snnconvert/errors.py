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


def check_int(value, name: str, owner: str, lo: int | None = None, hi: int | None = None) -> int:
    """Return `value` as int if it is an int (not bool) within [lo, hi]; else raise UsageError/TypeError."""
    rng = _range_text(lo, hi)
    if isinstance(value, bool) or not isinstance(value, (int,)) and not _is_np_int(value):
        raise UsageError(f"The '{name}' parameter of {owner} must be an int{rng}. Got {_fmt(value)} instead.")
    value = int(value)
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        raise UsageError(f"The '{name}' parameter of {owner} must be an int{rng}. Got {_fmt(value)} instead.")
    return value


def check_float(value, name: str, owner: str, lo: float | None = None, hi: float | None = None,
                lo_open: bool = False, hi_open: bool = False) -> float:
    """Return `value` as float if it is a real number within the interval; ints are accepted."""
    rng = _range_text(lo, hi, lo_open, hi_open)
    if isinstance(value, bool) or not isinstance(value, (int, float)) and not _is_np_number(value):
        raise UsageError(f"The '{name}' parameter of {owner} must be a float{rng}. Got {_fmt(value)} instead.")
    v = float(value)
    bad = math.isnan(v)
    if lo is not None:
        bad |= v <= lo if lo_open else v < lo
    if hi is not None:
        bad |= v >= hi if hi_open else v > hi
    if bad:
        raise UsageError(f"The '{name}' parameter of {owner} must be a float{rng}. Got {_fmt(value)} instead.")
    return v


def check_bool(value, name: str, owner: str) -> bool:
    if not isinstance(value, bool):
        raise UsageError(f"The '{name}' parameter of {owner} must be a bool. Got {_fmt(value)} instead.")
    return value


def check_str(value, name: str, owner: str) -> str:
    if not isinstance(value, str):
        raise UsageError(f"The '{name}' parameter of {owner} must be a str. Got {_fmt(value)} instead.")
    return value


def check_choice(value, name: str, owner: str, choices: Sequence[str]) -> str:
    """Return `value` if it is one of `choices`; the error lists the valid choices."""
    if not isinstance(value, str) or value not in choices:
        opts = ", ".join(repr(c) for c in choices)
        raise UsageError(
            f"The '{name}' parameter of {owner} must be one of {opts}. Got {_fmt(value)} instead.")
    return value


def closest(word: str, candidates: Iterable[str]) -> str | None:
    """The closest candidate to `word`, for "did you mean ...?" hints, or None."""
    hits = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.5)
    return hits[0] if hits else None


def unknown_key_message(key: str, section: str, valid: Iterable[str]) -> str:
    valid = sorted(valid)
    hint = closest(key, valid)
    tail = f" Did you mean '{hint}'?" if hint else f" Valid keys: {', '.join(valid)}."
    return f"Unknown key '{key}' in section [{section}].{tail}"


def _range_text(lo, hi, lo_open=False, hi_open=False) -> str:
    if lo is None and hi is None:
        return ""
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
