"""Frame models: a recipe's layer list -> an ordinary `torch.nn.Sequential`, plus the
conversion-aware modules (clip-and-quantize activation, fake-quantized weights).

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

import copy

import numpy as np
import torch
from torch import nn

from snnconvert import arith, console
from snnconvert.errors import UsageError, check_bool, check_float, check_int
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


# ---------------------------------------------------------------- batch-norm folding

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


# ---------------------------------------------------------------- conversion-aware modules

class ClipQuant(nn.Module):
    """y = s * clamp(round(x * (1/s)), 0, L),  s = a_max / L,  L = levels = 2^p - 1.

    The ReLU of a conversion-aware model: clip to [0, a_max] then quantize to L levels, so the
    float model sees exactly the payload grid of the spike network (`arith.payload_grid`;
    clip-floor activation, Bu et al. 2022; straight-through gradients, Bengio et al. 2013). With
    learn=True, a_max gets the gradient of the clip (1 above a_max) and of the rounding residual
    (in range). a_max is kept >= 1e-6 in the forward pass so the scale never reaches zero; a_max = 0
    (the start value of a layer that calibration found dead) therefore passes nothing but values
    below 1e-6. Rounding is half to even on x * (1/s) in float32, exactly like
    torch.fake_quantize_per_tensor_affine(x, s, 0, 0, L).
    """

    def __init__(self, a_max: float = 1.0, levels: int = 1, learn: bool = True):
        super().__init__()
        self.levels = check_int(levels, "levels", "ClipQuant", 1, 2**16)
        self.a_max = nn.Parameter(torch.tensor(float(a_max), dtype=torch.float32), requires_grad=bool(learn))

    def forward(self, x):
        s = self.a_max.clamp_min(1e-6) / self.levels
        return arith.payload_grid(x * (1.0 / s), self.levels) * s

    def extra_repr(self) -> str:
        return f"levels={self.levels}, a_max={float(self.a_max):.4g}, learn={self.a_max.requires_grad}"


class _WeightQuant:
    """Shared part of QConv2d/QLinear: weights and bias on the converter's integer grids in forward.

    The scale is the converter's (`arith.weight_scale` with the same rule, percentile and
    per-channel floor), so conversion-aware training sees the W and B the converter will store."""

    def _init_quant(self, weight_bits: int, per_channel: bool, weight_rule=("max", 100.0)) -> None:
        self.weight_bits = check_int(weight_bits, "weight_bits", type(self).__name__, 2, 16)
        self.per_channel = check_bool(per_channel, "per_channel", type(self).__name__)
        self.weight_rule = (str(weight_rule[0]), float(weight_rule[1]))
        # Where the input scale comes from, for the bias: [None] = integer frames (s_in = 1), or
        # [ClipQuant] whose a_max/levels is s_in; divided by the sum-pool size in between.
        # A plain list, so the ClipQuant is not registered twice as a submodule.
        self._bias_src, self._bias_div = [None], 1

    def weight_scale(self) -> torch.Tensor:
        """s_w per output channel, float64 (O,): `arith.weight_scale` of the current weights."""
        return arith.weight_scale_torch(self.weight, self.weight_bits, self.per_channel, *self.weight_rule)

    def quantized_bias(self):
        """B_q = s_acc * round(b / s_acc), s_acc = s_w * s_in / n: the bias on the accumulator's
        grid, as the integer network stores it (`arith.quantize_bias`); straight-through gradients.
        With binary inputs (s_in = 1) that grid can be coarser than the output step, so training
        has to see it. s_in = a_max / L of the ClipQuant before, in float64 as the converter forms it."""
        if self.bias is None:
            return None
        src = self._bias_src[0]
        s_in = 1.0 if src is None else float(src.a_max.detach().clamp_min(1e-6)) / src.levels
        return arith.fake_quantize_bias_torch(self.bias, self.weight_scale(), s_in / self._bias_div)

    def quantized_weight(self) -> torch.Tensor:
        """w_q = s_w * W, W = `arith.quantize_weights(w, s_w, k)` (see arith.fake_quantize_weights_torch)."""
        return arith.fake_quantize_weights_torch(self.weight, self.weight_scale(), self.weight_bits)

    def extra_repr(self) -> str:
        return super().extra_repr() + (f", weight_bits={self.weight_bits}, per_channel={self.per_channel}, "
                                       f"weight_rule={self.weight_rule[0]}:{self.weight_rule[1]:g}")


class QConv2d(_WeightQuant, nn.Conv2d):
    """Conv2d whose weight and bias are fake-quantized to the converter's grids (see _WeightQuant) in forward."""

    def __init__(self, *args, weight_bits: int = 8, per_channel: bool = False, weight_rule=("max", 100.0), **kwargs):
        super().__init__(*args, **kwargs)
        self._init_quant(weight_bits, per_channel, weight_rule)

    def forward(self, x):
        return self._conv_forward(x, self.quantized_weight(), self.quantized_bias())


