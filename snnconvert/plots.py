"""One home for figures: the headless backend, PNG files written atomically, and PNGs inlined in HTML.

Every stage that draws (frames, training curves, confusion matrices, sweeps, the report) gets pyplot
from `pyplot()` and writes through `save_png` or `png_data_uri`, so backend, resolution and the
atomic write are set in one place.
"""

from __future__ import annotations

import base64
import io
from pathlib import Path

DPI = 110  # sharp enough to read 8-pixel tick labels, small enough to embed a dozen figures in a report


def pyplot():
    """matplotlib.pyplot on the Agg backend (no display needed, same pixels on every machine)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def png_bytes(fig, dpi: int = DPI) -> bytes:
    """The figure as PNG bytes, tightly cropped; the figure is closed afterwards."""
    plt = pyplot()
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight")
    finally:
        plt.close(fig)
    return buf.getvalue()


def save_png(fig, path, dpi: int = DPI) -> Path:
    """Write the figure to `path` as PNG, atomically (temp file + rename); closes the figure."""
    from snnconvert.files import atomic_write_bytes
    return atomic_write_bytes(path, png_bytes(fig, dpi))


def png_data_uri(fig, dpi: int = 100) -> str:
    """The figure as a `data:image/png;base64,...` URI for a self-contained HTML page; closes it."""
    return "data:image/png;base64," + base64.b64encode(png_bytes(fig, dpi)).decode("ascii")
