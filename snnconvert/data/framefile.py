"""Frame files (simulate --data, export --inputs): frames as input payloads plus labels, validated."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError

def load_frames_file(path, input_shape, input_q: int, n_classes: int, need_labels: bool = True):
    """(x int64 (N, C, H, W), y int64 (N,) or None) from a frames NPZ: array `x` holds the frames as
    input payloads (integers in [0, input_q]; an integer dtype, or floats holding whole numbers, as the
    data set's frames do) and array `y` the class labels (an integer dtype, values in [0, n_classes)).

    Every failure is a FormatError naming the file and the array.
    """
    from snnconvert.files import load_npz
    path = Path(path)
    z = load_npz(path)
    shape = "(N, " + ", ".join(map(str, input_shape)) + ")"
    for k, what in (("x", f"frames as input payloads 0..{input_q}, shape {shape}"), ("y", "class labels, shape (N,)")):
        if k not in z and (k == "x" or need_labels):
            raise FormatError(f"{path}: array '{k}' ({what}) is missing; found {sorted(z)} "
                              f"(a frames file holds the arrays x and y)")
    x = z["x"]
    if x.ndim != 4 or tuple(x.shape[1:]) != tuple(input_shape) or x.shape[0] == 0:
        raise FormatError(f"{path}: array 'x' has shape {x.shape}; the network needs {shape} with N >= 1")
    if x.dtype.kind == "f":
        if not np.all(np.isfinite(x)) or np.any(x != np.round(x)):
            raise FormatError(f"{path}: array 'x' must hold whole-number input payloads in [0, {input_q}]; "
                              f"got fractions or non-finite values")
    elif x.dtype.kind not in "iub":
        raise FormatError(f"{path}: array 'x' must hold integer input payloads; got dtype {x.dtype}")
    lo, hi = x.min(), x.max()
    if lo < 0 or hi > input_q:
        raise FormatError(f"{path}: array 'x' must hold input payloads in [0, {input_q}]; got values in "
                          f"[{lo:g}, {hi:g}]")
    y = z.get("y")
    if y is not None:
        if y.dtype.kind not in "iu":
            raise FormatError(f"{path}: array 'y' must hold integer class labels; got dtype {y.dtype}")
        if y.shape != (x.shape[0],):
            raise FormatError(f"{path}: array 'y' must hold one label per frame, shape ({x.shape[0]},); "
                              f"got shape {y.shape}")
        bad = np.flatnonzero((y < 0) | (y >= n_classes))
        if bad.size:
            raise FormatError(f"{path}: array 'y' must hold class labels in [0, {n_classes - 1}]; got "
                              f"{int(y[bad[0]])} at index {int(bad[0])}")
        y = y.astype(np.int64)
    return x.astype(np.int64), y