class QLinear(_WeightQuant, nn.Linear):
    """Linear whose weight and bias are fake-quantized to the converter's grids (see _WeightQuant) in forward."""

    def __init__(self, *args, weight_bits: int = 8, per_channel: bool = False, weight_rule=("max", 100.0), **kwargs):
        super().__init__(*args, **kwargs)
        self._init_quant(weight_bits, per_channel, weight_rule)

    def forward(self, x):
        return nn.functional.linear(x, self.quantized_weight(), self.quantized_bias())


def make_aware(model: nn.Sequential, weight_bits: int, payload_bits: int, per_channel: bool,
               act_max=None, learn_act_max: bool = True, weight_rule=("max", 100.0)) -> nn.Sequential:
    """The conversion-aware twin of `model`: BN folded, Conv2d/Linear -> QConv2d/QLinear,
    ReLU -> ClipQuant(a_max, 2^p - 1). `act_max` gives one a_max >= 0 per ReLU (in order; 0 is
    the range of a dead layer, see `convert.calibrate.range_statistic`); None starts every a_max
    at 1.0 (`convert.calibrate.hidden_ranges` gives the converter's calibrated start).
    `weight_rule` is the converter's weight scale rule, ("max", 100) or ("percentile", Q), as
    `convert.parse_range_rule` returns it. The input model is not modified.
    """
    weight_bits = check_int(weight_bits, "weight_bits", "convert", 2, 16)
    payload_bits = check_int(payload_bits, "payload_bits", "convert", 1, 16)
    per_channel = check_bool(per_channel, "per_channel", "convert")
    folded = fold_batchnorm(model)
    n_act = sum(isinstance(m, (nn.ReLU, ClipQuant)) for m in folded)
    if act_max is not None:
        act_max = [float(a) for a in act_max]
        if len(act_max) != n_act:
            raise UsageError(f"act_max has {len(act_max)} values but the model has {n_act} activations")
        for j, a in enumerate(act_max):
            check_float(a, f"act_max[{j}]", "make_aware", 0.0, None)
    levels = arith.payload_max(payload_bits)
    out, j = [], 0
    src, div = None, 1      # the input scale seen by the next weighted layer's bias
    for m in folded:
        if isinstance(m, nn.Conv2d):
            q = QConv2d(m.in_channels, m.out_channels, m.kernel_size, m.stride, m.padding, m.dilation, m.groups,
                        m.bias is not None, weight_bits=weight_bits, per_channel=per_channel, weight_rule=weight_rule)
            q.load_state_dict(m.state_dict())
            q._bias_src, q._bias_div = [src], div
            out.append(q)
        elif isinstance(m, nn.Linear):
            q = QLinear(m.in_features, m.out_features, m.bias is not None, weight_bits=weight_bits,
                        per_channel=per_channel, weight_rule=weight_rule)
            q.load_state_dict(m.state_dict())
            q._bias_src, q._bias_div = [src], div
            out.append(q)
        elif isinstance(m, (nn.ReLU, ClipQuant)):
            a = act_max[j] if act_max is not None else (float(m.a_max) if isinstance(m, ClipQuant) else 1.0)
            out.append(ClipQuant(a, levels, learn=learn_act_max))
            src, div = out[-1], 1
            j += 1
        else:
            if isinstance(m, nn.AvgPool2d):   # becomes a sum pool: the next layer sees n times the scale
                k = m.kernel_size if isinstance(m.kernel_size, tuple) else (m.kernel_size, m.kernel_size)
                div *= int(k[0]) * int(k[1])
            out.append(copy.deepcopy(m))
    aware = nn.Sequential(*out)
    aware.train(model.training)
    return aware
