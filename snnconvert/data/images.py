"""Images shown to the simulated sensor: scikit-learn's bundled digits, resized."""

from __future__ import annotations

import numpy as np

def digits_images(sensor_side: int) -> tuple[np.ndarray, np.ndarray]:
    """scikit-learn's digits as (1797, S, S) float64 in [0, 1] and labels (1797,) int64."""
    from sklearn.datasets import load_digits
    d = load_digits()
    return _resize(d.images / 16.0, sensor_side), d.target.astype(np.int64)


def _resize(images: np.ndarray, size: int) -> np.ndarray:
    """(N, H, W) -> (N, size, size), bilinear with corners aligned, clipped to [0, 1]."""
    from scipy import ndimage
    n, h, w = images.shape
    if (h, w) == (size, size):
        return np.clip(images, 0, 1)
    return np.clip(ndimage.zoom(images, (1, size / h, size / w), order=1, grid_mode=False), 0, 1)

