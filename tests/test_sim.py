"""Vectorized and event-by-event simulators agree exactly; single-spike invariants; overflow."""

import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import torch

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import split, trained  # noqa: E402

from snnconvert import arith  # noqa: E402
from snnconvert.convert import convert_model  # noqa: E402
from snnconvert.intnet import IntLayer  # noqa: E402
from snnconvert.sim import reference as R  # noqa: E402
from snnconvert.sim import simulate  # noqa: E402
from snnconvert.sim.vectorized import weighted_sum  # noqa: E402

torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine


def _net(kind, coding, k, p, per_channel=False, binary=True, **kw):
    (xtr, _), (xte, yte) = split(binary)
    model = trained(kind, binary)
    net = convert_model(model, xtr[:300], weight_bits=k, payload_bits=p, coding=coding, per_channel=per_channel,
                        input_q=1 if binary else 3, **kw)
    return net, model, arith.quantize_input(xte, net.input_q), yte


def _golden_from_values(a: np.ndarray, coding: str, q: int) -> np.ndarray:
    """Events a layer must emit, from its per-neuron values (the contract's golden order)."""
    a = a.reshape(-1)
    idx = np.nonzero(a)[0]
    t = q - a[idx] if coding == "ttfs" else np.zeros_like(idx)
    ev = np.array(list(zip(idx, t, a[idx])), dtype=R.EVENT_FIELDS)
    return ev[np.lexsort((ev["addr"], ev["t"]))]


CASES = [  # (model, coding, weight bits, payload bits, per-channel, binary frames)
    ("conv_max", "payload", 4, 4, False, True),
    ("conv_max", "ttfs", 4, 4, True, True),
    ("conv_max", "binary", 3, 1, False, True),
    ("conv_avg", "payload", 6, 3, True, True),
    ("conv_avg", "ttfs", 3, 3, False, True),
    ("conv_avg", "ttfs", 8, 5, True, True),
    ("mlp", "payload", 2, 2, False, False),
    ("mlp", "ttfs", 5, 6, True, False),
    ("mlp", "ttfs", 4, 1, False, False),      # count inputs (Q_in = 3) wider than the 1-bit hidden payloads
    ("mlp", "binary", 4, 1, True, False),
]


@pytest.mark.parametrize("kind,coding,k,p,pc,binary", CASES)
def test_simulators_agree_exactly(kind, coding, k, p, pc, binary):
    net, _, x, _ = _net(kind, coding, k, p, pc, binary)
    x = x[:300]
    vec = simulate(net, x)
    traces = R.run_batch(net, x, progress=False)
    for s, tr in enumerate(traces):
        assert np.array_equal(tr.input_events, _golden_from_values(x[s], coding, net.input_q))
        for i, L in enumerate(net.layers):
            if L.kind == "sumpool":
                assert tr.layer_events[i] is None
                continue
            if L.is_output and coding != "ttfs":
                assert len(tr.layer_events[i]) == 0
            else:
                want = _golden_from_values(vec.payloads[i][s], coding, L.q_out)
                assert np.array_equal(tr.layer_events[i], want), (s, L.name)
            # single spike: every address at most once per window
            assert len(np.unique(tr.layer_events[i]["addr"])) == len(tr.layer_events[i])
        assert np.array_equal(tr.potentials, vec.potentials[s])
        assert tr.decision == vec.decisions[s]
        assert tr.early_decision == vec.early_decisions[s]
        assert tr.max_abs_v == vec.max_abs_v[s].tolist()
        assert tr.overflows == vec.overflows[s].tolist()
    assert all(int(p_.max(initial=0)) <= L.q_out for p_, L in zip(vec.payloads, net.layers) if L.kind != "sumpool")


@pytest.mark.parametrize("kind,k,p,pc", [("conv_max", 4, 4, False), ("conv_avg", 5, 3, True), ("mlp", 3, 2, True)])
def test_ttfs_carries_the_same_values_as_payload(kind, k, p, pc):
    # the reference steps the falling threshold for real; its decoded times must equal payload values
    net_p, _, x, _ = _net(kind, "payload", k, p, pc)
    net_t, _, _, _ = _net(kind, "ttfs", k, p, pc)
    x = x[:150]
    for tp, tt in zip(R.run_batch(net_p, x, progress=False), R.run_batch(net_t, x, progress=False)):
        assert tp.decision == tt.decision
        for i, L in enumerate(net_p.layers):
            if L.kind == "sumpool" or L.is_output:
                continue
            ep, et = tp.layer_events[i], tt.layer_events[i]
            et = et[np.argsort(et["addr"], kind="stable")]
            assert np.array_equal(ep["addr"], et["addr"])
            assert np.array_equal(ep["payload"], arith.decode_time(et["t"], L.q_out))


