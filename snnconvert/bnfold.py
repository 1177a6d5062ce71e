"""Batch-norm folding: a frame model's BatchNorm layers merged into the conv/linear layer before each.

Shared by the converter (`convert.fold`) and conversion-aware training (`aware.make_aware`).
"""

from __future__ import annotations

import copy

import torch
from torch import nn

from snnconvert.errors import UsageError

def fold_batchnorm(model: nn.Sequential) -> nn.Sequential:
    """A copy of `model` with every BatchNorm folded into the conv/linear layer before it:
        g = gamma / sqrt(running_var + eps);  w' = w * g[o];  b' = (b - running_mean) * g + beta
    Exact for the model in eval mode (up to float rounding). A BatchNorm not directly after a
    conv/linear raises UsageError. The input model is not modified.
    """
    mods = [copy.deepcopy(m) for m in model]
    out: list[nn.Module] = []
    for i, m in enumerate(mods):
        if isinstance(m, (nn.BatchNorm2d, nn.BatchNorm1d)):
            prev = out[-1] if out else None
            if not isinstance(prev, (nn.Conv2d, nn.Linear)):
                raise UsageError(f"layer {i} ({type(m).__name__}) must follow a Conv2d or Linear to be folded")
            with torch.no_grad():
                g = (m.weight if m.affine else torch.ones_like(m.running_var)) / torch.sqrt(m.running_var + m.eps)
                beta = m.bias if m.affine else torch.zeros_like(m.running_mean)
                prev.weight.mul_(g.reshape(-1, *[1] * (prev.weight.dim() - 1)))  # (O, ...)
                b = prev.bias if prev.bias is not None else torch.zeros_like(g)
                new_b = (b - m.running_mean) * g + beta
                if prev.bias is None:
                    prev.bias = nn.Parameter(new_b)
                else:
                    prev.bias.copy_(new_b)
            continue
        out.append(m)
    folded = nn.Sequential(*out)
    folded.train(model.training)
    return folded
