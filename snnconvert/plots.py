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


def save_confusion(cm, classes, path, title: str = "confusion matrix") -> Path:
    """PNG file of a confusion matrix (`confusion_figure`), written atomically."""
    return save_png(confusion_figure(cm, classes, title), path)


def save_training_curves(history: list[dict], path, title: str = "training") -> Path:
    """PNG: loss (left) and accuracy (right) per epoch, train and validation; aware epochs shaded."""
    plt = pyplot()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(9, 3.4), dpi=100)
    ep = [i + 1 for i in range(len(history))]
    a1.plot(ep, [h["train_loss"] for h in history], label="train")
    a1.plot(ep, [h["val_loss"] if h["val_loss"] is not None else float("nan") for h in history], label="validation")
    a2.plot(ep, [100 * h["train_accuracy"] for h in history], label="train")
    a2.plot(ep, [100 * h["val_accuracy"] if h["val_accuracy"] is not None else float("nan") for h in history],
            label="validation")
    aware = [e for e, h in zip(ep, history) if h["phase"] == "aware"]
    for ax in (a1, a2):
        if aware:
            ax.axvspan(aware[0] - 0.5, aware[-1] + 0.5, color="orange", alpha=0.15, label="conversion-aware")
        ax.set_xlabel("epoch")
        ax.xaxis.get_major_locator().set_params(integer=True)  # epochs are whole numbers
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
    a1.set_ylabel("cross-entropy loss")
    a2.set_ylabel("accuracy (%)")
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return save_png(fig, path)


def draw_rate(ax, trace: dict, labels=None, colors=None) -> None:
    """The front end's rate trace on `ax`: events per bin (steps), the opening and closing thresholds
    per bin (hi_k, lo_k; constant for absolute thresholds) and each window shaded, with its label
    (e.g. the decision) above it. trace: `frontend.trace` (or any dict with t0, bin_us, counts,
    windows and upper/lower None). colors: one matplotlib colour per window (default orange)."""
    import numpy as np
    c = np.asarray(trace["counts"])
    edges_ms = (trace["t0"] + np.arange(c.size + 1) * trace["bin_us"]) / 1e3
    ax.stairs(c, edges_ms, color="k", lw=0.8, label=f"events per {trace['bin_us']} us bin")
    top = float(c.max()) if c.size else 1.0
    if trace.get("upper") is not None and c.size:
        ax.stairs(trace["upper"], edges_ms, baseline=None, color="tab:red", ls="--", lw=1.2, label="opens at (upper)")
        ax.stairs(trace["lower"], edges_ms, baseline=None, color="tab:blue", ls=":", lw=1.2,
                  label="stays open at (lower)")
        top = max(top, float(np.max(trace["upper"])))
    for i, (s, e) in enumerate(np.asarray(trace["windows"]).reshape(-1, 2)):
        col = colors[i] if colors is not None else "tab:orange"
        ax.axvspan(s / 1e3, e / 1e3, color=col, alpha=0.3, lw=0, label="window" if i == 0 and colors is None else None)
        ax.axvline(s / 1e3, color=col, lw=1.0, alpha=0.8)  # visible even when the window is a sliver of the axis
        if labels is not None:  # two rows of labels, alternating, so neighbours do not overlap
            ax.text(s / 1e3, top * (1.6 if i % 2 == 0 else 5.0), str(labels[i]), ha="center", va="bottom",
                    fontsize=8, color=col, fontweight="bold", clip_on=True)
    ax.set_yscale("symlog", linthresh=1.0)
    ax.set_ylim(0, max(top, 1.0) * (40 if labels is not None else 4))
    ax.set_xlabel("time (ms)")
    ax.set_ylabel("events per bin (log above 1)")
    ax.legend(fontsize=7, loc="upper right")