def _conv_layer(rng, C, O, k, wmax, q, stride=1, pad=1, H=7):
    W = rng.integers(-wmax, wmax + 1, size=(O, C, k, k))
    Ho = (H + 2 * pad - k) // stride + 1
    return IntLayer("c", "conv", (C, H, H), (O, Ho, Ho), kernel=(k, k), stride=(stride, stride),
                    padding=(pad, pad), weight=W, bias=np.zeros(O, dtype=np.int64), q_in=q, q_out=1)


@pytest.mark.parametrize("C,O,k,wmax,q,stride,pad", [
    (2, 3, 3, 7, 15, 1, 1), (3, 2, 5, 127, 255, 2, 2), (1, 4, 3, 1, 1, 1, 0),
    (64, 2, 3, 127, 255, 1, 1),   # bound 576*127*255 > 2^24 (IEEE 754 binary32 has a 24-bit significand): float64 kernel
])
@pytest.mark.parametrize("kernel", ["auto", "float64", "int64"])
def test_integer_convolution_matches_scipy_correlate2d(C, O, k, wmax, q, stride, pad, kernel):
    rng = np.random.default_rng(C * 100 + k)
    L = _conv_layer(rng, C, O, k, wmax, q, stride, pad)
    a = rng.integers(0, q + 1, size=(3,) + L.in_shape)
    z, used = weighted_sum(L, torch.from_numpy(a), kernel)
    for n in range(3):
        for o in range(O):
            # scipy.signal.correlate2d on integer arrays is exact integer cross-correlation (torch's conv)
            ref = sum(scipy.signal.correlate2d(np.pad(a[n, c], pad), L.weight[o, c], mode="valid")
                      for c in range(C))[::stride, ::stride]
            assert np.array_equal(z[n, o].numpy(), ref)
    if kernel == "auto":
        # float32 holds every integer up to 2^24 exactly (IEEE 754-2008 binary32); only C = 64 exceeds it
        assert used == ("float64" if C == 64 else "float32")


def test_float32_kernel_is_exact_just_below_its_bound():
    # worst case F * max|W| * Q = 576 * 127 * 229 = 16,751,808 < 2^24 = 16,777,216 (IEEE 754 binary32 exact
    # integers; F = 64 * 3 * 3 = 576, hand-computed): the auto kernel is
    # float32; all-maximal inputs and weights hit the bound, and the result must equal int64
    rng = np.random.default_rng(1)
    L = _conv_layer(rng, 64, 2, 3, 127, 229)
    L.weight[0] = 127
    a = rng.integers(0, 230, size=(4,) + L.in_shape)
    a[0] = 229
    z32, used = weighted_sum(L, torch.from_numpy(a), "auto")
    z64, _ = weighted_sum(L, torch.from_numpy(a), "int64")
    assert used == "float32" and torch.equal(z32.to(torch.int64), z64)
    assert int(z32.abs().max()) == 576 * 127 * 229   # all-maximal sample at the centre: F * max|W| * Q (formula)


@pytest.mark.parametrize("mode", ["saturate", "wrap"])
def test_injected_overflows_are_counted_per_layer(mode):
    net, _, x, _ = _net("conv_max", "payload", 6, 4, accumulator_bits=6, overflow=mode)
    x = x[:120]
    free = simulate(net, x, limit=False)
    lim = simulate(net, x)
    lo, hi = -32, 31                                      # 6-bit two's complement range (common practice)
    conv_idx = [i for i, L in enumerate(net.layers) if L.weight is not None]
    # expected overflow counts from the unlimited potentials of the first layer (same inputs)
    first = conv_idx[0]
    v0, _ = weighted_sum(net.layers[first], torch.from_numpy(x))
    v0 = v0.numpy() + net.layers[first].bias.reshape(1, -1, 1, 1)
    want0 = ((v0 < lo) | (v0 > hi)).reshape(len(x), -1).sum(1)
    assert want0.sum() > 0, "the declared width must overflow in this test"
    assert np.array_equal(lim.overflows[:, first], want0)
    assert np.array_equal(free.overflows, np.zeros_like(free.overflows))
    traces = R.run_batch(net, x, progress=False)
    assert np.array_equal(np.array([t.overflows for t in traces]), lim.overflows)
    assert np.array_equal(np.stack([t.potentials for t in traces]), lim.potentials)
    assert lim.potentials.min() >= lo and lim.potentials.max() <= hi


