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


def confusion_figure(cm, classes, title: str = "confusion matrix"):
    """The one confusion-matrix figure: rows = true class, columns = predicted, counts in the non-zero
    cells (white on the darker half). Training, conversion and the report all draw it here."""
    import numpy as np
    plt = pyplot()
    cm = np.asarray(cm)  # (classes, classes)
    n = cm.shape[0]
    fig, ax = plt.subplots(figsize=(1.2 + 0.45 * n, 1.0 + 0.45 * n), dpi=100)
    ax.imshow(cm, cmap="Blues")
    hi = cm.max() if cm.size else 0
    for i in range(n):
        for j in range(cm.shape[1]):
            if cm[i, j]:
                ax.text(j, i, str(int(cm[i, j])), ha="center", va="center", fontsize=8,
                        color="white" if cm[i, j] > hi / 2 else "black")
    labels = [str(c) for c in classes]
    ax.set_xticks(range(cm.shape[1]), labels[:cm.shape[1]])
    ax.set_yticks(range(n), labels[:n])
    ax.set_xlabel("predicted")
    ax.set_ylabel("true")
    ax.set_title(title, fontsize=9)
    return fig
