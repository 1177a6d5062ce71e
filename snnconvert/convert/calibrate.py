"""Activation ranges of the folded float model, from a deterministic calibration subset.

    r_l = max(x_l)                 rule "max"
    r_l = percentile_Q(x_l)        rule "percentile:Q" (99.9 by default; Rueckauer et al. 2017)
    r_l = c * mean(x_l)            rule "mean" with c (the start of a low-bit clip range, `aware_start_ranges`)
    r_l = argmin_r sum_x (x - g_r(x))^2,  g_r(x) = (r/Q) clamp(round(x Q / r), 0, Q)
                                   rule "mse": the range whose payload grid of Q = 2^p - 1 levels fits the
                                   activations best (MSE range setting, Nagel et al. 2021, "A White Paper on
                                   Neural Network Quantization", section 3.4), over a histogram of the values

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


def range_statistic(values: np.ndarray, rule: str, pct: float, levels: int = 0) -> float:
    """max, the pct-th percentile (linear interpolation, numpy's default), pct times the mean (rule "mean":
    pct is then the factor) or the least-squares range of a `levels`-step grid (rule "mse", `mse_range`) of
    the positive values; 0 if none (a dead layer, see the module docstring)."""
    v = values[values > 0]
    if v.size == 0:
        return 0.0
    if rule == "mean":
        return float(pct) * float(v.mean())
    if rule == "mse":
        return mse_range(v, levels)
    return float(v.max()) if rule == "max" else float(np.percentile(v, pct))


# histogram bins and candidate ranges of the rule "mse"
MSE_BINS = 2048
MSE_CANDIDATES = 256


def mse_range(v: np.ndarray, levels: int) -> float:
    """r = argmin over r_j = max(v) j / MSE_CANDIDATES (j = 1..MSE_CANDIDATES) of

        E(r) = sum_b n_b (c_b - (r/L) clamp(round(c_b L / r), 0, L))^2

    over a histogram of v (MSE_BINS equal bins on [0, max v], counts n_b, centres c_b; rounding half to
    even, as `arith.payload_grid`). The smallest such r wins a tie. v: positive values (at least one);
    levels L >= 1. Deterministic: no sampling."""
    from snnconvert import arith
    if int(levels) < 1:
        raise ValueError(f"the rule 'mse' needs levels >= 1; got {levels}")
    top = float(v.max())
    counts, edges = np.histogram(v, bins=MSE_BINS, range=(0.0, top))
    centres = (edges[:-1] + edges[1:]) / 2                                                  # (B,)
    r = top * np.arange(1, MSE_CANDIDATES + 1) / MSE_CANDIDATES                             # (R,)
    step = (r / levels)[:, None]                                                            # (R, 1)
    err = centres[None] - arith.payload_grid(centres[None] / step, int(levels)) * step      # (R, B)
    return float(r[int(np.argmin((err ** 2) @ counts))])


@torch.no_grad()
def activation_ranges(ops: list[FoldedOp], calib_x, rule: str, pct: float, act_max=None,
                      batch: int = 256, quiet: bool = True, levels: int = 0) -> list[float | None]:
    """One range per op: conv/dense get r_l, pools get None (they keep their input's scale).
    `levels`: the payload grid's Q = 2^p - 1, which the rule "mse" fits.

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
    for i, parts in collected.items():
        allv = np.concatenate(parts) if parts else np.zeros(0)
        ranges[i] = range_statistic(allv, rule, pct, levels)
    for j, i in enumerate(hidden):
        if act_max is not None:
            ranges[i] = act_max[j]
        elif ops[i].a_max is not None:
            ranges[i] = ops[i].a_max
    return ranges


@torch.no_grad()
def input_means(ops: list[FoldedOp], calib_x, batch: int = 256) -> dict[int, np.ndarray]:
    """xbar_l = mean_n x_l[n]: the mean input (C, H, W) or (D,) of every conv/dense op l of the folded
    float model over the calibration frames, keyed by op index (for `bias_shift`)."""
    x = torch.as_tensor(np.asarray(calib_x), dtype=torch.float64)                  # (N, C, H, W)
    sums: dict[int, torch.Tensor] = {}
    for s in range(0, x.shape[0], batch):
        h = x[s:s + batch]
        for i, op in enumerate(ops):
            if op.kind in ("conv", "dense"):
                sums[i] = sums.get(i, 0) + h.sum(0)
            h = apply_op(op, h)
    return {i: (v / x.shape[0]).numpy() for i, v in sums.items()}


@torch.no_grad()
def bias_shift(op: FoldedOp, weight_error: np.ndarray, x_mean: np.ndarray) -> np.ndarray:
    """Bias correction (Nagel, van Baalen, Blankevoort, Welling 2019, "Data-Free Quantization Through
    Weight Equalization and Bias Correction", ICCV, section 4.2), with the expectation taken over the
    calibration frames:

        delta_o = E[(eps * x)_o] = mean over positions of (eps * xbar)_o,   eps = s_w W - w

    (* = the op's convolution or matrix product, xbar = `input_means`): the mean error the weight grid adds
    to output channel o's pre-activation; the corrected bias is b - delta. The convolution is linear, so
    the mean over samples moves inside it exactly; padding makes the per-position terms differ, which the
    mean over output positions keeps. Returns delta (O,), float64."""
    err = FoldedOp(op.kind, weight=np.asarray(weight_error, dtype=np.float64), bias=np.zeros(op.weight.shape[0]),
                   kernel=op.kernel, stride=op.stride, padding=op.padding)
    z = apply_op(err, torch.as_tensor(np.asarray(x_mean, dtype=np.float64))[None], activation=False)
    return z.reshape(z.shape[0], z.shape[1], -1).mean(dim=(0, 2)).numpy()


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
