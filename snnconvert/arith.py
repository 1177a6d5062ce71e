"""The integer arithmetic of the single-spike network, defined once.

The converter, the vectorized simulator, the event-by-event reference simulator, the exporter
and `verify` all call these functions; none of them re-implements rounding, clamping or
thresholds. Every function accepts numpy arrays or torch tensors (int64) and returns the same kind.

Scales (float model ~ integer network):
    activation of layer l:  x_l ~ s_l * a_l,   a_l integer in 0..Q,  Q = 2^p - 1
    weights:                w   ~ s_w * W,     W integer in [-(2^(k-1)-1), 2^(k-1)-1]
    bias:                   B   = round(b / (s_w * s_in))

One layer, integer only:
    V   = sum_i W_i * a_i + B                       (accumulated potential at window close)
    M   = s_w * s_in / s_out = M0 * 2^-n            (fixed-point multiplier, M0 >= 0 integer)
    a   = clamp((V * M0 + 2^(n-1)) >> n, 0, Q)      (round half up; >> is an arithmetic shift = floor)

Tie rule: exact halves round up (towards +inf), everywhere, at run time. Offline quantization of
float weights uses round-half-to-even (`np.rint`), like `torch.fake_quantize_per_tensor_affine`.

Time-to-first-spike form of the same value (falling threshold):
    during the output window, at step t in 0..Q-1 the neuron fires if
        V * M0 + 2^(n-1) >= (Q - t) * 2^n
    the first such t is t = Q - a, so the spike time carries exactly the payload value a;
    a = 0 never crosses (the threshold never falls below 1 * 2^n) and sends nothing.
"""

from __future__ import annotations

import math
import sys

import numpy as np

ROUNDING_WORDS = ("requantize the potential with an integer multiply and an arithmetic right shift; "
                  "exact halves round up (towards +infinity); clamp to 0..Q")
ROUNDING_FORMULA = "a = clamp((V * M0 + 2^(n-1)) >> n, 0, Q)"
TTFS_FORMULA = "fire at the first step t in 0..Q-1 with V * M0 + 2^(n-1) >= (Q - t) * 2^n; then a = Q - t"

# Widest multiplier mantissa we allow; with it V * M0 must stay inside int64.
MAX_MULTIPLIER_BITS = 31
# A channel's weight range is floored at this fraction of its layer's largest (weight_scale).
CHANNEL_RANGE_FLOOR = 2.0 ** -8
# The weight range of a layer whose weights are all zero (weight_scale).
ZERO_RANGE = 1.0
# Bits of the integers requantize works in: V * M0 + 2^(n-1) must stay inside int64.
WORD_BITS = 64


def _torch():
    """The torch module if something has imported it already, else None.

    arith never imports torch itself: it runs with numpy alone (checking an export needs no
    torch), and a tensor can only exist once torch is loaded, so looking it up is enough."""
    return sys.modules.get("torch")


def _is_torch(x) -> bool:
    torch = _torch()
    return torch is not None and isinstance(x, torch.Tensor)


def clip(x, lo, hi):
    """clamp(x, lo, hi) for numpy or torch integer arrays."""
    if _is_torch(x):
        return x.clamp(lo, hi)
    return np.clip(x, lo, hi)


def payload_max(bits: int) -> int:
    """Q = 2^p - 1: the largest payload of p bits (p = 1 is binary, Q = 1)."""
    return (1 << int(bits)) - 1


def weight_max(bits: int) -> int:
    """2^(k-1) - 1: symmetric signed range, so k = 2 gives ternary weights {-1, 0, 1}."""
    return (1 << (int(bits) - 1)) - 1


def time_steps(bits: int) -> int:
    """T = 2^p steps per layer window in ttfs coding (steps 0..Q-1 carry values Q..1)."""
    return 1 << int(bits)


def round_half_even(x: np.ndarray) -> np.ndarray:
    """Offline float->int rounding: half to even, like torch.round / np.round."""
    return np.rint(np.asarray(x, dtype=np.float64)).astype(np.int64)


