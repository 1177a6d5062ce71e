"""Recipe section [sweep]: the bit-width grid, the codings and how the points run (torch-free).

Grid syntax (recipe and CLI): ranges "2-8", lists "2,4,8", a mix "2-4,8", TOML int lists, one int.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from snnconvert.errors import UsageError
from snnconvert.intnet import CODINGS
from snnconvert.schema import Key
from snnconvert.settings import Section

# Bounds of the grids; the converter enforces the same ones per point.
WEIGHT_BITS_RANGE = (2, 16)
PAYLOAD_BITS_RANGE = (1, 8)

_ITEM = re.compile(r"^\s*(\d+)\s*(?:-\s*(\d+)\s*)?$")


def parse_grid(value, name: str, owner: str = "sweep", lo: int = 1, hi: int = 64) -> list[int]:
    """Grid text or int list -> sorted unique ints, e.g. "2-4,8" -> [2, 3, 4, 8].

    Edge cases: a single int is a one-point grid; a reversed range ("8-2") or an empty grid is
    an error; duplicates collapse.
    """
    bad = UsageError(
        f"The '{name}' parameter of {owner} must be a grid of ints in [{lo}, {hi}] "
        f"like '2-8', '2,4,8' or [2, 4, 8]. Got {value!r} instead.")
    out: set[int] = set()
    if isinstance(value, bool):
        raise bad
    if isinstance(value, int):
        items = [value]
    elif isinstance(value, (list, tuple)):
        items = list(value)
    elif isinstance(value, str):
        items = [s for s in value.split(",")]
    else:
        raise bad
    for item in items:
        if isinstance(item, bool):
            raise bad
        if isinstance(item, int):
            a = b = int(item)
        elif isinstance(item, str):
            m = _ITEM.match(item)
            if not m:
                raise bad
            a = int(m.group(1))
            b = int(m.group(2)) if m.group(2) is not None else a
        else:
            raise bad
        if a > b or a < lo or b > hi:
            raise bad
        out.update(range(a, b + 1))
    if not out:
        raise bad
    return sorted(out)


def parse_codings(value, name: str = "codings", owner: str = "sweep") -> list[str]:
    """"payload,ttfs" or ["payload", "ttfs"] -> list in the given order; "" or [] -> [] (= the
    coding of [convert])."""
    opts = ", ".join(repr(c) for c in CODINGS)
    bad = UsageError(f"The '{name}' parameter of {owner} must be a list of codings among {opts} "
                     f"(or '' for the coding of [convert]). Got {value!r} instead.")
    if isinstance(value, str):
        items = [s.strip() for s in value.split(",") if s.strip()]
    elif isinstance(value, (list, tuple)) and all(isinstance(s, str) for s in value):
        items = [s.strip() for s in value]
    else:
        raise bad
    out: list[str] = []
    for s in items:
        if s not in CODINGS:
            raise bad
        if s not in out:
            out.append(s)
    return out


_SCHEDULER = re.compile(r"^(?:local:(\d+)|(?:tcp|tls)://[^\s/:]+:\d+/?)$")


def parse_scheduler(value, name: str = "scheduler", owner: str = "sweep") -> str:
    """'' (this machine's process pool), 'local:N' (a Dask cluster of N worker processes started here,
    N in [1, 256]) or 'tcp://HOST:PORT' / 'tls://HOST:PORT' (a running Dask scheduler)."""
    m = _SCHEDULER.match(value.strip()) if isinstance(value, str) else None
    if isinstance(value, str) and value.strip() == "":
        return ""
    if m is None or (m.group(1) is not None and not 1 <= int(m.group(1)) <= 256):
        raise UsageError(f"The '{name}' parameter of {owner} must be '' (this machine), 'local:N' (N worker "
                         f"processes, 1 to 256) or 'tcp://HOST:PORT' (a running scheduler). Got {value!r} instead.")
    return value.strip()


def _scheduler_validator(value, key: str, section: str) -> str:
    return parse_scheduler(value, key, section)


def _seeds_validator(value, key: str, section: str) -> list[int]:
    """'' or [] -> [] (the recipe seed only); else a grid of seeds, e.g. "0-4"."""
    if value == "" or value == []:
        return []
    return parse_grid(value, key, section, 0, 2**31 - 1)


def _grid_validator(lo: int, hi: int):
    def check(value, key: str, section: str) -> list[int]:
        return parse_grid(value, key, section, lo, hi)
    return check


def _codings_validator(value, key: str, section: str) -> list[str]:
    return parse_codings(value, key, section)


KEYS: dict[str, Key] = {
    "enabled": Key(True, "bool", "the accuracy-vs-bits frontier is what a hardware budget is chosen from"),
    "weight_bits": Key("2-8", "any", "ternary to 8-bit covers the widths small accelerators use",
                       validator=_grid_validator(*WEIGHT_BITS_RANGE)),
    "payload_bits": Key("1-6", "any", "binary spikes to 6-bit payloads (64 ttfs steps) spans the latency range",
                        validator=_grid_validator(*PAYLOAD_BITS_RANGE)),
    "codings": Key("", "any", "empty: sweep only the coding chosen in [convert]; both codings give equal values",
                   validator=_codings_validator),
    "per_channel": Key(False, "bool", "one scale per tensor is what the simplest datapath implements"),
    "aware": Key(False, "bool", "post-training conversion first; aware fine-tuning costs a training run per point"),
    "aware_epochs": Key(2, "int", "a couple of epochs recover most of the loss at low bit-widths", lo=1, hi=1000),
    "jobs": Key(0, "int", "0 = one process per usable core, fewer when memory is short; points are independent",
                lo=0, hi=256),
    "scheduler": Key("", "any", "empty: this machine's process pool; 'local:N' or 'tcp://HOST:PORT' run the points on a "
                     "Dask cluster", validator=_scheduler_validator),
    "seeds": Key("", "any", "empty: the recipe seed only; '0-4' trains one model per seed and judges points on the mean",
                 validator=_seeds_validator),
    "tolerance_pp": Key(0.5, "float", "half a point of accuracy is within run-to-run noise of small test sets",
                        lo=0.0, hi=100.0),
    "test_samples": Key(0, "int", "0 = the whole test split; on large sets a few thousand evenly spaced test samples "
                        "rank the points (each shows its 95 % interval) in a fraction of the time", lo=0),
}


@dataclass(frozen=True)
class SweepSettings(Section):
    """The [sweep] section, checked: the grids as sorted int lists, the codings as a list ([] = the
    coding of [convert]), the flags, the job count (0 = automatic) and the tolerance in pp."""

    SECTION = "sweep"
    KEYS = KEYS

    enabled: bool
    weight_bits: list[int]
    payload_bits: list[int]
    codings: list[str]
    per_channel: bool
    aware: bool
    aware_epochs: int
    jobs: int
    scheduler: str
    seeds: list[int]
    tolerance_pp: float
    test_samples: int