def test_reference_refuses_a_second_spike():
    ev = np.array([(3, 0, 1), (3, 1, 2)], dtype=R.EVENT_FIELDS)
    with pytest.raises(RuntimeError, match="fired more than once"):
        R._check_once(ev, "conv0")


@pytest.mark.parametrize("bad,match", [
    (np.full((1, 1, 16, 16), 2), r"input payloads must lie in 0\.\.1"),
    (np.zeros((1, 1, 8, 8)), r"inputs must have shape"),
])
def test_simulators_reject_bad_inputs(bad, match):
    net, _, _, _ = _net("mlp", "payload", 4, 4)
    with pytest.raises(ValueError, match=match):
        simulate(net, bad)
    with pytest.raises(ValueError, match=match.replace("inputs must have shape", "sample shape")):
        R.run_sample(net, bad[0])


@pytest.mark.parametrize("mbits,vmax,significand", [(16, 2**20, 53), (31, 2**21, 53), (8, 2**40, 53),
                                                     (12, 2**8, 24), (10, 2**9, 24), (8, 127, 24), (16, 2**10, 24)])
def test_float_requantize_equals_the_integer_shift(mbits, vmax, significand):
    rng = np.random.default_rng(mbits + vmax)
    v = rng.integers(-vmax, vmax, size=(50, 4, 3))                               # (N, C, S)
    v[0, :, 0] = 0
    m0, n = arith.fixed_point_multiplier(rng.random(4) * 0.01 + 1e-4, bits=mbits)
    v[1] = ((2 * rng.integers(0, 20, size=(4, 3)) + 1) << (n - 1)[:, None]) // np.maximum(m0, 1)[:, None]  # near halves
    v[1] = np.clip(v[1], -vmax, vmax - 1)
    acc = int(np.ceil(np.log2(vmax + 1))) + 1                                    # magnitude bits plus a sign bit
    ok = arith.float_requantize_ok(acc, m0, n, significand)
    # float64 is exact on integers below 2^53, float32 below 2^24 (IEEE 754-2008 binary64 and binary32:
    # 53- and 24-bit significands)
    assert ok == (vmax * int(m0.max()) + 2 ** (int(n.max()) - 1) < 2**significand)
    npdt, tdt = (np.float64, torch.float64) if significand == 53 else (np.float32, torch.float32)
    want = arith.requantize(v, m0, n, 255)
    if ok:
        got = arith.requantize_float(v.astype(npdt), m0, n, 255)
        assert got.dtype == npdt and np.array_equal(got, want)
        got = arith.requantize_float(torch.from_numpy(v).to(tdt), m0, n, 255)
        assert got.dtype == tdt and torch.equal(got.to(torch.int64), torch.from_numpy(want))


@pytest.mark.parametrize("kind,coding", [("conv_max", "payload"), ("conv_avg", "ttfs")])
def test_fast_path_without_statistics_gives_the_same_decisions(kind, coding):
    net, _, x, _ = _net(kind, coding, 4, 4)
    full = simulate(net, x)
    fast = simulate(net, x, record=False, stats=False)
    assert np.array_equal(full.potentials, fast.potentials)
    assert np.array_equal(full.early_decisions, fast.early_decisions)
    slow = simulate(net, x, kernel="int64")
    assert np.array_equal(full.potentials, slow.potentials)
    assert all(np.array_equal(p, q) for p, q in zip(full.payloads, slow.payloads))


@pytest.mark.parametrize("shape,kernel,stride,padding,dtype", [
    ((3, 2, 16, 16), (2, 2), (2, 2), (0, 0), torch.float32),
    ((3, 2, 9, 7), (2, 2), (2, 2), (0, 0), torch.float32),     # odd sides: the last row/column is dropped
    ((2, 4, 12, 12), (3, 3), (3, 3), (0, 0), torch.float64),
    ((2, 1, 8, 6), (2, 3), (2, 3), (0, 0), torch.float32),
    ((2, 3, 10, 10), (3, 3), (2, 2), (1, 1), torch.float32),   # overlapping with padding: F.max_pool2d itself
])
def test_strided_max_pool_equals_torch_max_pool2d(shape, kernel, stride, padding, dtype):
    from snnconvert.sim.vectorized import max_pool
    g = torch.Generator().manual_seed(0)
    x = torch.randint(-50, 50, shape, generator=g).to(dtype)
    # torch's own max_pool2d is the reference
    assert torch.equal(max_pool(x, kernel, stride, padding), torch.nn.functional.max_pool2d(x, kernel, stride, padding))
    xi = x.to(torch.int64)
    assert torch.equal(max_pool(xi, kernel, stride, padding).to(dtype), torch.nn.functional.max_pool2d(x, kernel, stride, padding))
