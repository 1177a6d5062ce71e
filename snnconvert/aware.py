"""Conversion-aware modules: the float model trained on the spike network's integer grids.

    ClipQuant          the ReLU of an aware model: clip to [0, a_max], quantize to 2^p - 1 levels
    QConv2d / QLinear  conv / linear whose weight and bias are fake-quantized to the converter's grids
    make_aware         a float model -> its aware twin (BN folded, layers swapped)

Every grid comes from `arith` (numpy form and torch twin of one definition), so the aware model
trains on the very integers the converter stores.
"""

from __future__ import annotations

import copy

import torch
from torch import nn

from snnconvert import arith
from snnconvert.bnfold import fold_batchnorm
from snnconvert.errors import UsageError, check_bool, check_float, check_int

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
    `weight_rule` is the converter's weight scale rule, ("max", 100), ("percentile", Q) or ("mean", c),
    as `settings.convert.parse_weight_rule` returns it. The input model is not modified.
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
            layer = QConv2d(m.in_channels, m.out_channels, m.kernel_size, m.stride, m.padding, m.dilation, m.groups,
                        m.bias is not None, weight_bits=weight_bits, per_channel=per_channel, weight_rule=weight_rule)
            layer.load_state_dict(m.state_dict())
            layer._bias_src, layer._bias_div = [src], div
            out.append(layer)
        elif isinstance(m, nn.Linear):
            layer = QLinear(m.in_features, m.out_features, m.bias is not None, weight_bits=weight_bits,
                        per_channel=per_channel, weight_rule=weight_rule)
            layer.load_state_dict(m.state_dict())
            layer._bias_src, layer._bias_div = [src], div
            out.append(layer)
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
