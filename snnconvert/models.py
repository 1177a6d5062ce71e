"""Frame models: a recipe's layer list <-> an ordinary `torch.nn.Sequential`, and its size.

Batch-norm folding lives in `bnfold`, the conversion-aware modules in `aware`; their public names
(fold_batchnorm, ClipQuant, QConv2d, QLinear, make_aware) are importable from here too.

Layer tables in `[model] layers` (all other keys are rejected with a did-you-mean hint):
    {type="conv", out=8, kernel=3, stride=1, padding=1, bn=false}   padding defaults to kernel // 2
    {type="maxpool", size=2, stride=2}  /  {type="avgpool", size=2, stride=2}   stride defaults to size
    {type="dense", units=64, bn=false}
    {type="dropout", p=0.1}
Hidden conv/dense layers are followed by (BatchNorm, if bn) then ReLU. The LAST table must be a
dense layer: it is the classifier and gives the class scores (no BN, no ReLU). Its `units` may be
left out (it is then the number of classes of the data); if given it must equal that number.
A Flatten is inserted before the first dense layer that follows a (C, H, W) tensor.

The built model holds only Conv2d, BatchNorm2d/1d, ReLU, MaxPool2d, AvgPool2d, Dropout, Flatten
and Linear, so the converter and users' own code see a plain torch model; a hand-written
Sequential of the same pattern is accepted wherever a recipe model is (see `spec_from_model`).
"""

from __future__ import annotations

import numpy as np
import torch
from torch import nn

from snnconvert import console
from snnconvert.aware import ClipQuant, QConv2d, QLinear, make_aware  # noqa: F401  (public names)
from snnconvert.bnfold import fold_batchnorm  # noqa: F401  (public name)
from snnconvert.errors import UsageError, check_int
from snnconvert.settings.model import check_layers


# ---------------------------------------------------------------- building

def build_model(model_section, input_shape, n_classes: int, quiet: bool = False) -> nn.Sequential:
    """The [model] section (or its layer list) -> nn.Sequential for inputs of shape (C, H, W).

    Every layer's output shape is computed here, so a kernel larger than its input or a conv
    after a dense layer is reported at build time with the layer and both shapes.
    """
    layers = model_section.get("layers") if isinstance(model_section, dict) else model_section
    layers = check_layers(layers)
    n_classes = check_int(n_classes, "n_classes", "build_model", 2, 1_000_000)
    shape = tuple(int(s) for s in input_shape)
    if len(shape) != 3 or min(shape) < 1:
        raise UsageError(f"The input shape of the model must be (C, H, W) with positive sizes. Got {shape} instead.")
    mods: list[nn.Module] = []
    last = len(layers) - 1
    for i, L in enumerate(layers):
        where = f"model.layers[{i}] ({L['type']})"
        if L["type"] == "conv":
            if len(shape) != 3:
                raise UsageError(f"{where} needs a (C, H, W) input but gets shape {shape} from a dense layer before it.")
            out_hw = _out_hw(shape, L["kernel"], L["stride"], L["padding"], where)
            mods.append(nn.Conv2d(shape[0], L["out"], L["kernel"], L["stride"], L["padding"]))
            if L["bn"]:
                mods.append(nn.BatchNorm2d(L["out"]))
            mods.append(nn.ReLU())
            shape = (L["out"], *out_hw)
        elif L["type"] in ("maxpool", "avgpool"):
            if len(shape) != 3:
                raise UsageError(f"{where} needs a (C, H, W) input but gets shape {shape} from a dense layer before it.")
            out_hw = _out_hw(shape, L["size"], L["stride"], 0, where)
            pool = nn.MaxPool2d if L["type"] == "maxpool" else nn.AvgPool2d
            mods.append(pool(L["size"], L["stride"]))
            shape = (shape[0], *out_hw)
        elif L["type"] == "dropout":
            mods.append(nn.Dropout(L["p"]))
        else:  # dense
            if len(shape) == 3:
                mods.append(nn.Flatten())
                shape = (int(np.prod(shape)),)
            units = L.get("units", n_classes) if i == last else L["units"]
            if i == last and units != n_classes:
                raise UsageError(f"{where} is the output layer: its units must equal the number of classes. "
                                 f"Got units={units} for {n_classes} classes.")
            mods.append(nn.Linear(shape[0], units))
            if i != last:
                if L["bn"]:
                    mods.append(nn.BatchNorm1d(units))
                mods.append(nn.ReLU())
            shape = (units,)
    model = nn.Sequential(*mods)
    if not quiet:
        d = describe(model, input_shape)
        console.say(f"model: {d['params']:,} parameters, {d['macs']:,} multiply-accumulates per sample")
    return model


