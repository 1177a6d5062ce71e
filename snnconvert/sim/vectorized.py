"""Vectorized single-spike simulator: every sample of a batch, layer by layer, in exact integers.

    V = conv(a, W) + B  (or a @ W.T + B)     potential at window close
    V = limit_accumulator(V, bits, mode)      only with a declared accumulator width
    a' = clamp((V * M0 + 2^(n-1)) >> n, 0, Q) payload (ttfs: the spike at step Q - a')

Exactness: the weighted sums run in float32 only when the layer's worst case
sum |W| * |a| <= F * max|W| * Q_in stays below 2^24, where every product and partial sum is an
integer that float32 holds exactly (whatever the summation order); else in float64 below 2^53;
else in int64 (numpy). The bias is added in int64. Tests compare the kernel actually used
against the int64 path and scipy.signal.correlate2d.

The spike network gives the same per-neuron integers in payload and ttfs coding (the spike
time is t = Q - a, arith.encode_time), so one dense integer pass serves all three codings;
the reference simulator (reference.py) steps the ttfs dynamics for real and must agree.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import torch
import torch.nn.functional as F

from snnconvert import arith
from snnconvert.intnet import IntLayer, IntNetwork

KERNELS = ("auto", "float32", "float64", "int64")


@dataclass
class SimResult:
    input_payloads: np.ndarray          # (N, C, H, W) int64
    payloads: list                      # per layer (N, *out_shape) int64 (sumpool: pooled sums; output: a for ttfs)
    spike_counts: np.ndarray            # (N, L) events emitted per layer (sumpool 0; output: ttfs spikes only)
    input_spikes: np.ndarray            # (N,) input events
    potentials: np.ndarray              # (N, n_classes) int64 at window close
    decisions: np.ndarray               # (N,) argmax, ties -> lowest index
    early_decisions: np.ndarray         # (N,) ttfs: class of the first output spike; -1 if none / not ttfs
    first_spike_step: np.ndarray        # (N,) ttfs: step of that spike in the output window; -1 if none
    max_abs_v: np.ndarray               # (N, L) |V| at window close before the width limit (0 for pools)
    overflows: np.ndarray               # (N, L) neurons whose potential left the declared width
    kernels: list = field(default_factory=list)   # per layer, the arithmetic used for the weighted sum


def _kernel_for(L: IntLayer, kernel: str) -> str:
    if kernel != "auto":
        return kernel
    bound = L.fan_in * int(np.abs(L.weight).max(initial=0)) * L.q_in
    return "float32" if bound < 2**24 else "float64" if bound < 2**53 else "int64"


def max_pool(a: torch.Tensor, kernel, stride, padding) -> torch.Tensor:
    """Max pooling, exact for any dtype. Non-overlapping pools without padding (kernel == stride)
    take the maximum of kh*kw strided views, several times faster on CPU than F.max_pool2d for
    these shapes; anything else goes to F.max_pool2d. Rows and columns that do not fill a whole
    window are dropped, as F.max_pool2d does."""
    kh, kw = (int(k) for k in kernel)
    if (kh, kw) != tuple(int(s) for s in stride) or any(int(p) for p in padding):
        return F.max_pool2d(a, (kh, kw), tuple(stride), tuple(padding))
    H, W = a.shape[-2] // kh * kh, a.shape[-1] // kw * kw
    a = a[..., :H, :W]                                                           # (N, C, H, W) cropped
    out = None
    for i in range(kh):
        for j in range(kw):
            view = a[..., i::kh, j::kw]                                          # (N, C, H/kh, W/kw)
            out = view if out is None else torch.maximum(out, view)
    return out.contiguous() if out is not None else out


def _conv_int64(a: np.ndarray, W: np.ndarray, stride, padding) -> np.ndarray:
    """Exact integer cross-correlation (the torch Conv2d convention), numpy int64."""
    ph, pw = padding
    a = np.pad(a, ((0, 0), (0, 0), (ph, ph), (pw, pw)))                          # (N, C, H+2p, W+2p)
    win = np.lib.stride_tricks.sliding_window_view(a, W.shape[2:], axis=(2, 3))  # (N, C, H', W', kh, kw)
    win = win[:, :, ::stride[0], ::stride[1]]
    return np.einsum("nchwij,ocij->nohw", win, W, optimize=True)                 # (N, O, H', W')


def weighted_sum(L: IntLayer, a: torch.Tensor, kernel: str = "auto", bias: bool = False) -> tuple[torch.Tensor, str]:
    """sum W * a for a batch (no bias), exact, with the kernel chosen by the layer's bound.

    Returns a float32/float64 tensor holding exact integers, or int64 for the int64 kernel.
    bias=True adds B inside the kernel (callers use it only when |V| < 2^24 keeps float32 exact)."""
    k = _kernel_for(L, kernel)
    if L.kind == "dense":
        a = a.reshape(a.shape[0], -1)                                             # (N, F)
    if k == "int64":
        an, Wn = a.to(torch.int64).numpy(), L.weight.astype(np.int64)
        z = _conv_int64(an, Wn, L.stride, L.padding) if L.kind == "conv" else an @ Wn.T
        return torch.from_numpy(np.ascontiguousarray(z)), k
    dt = torch.float32 if k == "float32" else torch.float64
    W = torch.from_numpy(L.weight).to(dt)
    B = torch.from_numpy(L.bias).to(dt) if bias else None
    if L.kind == "conv":
        z = F.conv2d(a.to(dt), W, B, stride=tuple(L.stride), padding=tuple(L.padding))      # (N, O, H', W')
    else:
        z = F.linear(a.to(dt), W, B)                                              # (N, O)
    return z, k


# Values a batch may hold in one tensor. A batch allocates a handful of float64/int64 temporaries
# the size of its widest layer, so this keeps one batch near 32 MB per temporary however many
# samples are simulated (the recorded payloads, kept for every sample, come on top).
BATCH_VALUES = 2**22


def batch_size(net: IntNetwork, kernel: str = "auto") -> int:
    """Samples per batch: BATCH_VALUES // (values per sample of the widest tensor), at least 1.

    The widest tensor is a layer's output, or for a conv layer on the int64 kernel the window
    copy of the exact correlation (output positions x fan-in).
    """
    widest = int(np.prod(net.input_shape))
    for L in net.layers:
        n = int(np.prod(L.out_shape))
        if L.kind == "conv" and _kernel_for(L, kernel) == "int64":
            n = int(np.prod(L.out_shape[1:])) * L.fan_in
        widest = max(widest, n)
    return max(1, BATCH_VALUES // max(widest, 1))


@torch.no_grad()
def simulate(net: IntNetwork, x_int, record: bool = True, limit: bool = True, kernel: str = "auto",
             batch: int | None = None, stats: bool = True) -> SimResult:
    """Run the integer network on `x_int` (N, C, H, W) input payloads in 0..input_q.

    limit=False ignores the declared accumulator width: that is the dense "quantized forward".
    stats=False skips spike counts, |V| maxima and the single-spike check (decisions only).
    batch=None takes batch_size(net, kernel) samples at a time (bounded memory for any N).
    """
    if kernel not in KERNELS:
        raise ValueError(f"kernel must be one of {KERNELS}; got {kernel!r}")
    batch = batch_size(net, kernel) if batch is None else int(batch)
    x = np.asarray(x_int)
    if x.ndim != 4 or tuple(x.shape[1:]) != tuple(net.input_shape):
        raise ValueError(f"inputs must have shape (N, {', '.join(map(str, net.input_shape))}); got {x.shape}")
    if x.size and (x.min() < 0 or x.max() > net.input_q):
        raise ValueError(f"input payloads must lie in 0..{net.input_q}; got {x.min()}..{x.max()}")
    parts = [_run(net, torch.from_numpy(x[s:s + batch].astype(np.int64)), record, limit, kernel, stats)
             for s in range(0, max(len(x), 1), batch)]
    if len(parts) == 1:
        return parts[0]
    cat = lambda f: np.concatenate([getattr(p, f) for p in parts])  # noqa: E731
    return SimResult(input_payloads=cat("input_payloads"),
                     payloads=[np.concatenate([p.payloads[i] for p in parts]) for i in range(len(net.layers))]
                     if record else [],
                     spike_counts=cat("spike_counts"), input_spikes=cat("input_spikes"), potentials=cat("potentials"),
                     decisions=cat("decisions"), early_decisions=cat("early_decisions"),
                     first_spike_step=cat("first_spike_step"), max_abs_v=cat("max_abs_v"),
                     overflows=cat("overflows"), kernels=parts[0].kernels)


def _run(net: IntNetwork, a: torch.Tensor, record: bool, limit: bool, kernel: str, stats: bool = True) -> SimResult:
    """One batch. Values travel as float tensors holding exact integers wherever a layer's bound
    allows it (see weighted_sum and arith.requantize_float), else as int64."""
    N, nL = a.shape[0], len(net.layers)
    counts = np.zeros((N, nL), dtype=np.int64)
    maxv = np.zeros((N, nL), dtype=np.int64)
    over = np.zeros((N, nL), dtype=np.int64)
    payloads, kernels = [], []
    x0 = a
    a = a.to(torch.float32)                  # payloads <= 255 (sums <= n * 255) are exact in float32
    early = np.full(N, -1, dtype=np.int64)
    first = np.full(N, -1, dtype=np.int64)
    v = None
    pooled_early = False
    for i, L in enumerate(net.layers):
        used = "none"
        if L.kind == "maxpool" and pooled_early:
            pooled_early = False
        elif L.kind == "maxpool":   # max commutes with the monotone quantizer
            a = max_pool(a, L.kernel, L.stride, L.padding)
        elif L.kind == "sumpool":
            a = F.avg_pool2d(a, tuple(L.kernel), tuple(L.stride), divisor_override=1)
        else:
            limited = bool(limit and net.acc_limit_bits)
            acc = min(net.acc_limit_bits, L.acc_bits) if limited else L.acc_bits
            # |V| < 2^(acc_bits-1) <= 2^23: the potential, its bias and a wrap-around stay exact in float32
            f32 = _kernel_for(L, kernel) == "float32" and L.acc_bits <= 24 and (not limited or net.acc_limit_bits <= 24)
            z, used = weighted_sum(L, a, kernel, bias=f32)
            fast = used != "int64" and arith.float_requantize_ok(acc, L.m0, L.shift)
            if f32:
                v = z
            else:
                dt = torch.float64 if fast else torch.int64
                v = z.to(dt) + torch.from_numpy(L.bias).to(dt).reshape((1, -1) + (1,) * (z.ndim - 2))
            if stats:
                maxv[:, i] = v.abs().reshape(N, -1).amax(dim=1).numpy() if v.numel() else 0
            if limit and net.acc_limit_bits:
                v, ov = arith.limit_accumulator(v, net.acc_limit_bits, net.overflow)
                over[:, i] = ov.reshape(N, -1).sum(dim=1).numpy()
            nxt = net.layers[i + 1] if i + 1 < nL else None
            if fast and nxt is not None and nxt.kind == "maxpool" and not (stats or record):
                # requantize is monotone in V, so pooling V first gives the same payloads on 1/n of the values
                v = max_pool(v, nxt.kernel, nxt.stride, nxt.padding)
                pooled_early = True
            if fast and v.dtype == torch.float32 and arith.float_requantize_ok(acc, L.m0, L.shift, 24):
                a = arith.requantize_float(v, L.m0, L.shift, L.q_out)  # exact in float32: no float64 round trip
            elif fast:
                a = arith.requantize_float(v.to(torch.float64), L.m0, L.shift, L.q_out).to(torch.float32)  # (N, O, ...)
            else:   # the float path is not proven exact here: integers only (v may be a float32 from the kernel)
                a = arith.requantize(v.to(torch.int64), L.m0, L.shift, L.q_out).to(torch.float32)
        kernels.append(used)
        if stats and L.kind != "sumpool" and a.numel() and (float(a.min()) < 0 or float(a.max()) > L.q_out):
            # one spike carries at most Q; anything else would need a second spike
            raise RuntimeError(f"layer {L.name}: payload outside 0..{L.q_out}")
        if stats and L.kind != "sumpool" and (not L.is_output or net.coding == "ttfs"):
            counts[:, i] = (a > 0).reshape(N, -1).sum(dim=1).numpy()
        if L.is_output and net.coding == "ttfs":
            # largest payload = earliest spike; argmax_first gives the lowest index on ties
            ai = a.to(torch.int64)
            best = ai.max(dim=1).values.numpy()
            early = np.where(best > 0, arith.argmax_first(ai).numpy(), -1)
            first = np.where(best > 0, L.q_out - best, -1)
        if record:
            payloads.append(a.to(torch.int64).numpy())
    pot = v.to(torch.int64)
    return SimResult(input_payloads=x0.numpy(), payloads=payloads, spike_counts=counts,
                     input_spikes=(x0 > 0).reshape(N, -1).sum(dim=1).numpy(), potentials=pot.numpy(),
                     decisions=np.asarray(arith.argmax_first(pot).numpy(), dtype=np.int64), early_decisions=early,
                     first_spike_step=first, max_abs_v=maxv, overflows=over, kernels=kernels)


def quantized_forward(net: IntNetwork, x_int, kernel: str = "auto") -> np.ndarray:
    """Dense integer evaluation without the declared accumulator width: (N, n_classes) potentials."""
    return simulate(net, x_int, record=False, limit=False, kernel=kernel).potentials