def weight_scale(w: np.ndarray, bits: int, per_channel: bool, rule: str = "max",
                 percentile: float = 99.99, floor: float | None = None) -> np.ndarray:
    """s_w = r / (2^(k-1) - 1), with r = max|w| (rule "max"), the given percentile of |w|
    (rule "percentile", `percentile` = Q), or, rule "mean" with `percentile` = c:

        r = min(max|w|, 2 c mean|w| (2^(k-1) - 1)),  i.e.  s_w = min(max|w| / (2^(k-1) - 1), 2 c mean|w|)

    The "mean" rule sets the first rounding boundary of the grid, s_w / 2, at the threshold
    Delta = c mean|w| of Ternary Weight Networks (Li & Liu 2016, Delta ~ 0.7 mean|w| for weights
    spread like a normal or uniform law): at k = 2 (ternary) a weight becomes +-1 when |w| > Delta.
    With max-abs scales a ternary grid zeroes every weight below max|w| / 2, which for a wide
    layer is nearly all of them. The stored level is s_w = 2 Delta rather than TWN's mean of |w| above
    Delta: one scale sets both the boundary and the level on the integer grid, and the level's
    constant factor per layer (or channel) is absorbed by the next requantization. At wider grids
    the same step 2 Delta holds until the grid would reach past max|w|; then the max rule takes over.

    Per channel, each channel's range is floored at a fraction of the layer's largest:
        r_o = max(r_o, f * max_o r_o),   f = CHANNEL_RANGE_FLOOR = 2^-8 unless `floor` is given,
    so per-channel scales span at most 8 bits below the layer's widest channel. Without it a
    near-dead channel (largest |w| ~ 1e-12 next to 0.5) gets a scale ~1e-12 times the others:
    its multiplier M = s_w * s_in / s_out needs a shift n far beyond 63 bits and its bias
    B = b / (s_w * s_in) overflows int64. With the floor, such a channel's weights round to the
    few levels (usually 0) that the floored grid gives them, like a per-tensor scale would.
    A layer whose largest range is 0 (all-zero weights, or a zero percentile everywhere) gets
    r = ZERO_RANGE = 1.0 for every channel: any scale holds W = 0 exactly, and 1 (the unit of
    the float weights) keeps B = b / (s_w * s_in) and M at the size of the float bias and scales.
    Returns one scale per output channel (axis 0); per-layer scales are repeated so callers
    always see shape (O,).
    """
    w = np.asarray(w, dtype=np.float64)
    a = np.abs(w.reshape(w.shape[0], -1))  # (O, fan_in)
    if not per_channel:
        a = a.reshape(1, -1)
    if rule == "max":
        r = a.max(axis=1)
    elif rule == "percentile":
        r = np.percentile(a, percentile, axis=1)
    elif rule == "mean":
        r = np.minimum(a.max(axis=1), 2.0 * float(percentile) * a.mean(axis=1) * weight_max(bits))
    else:
        raise ValueError(f"unknown weight scale rule {rule!r}; use 'max', 'percentile' or 'mean'")
    r = channel_ranges(r, CHANNEL_RANGE_FLOOR if floor is None else floor)
    s = r / weight_max(bits)
    if not per_channel:
        s = np.repeat(s, w.shape[0])
    return s.astype(np.float64)


def channel_ranges(r, floor: float | None = None):
    """r_o -> max(r_o, f * max r) with f = CHANNEL_RANGE_FLOOR; all r = 0 -> ZERO_RANGE (see weight_scale).

    numpy (float64) or torch, like `r`; the rule of `weight_scale`, shared with the training twin."""
    f = CHANNEL_RANGE_FLOOR if floor is None else float(floor)
    if _is_torch(r):
        torch = _torch()
        top = r.max()
        return torch.where(top > 0, torch.maximum(r, f * top), torch.full_like(r, ZERO_RANGE))
    r = np.asarray(r, dtype=np.float64)
    top = float(r.max(initial=0.0))
    if not top > 0:
        return np.full(r.shape, ZERO_RANGE)
    return np.maximum(r, f * top)


def quantize_weights(w: np.ndarray, scale: np.ndarray, bits: int) -> np.ndarray:
    """W = clamp(round_half_even(w / s_w[o]), -(2^(k-1)-1), 2^(k-1)-1), per output channel o."""
    w = np.asarray(w, dtype=np.float64)
    s = np.asarray(scale, dtype=np.float64).reshape((-1,) + (1,) * (w.ndim - 1))
    qm = weight_max(bits)
    return np.clip(round_half_even(w / s), -qm, qm)


