"""Recipe section [hardware]: the datapath the cost model estimates (torch-free).

The model itself (stages, lanes, scan, memories, block packing, energy) is in `snnconvert.cost`;
every figure it gives is an estimate.
"""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.errors import check_int, fail
from snnconvert.schema import Key
from snnconvert.settings import Section


def _lanes_validator(value, key: str, section: str):
    """One int >= 0 for every conv/dense layer (0 = one lane per output channel), or a list of them,
    one per conv/dense layer in order."""
    if isinstance(value, (list, tuple)):
        if not value:
            fail(key, section, "an int >= 0 or a non-empty list of them (one per conv/dense layer)", "[]")
        return [check_int(v, f"{key}[{i}]", section, 0, 4096) for i, v in enumerate(value)]
    return check_int(value, key, section, 0, 4096)


KEYS: dict[str, Key] = {
    "clock_mhz": Key(100.0, "float", "100 MHz is met without effort by a small event datapath on current FPGAs",
                     lo=0.001, hi=10000.0),
    "lanes": Key(0, "any", "0 = one accumulate lane per output channel: each lane owns its channel's potentials "
                           "(an int for every layer, or a list with one per conv/dense layer)",
                 validator=_lanes_validator),
    "scan_lanes": Key(0, "any", "0 = as many as the layer's lanes: each lane scans its own potential bank at "
                                "window close (an int, or a list with one per conv/dense layer)",
                      validator=_lanes_validator),
    "pipelined": Key(False, "bool", "one sample at a time is the simplest controller; true overlaps the layers on "
                                    "successive samples, so the slowest layer sets the throughput"),
    "block_kbits": Key(18, "int", "18 Kbit is the block RAM half most FPGA families offer (36 Kbit = two halves)",
                       lo=1, hi=1024),
    "register_bits": Key(256, "int", "memories this small go into registers or LUT RAM rather than a whole block "
                                     "RAM (common practice); 0 puts every memory in blocks", lo=0, hi=1 << 20),
}


@dataclass(frozen=True)
class HardwareSettings(Section):
    """The [hardware] section, checked: clock, lanes (int or per-layer list), scan lanes, pipelining,
    block size and the register threshold of the cost model."""

    SECTION = "hardware"
    KEYS = KEYS

    clock_mhz: float
    lanes: int | list[int]
    scan_lanes: int | list[int]
    pipelined: bool
    block_kbits: int
    register_bits: int
