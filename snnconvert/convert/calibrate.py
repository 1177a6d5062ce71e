"""Activation ranges of the folded float model, from a deterministic calibration subset.

    r_l = max(x_l)                 rule "max"
    r_l = percentile_Q(x_l)        rule "percentile:Q" (99.9 by default; Rueckauer et al. 2017)
    r_l = c * mean(x_l)            rule "mean" with c (the start of a low-bit clip range, `aware_start_ranges`)

This is the one range statistic of the project: the converter calibrates with it, and
conversion-aware training starts its clip ranges from it (`hidden_ranges`).
The statistic is taken over the positive activations only: zeros send no spike and carry no
range information, and ReLU layers are often more than half zeros, which would pull a percentile
down to values that clip ordinary activity. The output layer's range is taken over its positive
logits (it only matters for the ttfs early decision).
Dead layer: a layer with no positive value has r = 0, for both users. quantize.py turns it into a
silent layer (M = 0); conversion-aware training starts its clip range at 0, so its ClipQuant passes
nothing either (its scale is floored at 1e-6 / L, models.ClipQuant).
"""

from __future__ import annotations

import numpy as np
import torch

from snnconvert import console
from snnconvert.convert.fold import FoldedOp, apply_op, fold
from snnconvert.errors import UsageError


def calibration_subset(n_total: int, n: int) -> np.ndarray:
    """Evenly spaced indices 0..n_total-1 (all of them when n >= n_total): deterministic, no RNG."""
    if n >= n_total:
        return np.arange(n_total)
    return np.unique(np.round(np.linspace(0, n_total - 1, n)).astype(np.int64))


def range_statistic(values: np.ndarray, rule: str, pct: float) -> float:
    """max, the pct-th percentile (linear interpolation, numpy's default) or pct times the mean of the
    positive values (rule "mean": pct is then the factor); 0 if none (a dead layer, see the module docstring)."""
    v = values[values > 0]
    if v.size == 0:
        return 0.0
    if rule == "mean":
        return float(pct) * float(v.mean())
    return float(v.max()) if rule == "max" else float(np.percentile(v, pct))


@torch.no_grad()
def activation_ranges(ops: list[FoldedOp], calib_x, rule: str, pct: float, act_max=None,
                      batch: int = 256, quiet: bool = True) -> list[float | None]:
    """One range per op: conv/dense get r_l, pools get None (they keep their input's scale).

    Priority for hidden layers: `act_max` (ranges learned by conversion-aware training, one per
    hidden activation, in order), then a ClipQuant's own `a_max`, then the calibration statistic.
    """
    hidden = [i for i, op in enumerate(ops) if op.kind in ("conv", "dense") and op.act is not None]
    if act_max is not None:
        act_max = [float(a) for a in act_max]
        if len(act_max) != len(hidden):
            raise UsageError(f"act_max has {len(act_max)} ranges but the model has {len(hidden)} hidden activations")
    x = torch.as_tensor(np.asarray(calib_x), dtype=torch.float64)                  # (N, C, H, W)
    collected: dict[int, list[np.ndarray]] = {i: [] for i, op in enumerate(ops) if op.kind in ("conv", "dense")}
    starts = range(0, x.shape[0], batch)
    for s in console.bar(starts, desc="calibrate", enabled=not quiet):
        h = x[s:s + batch]
        for i, op in enumerate(ops):
            h = apply_op(op, h)
            if i in collected:
                collected[i].append(h.reshape(-1).numpy())
    ranges: list[float | None] = [None] * len(ops)
    for i in collected:
        allv = np.concatenate(collected[i]) if collected[i] else np.zeros(0)
        ranges[i] = range_statistic(allv, rule, pct)
    for j, i in enumerate(hidden):
        if act_max is not None:
            ranges[i] = act_max[j]
        elif ops[i].a_max is not None:
            ranges[i] = ops[i].a_max
    return ranges


def hidden_ranges(model, x, rule: str, pct: float, quiet: bool = True) -> list[float]:
    """The calibrated range r_l of each hidden activation of a float `model` over frames `x`, in
    order: `activation_ranges` of its folded ops, one value per ReLU (0 for a dead layer).
    Conversion-aware training starts its clip ranges a_max here, so it starts where the converter
    would calibrate a float model with the same rule."""
    ops = fold(model)
    ranges = activation_ranges(ops, x, rule, pct, quiet=quiet)
    return [float(ranges[i]) for i, op in enumerate(ops) if op.kind in ("conv", "dense") and op.act is not None]


def aware_start_ranges(model, x, payload_bits: int, pct: float) -> list[float]:
    """Start clip ranges of conversion-aware training, one per hidden activation:

        a_max = min(percentile_pct(x_l), 2 sqrt(Q) mean(x_l)),   Q = 2^p - 1, over positive activations

    The first term is the converter's calibration (`hidden_ranges`), the second the step-size start
    of learned step size quantization, s = 2 mean|x| / sqrt(Q) (Esser et al. 2020, ICLR), times Q.
    At p = 1 the one level's threshold a_max / 2 then sits at the mean active value: from the 99.9th
    percentile it would sit at half the largest values and silence nearly every neuron. At p >= 3 the
    two terms are close (within 5 % on the digits model); the start only seeds the learned a_max.
    A dead layer starts at 0."""
    from snnconvert import arith
    top = hidden_ranges(model, x, "percentile", pct)
    lsq = hidden_ranges(model, x, "mean", 2.0 * float(np.sqrt(arith.payload_max(payload_bits))))
    return [min(a, b) for a, b in zip(top, lsq)]
