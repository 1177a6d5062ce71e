"""Hardware export: manifest, Verilog memory tables, golden vectors, and `verify`.

The export folder stands on its own: a hardware team needs nothing else to implement the
integer network and to check their implementation event for event.
"""

from __future__ import annotations

from snnconvert.export.fromrun import export_from_run  # noqa: E402
from snnconvert.export.manifest import LAYER_FIELDS, MANIFEST_FIELDS, TABLE_FIELDS  # noqa: E402
from snnconvert.export.verify import Mismatch, VerifyResult, verify  # noqa: E402
from snnconvert.export.writer import export_network  # noqa: E402

__all__ = ["MANIFEST_FIELDS", "LAYER_FIELDS", "TABLE_FIELDS", "export_network", "export_from_run", "verify",
           "VerifyResult", "Mismatch"]
