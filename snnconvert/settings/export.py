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
    "coe_mif": Key(True, "bool", "Vivado (.coe) and Quartus (.mif) load block-RAM images directly; small text copies of the .mem words"),
    "pack_bits": Key(0, "int", "0 = one table word per memory word, as the .mem files; e.g. 32 or 36 packs narrow words to a block-RAM width",
                     lo=0, hi=4096),
    "verilog": Key(False, "bool", "off: the Verilog model and testbench are for hardware bring-up; the .mem files and vectors suffice otherwise"),
    "frontend_vectors": Key(0, "int", "0: front-end vectors only serve hardware that builds the front end too; a few test recordings then cover its windows and gate",
                            lo=0, hi=100000),
}


@dataclass(frozen=True)
class ExportSettings(Section):
    """The [export] section, checked."""

    SECTION = "export"
    KEYS = KEYS

    vectors: int
    csv: bool
    intel_hex: bool
    coe_mif: bool
    pack_bits: int
    verilog: bool
    frontend_vectors: int
