"""The torch twins of arith's offline quantization equal their numpy forms exactly.

Conversion-aware training uses the twins; the converter uses the numpy forms. Equality (not
closeness) is what lets an aware model train on the very integers the converter stores.
"""

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st

from snnconvert import arith as A


def _weights(kind: str, seed: int, dtype) -> np.ndarray:
    """(6, 3, 3, 3) weight tables of the cases the scale rule treats specially."""
    rng = np.random.default_rng(seed)
    w = rng.standard_normal((6, 3, 3, 3)) * 0.3
    if kind == "near_dead":            # one channel ~1e-12 next to ~0.5: the per-channel floor decides it
        w[2] *= 1e-12
    elif kind == "dead_channel":
        w[4] = 0.0
    elif kind == "all_zero":
        w[:] = 0.0
    elif kind == "ties":               # multiples of 1/16 and their halves: exact ties of w / s for s = 2^-k
        w = np.round(w * 32) / 32
        w[0, 0, 0, 0] = 7 / 16          # largest |w|, so the max rule gives s = (7/16) / 7 = 1/16 at 4 bits
    elif kind == "duplicates":         # many equal |w|: percentiles between equal order statistics
        w = np.sign(w) * np.round(np.abs(w) * 4) / 4
    return w.astype(dtype)


KINDS = ["random", "near_dead", "dead_channel", "all_zero", "ties", "duplicates"]
RULES = [("max", 100.0), ("percentile", 99.9), ("percentile", 50.0), ("percentile", 12.5), ("mean", 0.7), ("mean", 3.0)]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("rule,pct", RULES)
@pytest.mark.parametrize("per_channel", [False, True])
@pytest.mark.parametrize("bits", [2, 4, 8])
def test_weight_and_bias_twins_equal_numpy(kind, rule, pct, per_channel, bits):
    for dtype in (np.float32, np.float64):
        w = _weights(kind, bits, dtype)
        b = (np.random.default_rng(bits + 1).standard_normal(6) * 0.2).astype(dtype)
        s_np = A.weight_scale(w, bits, per_channel, rule, pct)
        s_t = A.weight_scale_torch(torch.from_numpy(w), bits, per_channel, rule, pct)
        assert s_t.dtype == torch.float64 and np.array_equal(s_t.numpy(), s_np)
        W_np = A.quantize_weights(w, s_np, bits)
        W_t = A.quantize_weights_torch(torch.from_numpy(w), s_t, bits)
        assert np.array_equal(W_t.numpy().astype(np.int64), W_np)
        for s_in in (1.0, 0.37 / 15, 2.0 ** -5):
            B_np = A.quantize_bias(b, s_np, s_in)
            B_t = A.quantize_bias_torch(torch.from_numpy(b), s_t, s_in)
            assert np.array_equal(B_t.numpy().astype(np.int64), B_np)


def test_floor_argument_reaches_both_forms():
    w = _weights("near_dead", 0, np.float64)
    for floor in (0.0, 2.0 ** -4):
        s_np = A.weight_scale(w, 4, True, floor=floor)
        assert np.array_equal(A.weight_scale_torch(torch.from_numpy(w), 4, True, floor=floor).numpy(), s_np)
    # floor 2^-4 lifts the ~1e-12 channel to 1/16 of the widest (the rule of arith.channel_ranges)
    assert s_np[2] == pytest.approx(s_np.max() / 16)


def test_fake_quantized_values_are_the_integer_grid_times_the_scale():
    w = torch.from_numpy(_weights("random", 3, np.float32)).requires_grad_(True)
    s = A.weight_scale_torch(w, 3, True, "percentile", 99.0)
    wq = A.fake_quantize_weights_torch(w, s, 3)
    W = A.quantize_weights(w.detach().numpy(), s.numpy(), 3)
    assert wq.dtype == torch.float32
    expect = W.astype(np.float32) * s.numpy().astype(np.float32).reshape(-1, 1, 1, 1)
    assert np.array_equal(wq.detach().numpy(), expect)
    wq.sum().backward()                              # straight-through: d w_q / d w = 1
    assert torch.equal(w.grad, torch.ones_like(w))
    b = torch.tensor([0.3, -0.2, 0.05, 0.0, 1.0, -1.0], requires_grad=True)
    bq = A.fake_quantize_bias_torch(b, s, 0.1)
    B = A.quantize_bias(b.detach().numpy(), s.numpy(), 0.1)
    assert np.array_equal(bq.detach().numpy(), B.astype(np.float32) * (s.numpy() * 0.1).astype(np.float32))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-4.0, 20.0, allow_nan=False, width=32), min_size=1, max_size=40),
       st.integers(1, 255))
def test_payload_grid_twins_equal(values, q):
    u = np.array(values, dtype=np.float32)
    # exact halves too: k + 1/2 for k around 0..Q (round half to even, then clamp to 0..Q)
    u = np.concatenate([u, np.arange(-2, q + 2, dtype=np.float32) + np.float32(0.5)])
    got = A.payload_grid(torch.from_numpy(u), q)
    assert np.array_equal(got.numpy().astype(np.float64), A.payload_grid(u, q))


def test_payload_grid_rounds_half_to_even_and_clamps():
    # np.rint / torch.round: half to even (their documentation); clamp to 0..Q
    u = np.array([-0.5, 0.5, 1.5, 2.5, 3.5, 9.0])
    assert A.payload_grid(u, 3).tolist() == [0.0, 0.0, 2.0, 2.0, 3.0, 3.0]