def quantize_bias(b: np.ndarray, w_scale: np.ndarray, in_scale: float) -> np.ndarray:
    """B = round_half_even(b / (s_w[o] * s_in)): the bias at the accumulator's scale.

    Refuses (ValueError) a bias that does not fit in |B| < 2^62, where int64 would wrap silently.
    """
    x = np.asarray(b, dtype=np.float64) / (np.asarray(w_scale, dtype=np.float64) * float(in_scale))
    if not np.all(np.abs(x) < 2.0 ** (WORD_BITS - 2)):
        raise ValueError(f"bias at the accumulator's scale reaches {np.max(np.abs(x)):.3g}, beyond 2^62")
    return round_half_even(x)


# ---- torch twins of the offline quantization, for conversion-aware training ----------------
# Each grid is computed in float64 exactly as its numpy form computes it, so the aware model trains
# on the very integers the converter stores (same s_w, W, B); the fake-quantized value W * s is
# then formed in the weight's dtype.
# Gradients pass straight through the rounding (Bengio et al. 2013); scales are not learned.
# torch is imported inside them only, so arith still imports with numpy alone.

def weight_scale_torch(w, bits: int, per_channel: bool, rule: str = "max", percentile: float = 99.99,
                       floor: float | None = None):
    """`weight_scale` of a torch weight tensor, as a float64 tensor (O,): the numpy rule applied to
    the detached values, so both forms give the same scale bit for bit."""
    import torch
    return torch.from_numpy(weight_scale(w.detach().cpu().double().numpy(), bits, per_channel, rule, percentile,
                                         floor))


def quantize_weights_torch(w, scale, bits: int):
    """`quantize_weights` of a torch weight tensor: W = clamp(round_half_even(w / s_w[o]), -qmax, qmax),
    the same float64 division and rounding, as a float64 tensor of integers (no gradient)."""
    import torch
    s = torch.as_tensor(scale, dtype=torch.float64).reshape((-1,) + (1,) * (w.dim() - 1))
    qm = weight_max(bits)
    return torch.clamp(torch.round(w.detach().double() / s), -qm, qm)


def fake_quantize_weights_torch(w, scale, bits: int):
    """w_q = W * s_w[o] in w's dtype, W = `quantize_weights_torch`; d w_q / d w = 1 (straight through).

    The product is formed in w's dtype, like torch.fake_quantize_per_channel_affine."""
    import torch
    s = torch.as_tensor(scale, dtype=torch.float64).reshape((-1,) + (1,) * (w.dim() - 1))
    wq = quantize_weights_torch(w, scale, bits).to(w.dtype) * s.to(w.dtype)
    return w + (wq - w).detach()


def quantize_bias_torch(b, w_scale, in_scale: float):
    """`quantize_bias` of a torch bias: B = round_half_even(b / (s_w[o] * s_in)) in float64, as a float64
    tensor of integers (no gradient). No range check: the converter refuses |B| >= 2^62."""
    import torch
    s_acc = torch.as_tensor(w_scale, dtype=torch.float64) * float(in_scale)
    return torch.round(b.detach().double() / s_acc)


def fake_quantize_bias_torch(b, w_scale, in_scale: float):
    """b_q = B * s_acc[o] in b's dtype, s_acc = s_w * s_in, B = `quantize_bias_torch`; straight through."""
    import torch
    s_acc = torch.as_tensor(w_scale, dtype=torch.float64) * float(in_scale)
    bq = quantize_bias_torch(b, w_scale, in_scale).to(b.dtype) * s_acc.to(b.dtype)
    return b + (bq - b).detach()


def payload_grid(u, q: int):
    """a = clamp(round_half_even(u), 0, Q) with u = x / s: the payload grid of an activation.

    numpy: float64 integers. torch: u's dtype, and the rounding passes gradients straight through
    (the clamp does not: zero outside 0..Q), as the clip-and-quantize activation needs."""
    if _is_torch(u):
        torch = _torch()
        return torch.clamp(u + (torch.round(u) - u).detach(), 0, int(q))
    return np.clip(np.rint(np.asarray(u, dtype=np.float64)), 0, int(q))