def _out_hw(shape, k: int, s: int, p: int, where: str) -> tuple[int, int]:
    """floor((H + 2p - k) / s) + 1 per spatial axis (torch's rule); < 1 is a shape error."""
    h = (shape[1] + 2 * p - k) // s + 1
    w = (shape[2] + 2 * p - k) // s + 1
    if h < 1 or w < 1:
        raise UsageError(f"{where} with kernel {k}, stride {s}, padding {p} cannot take input shape {tuple(shape)}: "
                         f"output shape would be ({shape[0]}, {h}, {w}).")
    return h, w


def describe(model: nn.Module, input_shape) -> dict:
    """params = number of parameters; macs = dense multiply-accumulates per sample:
    conv: C_out * H_out * W_out * (C_in / groups) * kh * kw;  linear: in * out.
    Pooling, BN and ReLU are not counted (no multiplies by weights)."""
    macs = 0

    def hook(mod, inp, out):
        nonlocal macs
        if isinstance(mod, nn.Conv2d):
            macs += out[0].numel() * (mod.in_channels // mod.groups) * mod.kernel_size[0] * mod.kernel_size[1]
        elif isinstance(mod, nn.Linear):
            macs += mod.in_features * mod.out_features

    handles = [m.register_forward_hook(hook) for m in model.modules() if isinstance(m, (nn.Conv2d, nn.Linear))]
    was_training = model.training
    try:
        model.eval()
        with torch.no_grad():
            model(torch.zeros((1, *[int(s) for s in input_shape])))  # (1, C, H, W)
    finally:
        for h in handles:
            h.remove()
        model.train(was_training)
    return {"params": int(sum(p.numel() for p in model.parameters())), "macs": int(macs)}


def spec_from_model(model: nn.Sequential) -> list[dict]:
    """The layer list that `build_model` turns back into `model` (same module order and sizes).

    Accepts the build pattern: Conv2d [BatchNorm2d] ReLU | MaxPool2d | AvgPool2d | Dropout |
    Flatten | Linear [BatchNorm1d] ReLU | final Linear; the conversion-aware twins are accepted
    too (QConv2d, QLinear, ClipQuant in place of ReLU). Anything else raises UsageError.
    """
    mods = list(model)
    out, i = [], 0
    while i < len(mods):
        m = mods[i]
        if isinstance(m, nn.Conv2d):
            if m.groups != 1 or m.dilation != (1, 1) or m.kernel_size[0] != m.kernel_size[1] \
                    or m.stride[0] != m.stride[1] or m.padding[0] != m.padding[1] or m.bias is None:
                raise UsageError(f"layer {i} (Conv2d): only square, undilated, ungrouped convolutions with bias are supported")
            L = {"type": "conv", "out": m.out_channels, "kernel": m.kernel_size[0], "stride": m.stride[0],
                 "padding": m.padding[0], "bn": False}
            i += 1
            if i < len(mods) and isinstance(mods[i], nn.BatchNorm2d):
                L["bn"] = True
                i += 1
            i = _expect_act(mods, i, "Conv2d")
            out.append(L)
        elif isinstance(m, (nn.MaxPool2d, nn.AvgPool2d)):
            k, s = _pair(m.kernel_size), _pair(m.stride if m.stride is not None else m.kernel_size)
            if k[0] != k[1] or s[0] != s[1] or _pair(m.padding) != (0, 0):
                raise UsageError(f"layer {i} ({type(m).__name__}): only square pools without padding are supported")
            out.append({"type": "maxpool" if isinstance(m, nn.MaxPool2d) else "avgpool", "size": k[0], "stride": s[0]})
            i += 1
        elif isinstance(m, nn.Dropout):
            out.append({"type": "dropout", "p": float(m.p)})
            i += 1
        elif isinstance(m, nn.Flatten):
            i += 1
        elif isinstance(m, nn.Linear):
            if m.bias is None:
                raise UsageError(f"layer {i} (Linear): a bias is required")
            L = {"type": "dense", "units": m.out_features, "bn": False}
            i += 1
            if i == len(mods):
                out.append({"type": "dense", "units": m.out_features})
                break
            if isinstance(mods[i], nn.BatchNorm1d):
                L["bn"] = True
                i += 1
            i = _expect_act(mods, i, "Linear")
            out.append(L)
        else:
            raise UsageError(f"layer {i} ({type(m).__name__}) is not supported; use Conv2d, BatchNorm, ReLU, "
                             f"MaxPool2d, AvgPool2d, Dropout, Flatten, Linear")
    return check_layers(out)


def _expect_act(mods, i, after: str) -> int:
    if i >= len(mods) or not isinstance(mods[i], (nn.ReLU, ClipQuant)):
        raise UsageError(f"layer {i}: a hidden {after} must be followed by ReLU")
    return i + 1


def _pair(v):
    return tuple(v) if isinstance(v, (tuple, list)) else (v, v)
