"""Models in the open ONNX format: read a frame CNN built elsewhere (`onnx_read`), write the
project's float model (`onnx_write`), and the `import` job that turns an ONNX file into a train
folder (`importer`). Needs the optional packages onnx and onnxruntime (`pip install 'snnconvert[onnx]'`).
"""

from __future__ import annotations

import importlib.util

from snnconvert.errors import UsageError

ONNX_EXTRA = "pip install 'snnconvert[onnx]'"


def missing_packages() -> list[str]:
    """The optional ONNX packages this install lacks (names as pip knows them)."""
    return [name for name in ("onnx", "onnxruntime") if importlib.util.find_spec(name) is None]


def require_onnx(what: str) -> None:
    """Raise a one-line UsageError naming what to install when onnx or onnxruntime is missing."""
    missing = missing_packages()
    if missing:
        raise UsageError(f"{what} needs {' and '.join(missing)}, which this install lacks; install with: {ONNX_EXTRA}")