def fixed_point_multiplier(m: np.ndarray, bits: int = 16, acc_bits: int | None = None
                           ) -> tuple[np.ndarray, np.ndarray]:
    """Split each real multiplier M >= 0 into integers (M0, n) with M ~ M0 * 2^-n, n >= 1.

    M0 has exactly `bits` significant bits (2^(bits-1) <= M0 < 2^bits), so the relative error
    of the split is at most 2^-bits, and n >= 1 so the rounding constant 2^(n-1) is an integer.
    Edge cases:
      - M = 0 gives (0, 1), which makes every payload 0.
      - Carry: when M * 2^n rounds up to 2^bits, the split is (2^(bits-1), n - 1).
      - M >= 2^(bits-1) (or rounding up to it) would need n < 1 or a wider M0: refused
        (ValueError); it means an output scale `bits` bits below the input's.
      - With `acc_bits`, a multiplier that cannot move any potential |V| < 2^(acc_bits-1) off
        payload 0, i.e. M0 * 2^(acc_bits-1) <= 2^(n-1), is stored as (0, 1): the same payloads
        (all 0) and a shift that stays small.
    """
    if not 2 <= bits <= MAX_MULTIPLIER_BITS:
        raise ValueError(f"multiplier bits must be in [2, {MAX_MULTIPLIER_BITS}], got {bits}")
    m = np.atleast_1d(np.asarray(m, dtype=np.float64))
    if np.any(m < 0) or not np.all(np.isfinite(m)):
        raise ValueError("multipliers must be finite and >= 0")
    m0 = np.zeros(m.shape, dtype=np.int64)
    n = np.ones(m.shape, dtype=np.int64)
    for i, mi in enumerate(m):
        if mi == 0:
            continue
        mant, e2 = math.frexp(mi)                  # mi = mant * 2^e2, 0.5 <= mant < 1 (exact)
        ni = bits - e2                             # M * 2^ni = mant * 2^bits in [2^(bits-1), 2^bits)
        mi0 = int(round(math.ldexp(mant, bits)))   # exact: ldexp only moves the exponent
        if mi0 == 1 << bits:                       # rounding carried into the next power of two
            mi0, ni = mi0 >> 1, ni - 1
        if ni < 1:
            raise ValueError(f"multiplier {mi:.6g} does not fit a {bits}-bit M0 with a shift n >= 1 "
                             f"(needs M < 2^{bits - 1})")
        if acc_bits is not None and mi0 << (int(acc_bits) - 1) <= 1 << (ni - 1):
            continue                               # silent: no potential reaches payload 1
        m0[i], n[i] = mi0, ni
    return m0, n


def check_requantize_range(acc_bits: int, m0, n, q: int | None = None, ttfs: bool = False) -> None:
    """Refuse (ValueError) integers that would leave int64 in requantize or ttfs_crosses.

    For |V| < 2^(acc_bits-1) and M0 of b bits (M0 < 2^b):
        |V * M0| < 2^(acc_bits - 1 + b) <= 2^62   needs  acc_bits + b <= 63
        2^(n-1) <= 2^61                           needs  1 <= n <= 62
    so V * M0 + 2^(n-1) < 2^63. The ttfs threshold (Q - t) * 2^n <= Q * 2^n < 2^63 also needs
    bits(Q) + n <= 63. numpy wraps int64 silently, hence the check.
    """
    m0 = np.asarray(m0, dtype=np.int64)
    n = np.asarray(n, dtype=np.int64)
    if m0.size and int(m0.min()) < 0:
        raise ValueError(f"multiplier mantissas M0 must be >= 0; got {int(m0.min())}")
    mb = int(m0.max(initial=0)).bit_length()
    if int(acc_bits) + mb > WORD_BITS - 1:
        raise ValueError(f"V * M0 needs {int(acc_bits)} + {mb} = {int(acc_bits) + mb} bits, more than "
                         f"{WORD_BITS - 1} (accumulator bits + multiplier bits must be <= 63)")
    if n.size and (int(n.min()) < 1 or int(n.max()) > WORD_BITS - 2):
        raise ValueError(f"shifts n must lie in 1..{WORD_BITS - 2}; got {int(n.min())}..{int(n.max())}")
    if ttfs and q is not None and n.size and int(q).bit_length() + int(n.max()) > WORD_BITS - 1:
        raise ValueError(f"the ttfs threshold Q * 2^n needs {int(q).bit_length()} + {int(n.max())} bits, "
                         f"more than {WORD_BITS - 1}")


def _value_bits(v) -> int:
    """Signed width of the values of an int64 array: the least b with -2^(b-1) <= V < 2^(b-1)."""
    if _is_torch(v):
        torch = _torch()
        if v.dtype != torch.int64:
            raise TypeError(f"requantize needs int64 potentials; got {v.dtype}")
        lo, hi = (int(v.min()), int(v.max())) if v.numel() else (0, 0)
    else:
        v = np.asarray(v)
        if v.dtype != np.int64:
            raise TypeError(f"requantize needs int64 potentials; got {v.dtype}")
        lo, hi = (int(v.min()), int(v.max())) if v.size else (0, 0)
    return max(hi, -1 - lo).bit_length() + 1


