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
}

from snnconvert.export.fromrun import export_from_run  # noqa: E402
from snnconvert.export.manifest import LAYER_FIELDS, MANIFEST_FIELDS, TABLE_FIELDS  # noqa: E402
from snnconvert.export.verify import Mismatch, VerifyResult, verify  # noqa: E402
from snnconvert.export.writer import export_network  # noqa: E402

__all__ = ["SCHEMA", "MANIFEST_FIELDS", "LAYER_FIELDS", "TABLE_FIELDS", "export_network", "export_from_run", "verify",
           "VerifyResult", "Mismatch"]
