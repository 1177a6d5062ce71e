"""Check a frame model and fold it into a flat list of float operations.

    conv/dense + BatchNorm:  w' = w * g / sqrt(var + eps),  b' = (b - mean) * g / sqrt(var + eps) + beta
                             (models.fold_batchnorm, shared with conversion-aware training)
    Dropout:                 removed (identity at inference)
    MaxPool before ReLU:     swapped, since max(relu(z)) = relu(max(z)) for the monotone ReLU
    AvgPool2d:               kept as "avgpool"; quantize.py turns it into a sum pool whose 1/n
                             moves into the next layer's multiplier

The folded list evaluates in float64 exactly like the original model in eval mode (up to float
rounding), which `folded_forward` lets tests check.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import torch
from torch import nn

from snnconvert.errors import UsageError
from snnconvert.bnfold import fold_batchnorm

SUPPORTED = ("Conv2d", "Linear", "ReLU", "AvgPool2d", "MaxPool2d", "Flatten", "BatchNorm1d", "BatchNorm2d",
             "Dropout", "ClipQuant", "QConv2d", "QLinear")


@dataclass
class FoldedOp:
    kind: str                                  # conv | dense | maxpool | avgpool
    weight: np.ndarray | None = None           # float64 (O, I, kh, kw) or (O, I)
    bias: np.ndarray | None = None             # float64 (O,)
    kernel: tuple = (1, 1)
    stride: tuple = (1, 1)
    padding: tuple = (0, 0)
    act: nn.Module | None = None               # ReLU or ClipQuant after conv/dense; None on the output layer
    source: list = field(default_factory=list) # indices of the original layers that went into this op

    @property
    def a_max(self) -> float | None:
        """The trained range of a ClipQuant activation, else None (range comes from calibration)."""
        if self.act is not None and hasattr(self.act, "a_max"):
            return float(torch.as_tensor(self.act.a_max).detach().reshape(-1)[0])
        return None


def _pair(v) -> tuple:
    return tuple(v) if isinstance(v, (tuple, list)) else (int(v), int(v))


def _is_act(m) -> bool:
    return isinstance(m, nn.ReLU) or type(m).__name__ == "ClipQuant"


def check_model(model) -> list[nn.Module]:
    """Reject anything the converter cannot map exactly, before any work starts."""
    if not isinstance(model, nn.Sequential):
        raise UsageError(f"convert needs a torch.nn.Sequential model; got {type(model).__name__}")
    layers = list(model)
    supported = ", ".join(SUPPORTED)
    for i, m in enumerate(layers):
        name = type(m).__name__
        ok = isinstance(m, (nn.Conv2d, nn.Linear, nn.ReLU, nn.AvgPool2d, nn.MaxPool2d, nn.Flatten,
                            nn.BatchNorm1d, nn.BatchNorm2d, nn.Dropout)) or name == "ClipQuant"
        if not ok:
            raise UsageError(f"layer {i} ({name}) is not supported by convert; supported layers: {supported}")
        if isinstance(m, nn.Conv2d):
            if not isinstance(m.padding, (tuple, list)) or m.groups != 1 or _pair(m.dilation) != (1, 1) \
                    or m.padding_mode != "zeros":
                raise UsageError(f"layer {i} ({name}): only zero padding given as numbers, groups=1 and "
                                 f"dilation=1 are supported")
        if isinstance(m, nn.MaxPool2d) and (m.ceil_mode or _pair(m.dilation) != (1, 1)):
            raise UsageError(f"layer {i} ({name}): ceil_mode and dilation are not supported")
        if isinstance(m, nn.AvgPool2d) and (m.ceil_mode or _pair(m.padding) != (0, 0)
                                            or m.divisor_override is not None):
            raise UsageError(f"layer {i} ({name}): average pooling must have padding=0, ceil_mode=False and "
                             f"no divisor_override, so that it is an exact sum of n inputs")
    return layers


def fold(model) -> list[FoldedOp]:
    """The model as folded float operations; raises UsageError naming the layer on bad orderings."""
    original = check_model(model)
    # BatchNorm folding is shared with conversion-aware training; keep the original layer indices
    index = [i for i, m in enumerate(original) if not isinstance(m, (nn.BatchNorm1d, nn.BatchNorm2d))]
    for i, m in enumerate(original):
        if isinstance(m, (nn.BatchNorm1d, nn.BatchNorm2d)) and (m.running_mean is None or m.running_var is None):
            raise UsageError(f"layer {i} ({type(m).__name__}) has no running statistics (track_running_stats=False)")
    layers = list(fold_batchnorm(model))
    ops: list[FoldedOp] = []
    pending_pool = None          # a MaxPool seen between a conv and its activation
    open_op = None               # conv/dense waiting for BN / activation
    for i, m in zip(index, layers):
        name = type(m).__name__
        if isinstance(m, (nn.Dropout, nn.Flatten)):
            continue
        if isinstance(m, (nn.Conv2d, nn.Linear)):
            if open_op is not None:
                raise UsageError(f"layer {i} ({name}) follows layer {open_op.source[0]} without a ReLU; "
                                 f"every hidden Conv2d/Linear must be followed by ReLU or ClipQuant")
            w = m.weight.detach().double().cpu().numpy()
            b = m.bias.detach().double().cpu().numpy() if m.bias is not None else np.zeros(w.shape[0])
            if isinstance(m, nn.Conv2d):
                open_op = FoldedOp("conv", w, b, kernel=_pair(m.kernel_size), stride=_pair(m.stride),
                                   padding=_pair(m.padding), source=[i])
            else:
                open_op = FoldedOp("dense", w, b, source=[i])
            ops.append(open_op)
        elif _is_act(m):
            if open_op is None:
                raise UsageError(f"layer {i} ({name}) must follow a Conv2d/Linear (optionally with BatchNorm); "
                                 f"a single-spike neuron needs weights in front of its activation")
            # a private float64 copy: evaluating it must not change the caller's model
            open_op.act = m.double() if hasattr(m, "a_max") else m   # fold_batchnorm made a private copy
            open_op.source.append(i)
            open_op = None
            if pending_pool is not None:
                ops.append(pending_pool)
                pending_pool = None
        elif isinstance(m, nn.MaxPool2d):
            op = FoldedOp("maxpool", kernel=_pair(m.kernel_size),
                          stride=_pair(m.stride if m.stride is not None else m.kernel_size),
                          padding=_pair(m.padding), source=[i])
            if open_op is not None and open_op.kind == "conv" and pending_pool is None:
                pending_pool = op     # max commutes with ReLU: apply it after the activation
            elif open_op is not None:
                raise UsageError(f"layer {i} ({name}) sits between a layer and its activation in a way that "
                                 f"cannot be reordered exactly")
            else:
                ops.append(op)
        elif isinstance(m, nn.AvgPool2d):
            if open_op is not None:
                raise UsageError(f"layer {i} ({name}): average pooling before the activation mixes pre-activation "
                                 f"values; put it after ReLU so it becomes an exact sum pool")
            ops.append(FoldedOp("avgpool", kernel=_pair(m.kernel_size),
                                stride=_pair(m.stride if m.stride is not None else m.kernel_size), source=[i]))
    if pending_pool is not None:
        raise UsageError(f"layer {pending_pool.source[0]} (MaxPool2d) is not followed by an activation")
    weighted = [op for op in ops if op.kind in ("conv", "dense")]
    if not weighted or ops[-1].kind != "dense" or ops[-1].act is not None:
        raise UsageError("the model must end with a Linear layer giving the class scores (no activation after it)")
    for j, op in enumerate(ops[:-1]):
        if op.kind in ("conv", "dense") and op.act is None:
            raise UsageError(f"layer {op.source[0]} ({op.kind}) has no activation; only the last Linear may")
        if op.kind == "avgpool" and ops[j + 1].kind not in ("conv", "dense", "avgpool"):
            raise UsageError(f"layer {op.source[0]} (AvgPool2d) must be followed by a Conv2d or Linear, which "
                             f"absorbs its 1/n; found {ops[j + 1].kind}")
        if op.kind == "dense" and any(o.kind in ("conv", "maxpool", "avgpool") for o in ops[j + 1:]):
            raise UsageError(f"layer {op.source[0]} (Linear) cannot be followed by convolution or pooling")
    return ops


def apply_op(op: FoldedOp, x: torch.Tensor, activation: bool = True) -> torch.Tensor:
    """One folded op in float64; conv/dense return the activation output unless activation=False."""
    if op.kind == "conv":
        z = torch.nn.functional.conv2d(x, torch.from_numpy(op.weight), torch.from_numpy(op.bias),
                                       stride=op.stride, padding=op.padding)           # (N, O, H', W')
    elif op.kind == "dense":
        z = torch.nn.functional.linear(x.reshape(x.shape[0], -1), torch.from_numpy(op.weight),
                                       torch.from_numpy(op.bias))                      # (N, O)
    elif op.kind == "maxpool":
        return torch.nn.functional.max_pool2d(x, op.kernel, op.stride, op.padding)
    else:
        return torch.nn.functional.avg_pool2d(x, op.kernel, op.stride)
    if activation and op.act is not None:
        z = op.act(z) if hasattr(op.act, "a_max") else torch.relu(z)
    return z


@torch.no_grad()
def folded_forward(ops: list[FoldedOp], x, record: bool = False):
    """Float64 forward of the folded ops; with record=True also the output of every op."""
    h = torch.as_tensor(np.asarray(x), dtype=torch.float64)                            # (N, C, H, W)
    outs = []
    for op in ops:
        h = apply_op(op, h)
        if record:
            outs.append(h)
    return (h, outs) if record else h
