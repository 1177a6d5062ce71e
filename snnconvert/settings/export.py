"""Recipe section [export]: what the hardware export writes besides the tables (torch-free)."""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.schema import Key
from snnconvert.settings import Section

KEYS: dict[str, Key] = {
    "vectors": Key(16, "int", "16 samples exercise every class of a small test set yet keep the golden files small enough to diff by hand",
                   lo=0, hi=100000),
    "csv": Key(True, "bool", "CSV tables and per-layer vector files are what testbench scripts and spreadsheets read most easily"),
    "intel_hex": Key(False, "bool", "off: $readmemh files serve every HDL simulator; Intel HEX only for tools that load ROMs from it"),
}


@dataclass(frozen=True)
class ExportSettings(Section):
    """The [export] section, checked."""

    SECTION = "export"
    KEYS = KEYS

    vectors: int
    csv: bool
    intel_hex: bool
