"""28x28 thin-stroke binary digits made from scikit-learn's 8x8 digits, for the benchmarks.

Each 8x8 digit (values 0..16) is drawn on a 28x28 canvas by one affine map: scale to a 20x20 box
(the digit box of the MNIST layout, common practice), a small rotation, a stroke-size change and a
shift, with cubic spline interpolation (scipy.ndimage.affine_transform). The brightest k pixels are
set, k drawn in 100..150 (about the set pixels of a binarized 28x28 handwritten digit, common
practice), so strokes stay thin: one spike per set pixel.

The held-out split is made on the ORIGINAL images: train, validation and test images are drawn from
disjoint sets of the 1,797 originals (60 / 10 / 30 %), so no test image is a variant of a training
image. Nothing here is tuned on the test split.
"""

from __future__ import annotations

import hashlib
from types import SimpleNamespace

import numpy as np

SIDE = 28
BOX = 20          # the digit's box inside the frame (MNIST layout: 20x20 in 28x28, common practice)


def _draw(img8: np.ndarray, rng: np.random.Generator, augment: bool) -> np.ndarray:
    """One 8x8 image -> a (28, 28) uint8 image of 0/1."""
    from scipy import ndimage
    ang = np.deg2rad(rng.uniform(-12, 12)) if augment else 0.0
    scale = rng.uniform(0.85, 1.1) if augment else 1.0
    shift = rng.uniform(-2, 2, size=2) if augment else np.zeros(2)
    # output pixel o -> input pixel i = A (o - c_out - shift) + c_in, A = R(ang) / (zoom * scale)
    zoom = BOX / 8.0
    c, s = np.cos(ang), np.sin(ang)
    A = np.array([[c, -s], [s, c]]) / (zoom * scale)
    c_out = np.array([(SIDE - 1) / 2.0, (SIDE - 1) / 2.0]) + shift
    c_in = np.array([3.5, 3.5])
    off = c_in - A @ c_out
    big = ndimage.affine_transform(img8.astype(np.float64), A, offset=off, output_shape=(SIDE, SIDE), order=3,
                                   mode="constant", cval=0.0)
    k = int(rng.integers(100, 151))
    thr = np.partition(big.ravel(), -k)[-k]
    return (big >= max(thr, 1e-6)).astype(np.uint8)


def make(n_train: int = 8000, n_val: int = 800, n_test: int = 2000, seed: int = 0):
    """(images, labels) per split: {"train": (X, y), "val": ..., "test": ...}, X (N, 28, 28) uint8 0/1."""
    from sklearn.datasets import load_digits
    d = load_digits()
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(d.target))
    a, b = int(0.6 * len(order)), int(0.7 * len(order))
    groups = {"train": order[:a], "val": order[a:b], "test": order[b:]}
    out = {}
    for split, n in (("train", n_train), ("val", n_val), ("test", n_test)):
        src = groups[split]
        pick = np.concatenate([src, rng.choice(src, size=max(0, n - len(src)), replace=True)])[:n]
        X = np.stack([_draw(d.images[i], rng, augment=True) for i in pick])       # (N, 28, 28)
        out[split] = (X, d.target[pick].astype(np.int64))
    return out


def dataset(n_train: int = 8000, n_val: int = 800, n_test: int = 2000, seed: int = 0):
    """The splits as a data set for `train.train` / `convert_and_measure` (frames (N, 1, 28, 28) float32)."""
    sp = make(n_train, n_val, n_test, seed)
    f = {k: (v[0][:, None].astype(np.float32), v[1]) for k, v in sp.items()}
    h = hashlib.sha256()
    for k in ("train", "val", "test"):
        h.update(f[k][0].tobytes())
        h.update(f[k][1].tobytes())
    return SimpleNamespace(train=f["train"], val=f["val"], test=f["test"], classes=[str(i) for i in range(10)],
                           input_shape=(1, SIDE, SIDE), input_q=1, fingerprint="digits28-" + h.hexdigest()[:16])
