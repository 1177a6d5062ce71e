"""Hardware export: manifest, Verilog memory tables, golden vectors, and `verify`.

The export folder stands on its own: a hardware team needs nothing else to implement the
integer network and to check their implementation event for event.
"""

from __future__ import annotations

from snnconvert.schema import Key

# Recipe section [export].
SCHEMA: dict[str, Key] = {
    "vectors": Key(16, "int", "16 samples exercise every class of a small test set yet keep the golden files small enough to diff by hand",
                   lo=0, hi=100000),
    "csv": Key(True, "bool", "CSV tables and per-layer vector files are what testbench scripts and spreadsheets read most easily"),
    "intel_hex": Key(False, "bool", "off: $readmemh files serve every HDL simulator; Intel HEX only for tools that load ROMs from it"),
    "coe_mif": Key(True, "bool", "Vivado (.coe) and Quartus (.mif) load block-RAM images directly; small text copies of the .mem words"),
    "pack_bits": Key(0, "int", "0 = one table word per memory word, as the .mem files; e.g. 32 or 36 packs narrow words to a block-RAM width",
                     lo=0, hi=4096),
    "verilog": Key(False, "bool", "off: the Verilog model and testbench are for hardware bring-up; the .mem files and vectors suffice otherwise"),
}

from snnconvert.export.fromrun import export_from_run  # noqa: E402
from snnconvert.export.manifest import LAYER_FIELDS, MANIFEST_FIELDS, TABLE_FIELDS  # noqa: E402
from snnconvert.export.verify import Mismatch, VerifyResult, verify  # noqa: E402
from snnconvert.export.writer import export_network  # noqa: E402

__all__ = ["SCHEMA", "MANIFEST_FIELDS", "LAYER_FIELDS", "TABLE_FIELDS", "export_network", "export_from_run", "verify",
           "VerifyResult", "Mismatch"]
