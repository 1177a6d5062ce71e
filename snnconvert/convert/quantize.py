"""Folded float ops + activation ranges -> IntNetwork (weights, biases, multipliers, widths).

Scales (s_0 = 1: frame values are the input payloads):
    s_l = r_l / Q                     activation scale from the calibrated range r_l, Q = 2^p - 1
    s_in' = s_in / n                  after a sum pool of n inputs (the average pool's 1/n)
    W = quantize_weights(w, s_w, k)   B = round(b / (s_w * s_in'))
    M = s_w * s_in' / s_l = M0 * 2^-n (fixed point, Jacob et al. 2018)
    b <- b - delta                    with bias correction on: delta = the mean weight-grid error of the
                                      pre-activation over the calibration frames (calibrate.bias_shift)
    a_l = clamp((V * M0 + 2^(n-1)) >> n, 0, Q)      (arith.requantize; exact halves round up)

Edge cases: a layer whose calibrated range is 0 gets M = 0 (it never fires) and s_l = 1 so
later scales stay finite. Per-channel weight ranges are floored at 2^-8 of the layer's largest
(arith.weight_scale), and a channel whose multiplier cannot lift any potential of its
accumulator to payload 1 is stored silent (M0 = 0; arith.fixed_point_multiplier), so near-dead
and all-zero channels keep shifts and biases inside 64-bit integers. A layer that still does not
fit (accumulator bits + multiplier bits > 63, arith.check_requantize_range) is refused.
The output layer keeps its potentials for the argmax; its M0/n and q_out = Q map positive
logits to payloads for the ttfs early decision only.
"""

from __future__ import annotations

import numpy as np

from snnconvert import arith
from snnconvert.convert.calibrate import bias_shift
from snnconvert.convert.fold import FoldedOp
from snnconvert.errors import UsageError
from snnconvert.intnet import IntLayer, IntNetwork


def _out_hw(h: int, w: int, kernel, stride, padding) -> tuple[int, int]:
    return ((h + 2 * padding[0] - kernel[0]) // stride[0] + 1, (w + 2 * padding[1] - kernel[1]) // stride[1] + 1)


def build_network(ops: list[FoldedOp], ranges: list, *, input_shape: tuple, input_q: int, weight_bits: int,
                  payload_bits: int, coding: str, per_channel: bool, weight_rule: tuple[str, float],
                  multiplier_bits: int, acc_limit_bits: int, overflow: str,
                  input_means: dict | None = None) -> IntNetwork:
    """Quantize every folded op; see the module docstring for the formulas. `input_means`
    (`calibrate.input_means`): correct each weighted op's bias for the mean error of its weight grid."""
    Q = arith.payload_max(payload_bits)
    shape = tuple(int(d) for d in input_shape)
    s_in, q_in, div = 1.0, int(input_q), 1
    layers: list[IntLayer] = []
    n_weighted = sum(op.kind in ("conv", "dense") for op in ops)
    seen = 0
    for i, op in enumerate(ops):
        name = f"{op.kind}{i}"
        if op.kind in ("conv", "dense"):
            seen += 1
            is_out = seen == n_weighted
            w = op.weight
            s_w = arith.weight_scale(w, weight_bits, per_channel, weight_rule[0], weight_rule[1])     # (O,)
            W = arith.quantize_weights(w, s_w, weight_bits)
            bias, shift = op.bias, None
            if input_means is not None:
                shift = bias_shift(op, s_w.reshape((-1,) + (1,) * (w.ndim - 1)) * W - w, input_means[i])
                bias = op.bias - shift
            s_eff = s_in / div
            r = float(ranges[i])
            s_out = r / Q if r > 0 else 1.0
            M = s_w * s_eff / s_out if r > 0 else np.zeros_like(s_w)
            if op.kind == "conv":
                out_shape = (w.shape[0],) + _out_hw(shape[1], shape[2], op.kernel, op.stride, op.padding)
                kw = dict(kernel=op.kernel, stride=op.stride, padding=op.padding)
            else:
                out_shape, kw = (w.shape[0],), {}
                shape = (int(np.prod(shape)),)
            try:
                B = arith.quantize_bias(bias, s_w, s_eff)
                acc = arith.accumulator_bits(int(np.prod(W.shape[1:])), int(np.abs(W).max(initial=0)), q_in,
                                             int(np.abs(B).max(initial=0)))
                m0, n = arith.fixed_point_multiplier(M, multiplier_bits, acc_bits=acc)
                arith.check_requantize_range(acc, m0, n, Q, ttfs=coding == "ttfs")
            except ValueError as exc:
                raise UsageError(f"layer {name} cannot be held in 64-bit integers with these settings: {exc} "
                                 f"(input scale {s_eff:.3g}, output range {r:.3g}; try other 'multiplier_bits' "
                                 f"or 'calibration')") from None
            info = {"range": r, "s_in": s_eff, "s_out": s_out, "s_w": s_w.tolist(), "multiplier": M.tolist(),
                    "source_layers": op.source, "pool_divisor": div}
            if shift is not None:
                info["bias_shift"] = shift.tolist()
            layers.append(IntLayer(name=name, kind=op.kind, in_shape=shape, out_shape=out_shape, weight=W, bias=B,
                                   m0=m0, shift=n, q_in=q_in, q_out=Q, is_output=is_out, acc_bits=acc, info=info,
                                   **kw))
            shape, s_in, q_in, div = out_shape, s_out, Q, 1
        elif op.kind == "maxpool":
            out_shape = (shape[0],) + _out_hw(shape[1], shape[2], op.kernel, op.stride, op.padding)
            layers.append(IntLayer(name=name, kind="maxpool", in_shape=shape, out_shape=out_shape, kernel=op.kernel,
                                   stride=op.stride, padding=op.padding, q_in=q_in, q_out=q_in,
                                   info={"source_layers": op.source}))
            shape = out_shape
        else:  # avgpool -> sumpool: routing only; the next weighted layer divides by n
            out_shape = (shape[0],) + _out_hw(shape[1], shape[2], op.kernel, op.stride, (0, 0))
            n_pool = op.kernel[0] * op.kernel[1]
            layers.append(IntLayer(name=f"sumpool{i}", kind="sumpool", in_shape=shape, out_shape=out_shape,
                                   kernel=op.kernel, stride=op.stride, q_in=q_in, q_out=0,
                                   info={"source_layers": op.source, "n": n_pool}))
            shape, q_in, div = out_shape, q_in * n_pool, div * n_pool
    return IntNetwork(layers=layers, input_shape=tuple(input_shape), input_q=int(input_q), coding=coding,
                      payload_bits=int(payload_bits), weight_bits=int(weight_bits), per_channel=bool(per_channel),
                      n_classes=int(layers[-1].out_shape[0]), multiplier_bits=int(multiplier_bits),
                      acc_limit_bits=int(acc_limit_bits), overflow=overflow)