def requantize(v, m0, n, q: int, channel_axis: int = 1):
    """a = clamp((V * M0 + 2^(n-1)) >> n, 0, Q).

    `v` is the int64 potential, shape (N, C, ...) or (N, C); `m0` and `n` are per channel,
    shape (C,), broadcast along `channel_axis`. `>>` is the arithmetic shift (floor), so the
    result is floor(V * M + 1/2) with M = M0 * 2^-n: exact halves round towards +infinity
    (2.5 -> 3, -2.5 -> -2), unlike round-half-away-from-zero helpers (-2.5 -> -3). The two rules
    differ only for negative halves, and the clamp at 0 maps both of their results there to 0
    (no spike): for V * M >= 0 they agree, and every V * M < 0 ends at 0 under either rule. So
    the cheaper rule (one add, one shift) never changes a payload.

    Valid input (checked, else ValueError/TypeError): int64 `v`, M0 >= 0, 1 <= n <= 62, and
    bits(max |V|) + 1 + bits(max M0) <= 63, so V * M0 + 2^(n-1) stays inside int64.
    """
    check_requantize_range(_value_bits(v), m0, n)
    m0b, nb = _per_channel(v, m0, n, channel_axis)
    half = _shl(1, nb - 1, v)
    out = (v * m0b + half) >> nb
    return clip(out, 0, int(q))


def ttfs_crosses(v, m0, n, q: int, t: int, channel_axis: int = 1):
    """Boolean: does the falling threshold at step t (0 <= t < Q) lie at or below the potential?

        V * M0 + 2^(n-1) >= (Q - t) * 2^n

    The first step where this holds is t = Q - a with a = requantize(V); it never holds for a = 0.
    Valid input as for `requantize`, and bits(Q) + n <= 63 for the threshold (checked).
    """
    check_requantize_range(_value_bits(v), m0, n, q, ttfs=True)
    m0b, nb = _per_channel(v, m0, n, channel_axis)
    half = _shl(1, nb - 1, v)
    return v * m0b + half >= _shl(int(q) - int(t), nb, v)


def encode_time(a, q: int):
    """Spike step of a payload in ttfs coding: t = Q - a for a > 0, and -1 (no spike) for a = 0."""
    if _is_torch(a):
        torch = _torch()
        return torch.where(a > 0, int(q) - a, torch.full_like(a, -1))
    a = np.asarray(a)
    return np.where(a > 0, int(q) - a, -1)


def decode_time(t, q: int):
    """Payload carried by a spike at step t: a = Q - t; no spike (-1) decodes to 0."""
    if _is_torch(t):
        torch = _torch()
        return torch.where(t >= 0, int(q) - t, torch.zeros_like(t))
    t = np.asarray(t)
    return np.where(t >= 0, int(q) - t, 0)


def accumulator_bits(fan_in: int, w_absmax: int, q_in: int, b_absmax: int) -> int:
    """Signed width that can never overflow: ceil(log2(F * max|W| * Q_in + |B| + 1)) + 1."""
    bound = int(fan_in) * int(w_absmax) * int(q_in) + int(b_absmax)
    return max(1, math.ceil(math.log2(bound + 1))) + 1


def limit_accumulator(v, bits: int, mode: str):
    """Apply a declared accumulator width to the potential at window close.

    mode "saturate": clamp to [-2^(b-1), 2^(b-1)-1]; mode "wrap": two's complement wrap-around.
    Returns (limited, overflow_mask). The check is on the potential at window close, so it is
    independent of event order (wrap-around is order-free anyway; a per-add saturating adder can
    differ from this when a partial sum leaves the range and comes back).
    """
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    over = (v < lo) | (v > hi)
    if mode == "saturate":
        return clip(v, lo, hi), over
    if mode == "wrap":
        span = 1 << bits
        return ((v - lo) % span) + lo, over
    raise ValueError(f"unknown overflow mode {mode!r}; use 'saturate' or 'wrap'")


def argmax_first(v, axis: int = -1):
    """Decision readout: index of the largest potential; ties go to the lowest index."""
    if _is_torch(v):
        torch = _torch()
        # torch.argmax does not promise the first index on ties; compute it explicitly
        mx = v.max(dim=axis, keepdim=True).values
        idx = torch.arange(v.shape[axis]).reshape([-1 if d == (axis % v.ndim) else 1 for d in range(v.ndim)])
        big = torch.where(v == mx, idx, torch.full_like(idx, v.shape[axis]).expand_as(v))
        return big.min(dim=axis).values
    return np.argmax(np.asarray(v), axis=axis)  # numpy documents first occurrence


def _per_channel(v, m0, n, axis):
    if _is_torch(v):
        torch = _torch()
        m0 = torch.as_tensor(np.asarray(m0), dtype=torch.int64)
        n = torch.as_tensor(np.asarray(n), dtype=torch.int64)
    else:
        m0 = np.asarray(m0, dtype=np.int64)
        n = np.asarray(n, dtype=np.int64)
    if m0.ndim == 0:
        return m0, n
    shape = [1] * v.ndim
    shape[axis] = -1
    return m0.reshape(shape), n.reshape(shape)


def _shl(base: int, shift, like):
    """base << shift for scalar base and array shift, in the array library of `like`."""
    if _is_torch(like):
        torch = _torch()
        return torch.as_tensor(base, dtype=torch.int64) << shift
    return np.left_shift(np.int64(base), shift)


def quantize_input(x, q: int):
    """a0 = clamp(round_half_even(frame), 0, Q_in): frame values become the input payloads.

    Binary frames (Q_in = 1) give one spike per active pixel; count frames are clipped to Q_in.
    NaN frames are refused. Returns int64 (numpy or torch, like `x`).
    """
    if _is_torch(x):
        torch = _torch()
        if torch.isnan(x).any():
            raise ValueError("frames contain NaN")
        return torch.round(x.double()).clamp(0, int(q)).to(torch.int64)
    x = np.asarray(x, dtype=np.float64)
    if np.isnan(x).any():
        raise ValueError("frames contain NaN")
    return np.clip(round_half_even(x), 0, int(q))


def requantize_float(v, m0, n, q: int, channel_axis: int = 1):
    """a = clamp(floor((V * M0 + 2^(n-1)) * 2^-n), 0, Q) on float64 (or float32) tensors holding integers.

    The same integers as `requantize` while |V| * M0 + 2^(n-1) < 2^53 (float32: 2^24): every product
    and sum is an integer the type holds exactly, scaling by 2^-n is exact, and floor equals the
    arithmetic right shift. Callers check that bound (`float_requantize_ok`, with significand=24 for
    float32); it lets a simulator stay in floating point, where CPU kernels are fastest, without
    changing a single payload. The constants take v's dtype (a float32 tensor is not promoted).
    """
    shape = [1] * v.ndim
    shape[channel_axis] = -1
    if _is_torch(v):
        torch = _torch()
        dt = v.dtype if v.dtype in (torch.float32, torch.float64) else torch.float64
        m0b = torch.as_tensor(np.asarray(m0, dtype=np.float64)).reshape(shape).to(dt)
        sc = torch.as_tensor(np.ldexp(1.0, -np.asarray(n, dtype=np.int64))).reshape(shape).to(dt)
        half = torch.as_tensor(np.ldexp(1.0, np.asarray(n, dtype=np.int64) - 1)).reshape(shape).to(dt)
        out = v.to(dt) * m0b                            # one temporary, then in place
        return out.add_(half).mul_(sc).floor_().clamp_(0, int(q))
    dt = v.dtype if np.asarray(v).dtype in (np.float32, np.float64) else np.float64
    m0b = np.asarray(m0, dtype=np.float64).reshape(shape).astype(dt)
    n = np.asarray(n, dtype=np.int64).reshape(shape)
    return np.clip(np.floor((v * m0b + np.ldexp(1.0, n - 1).astype(dt)) * np.ldexp(1.0, -n).astype(dt)), 0, int(q))


def float_requantize_ok(acc_bits: int, m0, n, significand: int = 53) -> bool:
    """True when |V| * M0 + 2^(n-1) < 2^significand for every |V| < 2^(acc_bits-1) (see requantize_float):
    significand 53 for float64, 24 for float32."""
    top = (1 << (int(acc_bits) - 1)) * int(np.max(m0, initial=0)) + (1 << (int(np.max(n, initial=1)) - 1))
    return top < 1 << int(significand)
